"""How figures read in reports (conventions.md: babel for formatting, in reports only). Every
function takes a number from the stored quote and returns text; None reads as an em dash."""

import decimal
import functools
import math
from collections.abc import Callable
from decimal import Decimal
from typing import ParamSpec

from babel import Locale
from babel.numbers import format_compact_decimal, format_currency, format_decimal

LOCALE = "en"
MISSING = "—"

TERM_LABELS = {
    "owned_chargeback": "owned, chargeback",
    "owned_new_build": "owned, new build",
    "on_demand": "on demand",
    "interruptible": "interruptible",
    "split": "split, owned and rented",
}
SUPERSCRIPTS = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")
KIND_LABELS = {"owned": "owned site", "rented": "rented offer", "split": "owned + rented"}


Params = ParamSpec("Params")


def _wide(render: Callable[Params, str]) -> Callable[Params, str]:
    """Babel rounds in the current decimal context, whose 28 digits cannot hold a figure of 1e26 to
    the cent (InvalidOperation); every finite float64 fits in 400."""
    @functools.wraps(render)
    def wide(*args: Params.args, **kwargs: Params.kwargs) -> str:
        with decimal.localcontext(prec=400):
            return render(*args, **kwargs)
    return wide


def _finite(value: float | None) -> bool:
    return value is not None and math.isfinite(value)


@_wide
def money(value: float | None, currency: str) -> str:
    """An amount in the currency's own minor unit: 51129.83 EUR → '€51,129.83'."""
    if value is None or not _finite(value):
        return MISSING
    return str(format_currency(value, currency, locale=LOCALE))


@_wide
def money_precise(value: float | None, currency: str, digits: int = 4) -> str:
    """A small rate with more digits than the currency's minor unit: 0.0673 → '€0.0673'."""
    if value is None or not _finite(value):
        return MISSING
    return str(format_currency(value, currency, locale=LOCALE, format="¤#,##0." + "0" * digits,
                               currency_digits=False))


@_wide
def money_whole(value: float | None, currency: str) -> str:
    """An amount rounded to whole units, for headline figures and chart labels: '€51,130'."""
    if value is None or not _finite(value):
        return MISSING
    return str(format_currency(round(value), currency, locale=LOCALE, format="¤#,##0", currency_digits=False))


@_wide
def number(value: float | None, digits: int = 0) -> str:
    """A grouped decimal with at most `digits` fraction digits: 15767.9 → '15,767.9'."""
    if value is None or not _finite(value):
        return MISSING
    pattern = "#,##0" + ("." + "#" * digits if digits > 0 else "")
    return str(format_decimal(value, format=pattern, locale=LOCALE))


@_wide
def fixed(value: float | None, digits: int) -> str:
    """A grouped decimal with exactly `digits` fraction digits: 3.3 → '3.30'."""
    if value is None or not _finite(value):
        return MISSING
    pattern = "#,##0" + ("." + "0" * digits if digits > 0 else "")
    return str(format_decimal(value, format=pattern, locale=LOCALE))


def percent(fraction: float | None, digits: int = 1) -> str:
    """A fraction as a percentage: 0.5384 → '53.8%'."""
    if fraction is None or not _finite(fraction):
        return MISSING
    return f"{fixed(fraction * 100, digits)}%"


def words(value: float | None) -> str:
    """A large count in words: 7e9 → '7 billion', 1.4e12 → '1.4 trillion'."""
    if value is None or not _finite(value):
        return MISSING
    if abs(value) < 1e6:
        return number(value, 2)
    return str(format_compact_decimal(value, format_type="long", locale=LOCALE, fraction_digits=2))


def scientific(value: float | None) -> str:
    """A very large number as a power of ten: 1.085e22 → '1.09 × 10²²'."""
    if value is None or not _finite(value) or value == 0:
        return number(value)
    exponent = math.floor(math.log10(abs(value)))
    return f"{value / 10 ** exponent:.2f} × 10{str(exponent).translate(SUPERSCRIPTS)}"


def plain(value: object) -> str:
    """A value for a spreadsheet cell: decimals without exponent or grouping, empty when missing."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if not math.isfinite(value):
            return ""
        text = format(Decimal(repr(value)), "f")
        return text[:-2] if text.endswith(".0") else text
    return str(value)


def term_label(term: str) -> str:
    """'committed_12m' → 'committed, 12 months'; unknown terms read with spaces for underscores."""
    if term in TERM_LABELS:
        return TERM_LABELS[term]
    if term.startswith("committed_") and term.endswith("m") and term[10:-1].isdigit():
        return f"committed, {int(term[10:-1])} months"
    return term.replace("_", " ")


def item_label(item: str) -> str:
    """A cost line's item in words: 'idle_energy' → 'idle energy'; a split's venue prefix is kept."""
    return item.replace("_", " ")


def jurisdiction_label(code: str) -> str:
    """'DE' → 'DE (Germany)'; a catalog group such as 'EEA' or a split's 'NO+FR' stays as given."""
    if "+" in code:
        return " + ".join(jurisdiction_label(part) for part in code.split("+"))
    name = Locale.parse(LOCALE).territories.get(code) if len(code) == 2 and code.isalpha() else None
    return f"{code} ({name})" if name else code


DECIDED_BY_WORDS = {
    "memory": "the fewest nodes that hold the model",
    "deadline": "the fewest nodes that meet the deadline",
    "node_limit": "the deadline is missed: the fastest layout within the node limit",
    "cost": "the cheapest layout that meets the deadline",
    "pinned": "the accelerator count the request pins",
}


def layout_words(layout: dict[str, object]) -> str:
    """A layout as an architect says it: '8-way tensor (sequence parallel) × 12 pipeline stages ×
    4 data-parallel replicas, ZeRO stage 1; 384 micro-batches of 1 a step, bubble 2.9%'."""
    t, p, d = int(layout["tensor"]), int(layout["pipeline"]), int(layout["data"])  # type: ignore[call-overload]
    parts = []
    if t > 1:
        parts.append(f"{t}-way tensor" + (" (sequence parallel)" if layout.get("sequence_parallel") else ""))
    if p > 1:
        chunks = int(layout.get("pipeline_chunks") or 1)  # type: ignore[call-overload]
        parts.append(f"{p} pipeline stages" + (f" of {chunks} interleaved chunks" if chunks > 1 else ""))
    parts.append(f"{d} data-parallel replica{'s' if d != 1 else ''}")
    words = " × ".join(parts) + f", ZeRO stage {layout['zero_stage']}"
    micro = f"{fixed(layout.get('micro_batches'), 0)} micro-batch{'es' if layout.get('micro_batches') != 1 else ''}"  # type: ignore[arg-type]
    words += f"; {micro} of {layout['micro_batch']} sequence{'s' if layout['micro_batch'] != 1 else ''} a step"
    if p > 1:
        words += f", pipeline bubble {percent(layout.get('pipeline_bubble_fraction'))}"  # type: ignore[arg-type]
    return words
