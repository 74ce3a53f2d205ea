"""The versioned REST API (/api/v1/): one NinjaAPI, one router per resource family."""

from ninja import NinjaAPI

from webapp.api.auth import SessionAuth, TokenAuth
from webapp.api.endpoints import catalogue, checks, designs, print_logs
from webapp.api.errors import install_error_handlers

DESCRIPTION = """Check 3D-printed millimetre-wave optics before printing.

Authenticate with a personal API token: `Authorization: Bearer pw_...` (make one on your account page,
or `python manage.py create_api_token USERNAME`). Errors are JSON `{"code", "message"}`; another
user's objects answer 404. Uploading the same bytes again returns the same design, and asking for the
same check again returns the existing check."""


class PhasewrightAPI(NinjaAPI):
    def get_openapi_operation_id(self, operation) -> str:
        """Name each operation after its function (design_upload, check_get), not its module path."""
        return operation.view_func.__name__


# No interactive docs page: it would load its scripts from a third-party host.
api = PhasewrightAPI(title="Phasewright API", version="1", description=DESCRIPTION, urls_namespace="api",
                     auth=[TokenAuth(), SessionAuth()], docs_url=None)
install_error_handlers(api)
api.add_router("", designs.router)
api.add_router("", checks.router)
api.add_router("", catalogue.router)
api.add_router("", print_logs.router)
