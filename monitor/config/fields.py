"""The value types of configuration keys, shared by the table models.

Numbers are strict (``true`` or ``"30"`` is not a number) and finite; text is
non-empty; each range check says what was expected (`monitor.config.limits`).
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Annotated, Any, Literal
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from pydantic import (
    AfterValidator,
    AllowInfNan,
    BeforeValidator,
    ConfigDict,
    PlainValidator,
    Strict,
    StringConstraints,
    ValidationInfo,
)

from ..units import TEMPERATURE_UNITS
from .limits import check_range
from .reading import shown
from .urls import database_url

#: Every table: unknown keys refused, immutable; Python may build a model by attribute
#: name, a file is validated by its keys (`monitor.config.load` asks for aliases only).
FROZEN = ConfigDict(extra="forbid", frozen=True, validate_by_name=True, validate_by_alias=True)

TemperatureUnit = Literal["K", "degC", "degF"]
if TemperatureUnit.__args__ != TEMPERATURE_UNITS:  # one list of units, in monitor.units
    raise ImportError("TemperatureUnit and monitor.units.TEMPERATURE_UNITS differ")

Text = Annotated[str, Strict(), StringConstraints(min_length=1)]
Number = Annotated[float, Strict(), AllowInfNan(False)]
Integer = Annotated[int, Strict()]
Flag = Annotated[bool, Strict()]


def in_range(what: str, low: float = -math.inf, high: float = math.inf, **open_ends):
    """A validator refusing values outside [low, high] (``low_open``/``high_open``: exclusive)."""
    return AfterValidator(lambda v: check_range(v, what, low, high, **open_ends))


Seconds = Annotated[Number, in_range("a duration [s]", 0.0, low_open=True)]
SecondsOrZero = Annotated[Number, in_range("a duration [s]", 0.0)]
Positive = Annotated[Number, in_range("a positive number", 0.0, low_open=True)]


def from_file(info: ValidationInfo) -> dict | None:
    """The validation context of a file being read, or None when Python code builds a model."""
    ctx = info.context
    return ctx if isinstance(ctx, dict) and "base_dir" in ctx else None


def base_dir(info: ValidationInfo) -> Path:
    """The folder relative paths resolve against: the file's, else the working directory."""
    ctx = from_file(info)
    return ctx["base_dir"] if ctx else Path.cwd()


def file_unit(info: ValidationInfo, unit_key: str) -> str:
    """The unit a file value is written in, from the key validated before it."""
    unit = info.data.get(unit_key)
    if unit is None:
        raise ValueError(f"cannot be read while {unit_key} is not valid")
    return unit


def is_number(value: Any) -> bool:
    """A finite int or float from a file (``true`` is not a number)."""
    return isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)


def _url(raw: str, info: ValidationInfo) -> str:
    return database_url(raw, base_dir(info))


def _zone(name: str) -> str:
    try:
        ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError, OSError):
        raise ValueError(
            f"expected an IANA time zone such as 'Europe/Berlin', got {shown(name)}"
        ) from None
    return name


def _optional_column(value: Any) -> Any:
    if value is False or value == "":
        return None  # the site's export has no such column
    if value is True:
        raise ValueError("expected a column name, or false when there is none")
    return value


def _quality_code(value: Any) -> int | str:
    if isinstance(value, bool) or not isinstance(value, int | str):
        raise ValueError(f"expected an integer or string quality code, got {shown(value)}")
    return value


Url = Annotated[Text, AfterValidator(_url)]
Zone = Annotated[Text, AfterValidator(_zone)]
OptionalColumn = Annotated[Text | None, BeforeValidator(_optional_column)]
QualityCode = Annotated[int | str, PlainValidator(_quality_code)]
