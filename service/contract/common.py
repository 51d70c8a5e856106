"""Field types shared by the edge models."""

from typing import Annotated

from pydantic import BaseModel, ConfigDict, Field

PositiveFloat = Annotated[float, Field(gt=0, allow_inf_nan=False)]
NonNegativeFloat = Annotated[float, Field(ge=0, allow_inf_nan=False)]
PositiveInt = Annotated[int, Field(gt=0)]
NonNegativeInt = Annotated[int, Field(ge=0)]
Fraction = Annotated[float, Field(ge=0, le=1, allow_inf_nan=False)]
Utilisation = Annotated[float, Field(gt=0, le=1, allow_inf_nan=False, description="in (0, 1]")]
Identifier = Annotated[str, Field(min_length=1, max_length=100, pattern=r"^[A-Za-z0-9][A-Za-z0-9._-]*$")]
CountryCode = Annotated[str, Field(pattern=r"^[A-Z]{2}$", description="ISO 3166-1 alpha-2")]


class Strict(BaseModel):
    """Unknown fields are rejected, so a typo never silently falls back to a default; and types are
    strict, so a JSON body's `true` or `"0.4"` is not taken for a number. Files read through
    `service.usecases.loading` (JSON or YAML) are validated laxly instead: YAML 1.1 reads 1.4e12 as a string."""

    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)
