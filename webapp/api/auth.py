"""Who is calling: a personal token in the Authorization header, or the site's own session.

A token never travels in a cookie or a URL, so token calls need no CSRF check; a session call
does, because the browser attaches the cookie to any site's request.
"""

from django.conf import settings
from django.http import HttpRequest
from ninja.security import APIKeyCookie, HttpBearer
from ninja.utils import check_csrf

from webapp.api.services import api_token_authenticate


class CsrfFailed(Exception):
    """A session call without a valid CSRF token."""


class TokenAuth(HttpBearer):
    def authenticate(self, request: HttpRequest, token: str):
        return api_token_authenticate(raw=token)


class SessionAuth(APIKeyCookie):
    """The site's session, with Django's CSRF check for every unsafe method."""

    param_name = settings.SESSION_COOKIE_NAME

    def __init__(self) -> None:
        # The CSRF check runs below, once we know a session is signed in: an anonymous caller gets a 401.
        super().__init__(csrf=False)

    def authenticate(self, request: HttpRequest, key):
        if not request.user.is_authenticated:
            return None
        if check_csrf(request) is not None:
            raise CsrfFailed()
        return request.user
