"""A small browser stand-in over HTTP (stdlib only): cookies, CSRF, form defaults, multipart uploads."""

from __future__ import annotations

import http.cookiejar
import json
import urllib.error
import urllib.parse
import urllib.request
import uuid
from html.parser import HTMLParser


class _FormFields(HTMLParser):
    """Collect the default values of each POST form's fields (inputs, selected options)."""

    def __init__(self) -> None:
        super().__init__()
        self.forms: list[dict[str, str]] = []
        self._select: str | None = None
        self._fields: dict[str, str] | None = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        fields = self._fields
        if tag == "form" and (a.get("method") or "").lower() == "post":
            self._fields = {}
            self.forms.append(self._fields)
        elif fields is None:
            return
        elif tag == "input" and a.get("name") and a.get("type") not in ("file", "submit", "checkbox", "radio"):
            fields[a["name"]] = a.get("value") or ""
        elif tag == "input" and a.get("type") in ("checkbox", "radio") and "checked" in a and a.get("name"):
            fields[a["name"]] = a.get("value") or "on"
        elif tag == "select":
            self._select = a.get("name")
        elif tag == "option" and self._select and (self._select not in fields or "selected" in a):
            fields[self._select] = a.get("value") or ""

    def handle_endtag(self, tag):
        if tag == "select":
            self._select = None
        elif tag == "form":
            self._fields = None


class WebClient:
    """Sign in and use the site the way a browser does."""

    def __init__(self, base_url: str) -> None:
        self.base = base_url.rstrip("/")
        self.jar = http.cookiejar.CookieJar()
        self.opener = urllib.request.build_opener(urllib.request.HTTPCookieProcessor(self.jar))

    def request(self, path: str, data: bytes | None = None, headers: dict | None = None, follow: bool = True):
        """Return (status, final URL, body bytes); HTTP errors are answers, not exceptions."""
        req = urllib.request.Request(self.base + path, data=data, headers={"Referer": self.base + "/", **(headers or {})})
        opener = self.opener if follow else urllib.request.build_opener(
            urllib.request.HTTPCookieProcessor(self.jar), _NoRedirect)
        try:
            with opener.open(req, timeout=60) as resp:
                return resp.status, resp.url, resp.read()
        except urllib.error.HTTPError as err:
            return err.code, err.url, err.read()

    def form_defaults(self, path: str) -> dict[str, str]:
        status, _, body = self.request(path)
        assert status == 200, (path, status)
        parser = _FormFields()
        parser.feed(body.decode())
        return max(parser.forms, key=len)  # the page's main form, not the sign-out button's

    def login(self, username: str, password: str) -> None:
        fields = self.form_defaults("/login/") | {"username": username, "password": password}
        status, url, _ = self.request("/login/", urllib.parse.urlencode(fields).encode())
        assert status == 200 and "/login/" not in url, f"sign-in failed ({status}, {url})"

    def upload(self, path: str, fields: dict[str, str], file_field: str, filename: str, data: bytes):
        body, content_type = multipart(fields, file_field, filename, data)
        return self.request(path, body, {"Content-Type": content_type})

    def json(self, path: str) -> dict:
        status, _, body = self.request(path)
        assert status == 200, (path, status, body[:200])
        return json.loads(body)


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    def redirect_request(self, *args, **kwargs):
        return None


def multipart(fields: dict[str, str], file_field: str, filename: str, data: bytes) -> tuple[bytes, str]:
    """Encode a multipart/form-data body with one file (RFC 7578)."""
    boundary = uuid.uuid4().hex
    parts = [f'--{boundary}\r\nContent-Disposition: form-data; name="{k}"\r\n\r\n{v}\r\n'.encode()
             for k, v in fields.items()]
    parts.append(f'--{boundary}\r\nContent-Disposition: form-data; name="{file_field}"; filename="{filename}"\r\n'
                 "Content-Type: application/octet-stream\r\n\r\n".encode() + data + b"\r\n")
    return b"".join(parts) + f"--{boundary}--\r\n".encode(), f"multipart/form-data; boundary={boundary}"
