"""The one error hierarchy of berth. The domain and use cases raise these; the HTTP layer maps
each to an RFC 9457 problem and the command line to a message and exit status 2.

    BerthError
    ├── InvalidInput        a request or catalog failed validation; carries [{field, reason}]
    ├── NotFound            a catalog or quote id that does not exist (or is not yours)
    ├── Forbidden           the caller's role or team may not do this
    ├── Conflict            the request collides with another one (e.g. idempotency in flight)
    └── Unavailable         the service cannot do it now (time limit, busy); retry later
        └── StorageFull     the database has no room left for a write; nothing was written
"""

from collections.abc import Sequence
from dataclasses import dataclass


@dataclass(frozen=True)
class FieldProblem:
    field: str
    reason: str


class BerthError(Exception):
    status = 500
    title = "Internal error"

    def __init__(self, detail: str) -> None:
        super().__init__(detail)
        self.detail = detail


class InvalidInput(BerthError):
    status = 422
    title = "Invalid input"

    def __init__(self, detail: str, problems: Sequence[FieldProblem] = ()) -> None:
        super().__init__(detail)
        self.problems = tuple(problems)


class NotFound(BerthError):
    status = 404
    title = "Not found"


class Forbidden(BerthError):
    status = 403
    title = "Forbidden"


class Conflict(BerthError):
    status = 409
    title = "Conflict"


class Unavailable(BerthError):
    status = 503
    title = "Unavailable"

    def __init__(self, detail: str, *, retry_after_seconds: int = 5) -> None:
        super().__init__(detail)
        self.retry_after_seconds = retry_after_seconds


class StorageFull(Unavailable):
    title = "Storage full"

    def __init__(self, detail: str = "the database has no room left for this write; nothing was stored") -> None:
        super().__init__(detail, retry_after_seconds=30)
