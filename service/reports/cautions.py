"""The cautions every page, chart and sheet carries where a person reads the numbers. A document's
own wording is kept when it says the same; what it lacks is added."""

from typing import Any

Json = dict[str, Any]

# The three cautions every report carries; a quote's own wording is kept when it says the same.
CAUTIONS = (
    ("vendor quote", "Planning estimate, not a vendor quote: the figures come from the catalog and the model's "
                     "published methods, not from offers by any supplier."),
    ("licensed engineers", "Power, cooling and electrical figures are for sizing discussions only and must be "
                           "confirmed by licensed engineers under local codes."),
    ("legal advice", "The residency result is a screen against the jurisdiction rules entered with the request, "
                     "not legal advice."),
)


def cautions(document: Json) -> list[str]:
    given = [str(c) for c in document.get("cautions", [])]
    missing = [text for phrase, text in CAUTIONS if not any(phrase in c for c in given)]
    return given + missing
