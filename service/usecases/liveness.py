"""Which process holds a claim or runs a sweep, and whether that process is gone.

A holder is `host:pid:token`, the token drawn once per process. On one host, a holder whose pid no
longer runs, or whose pid is this very process under another token (a restart that drew the same pid,
as a container's first process does), is dead: what it held is released at once. A holder on another
host is judged by its lease or heartbeat instead."""

import os
import socket
import uuid

_tokens: dict[int, str] = {}


def this_process() -> str:
    pid = os.getpid()
    token = _tokens.setdefault(pid, uuid.uuid4().hex[:12])  # a forked worker draws its own
    return f"{socket.gethostname()[:80]}:{pid}:{token}"


def dead_here(holder: str | None) -> bool:
    """Whether `holder` was a process on this host that is no longer running."""
    if not holder:
        return False
    parts = holder.rsplit(":", 2)
    if len(parts) != 3 or not parts[1].isdigit():
        return False
    host, pid_text, _token = parts
    if host != socket.gethostname()[:80]:
        return False
    pid = int(pid_text)
    if pid == os.getpid():
        return holder != this_process()
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    except PermissionError:
        return False  # alive, another user's
    return False
