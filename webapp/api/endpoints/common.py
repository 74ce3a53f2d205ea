"""What every endpoint module shares: the error responses to document, and paging."""

from ninja import Field, Schema
from ninja.pagination import LimitOffsetPagination

from webapp.api.schemas import ErrorOut


def errors(*statuses: int) -> dict:
    """Return the documented error responses of an operation (401 always: every call needs a token)."""
    return {status: ErrorOut for status in sorted({401, *statuses})}


class Pages(LimitOffsetPagination):
    """Limit and offset paging, at most 200 rows a page."""

    class Input(Schema):
        limit: int = Field(50, ge=1, le=200)
        offset: int = Field(0, ge=0, le=10_000_000)

    def __init__(self, **kwargs) -> None:
        super().__init__(max_limit=200, **kwargs)
