"""The physical limits a configuration or kinetics file must respect, and why.

Values outside are refused at load (exit 2), because past them a number is far
more likely a slip (a sign, a unit, a percentage for a fraction) than a process,
and a slip must never become a confident wrong estimate. Each limit says where
it comes from; none of them is a process-safety limit.
"""

from __future__ import annotations

import math

#: Plausible absolute temperatures of a liquid-phase batch [K]: reference
#: temperatures, plan setpoints, MTT and T_D24. 150 K (-123 degC) is below the
#: coldest batch chemistry in practice (cryogenic lithiations run near -100 degC =
#: 173 K; from memory); 800 K (527 degC) is above any organic liquid-phase batch
#: (organic matter cracks well below it; common practice). A Celsius value written
#: where kelvin is expected (``t_ref_k = 70``) falls outside.
TEMPERATURE_K = (150.0, 800.0)

#: Ceiling of the activation energy [J/mol]. Even with a pre-exponential factor of
#: 1e17 s^-1 (the high end seen for unimolecular decompositions; from memory),
#: Ea = 400 kJ/mol gives k = 1e17 exp(-400e3 / (R 800 K)) = 7.6e-10 s^-1 at the
#: top of `TEMPERATURE_K`: a half-life of about 29 years, so no batch reaction has
#: a larger Ea. (The largest single-bond dissociation energies, C-H and O-H near
#: 400-460 kJ/mol, are of the same size; from memory.)
EA_MAX_J_PER_MOL = 400e3

#: Range of a power-law reaction order [-]. Elementary steps are at most
#: termolecular (order 3; Levenspiel, Chemical Reaction Engineering, 3rd ed.,
#: 1999, ch. 2; from memory); 4
#: leaves room for an apparent order fitted to plant data (common practice).
ORDER = (0.0, 4.0)

#: Ceiling of ``activity_sd``, the batch-to-batch spread of ln(activity) [-].
#: A one-sigma factor of e^2 = 7.4 between batches describes no process; a larger
#: value is usually a percentage written where a fraction was meant (common practice).
ACTIVITY_SD_MAX = 2.0

#: Ceiling of an initial concentration [mol/L]. Neat water is 55.3 mol/L
#: (997.05 kg/m^3 / 18.015 g/mol at 25 degC; CRC Handbook, from memory) and few
#: liquids are denser in moles; a larger value is usually mol/m^3 written for mol/L.
CONCENTRATION_MAX_MOL_PER_L = 60.0

#: Stoessel's criticality classes run from 1 to 5 (Stoessel, Thermal Safety of
#: Chemical Processes, 2008, ch. 3; from memory).
CRITICALITY_CLASSES = (1, 5)

#: Fewest Monte Carlo draws that still give a P10 and a P90 [-].
MONTE_CARLO_DRAWS = (10, 1_000_000)


def interval(low: float, high: float, *, low_open: bool, high_open: bool) -> str:
    """``"(0, 1)"``, ``"[150, 800]"`` …: a range as people write it."""
    return f"{'(' if low_open else '['}{low:.12g}, {high:.12g}{')' if high_open else ']'}"


def check_range(
    value: float,
    what: str,
    low: float = -math.inf,
    high: float = math.inf,
    *,
    low_open: bool = False,
    high_open: bool = False,
) -> float:
    """Return ``value`` if it lies in the range, else raise ValueError saying what was expected.

    Examples
    --------
    >>> check_range(0.5, "a conversion", 0.0, 1.0, low_open=True, high_open=True)
    0.5
    >>> check_range(1.5, "a conversion", 0.0, 1.0, low_open=True, high_open=True)
    Traceback (most recent call last):
    ...
    ValueError: expected a conversion in (0, 1), got 1.5
    """
    below = value <= low if low_open else value < low
    above = value >= high if high_open else value > high
    if below or above or math.isnan(value):
        if high == math.inf:
            bound = f"{'>' if low_open else '>='} {low:.12g}"
        elif low == -math.inf:
            bound = f"{'<' if high_open else '<='} {high:.12g}"
        else:
            bound = "in " + interval(low, high, low_open=low_open, high_open=high_open)
        raise ValueError(f"expected {what} {bound}, got {value!r}")
    return value
