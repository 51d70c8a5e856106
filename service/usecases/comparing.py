"""Comparing two quote documents (`compare_documents`, pure: the API and `berth compare` on files both
use it), comparing two stored quotes with their catalogs, and re-quoting a stored request against
another catalog. A budget reviewer reads what moved: the recommendation, each option's total, days and
layout, the break-even rows, and the inputs (request fields, catalog, model version) behind the move."""

from collections.abc import Callable
from datetime import datetime
from typing import Any

from service.contract.request import QuoteRequestIn
from service.contract.views import recommended
from service.storage.repository import Repository, Storage
from service.usecases.access import Principal
from service.usecases.catalogs import ParsedCatalogs
from service.usecases.differences import differences, numbers
from service.usecases.idempotency import Created, KeepAnswer
from service.usecases.quotes import create_quote, get_quote

Json = dict[str, Any]
DIFFERENCES_LISTED = 200  # a reviewer reads this many; `*_total` says how many there were
IDENTITY = ("id", "created_at", "catalog_id", "catalog_hash", "model_version", "currency")


def _change(a: Any, b: Any) -> float | None:
    return b - a if numbers(a, b) else None


def _label(option: Json) -> str:
    return f"{option['venue']['id']}/{option['term']}"


def _option_figures(option: Json) -> Json:
    return {"rank": option.get("rank"), "feasible": option.get("feasible"), "total": option["cost"].get("total"),
            "wall_clock_days": option.get("timing", {}).get("wall_clock_days"),
            "layout": option.get("layout", {}), "reasons": option.get("reasons", [])}


def _listed(items: list[Json]) -> tuple[list[Json], int]:
    return items[:DIFFERENCES_LISTED], len(items)


def compare_documents(a: Json, b: Json) -> Json:
    """What changed from quote document `a` to quote document `b`. Every option of either is listed
    side by side with its change in total, days and layout (every layout field the documents carry);
    break-even rows are listed where their utilisation or payback moved. Totals are differenced only
    when both quotes are in the same currency."""
    same_currency = a.get("currency") == b.get("currency")
    options_a = {_label(o): o for o in a.get("options", [])}
    options_b = {_label(o): o for o in b.get("options", [])}
    options = []
    for label in [*options_a, *(k for k in options_b if k not in options_a)]:
        old, new = options_a.get(label), options_b.get(label)
        fa = None if old is None else _option_figures(old)
        fb = None if new is None else _option_figures(new)
        row: Json = {"option": label, "a": fa, "b": fb}
        if fa is not None and fb is not None:
            total_change = _change(fa["total"], fb["total"]) if same_currency else None
            layout_changes = list(differences(fa["layout"], fb["layout"]))
            row.update({
                "total_change": total_change,
                "total_change_fraction": (total_change / fa["total"]) if total_change is not None and fa["total"]
                else None,
                "wall_clock_days_change": _change(fa["wall_clock_days"], fb["wall_clock_days"]),
                "layout_changes": [{"field": d["path"], "a": d["a"], "b": d["b"]} for d in layout_changes],
                "changed": bool(layout_changes) or any(
                    next(differences(fa[k], fb[k]), None) is not None
                    for k in ("rank", "feasible", "total", "wall_clock_days", "reasons")),
            })
        else:
            row["changed"] = True  # only in one of them
        options.append(row)

    def breakeven_key(row: Json) -> tuple[str, str, str]:
        return (row["site"], row["offer"], row["term"])

    rows_a = {breakeven_key(r): r for r in a.get("breakeven", [])}
    rows_b = {breakeven_key(r): r for r in b.get("breakeven", [])}
    breakeven = []
    for key in [*rows_a, *(k for k in rows_b if k not in rows_a)]:
        old_row, new_row = rows_a.get(key, {}), rows_b.get(key, {})
        pair = {name: (old_row.get(name), new_row.get(name)) for name in ("utilisation", "payback_months")}
        if key in rows_a and key in rows_b and all(next(differences(x, y), None) is None for x, y in pair.values()):
            continue
        breakeven.append({"site": key[0], "offer": key[1], "term": key[2],
                          "a": {k: v[0] for k, v in pair.items()} if key in rows_a else None,
                          "b": {k: v[1] for k, v in pair.items()} if key in rows_b else None,
                          "utilisation_change": _change(*pair["utilisation"])})

    recommended_a, recommended_b = recommended(a), recommended(b)
    inputs, inputs_total = _listed(list(differences(a.get("request", {}), b.get("request", {}), "request")))
    provenance = [{"path": k, "a": a.get(k), "b": b.get(k)} for k in ("catalog_id", "catalog_hash", "model_version")
                  if a.get(k) != b.get(k)]
    return {
        "a": {k: a.get(k) for k in IDENTITY},
        "b": {k: b.get(k) for k in IDENTITY},
        "changed": bool(inputs or provenance or any(o["changed"] for o in options) or breakeven),
        "recommendation": {
            "a": recommended_a, "b": recommended_b,
            "changed": (recommended_a or {}).get("option") != (recommended_b or {}).get("option"),
            "programme_total_change": _change((recommended_a or {}).get("programme_total"),
                                              (recommended_b or {}).get("programme_total"))
            if same_currency else None,
        },
        "inputs_changed": provenance + inputs,
        "inputs_changed_total": len(provenance) + inputs_total,
        "currency_changed": not same_currency,
        "options": options,
        "breakeven_changed": breakeven,
    }


def _with_catalog_changes(comparison: Json, repository: Repository, a: Json, b: Json) -> Json:
    """The comparison plus, when the two quotes used different catalogs, the catalog figures that
    differ (sites, offers and node types matched by id)."""
    changes: list[Json] = []
    if a.get("catalog_hash") != b.get("catalog_hash") and a.get("catalog_id") and b.get("catalog_id"):
        old, new = repository.catalog(a["catalog_id"]), repository.catalog(b["catalog_id"])
        if old is not None and new is not None:
            changes = list(differences(old.content, new.content, "catalog"))
    listed, total = _listed(changes)
    return {**comparison, "catalog_changed": listed, "catalog_changed_total": total}


def compare_quotes(storage: Storage, a_id: str, b_id: str, viewer: Principal) -> Json:
    """Two stored quotes the viewer may see, compared, with their catalogs' differences."""
    a, b = get_quote(storage, a_id, viewer).response, get_quote(storage, b_id, viewer).response
    with storage.reading() as repository:
        return _with_catalog_changes(compare_documents(a, b), repository, a, b)


def requote(storage: Storage, catalogs: ParsedCatalogs, quote_id: str, catalog_id: str, *,
            clock: Callable[[], datetime], caller: Principal, keep: KeepAnswer | None = None) -> Created:
    """The stored quote's request, quoted and stored again against another catalog (which must be
    usable today), returned with the comparison from the old quote to the new one."""
    old = get_quote(storage, quote_id, caller)
    request = QuoteRequestIn.model_validate({**old.request, "catalog_id": catalog_id})
    answer: Json = {}

    def keep_with_comparison(repository: Repository, status: int, document: Json) -> None:
        comparison = _with_catalog_changes(compare_documents(old.response, document), repository, old.response,
                                           document)
        answer.update(quote=document, comparison=comparison)
        if keep is not None:
            keep(repository, status, answer)

    created = create_quote(storage, catalogs, request, clock=clock, caller=caller, keep=keep_with_comparison)
    return Created(created.status_code, answer)
