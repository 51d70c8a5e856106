"""Use cases for API keys: issue (the key is shown once, only its sha256 is kept), list, revoke,
and resolve a presented key to the role and team it acts for."""

import hashlib
import hmac
import secrets
from dataclasses import dataclass
from datetime import datetime
from typing import Literal

from service.errors import InvalidInput, NotFound
from service.storage.repository import Storage, StoredKey, new_id

Role = Literal["requester", "analyst", "admin"]
ROLES: tuple[Role, ...] = ("requester", "analyst", "admin")
KEY_PREFIX = "berth_"


def key_hash(key: str) -> str:
    return hashlib.sha256(key.encode("utf-8")).hexdigest()


@dataclass(frozen=True)
class Principal:
    """Who is asking: a key's id, role and team; or the local operator when no keys exist."""

    key_id: str
    role: Role
    team: str | None  # None: every team
    local: bool = False

    def sees_team(self, team: str) -> bool:
        """Requesters see their own team's quotes only; analysts and admins see every team's."""
        return self.role != "requester" or team == self.team


LOCAL = Principal(key_id="local", role="admin", team=None, local=True)


def issue_key(storage: Storage, *, role: str, team: str, now: datetime) -> tuple[StoredKey, str]:
    """A new high-entropy key for a role and team. The key itself is returned once and never stored."""
    if role not in ROLES:
        raise InvalidInput("unknown role", [])
    if not team.strip() or len(team) > 100:
        raise InvalidInput("a team is 1 to 100 characters", [])
    key = KEY_PREFIX + secrets.token_urlsafe(32)
    with storage.writing() as repository:
        stored = repository.add_key(key_id=new_id("key"), key_hash=key_hash(key), prefix=key[:12], role=role,
                                    team=team, now=now)
    return stored, key


def list_keys(storage: Storage) -> list[StoredKey]:
    with storage.reading() as repository:
        return repository.keys()


def revoke_key(storage: Storage, key_id: str, *, now: datetime) -> None:
    with storage.writing() as repository:
        if not repository.revoke_key(key_id, now=now):
            raise NotFound(f"no active key {key_id!r}")


def keys_configured(storage: Storage) -> bool:
    """Whether keys are in use. Revoked keys count: revoking every key locks the service rather
    than opening it to loopback callers as local mode would."""
    with storage.reading() as repository:
        return repository.key_count() > 0


def resolve(storage: Storage, presented: str) -> Principal | None:
    """The principal of a presented key, or None for an unknown or revoked key. Keys are found by
    their public prefix and their sha256 compared in constant time (hmac.compare_digest)."""
    digest = key_hash(presented)
    with storage.reading() as repository:
        candidates = repository.keys_by_prefix(presented[:12])
    for stored, stored_hash in candidates:
        if hmac.compare_digest(stored_hash, digest) and stored.revoked_at is None:
            role: Role = stored.role  # type: ignore[assignment]
            return Principal(key_id=stored.id, role=role, team=stored.team)
    return None
