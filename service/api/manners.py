"""HTTP manners every /v1 route keeps: a body in a media type the route does not read is a 415 (not a
422 about a "valid dictionary"), and a query parameter the route does not know is a 422 naming it,
with the nearest known name when there is one (a typo such as `?limt=5` is never silently ignored)."""

from collections.abc import Awaitable, Callable, Iterator

from fastapi import Depends, Request
from fastapi.dependencies.models import Dependant
from fastapi.routing import APIRoute
from starlette.exceptions import HTTPException

from service.errors import FieldProblem, InvalidInput
from service.usecases.loading import closest

JSON = ("application/json",)
JSON_OR_YAML = ("application/json", "application/yaml", "application/x-yaml", "text/yaml", "text/x-yaml")


def body_types(*accepted: str, sniffed: bool = False) -> Callable[[Request], Awaitable[None]]:
    """A dependency that answers 415 when the body's Content-Type is not one of `accepted` (or a
    `+json` type, where JSON is accepted). A body without a Content-Type is refused too, unless the
    route tells JSON from YAML by itself (`sniffed`); an empty body passes, to be named as missing."""
    async def check(request: Request) -> None:
        declared = request.headers.get("content-type")
        if declared is None and (sniffed or not await request.body()):
            return
        media = (declared or "").split(";", 1)[0].strip().lower()
        if media in accepted or ("application/json" in accepted and media.endswith("+json")):
            return
        raise HTTPException(415, f"this route reads {' or '.join(accepted)}, not {media or 'a body without a type'}; "
                                 f"send Content-Type: {accepted[0]}")
    return check


JsonBody = Depends(body_types(*JSON))
JsonOrYamlBody = Depends(body_types(*JSON_OR_YAML, sniffed=True))


def _query_params(dependant: Dependant) -> Iterator[str]:
    for field in dependant.query_params:
        yield field.alias
    for sub in dependant.dependencies:
        yield from _query_params(sub)


def known_query(route: APIRoute) -> frozenset[str]:
    """Every query parameter the route or its dependencies declare (a walk of a few nodes)."""
    return frozenset(_query_params(route.dependant))


async def _no_unknown_query(request: Request) -> None:
    route = request.scope.get("route")
    if not isinstance(route, APIRoute):
        return
    known = known_query(route)
    problems = []
    for name in dict.fromkeys(request.query_params.keys()):
        if name in known:
            continue
        if not known:
            reason = "this route takes no query parameters"
        else:
            match = closest(name, known)
            reason = (f"unknown query parameter; did you mean {match!r}?" if match else
                      f"unknown query parameter; this route takes {', '.join(sorted(known))}")
        problems.append(FieldProblem(f"query.{name}", reason))
    if problems:
        raise InvalidInput("unknown query parameters", problems)


KnownQueryOnly = Depends(_no_unknown_query)
