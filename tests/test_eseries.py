"""E series: the IEC 60063 tables, snapping to standard values, neighbours across decades."""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from stagesynth.quantities.errors import StageError
from stagesynth.quantities.eseries import (
    SERIES,
    nearest,
    neighbours,
    series,
    tolerance_of,
    values_between,
)

# IEC 60063 (from memory): the E24 table as published, two significant digits.
E24_PUBLISHED = (
    1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
    3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1,
)
# IEC 60063 (from memory): E12, E6 and E3 as published.
E12_PUBLISHED = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)
E6_PUBLISHED = (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)
E3_PUBLISHED = (1.0, 2.2, 4.7)
# IEC 60063 (from memory): E96 as published, three significant digits.
E96_PUBLISHED = (
    1.00, 1.02, 1.05, 1.07, 1.10, 1.13, 1.15, 1.18, 1.21, 1.24, 1.27, 1.30,
    1.33, 1.37, 1.40, 1.43, 1.47, 1.50, 1.54, 1.58, 1.62, 1.65, 1.69, 1.74,
    1.78, 1.82, 1.87, 1.91, 1.96, 2.00, 2.05, 2.10, 2.15, 2.21, 2.26, 2.32,
    2.37, 2.43, 2.49, 2.55, 2.61, 2.67, 2.74, 2.80, 2.87, 2.94, 3.01, 3.09,
    3.16, 3.24, 3.32, 3.40, 3.48, 3.57, 3.65, 3.74, 3.83, 3.92, 4.02, 4.12,
    4.22, 4.32, 4.42, 4.53, 4.64, 4.75, 4.87, 4.99, 5.11, 5.23, 5.36, 5.49,
    5.62, 5.76, 5.90, 6.04, 6.19, 6.34, 6.49, 6.65, 6.81, 6.98, 7.15, 7.32,
    7.50, 7.68, 7.87, 8.06, 8.25, 8.45, 8.66, 8.87, 9.09, 9.31, 9.53, 9.76,
)


def _formula(n: int) -> tuple[float, ...]:
    """The defining geometric series 10**(i/n), rounded to 2 (n <= 24) or 3 significant digits."""
    places = 1 if n <= 24 else 2
    return tuple(round(10 ** (i / n), places) for i in range(n))


@pytest.mark.parametrize("name", list(SERIES))
def test_lengths_and_range(name: str) -> None:
    # IEC 60063: series En has n values per decade, 1 <= m < 10, strictly increasing.
    values = series(name)
    assert len(values) == int(name[1:])
    assert values[0] == 1.0 and values[-1] < 10.0
    assert values == tuple(sorted(set(values)))


def test_published_two_digit_tables() -> None:
    # IEC 60063 tables for E3, E6, E12, E24 (from memory).
    assert series("E24") == E24_PUBLISHED
    assert series("E12") == E12_PUBLISHED
    assert series("E6") == E6_PUBLISHED
    assert series("E3") == E3_PUBLISHED
    assert 4.3 in series("E24") and 9.1 in series("E24")


def test_published_e96() -> None:
    # IEC 60063 E96 table (from memory).
    assert series("E96") == E96_PUBLISHED


def test_e24_departs_from_rounded_formula_exactly_where_published() -> None:
    # IEC 60063 (from memory): the E24 values 2.7 3.0 3.3 3.6 3.9 4.3 4.7 8.2 differ from
    # round(10**(i/24), 1), which gives 2.6 2.9 3.2 3.5 3.8 4.2 4.6 8.3. No others differ.
    diffs = {(a, b) for a, b in zip(series("E24"), _formula(24), strict=True) if a != b}
    assert diffs == {(2.7, 2.6), (3.0, 2.9), (3.3, 3.2), (3.6, 3.5), (3.9, 3.8), (4.3, 4.2),
                     (4.7, 4.6), (8.2, 8.3)}


def test_three_digit_series_follow_formula_except_e192_9_20() -> None:
    # IEC 60063 (from memory): E48, E96 and E192 are round(10**(i/n), 2) except E192's 9.20
    # (the formula gives 9.19).
    for n in (48, 96):
        assert series(f"E{n}") == _formula(n)
    diffs = [(a, b) for a, b in zip(series("E192"), _formula(192), strict=True) if a != b]
    assert diffs == [(9.20, 9.19)]
    assert 9.20 in series("E192") and 9.19 not in series("E192")


def test_subsets() -> None:
    # IEC 60063: each series is every second value of the next finer one, within the
    # two-digit family (E3..E24) and the three-digit family (E48..E192).
    for coarse, fine in (("E3", "E6"), ("E6", "E12"), ("E12", "E24"), ("E48", "E96"),
                         ("E96", "E192")):
        assert set(series(coarse)) <= set(series(fine))
        assert series(coarse) == series(fine)[::2]
    # ... but not across families: E24's 1.2 is no E48 value (E48 has 1.21).
    assert not set(series("E24")) <= set(series("E48"))
    assert 1.2 not in series("E48") and 1.21 in series("E48")


def test_customary_tolerances() -> None:
    # Tolerance customarily paired with each series (IEC 60063 foreword; common practice).
    assert tolerance_of("E6") == 0.20
    assert tolerance_of("E12") == 0.10
    assert tolerance_of("E24") == 0.05
    assert tolerance_of("E48") == 0.02
    assert tolerance_of("E96") == 0.01
    assert tolerance_of("E192") == 0.005
    assert tolerance_of("E3") > 0.20  # IEC 60063: E3 is for tolerances wider than 20 %


def test_unknown_series() -> None:
    with pytest.raises(StageError) as err:
        series("E25")
    assert "E3, E6, E12, E24, E48, E96, E192" in str(err.value)
    assert series("e24") == series("E24")


def test_nearest_examples() -> None:
    # E24 values from IEC 60063 (from memory); nearest on a ratio (log) scale.
    assert nearest(4650.0, "E24") == 4700.0
    assert nearest(9.6, "E24") == 10.0  # 10/9.6 < 9.6/9.1: wraps to the next decade
    assert nearest(1.04e-9, "E6") == 1e-9
    assert nearest(9.2e3, "E192") == 9.2e3


def test_neighbours_examples() -> None:
    # IEC 60063 E24 (from memory): around 4.7 k are 3.9 k, 4.3 k | 5.1 k, 5.6 k.
    assert neighbours(4700.0, "E24", 2) == [3900.0, 4300.0, 4700.0, 5100.0, 5600.0]
    assert neighbours(4800.0, "E24", 2) == [4300.0, 4700.0, 5100.0, 5600.0]
    assert neighbours(9.5, "E24", 2) == [8.2, 9.1, 10.0, 11.0]
    assert neighbours(1.0, "E12", 1) == [0.82, 1.0, 1.2]
    # a computed value within 1e-9 of a standard one counts as that value, at a decade edge too
    assert neighbours(9999999995.0, "E3", 0) == [1e10]
    assert neighbours(4700.000000001, "E24", 1) == [4300.0, 4700.0, 5100.0]


def test_values_between() -> None:
    # IEC 60063 E24 (from memory), across a decade boundary, ends included.
    assert values_between(800.0, 1300.0, "E24") == [820.0, 910.0, 1000.0, 1100.0, 1200.0, 1300.0]
    assert values_between(1e3, 1e3, "E6") == [1000.0]
    assert values_between(2e3, 1e3, "E6") == []


# The published tables above (IEC 60063, from memory), independent of the product's own:
# E48 is every second E96 value, E192 the three-digit rounded formula with 9.20 for 9.19.
PUBLISHED = {
    "E3": E3_PUBLISHED, "E6": E6_PUBLISHED, "E12": E12_PUBLISHED, "E24": E24_PUBLISHED,
    "E48": E96_PUBLISHED[::2], "E96": E96_PUBLISHED,
    "E192": tuple(9.20 if m == 9.19 else m for m in _formula(192)),
}


def _published_around(value: float, name: str, decades: int = 2) -> list[float]:
    """Every published value of the series within `decades` of `value`, ascending."""
    d = math.floor(math.log10(value))
    return [float(f"{m * 10.0 ** e:.3g}") for e in range(d - decades, d + decades + 1)
            for m in PUBLISHED[name]]


positive = st.floats(min_value=1e-13, max_value=1e10, allow_nan=False, allow_infinity=False)
names = st.sampled_from(list(SERIES))


@given(positive, names)
def test_nearest_is_the_closest_published_value(value: float, name: str) -> None:
    # Property against the published tables: the result is a published value, and none
    # is closer on a ratio scale (ties within 1e-12 either way).
    best = nearest(value, name)
    table = _published_around(value, name)
    assert any(math.isclose(best, v, rel_tol=1e-12) for v in table), best
    err = abs(math.log(best / value))
    assert err <= min(abs(math.log(v / value)) for v in table) + 1e-12


@given(positive, names, st.integers(min_value=0, max_value=4))
def test_neighbours_are_the_published_values_around(value: float, name: str, n: int) -> None:
    # Property against the published tables: the n values below and the n above, with the
    # value itself between them when it is standard (within 1e-9, as documented).
    got = neighbours(value, name, n)
    table = _published_around(value, name)
    same = [v for v in table if math.isclose(v, value, rel_tol=1e-9)]
    below = [v for v in table if v < value and v not in same][-n:] if n else []
    above = [v for v in table if v > value and v not in same][:n]
    want = below + same + above
    assert len(got) == len(want)
    assert all(math.isclose(g, w, rel_tol=1e-12) for g, w in zip(got, want, strict=True)), \
        (got, want)


@given(positive, names)
def test_exact_decade_values(value: float, name: str) -> None:
    # Standard values in any decade come out as the exact decimal (e.g. 4.7e3 == 4700.0).
    for v in neighbours(value, name, 1):
        assert v == float(f"{v:.3g}")
