"""The leaves that differ between two JSON documents: what recompute and compare report."""

from collections.abc import Iterator
from typing import Any

Json = dict[str, Any]


def differences(old: Any, new: Any, path: str = "") -> Iterator[Json]:
    """Every leaf that differs between two JSON documents, as {path, a, b}. Numbers equal to 1e-9
    (relative) are equal; lists of objects that all carry an `id` are matched by id, so a catalog whose
    sites were reordered shows no difference."""
    if isinstance(old, dict) and isinstance(new, dict):
        for key in sorted(set(old) | set(new), key=str):
            yield from differences(old.get(key), new.get(key), f"{path}.{key}" if path else str(key))
    elif isinstance(old, list) and isinstance(new, list) and _by_id(old) is not None and _by_id(new) is not None:
        yield from differences(_by_id(old), _by_id(new), path)
    elif isinstance(old, list) and isinstance(new, list) and len(old) == len(new):
        for k, (a, b) in enumerate(zip(old, new, strict=True)):
            yield from differences(a, b, f"{path}[{k}]")
    elif numbers(old, new):
        if abs(old - new) > 1e-9 * max(abs(old), abs(new), 1e-300):
            yield {"path": path, "a": old, "b": new}
    elif old != new:
        yield {"path": path, "a": old, "b": new}


def _by_id(items: list[Any]) -> dict[str, Any] | None:
    if not items or not all(isinstance(i, dict) and isinstance(i.get("id"), str) for i in items):
        return None
    keyed = {i["id"]: i for i in items}
    return keyed if len(keyed) == len(items) else None


def numbers(a: Any, b: Any) -> bool:
    return all(isinstance(x, int | float) and not isinstance(x, bool) for x in (a, b))
