"""Value types every file schema shares: numbers that refuse text, names, units, and the strict base model.

The world, experiment, calibration and optimisation schemas build their keys
from these. A key's unit is ``Annotated`` metadata (:func:`unit`), so it sits
beside the key's range in the JSON Schema (``undertow schema KIND``) and in
docs/reference.md, which :mod:`abm.reference` generates from the schemas.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, model_validator


def _number_only(value: Any) -> Any:
    """Refuse true/false and text where a number belongs (lax mode would read ``true`` as 1)."""
    if isinstance(value, bool):
        raise ValueError(f"expected a number, got {str(value).lower()}")
    if isinstance(value, str):
        raise ValueError(f"expected a number, got the text {value!r}")
    return value


NumberOnly = BeforeValidator(_number_only)  # shared by every file schema of the project
# No quantity of a world reaches a billion in its unit (minutes, vehicles, people, utility); a larger number is a
# typo, and one near the float or integer limits would overflow the engine's arithmetic (common practice, no source).
LARGEST = 1e9
Probability = Annotated[float, Field(ge=0.0, le=1.0), NumberOnly]
NonNegative = Annotated[float, Field(ge=0.0, le=LARGEST), NumberOnly]
Positive = Annotated[float, Field(gt=0.0, le=LARGEST), NumberOnly]
Count = Annotated[int, Field(ge=0, le=int(LARGEST)), NumberOnly]
Hour = Annotated[int, Field(ge=0, le=24), NumberOnly]
NAME_PATTERN = r"^[A-Za-z0-9_\-]+$"
CLOCK_PATTERN = r"^([01]\d|2[0-3]):[0-5]\d$"
Name = Annotated[str, Field(min_length=1, max_length=80, pattern=NAME_PATTERN)]
# What a pattern means, in words (error messages, docs/reference.md): a regular expression is no help in YAML.
PATTERN_WORDS = {
    NAME_PATTERN: "a name of letters, digits, '_' or '-' (no spaces)",
    CLOCK_PATTERN: "a clock time 'HH:MM' from '00:00' to '23:59'",
}


def unit(name: str) -> Any:
    """``Annotated`` metadata naming the unit of a key's numbers (``unit`` in its JSON Schema and the reference)."""
    return Field(json_schema_extra={"unit": name})


Chance = Annotated[Probability, unit("chance")]
Share = Annotated[Probability, unit("share")]
Minutes = Annotated[NonNegative, unit("minutes")]
PositiveMinutes = Annotated[Positive, unit("minutes")]
Multiplier = Annotated[NonNegative, unit("multiplier")]
Utility = Annotated[NonNegative, unit("utility units")]
Weight = Annotated[NonNegative, unit("relative weight")]
PseudoCount = Annotated[Positive, unit("pseudo-count")]
Payoff = Annotated[NonNegative, unit("payoff units")]
Lanes = Annotated[Count, unit("lanes")]
Days = Annotated[Count, unit("days")]
HourOfDay = Annotated[Hour, unit("hour of day")]


class Strict(BaseModel):
    """Base for every section: unknown keys are errors, values are not coerced loosely."""

    # Not strict=True: YAML gives lists where tuples are declared. Infinity and NaN are refused
    # because no count, time or chance in a world can be infinite.
    model_config = ConfigDict(extra="forbid", frozen=True, strict=False, allow_inf_nan=False)


class Duration(Strict):
    """A distribution of minutes: its family, mean and shape (a check's duration, a departure's delay)."""

    dist: Literal["exponential", "deterministic", "lognormal", "gamma", "uniform"] = Field(
        description="distribution family of the minutes"
    )
    mean: PositiveMinutes = Field(description="mean minutes")
    cv: Annotated[NonNegative, unit("ratio")] = Field(
        0.0, description="coefficient of variation, sd / mean (lognormal, gamma: must be > 0)"
    )
    spread: Annotated[NonNegative, unit("share of the mean")] = Field(
        0.0, description="half-width of the range as a share of the mean (uniform: 0 < spread <= 1)"
    )

    @model_validator(mode="after")
    def _shape_given(self) -> "Duration":
        if self.dist in ("lognormal", "gamma") and self.cv <= 0:
            raise ValueError(f"a {self.dist} distribution of minutes needs cv > 0")
        if self.dist == "uniform" and not 0 < self.spread <= 1:
            raise ValueError("a uniform distribution of minutes needs 0 < spread <= 1")
        return self
