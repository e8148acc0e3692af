"""IEC 60063 preferred-number series (E3 ... E192): exact tables, snapping and neighbours.

The tables are the published ones, not the formula round(10**(i/n)): E3 to E24 carry
two significant digits and eight E24 values (2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2)
differ from the rounded formula; E48 to E192 carry three digits and follow the
formula except E192's 9.20 (the formula gives 9.19).
"""

from __future__ import annotations

import bisect
import math
from functools import cache

from stagesynth.quantities.errors import StageError

_E24 = (
    1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
    3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1,
)
_E192 = (
    1.00, 1.01, 1.02, 1.04, 1.05, 1.06, 1.07, 1.09, 1.10, 1.11, 1.13, 1.14,
    1.15, 1.17, 1.18, 1.20, 1.21, 1.23, 1.24, 1.26, 1.27, 1.29, 1.30, 1.32,
    1.33, 1.35, 1.37, 1.38, 1.40, 1.42, 1.43, 1.45, 1.47, 1.49, 1.50, 1.52,
    1.54, 1.56, 1.58, 1.60, 1.62, 1.64, 1.65, 1.67, 1.69, 1.72, 1.74, 1.76,
    1.78, 1.80, 1.82, 1.84, 1.87, 1.89, 1.91, 1.93, 1.96, 1.98, 2.00, 2.03,
    2.05, 2.08, 2.10, 2.13, 2.15, 2.18, 2.21, 2.23, 2.26, 2.29, 2.32, 2.34,
    2.37, 2.40, 2.43, 2.46, 2.49, 2.52, 2.55, 2.58, 2.61, 2.64, 2.67, 2.71,
    2.74, 2.77, 2.80, 2.84, 2.87, 2.91, 2.94, 2.98, 3.01, 3.05, 3.09, 3.12,
    3.16, 3.20, 3.24, 3.28, 3.32, 3.36, 3.40, 3.44, 3.48, 3.52, 3.57, 3.61,
    3.65, 3.70, 3.74, 3.79, 3.83, 3.88, 3.92, 3.97, 4.02, 4.07, 4.12, 4.17,
    4.22, 4.27, 4.32, 4.37, 4.42, 4.48, 4.53, 4.59, 4.64, 4.70, 4.75, 4.81,
    4.87, 4.93, 4.99, 5.05, 5.11, 5.17, 5.23, 5.30, 5.36, 5.42, 5.49, 5.56,
    5.62, 5.69, 5.76, 5.83, 5.90, 5.97, 6.04, 6.12, 6.19, 6.26, 6.34, 6.42,
    6.49, 6.57, 6.65, 6.73, 6.81, 6.90, 6.98, 7.06, 7.15, 7.23, 7.32, 7.41,
    7.50, 7.59, 7.68, 7.77, 7.87, 7.96, 8.06, 8.16, 8.25, 8.35, 8.45, 8.56,
    8.66, 8.76, 8.87, 8.98, 9.09, 9.20, 9.31, 9.42, 9.53, 9.65, 9.76, 9.88,
)

# Each coarser series takes every 2nd value of the next finer one (E3 every 2nd of E6,
# which is 1.0, 2.2, 4.7); E24 and E192 are the two published base tables.
SERIES: dict[str, tuple[float, ...]] = {
    "E3": _E24[::8],
    "E6": _E24[::4],
    "E12": _E24[::2],
    "E24": _E24,
    "E48": _E192[::4],
    "E96": _E192[::2],
    "E192": _E192,
}

# Tolerance customarily paired with each series (IEC 60063 foreword; common practice).
# IEC 60063 gives E3 for tolerances wider than 20 %; 40 % is the figure long used with it.
TOLERANCE: dict[str, float] = {
    "E3": 0.40,
    "E6": 0.20,
    "E12": 0.10,
    "E24": 0.05,
    "E48": 0.02,
    "E96": 0.01,
    "E192": 0.005,
}

_ACCEPTED = ", ".join(SERIES)


def series_name(name: str, *, key: str = "", file: str = "") -> str:
    """The canonical spelling ("e24" -> "E24"); StageError for an unknown series."""
    canonical = name.strip().upper() if isinstance(name, str) else ""
    if canonical not in SERIES:
        raise StageError(f"{name!r} is not an IEC 60063 series", file=file or None,
                         key=key or None, accepted=_ACCEPTED)
    return canonical


def series(name: str) -> tuple[float, ...]:
    """Decade mantissas 1.0 <= m < 10 of an E series, ascending."""
    return SERIES[series_name(name)]


def tolerance_of(name: str) -> float:
    """The tolerance customarily paired with a series, as a fraction (E24 -> 0.05)."""
    return TOLERANCE[series_name(name)]


def _check_value(value: float) -> float:
    value = float(value)
    if not (math.isfinite(value) and value > 0):
        raise ValueError(f"E-series values are positive and finite, got {value!r}")
    return value


@cache
def _wrapped(name: str) -> tuple[float, ...]:
    """Mantissas with 10.0 appended, so a value near a decade's top wraps cleanly."""
    return (*SERIES[name], 10.0)


def _decade_value(decade: int, mantissa: float) -> float:
    """mantissa * 10**decade, rounded once from its decimal text so 4.7e3 is exactly 4700."""
    return float(f"{mantissa!r}e{decade}")


_REL = 1e-9  # values this close (relative) to a series value count as that value


def _index(value: float, name: str) -> tuple[int, int, bool]:
    """(decade, i, exact): series[i] * 10**decade is the largest standard value <= value.

    `exact` when `value` is within relative _REL of that standard value (so computed
    values such as 4700.000000001 or 9999999990 count as standard).
    """
    mantissas = _wrapped(name)
    decade = math.floor(math.log10(value))
    m = value / 10.0**decade
    if m < 1.0:  # rounding in log10 at a decade boundary
        decade, m = decade - 1, m * 10.0
    elif m >= 10.0:
        decade, m = decade + 1, m / 10.0
    i = max(bisect.bisect_right(mantissas, m) - 1, 0)  # mantissas[i] <= m < mantissas[i + 1]
    exact = False
    if i + 1 < len(mantissas) and mantissas[i + 1] / m - 1.0 <= _REL:
        i, exact = i + 1, True
    elif 1.0 - mantissas[i] / m <= _REL:
        exact = True
    if i == len(mantissas) - 1:  # the appended 10.0: first value of the next decade
        decade, i = decade + 1, 0
    return decade, i, exact


def _step(decade: int, i: int, steps: int, name: str) -> float:
    """The standard value `steps` places from series[i] * 10**decade (negative: downward)."""
    size = len(SERIES[name])
    d, j = divmod(i + steps, size)
    return _decade_value(decade + d, SERIES[name][j])


def nearest(value: float, name: str) -> float:
    """The standard value nearest `value` on a logarithmic scale (ratio error, not difference)."""
    name = series_name(name)
    value = _check_value(value)
    decade, i, exact = _index(value, name)
    below = _step(decade, i, 0, name)
    if exact:
        return below
    above = _step(decade, i, 1, name)
    return below if value / below <= above / value else above


def neighbours(value: float, name: str, n: int = 1) -> list[float]:
    """The n standard values below and n above `value`, across decades, ascending.

    If `value` is itself standard it is included, with n on each side (2n + 1 values).
    """
    name = series_name(name)
    value = _check_value(value)
    if n < 0:
        raise ValueError("n must be >= 0")
    decade, i, exact = _index(value, name)
    if exact:
        return [_step(decade, i, k, name) for k in range(-n, n + 1)]
    return [_step(decade, i, k, name) for k in range(-n + 1, n + 1)]


def values_between(lo: float, hi: float, name: str) -> list[float]:
    """Every standard value v with lo <= v <= hi, ascending."""
    name = series_name(name)
    lo, hi = _check_value(lo), _check_value(hi)
    if lo > hi:
        return []
    decade, i, exact = _index(lo, name)
    k = 0 if exact else 1
    out: list[float] = []
    while True:
        v = _step(decade, i, k, name)
        if v > hi * (1 + 1e-12):
            return out
        out.append(v)
        k += 1


def is_standard(value: float, name: str, rel: float = _REL) -> bool:
    """True when `value` is a value of the series (any decade) within relative `rel`."""
    name = series_name(name)
    value = float(value)
    if not (math.isfinite(value) and value > 0):
        return False
    if rel == _REL:  # the same test neighbours() and values_between() use
        return _index(value, name)[2]
    return abs(nearest(value, name) / value - 1.0) <= rel
