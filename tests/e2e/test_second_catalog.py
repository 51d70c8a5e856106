"""The issue's own check: after a second catalog is uploaded (one without the EEA group the demo
campaigns name), the README's curl example and the finance script still work, because an upload never
moves the default."""

import copy
import json
import subprocess
import sys
from pathlib import Path

import httpx
import pytest

from tests.conftest import EXAMPLES
from tests.e2e.conftest import BerthServer

pytestmark = pytest.mark.e2e


def test_the_readme_example_and_the_finance_script_still_work_after_a_second_catalog_is_uploaded(
    berth: BerthServer,
) -> None:
    second = copy.deepcopy(json.loads((EXAMPLES / "catalog.json").read_text(encoding="utf-8")))
    second["name"] = "second-without-groups"
    second["jurisdiction_groups"] = {}
    uploaded = httpx.post(f"{berth.url}/v1/catalogs", json=second, timeout=30)
    assert uploaded.status_code == 201 and uploaded.json()["default"] is False

    # README: curl -s -X POST localhost:8000/v1/quotes -H 'content-type: application/json' -d @...
    readme = httpx.post(f"{berth.url}/v1/quotes", content=(EXAMPLES / "campaign-owned-wins.json").read_bytes(),
                        headers={"content-type": "application/json"}, timeout=60)
    assert readme.status_code == 201, readme.text
    assert readme.json()["recommendation"]["why"].startswith("fjordvik-hall/owned_chargeback costs")

    script = subprocess.run(
        [sys.executable, str(EXAMPLES / "finance_script.py"), str(EXAMPLES / "campaign-split.json"),
         "--url", berth.url], capture_output=True, text=True, timeout=120, cwd=Path(EXAMPLES).parent)
    assert script.returncode == 0, script.stderr
    assert "Recommended: fjordvik-hall+corvane-seronne-b176/split" in script.stdout
