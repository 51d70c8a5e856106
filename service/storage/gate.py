"""Who wins when a request's time limit fires while its work is about to commit.

The HTTP layer opens a `CommitGate` per request and sets it in `COMMIT_GATE`; the storage consults it
before every commit it makes on that request's behalf (threads started by the request inherit it).
Once the time limit has fired, no commit goes through, so a 503 never hides a stored write; once a
final commit has gone through, the time limit no longer fires, so the caller gets the answer that
names what was stored."""

import contextvars
import threading

OPEN, COMMITTING, EXPIRED, DONE = "open", "committing", "expired", "done"


class CommitGate:
    def __init__(self) -> None:
        self._state = OPEN
        self._lock = threading.Lock()

    def enter(self) -> bool:
        """Before a commit: False when the time limit has already fired (the commit must not happen)."""
        with self._lock:
            if self._state == EXPIRED:
                return False
            if self._state == OPEN:
                self._state = COMMITTING
            return True

    def leave(self, *, final: bool) -> None:
        """After a commit: a final one (it stored what the request creates) closes the gate for good."""
        with self._lock:
            if self._state == COMMITTING:
                self._state = DONE if final else OPEN

    def expire(self) -> bool:
        """The time limit fires: True when nothing has been or is being committed for good, and
        nothing will be from now on; False when a commit got there first (answer normally)."""
        with self._lock:
            if self._state != OPEN:
                return False
            self._state = EXPIRED
            return True


COMMIT_GATE: contextvars.ContextVar[CommitGate | None] = contextvars.ContextVar("commit_gate", default=None)
