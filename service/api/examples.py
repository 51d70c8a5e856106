"""OpenAPI examples taken from the demo scenario: the campaigns beside the demo catalog (pricing_examples/
in a checkout, wherever BERTH_DEMO_CATALOG points in an image), read when the schema is first asked for."""

import json
from pathlib import Path
from typing import Any

_CAMPAIGNS = {
    "owned_wins": ("Owning wins", "campaign-owned-wins.json"),
    "renting_wins": ("Renting wins on a deadline", "campaign-renting-wins.json"),
    "residency_blocked": ("Blocked by residency", "campaign-residency-blocked.json"),
    "recurring": ("A monthly recurring campaign", "campaign-recurring.json"),
    "split": ("Split between an owned site and a rented offer", "campaign-split.json"),
}


def quote_request_examples(directory: Path) -> dict[str, dict[str, Any]]:
    """The demo campaigns found in `directory`; one that is missing is left out."""
    return {key: {"summary": summary, "value": json.loads((directory / name).read_text(encoding="utf-8"))}
            for key, (summary, name) in _CAMPAIGNS.items() if (directory / name).exists()}

