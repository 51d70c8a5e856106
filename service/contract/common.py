"""Field types shared by the edge models."""

from typing import Annotated

import pycountry
from pydantic import AfterValidator, BaseModel, ConfigDict, Field

from service.domain import limits


def unsigned_zero(value: float) -> float:
    """-0.0 becomes 0.0: numpy treats a negative zero as negative (a lognormal's sigma, say)."""
    return value + 0.0


# Every number has a ceiling (service.domain.limits): a field left unbounded lets 2**63 or 1e300 in.
PositiveFloat = Annotated[float, Field(gt=0, le=limits.MAX_QUANTITY, allow_inf_nan=False)]
NonNegativeFloat = Annotated[float, Field(ge=0, le=limits.MAX_QUANTITY, allow_inf_nan=False),
                             AfterValidator(unsigned_zero)]
PositiveInt = Annotated[int, Field(gt=0, le=limits.MAX_COUNT)]
NonNegativeInt = Annotated[int, Field(ge=0, le=limits.MAX_COUNT)]
Amount = Annotated[float, Field(ge=0, le=limits.MAX_AMOUNT, allow_inf_nan=False), AfterValidator(unsigned_zero)]
PositiveAmount = Annotated[float, Field(gt=0, le=limits.MAX_AMOUNT, allow_inf_nan=False)]
Factor = Annotated[float, Field(gt=0, le=limits.MAX_FACTOR, allow_inf_nan=False)]
Nodes = Annotated[int, Field(ge=0, le=limits.MAX_NODES)]
Months = Annotated[int, Field(gt=0, le=limits.MAX_MONTHS)]
Hours = Annotated[float, Field(gt=0, le=limits.MAX_HOURS, allow_inf_nan=False)]
Gbps = Annotated[float, Field(gt=0, le=limits.MAX_GBPS, allow_inf_nan=False)]
Kilowatts = Annotated[float, Field(gt=0, le=limits.MAX_KW, allow_inf_nan=False)]
Terabytes = Annotated[float, Field(ge=0, le=limits.MAX_TB, allow_inf_nan=False), AfterValidator(unsigned_zero)]
CarbonIntensity = Annotated[float, Field(ge=0, le=limits.MAX_KGCO2E_PER_KWH, allow_inf_nan=False),
                            AfterValidator(unsigned_zero)]
# Names and labels: printable text. A NUL cannot be stored in PostgreSQL text, and control characters
# have no place in a name.
Name = Annotated[str, Field(min_length=1, max_length=200, pattern=r"^[^\x00-\x1f\x7f]+$")]
Team = Annotated[str, Field(min_length=1, max_length=100, pattern=r"^[^\x00-\x1f\x7f]+$")]
# Ids this service issues: a prefix, an underscore, then letters and digits (`new_id`).
CatalogId = Annotated[str, Field(pattern=r"^cat_[A-Za-z0-9]{1,64}$", description="a stored catalog's id")]
QuoteId = Annotated[str, Field(pattern=r"^q_[A-Za-z0-9]{1,64}$", description="a stored quote's id")]
Fraction = Annotated[float, Field(ge=0, le=1, allow_inf_nan=False)]
Utilisation = Annotated[float, Field(gt=0, le=1, allow_inf_nan=False, description="in (0, 1]")]
Identifier = Annotated[str, Field(min_length=1, max_length=100, pattern=r"^[A-Za-z0-9][A-Za-z0-9._-]*$")]
# The code lists themselves are in the OpenAPI document, so a client (or a fuzzer) knows every valid value.
COUNTRY_CODES = sorted(country.alpha_2 for country in pycountry.countries)
CURRENCY_CODES = sorted(currency.alpha_3 for currency in pycountry.currencies)
CountryCode = Annotated[str, Field(pattern=r"^[A-Z]{2}$", description="ISO 3166-1 alpha-2",
                                   json_schema_extra={"enum": COUNTRY_CODES})]
CurrencyCode = Annotated[str, Field(pattern=r"^[A-Z]{3}$", description="ISO 4217 code",
                                    json_schema_extra={"enum": CURRENCY_CODES})]


class Strict(BaseModel):
    """Unknown fields are rejected, so a typo never silently falls back to a default; and types are
    strict, so a JSON body's `true` or `"0.4"` is not taken for a number. Files read through
    `service.usecases.loading` (JSON or YAML) are validated laxly instead: YAML 1.1 reads 1.4e12 as a string."""

    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)
