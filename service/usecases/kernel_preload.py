"""Imported by the fork server of the sweep's worker processes (`chunk_pool._workers_context`), and only
there: it loads the compiled kernel (`domain/compiled.py`) once, so that every worker forked from the server
has it, where each would otherwise import numba and read the kernel from its cache itself (0.3 s apiece)."""

from service.domain import compiled

compiled.kernel()
