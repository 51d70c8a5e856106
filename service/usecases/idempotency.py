"""Every creating request at most once per Idempotency-Key (conventions.md): what a creating use case
answers, and how its answer is kept in the transaction that stores what it created."""

import hashlib
import json
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from service.errors import Conflict, FieldProblem, InvalidInput
from service.storage.repository import Repository, Storage
from service.usecases.access import Principal
from service.usecases.liveness import dead_here, this_process

IDEMPOTENCY_KEEP = timedelta(hours=24)
IDEMPOTENCY_LEASE = timedelta(seconds=60)


@dataclass(frozen=True)
class Created:
    """What a creating request answers: its status and body, and whether it replays a first answer."""

    status_code: int
    body: dict[str, Any]
    replayed: bool = False


# Called by a creating use case inside the transaction that stores what it created, with the answer:
# the answer is then kept under the request's Idempotency-Key in that same commit.
KeepAnswer = Callable[[Repository, int, dict[str, Any]], None]


def body_fingerprint(body: bytes) -> str:
    """sha256 of the request's JSON, canonicalised, so whitespace and key order do not matter."""
    try:
        canonical = json.dumps(json.loads(body), sort_keys=True, separators=(",", ":")).encode("utf-8")
    except (ValueError, UnicodeDecodeError):
        canonical = body
    return hashlib.sha256(canonical).hexdigest()


def once_per_key(storage: Storage, *, caller: Principal, key: str | None, body: bytes, clock: Callable[[], datetime],
                 create: Callable[[KeepAnswer | None], Created]) -> Created:
    """Run a creating use case at most once per Idempotency-Key of the caller (conventions.md): the
    same key with the same body replays the first answer, with another body is refused, and a retry
    while the first still runs is told to wait. Without a key, `create` just runs."""
    if key is None:
        return create(None)
    with storage.writing(claim=True) as repository:
        claim = repository.claim_key(caller=caller.key_id, key=key, body_hash=body_fingerprint(body), now=clock(),
                                     lease=IDEMPOTENCY_LEASE, keep=IDEMPOTENCY_KEEP, holder=this_process())
    if not claim.same_body:
        raise InvalidInput("this Idempotency-Key was used with a different request body", [
            FieldProblem("header.idempotency-key", "already used with another request body; send a new key")])
    if claim.state == "in_flight":
        raise Conflict("a request with this Idempotency-Key is still being processed; retry shortly")
    if claim.state == "done" and claim.response is not None:
        return Created(claim.status_code or 201, claim.response, replayed=True)

    def keep(repository: Repository, status_code: int, answer: dict[str, Any]) -> None:
        repository.complete_key(caller=caller.key_id, key=key, status_code=status_code, response=answer)

    try:
        return create(keep)
    except Exception:
        with storage.writing(gated=False) as repository:
            repository.release_key(caller=caller.key_id, key=key)
        raise


def release_dead_claims(storage: Storage) -> int:
    """Release the claims in flight of processes on this host that are gone (a SIGKILL, a crash), so a
    retry with the same key runs at once instead of waiting out the lease. Run at start."""
    with storage.reading() as repository:
        dead = [holder for holder in repository.claim_holders() if dead_here(holder)]
    if not dead:
        return 0
    with storage.writing() as repository:
        return repository.release_claims_of(dead)
