"""Residency: the jurisdictions a campaign's data may be processed in (model.md §9).

A screen against the rules the user entered, not legal advice.
"""

from collections.abc import Iterable, Mapping


def allowed_jurisdictions(
    entries: Iterable[str] | None, groups: Mapping[str, Iterable[str]]
) -> frozenset[str] | None:
    """ISO 3166-1 alpha-2 codes allowed, with named groups expanded; None when unrestricted."""
    if entries is None:
        return None
    allowed: set[str] = set()
    for entry in entries:
        allowed.update(groups.get(entry, (entry,)))
    return frozenset(allowed)


def admits(allowed: frozenset[str] | None, jurisdiction: str) -> bool:
    """Whether data allowed in `allowed` (None: anywhere) may be processed in `jurisdiction`."""
    return allowed is None or jurisdiction in allowed
