"""Quote one training campaign on a running berth service and print the ranked options.

    python finance_script.py [CAMPAIGN.json] [--url http://127.0.0.1:8000]

The campaign file defaults to campaign-owned-wins.json beside this script. Needs only httpx.
Exit codes: 0 quoted (even when no option is feasible), 1 the service refused the request,
2 the file could not be read or the service could not be reached."""

import argparse
import json
import sys
from pathlib import Path
from typing import Any

import httpx

HERE = Path(__file__).resolve().parent
DEFAULT_CAMPAIGN = HERE / "campaign-owned-wins.json"


def money(amount: float | None, currency: str) -> str:
    return "n/a" if amount is None else f"{amount:,.2f} {currency}"


def days(value: float | None) -> str:
    return "n/a" if value is None else f"{value:.1f}"


def label(option: dict[str, Any]) -> str:
    return f"{option['venue']['id']}/{option['term']}"


def print_quote(quote: dict[str, Any]) -> None:
    campaign = quote["request"]["campaign"]
    print(f"Quote {quote['id']} for campaign {campaign['name']!r} (team {campaign['team']}), "
          f"catalog {quote['catalog_id']}, amounts in {quote['currency']}")
    print()
    print(f"{'rank':>4}  {'venue/term':<44} {'total':>20} {'days':>7}  status")
    for option in quote["options"]:
        cost = option["cost"]
        rank = "-" if option["rank"] is None else str(option["rank"])
        status = "feasible" if option["feasible"] else "ruled out: " + "; ".join(option["reasons"])
        print(f"{rank:>4}  {label(option):<44} {money(cost['total'], cost.get('currency', quote['currency'])):>20} "
              f"{days(option['timing']['wall_clock_days']):>7}  {status}")
    print()
    recommendation = quote.get("recommendation")
    if recommendation:
        chosen = quote["options"][recommendation["option_index"]]
        print(f"Recommended: {label(chosen)}")
        print(f"Why: {recommendation['why']}")
    else:
        print("No option is feasible. Next steps:")
        for step in quote.get("next_steps", []):
            print(f"  - {step}")
    print()
    for caution in quote.get("cautions", []):  # the quote's own words: these figures are estimates
        print(f"Note: {caution}")


def print_problem(response: httpx.Response) -> None:
    try:
        problem = response.json()
    except ValueError:
        print(f"berth answered {response.status_code}: {response.text[:500]}", file=sys.stderr)
        return
    print(f"berth refused the request ({response.status_code} {problem.get('title', '')}): "
          f"{problem.get('detail', '')}", file=sys.stderr)
    for error in problem.get("errors", []):
        print(f"  {error.get('field')}: {error.get('reason')}", file=sys.stderr)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Quote a training campaign on a running berth service.")
    parser.add_argument("campaign", nargs="?", type=Path, default=DEFAULT_CAMPAIGN, help="campaign request JSON")
    parser.add_argument("--url", default="http://127.0.0.1:8000", help="the berth service (default: %(default)s)")
    parser.add_argument("--timeout", type=float, default=60.0, help="seconds to wait for the answer")
    args = parser.parse_args(argv)
    try:
        body = json.loads(args.campaign.read_text(encoding="utf-8"))
    except (OSError, ValueError) as error:
        print(f"cannot read {args.campaign}: {error}", file=sys.stderr)
        return 2
    try:
        with httpx.Client(base_url=args.url, timeout=args.timeout) as client:
            response = client.post("/v1/quotes", json=body)
    except httpx.HTTPError as error:
        print(f"cannot reach berth at {args.url}: {error}", file=sys.stderr)
        return 2
    if response.status_code != 201:
        print_problem(response)
        return 1
    print_quote(response.json())
    return 0


if __name__ == "__main__":
    sys.exit(main())
