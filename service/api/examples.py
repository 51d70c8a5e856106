"""OpenAPI examples taken from the demo scenario in pricing_examples/ (read when the app is built)."""

import json
from typing import Any

from service.config import REPO_ROOT

_EXAMPLES = REPO_ROOT / "pricing_examples"
_CAMPAIGNS = {
    "owned_wins": ("Owning wins", "campaign-owned-wins.json"),
    "renting_wins": ("Renting wins on a deadline", "campaign-renting-wins.json"),
    "residency_blocked": ("Blocked by residency", "campaign-residency-blocked.json"),
    "recurring": ("A monthly recurring campaign", "campaign-recurring.json"),
}


def _load(name: str) -> Any:
    path = _EXAMPLES / name
    return json.loads(path.read_text(encoding="utf-8")) if path.exists() else {}


def quote_request_examples() -> dict[str, dict[str, Any]]:
    return {key: {"summary": summary, "value": _load(name)} for key, (summary, name) in _CAMPAIGNS.items()}

