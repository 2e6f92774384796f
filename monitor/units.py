"""Unit conversion at the edges: temperatures and quantity strings to SI.

Temperature conversions use the defining constants: 0 degC = 273.15 K exactly
and 1 degF = 5/9 K with 32 degF = 0 degC (NIST SP 811, 2008, appendix B.9;
ISO 80000-5:2019). Quantity strings in configuration ("-85 kJ/mol") are parsed
with pint.
"""

from __future__ import annotations

import re
import tokenize
from functools import lru_cache

import numpy as np

from .errors import ConfigError

_NUMBER = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*)$")
TEMPERATURE_UNITS = ("K", "degC", "degF")
ZERO_CELSIUS_K = 273.15


def to_kelvin(values, unit: str):
    """Convert temperatures to kelvin.

    Parameters
    ----------
    values : float or array_like
        Temperatures in ``unit``.
    unit : str
        One of ``"K"``, ``"degC"``, ``"degF"``.

    Returns
    -------
    float or numpy.ndarray
        Temperatures [K].

    Examples
    --------
    >>> float(to_kelvin(32.0, "degF"))
    273.15
    """
    v = np.asarray(values, dtype=float)
    if unit == "K":
        out = v
    elif unit == "degC":
        out = v + ZERO_CELSIUS_K
    elif unit == "degF":
        out = (v - 32.0) * (5.0 / 9.0) + ZERO_CELSIUS_K
    else:
        raise ValueError(f"unknown temperature unit {unit!r}; expected one of {TEMPERATURE_UNITS}")
    return out if out.ndim else float(out)


def from_kelvin(values, unit: str):
    """Convert temperatures from kelvin to ``unit`` (inverse of `to_kelvin`)."""
    v = np.asarray(values, dtype=float)
    if unit == "K":
        out = v
    elif unit == "degC":
        out = v - ZERO_CELSIUS_K
    elif unit == "degF":
        out = (v - ZERO_CELSIUS_K) * (9.0 / 5.0) + 32.0
    else:
        raise ValueError(f"unknown temperature unit {unit!r}; expected one of {TEMPERATURE_UNITS}")
    return out if out.ndim else float(out)


@lru_cache(maxsize=1)
def _registry():
    import pint

    return pint.UnitRegistry()


def parse_quantity(text: str, si_unit: str, *, path=None, key: str | None = None) -> float:
    """Parse a quantity with its unit ("1.9 kJ/(kg*K)") and return its value in ``si_unit``.

    Examples
    --------
    >>> parse_quantity("-85 kJ/mol", "J/mol")
    -85000.0
    >>> round(parse_quantity("80 degC", "K"), 2)
    353.15
    """
    import pint

    ureg = _registry()
    if not isinstance(text, str):
        raise ConfigError(
            f"expected a quantity with its unit, e.g. '{si_unit}', got {text!r}", path=path, key=key
        )
    try:
        m = _NUMBER.match(text)
        if not m or not m.group(2).strip():
            raise ValueError("expected a number followed by its unit")
        # magnitude and unit apart, so offset units such as degC are accepted
        q = ureg.Quantity(float(m.group(1)), m.group(2).strip())
        return float(q.to(si_unit).magnitude)
    except (
        pint.errors.PintError,
        ValueError,
        TypeError,
        AttributeError,
        ArithmeticError,  # "1 K/0", "1 kg**1e9"
        LookupError,
        tokenize.TokenError,  # "1 (": pint tokenizes unit text as Python
        SyntaxError,
    ) as exc:
        raise ConfigError(
            f"cannot read {text!r} as a quantity in {si_unit}: {exc}", path=path, key=key
        ) from None
