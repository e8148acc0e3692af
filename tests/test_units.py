"""Units: SI prefixes, IEC 60062 codes, dB, temperatures, swings, and their error messages."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from stagesynth.quantities.errors import StageError
from stagesynth.quantities.units import (
    UNITS,
    format_iec60062,
    format_quantity,
    parse_db,
    parse_fraction,
    parse_gain,
    parse_number,
    parse_per_kelvin,
    parse_quantity,
    parse_swing,
    parse_temperature,
)

# SI prefixes and their powers of ten: BIPM SI Brochure, 9th ed. (2019), table 7 (from memory).
SI_PREFIXES = {
    "y": -24, "z": -21, "a": -18, "f": -15, "p": -12, "n": -9, "µ": -6, "m": -3,
    "k": 3, "M": 6, "G": 9, "T": 12,
}


@pytest.mark.parametrize(("prefix", "power"), SI_PREFIXES.items())
def test_si_prefixes(prefix: str, power: int) -> None:
    # SI Brochure 9th ed., table 7 (from memory); "4.7 <prefix>F" is 4.7 * 10**power farad.
    assert parse_quantity(f"4.7 {prefix}F", "F") == pytest.approx(4.7 * 10.0**power, rel=1e-15)


def test_micro_spellings() -> None:
    # SI Brochure: the micro prefix is the Greek mu; "u" is the customary ASCII stand-in.
    values = {parse_quantity(t, "F") for t in ("2.2 µF", "2.2 μF", "2.2 uF", "2.2µ", "2u2")}
    assert values == {2.2e-6}


def test_milli_and_mega_differ_by_case() -> None:
    # SI Brochure 9th ed., 3: prefix symbols are case-sensitive; m = 1e-3, M = 1e6.
    assert parse_quantity("1 m", "Ω") == 1e-3
    assert parse_quantity("1 M", "Ω") == 1e6
    assert parse_quantity("1 mHz", "Hz") == 1e-3
    assert parse_quantity("1 MHz", "Hz") == 1e6


@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        ("4.7 kΩ", "Ω", 4700.0),
        ("4.7k", "Ω", 4700.0),
        ("4.7 kohm", "Ω", 4700.0),
        ("4.7 kOhm", "Ω", 4700.0),
        ("4.7 k\u2126", "Ω", 4700.0),  # U+2126 OHM SIGN, NFKC-equivalent to Greek capital omega
        ("100R", "Ω", 100.0),
        ("4.7e3 Ω", "Ω", 4700.0),
        ("100 nF", "F", 1e-7),
        ("100n", "F", 1e-7),
        ("250 MHz", "Hz", 2.5e8),
        ("0.65 V", "V", 0.65),
        ("1 mA", "A", 1e-3),
        ("500 mW", "W", 0.5),
        ("250 K/W", "K/W", 250.0),
        ("-2 mV/K", "V/K", -2e-3),
        ("10 ms", "s", 1e-2),
        (4700, "Ω", 4700.0),
        (1e-7, "F", 1e-7),
        ("4700", "Ω", 4700.0),
    ],
)
def test_parse_quantity_examples(text: object, unit: str, expected: float) -> None:
    # SI notation (BIPM SI Brochure 9th ed., 5.4.3: number, space, prefixed unit; from memory);
    # bare numbers are SI base units per the spec contract. Exact: one decimal rounding only.
    assert parse_quantity(text, unit) == expected


# IEC 60062 resistance codes: the letter R, K, M, G or T stands for the decimal point and
# the multiplier (examples as listed in IEC 60062, from memory).
IEC60062_RESISTANCE = {
    "R47": 0.47, "4R7": 4.7, "470R": 470.0, "4K7": 4.7e3, "47K": 47e3, "47K3": 47.3e3,
    "470K": 470e3, "4M7": 4.7e6, "1R0": 1.0, "1K0": 1e3, "1M0": 1e6, "2G37": 2.37e9,
    "1T0": 1e12, "R10": 0.1, "3R32": 3.32, "15R4": 15.4, "5K9": 5.9e3,
}
# IEC 60062 capacitance codes: the letter p, n, µ or m marks the decimal point (from memory).
IEC60062_CAPACITANCE = {"p68": 0.68e-12, "4p7": 4.7e-12, "6n8": 6.8e-9, "1µ5": 1.5e-6,
                        "3m3": 3.3e-3, "p47": 0.47e-12, "4n7": 4.7e-9}


@pytest.mark.parametrize(("code", "ohms"), IEC60062_RESISTANCE.items())
def test_iec60062_resistance_codes(code: str, ohms: float) -> None:
    # IEC 60062 letter-and-digit code for resistance (from memory); lower-case k also read.
    assert parse_quantity(code, "Ω") == ohms
    assert parse_quantity(code.replace("K", "k"), "Ω") == ohms
    assert parse_quantity(code + " Ω", "Ω") == ohms


@pytest.mark.parametrize(("code", "farads"), IEC60062_CAPACITANCE.items())
def test_iec60062_capacitance_codes(code: str, farads: float) -> None:
    # IEC 60062 letter-and-digit code for capacitance (from memory).
    assert parse_quantity(code, "F") == pytest.approx(farads, rel=1e-15)
    assert parse_quantity(code + "F", "F") == pytest.approx(farads, rel=1e-15)


@pytest.mark.parametrize(
    ("ohms", "code"),
    [(4700.0, "4k7"), (2.2, "2R2"), (1.5e6, "1M5"), (1e5, "100k"), (0.47, "R47"),
     (1000.0, "1k0"), (1.0, "1R0"), (47.3e3, "47k3"), (470.0, "470R"), (2.37e9, "2G37")],
)
def test_format_iec60062(ohms: float, code: str) -> None:
    # IEC 60062 examples (from memory), written with SI lower-case k as the task asks.
    assert format_iec60062(ohms) == code


@given(st.integers(min_value=1, max_value=999), st.integers(min_value=-2, max_value=10))
def test_iec60062_round_trip(digits3: int, power: int) -> None:
    # Any 3-significant-digit resistance prints as an IEC 60062 code that reads back unchanged.
    ohms = float(f"{digits3}e{power}")
    assert parse_quantity(format_iec60062(ohms), "Ω") == pytest.approx(ohms, rel=1e-12)


@pytest.mark.parametrize(
    ("value", "unit", "text"),
    [(4700.0, "Ω", "4.7 kΩ"), (1e-7, "F", "100 nF"), (2.5e8, "Hz", "250 MHz"),
     (0.0, "Ω", "0 Ω"), (math.inf, "Ω", "∞"), (-2e-3, "V/K", "-2 mV/K"),
     (999.6, "Ω", "1 kΩ"), (0.05, "%", "5 %"), (0.005, "%/K", "0.5 %/K"),
     (1.23456e-13, "F", "123 fF"), (12.0, "V", "12 V")],
)
def test_format_quantity_examples(value: float, unit: str, text: str) -> None:
    # Engineering notation: exponent a multiple of 3, SI prefix, 3 significant digits,
    # trailing zeros dropped (SI Brochure 9th ed., 5.4.3 spacing; from memory).
    assert format_quantity(value, unit) == text


PREFIXABLE = list(UNITS)


@settings(max_examples=300, deadline=None)
@given(
    st.floats(min_value=1e-21, max_value=9e14, allow_nan=False, allow_infinity=False),
    st.sampled_from(PREFIXABLE),
    st.integers(min_value=1, max_value=8),
    st.booleans(),
)
def test_format_then_parse_within_printed_precision(
    value: float, unit: str, digits: int, negative: bool
) -> None:
    # Property: a printed value reads back within half a unit of its last printed digit.
    x = -value if negative and unit == "V/K" else value
    back = parse_quantity(format_quantity(x, unit, digits), unit)
    assert back == pytest.approx(x, rel=0.5 * 10.0 ** (1 - digits) * (1 + 1e-9))


@settings(max_examples=300, deadline=None)
@given(st.floats(min_value=1e-21, max_value=9e14), st.sampled_from(PREFIXABLE))
def test_shortest_format_reads_back_exactly(value: float, unit: str) -> None:
    # Property: digits=None prints the shortest decimal of the float (as repr does), which
    # reads back to the identical float (IEEE 754 round-trip guarantee of shortest repr).
    assert parse_quantity(format_quantity(value, unit, digits=None), unit) == value


def test_fraction() -> None:
    # Percent: 1 % = 0.01 (ISO 80000-1, from memory); ppm = 1e-6.
    assert parse_fraction("5%") == 0.05
    assert parse_fraction("99 %") == 0.99
    assert parse_fraction(0.05) == 0.05
    assert parse_fraction("500 ppm") == 5e-4
    with pytest.raises(StageError, match=r"did you mean '5 %'\?"):
        parse_fraction(5, key="supply.tolerance", file="a.toml")
    with pytest.raises(StageError, match="negative"):
        parse_fraction("-1 %")


def test_per_kelvin() -> None:
    # 0.5 %/K = 0.005 per kelvin (percent = 1e-2); 5000 ppm/K is the same.
    assert parse_per_kelvin("0.5 %/K") == 0.005
    assert parse_per_kelvin("0.005 /K") == 0.005
    assert parse_per_kelvin("5000 ppm/K") == 0.005
    assert parse_per_kelvin("-0.3 %/°C") == -0.003
    with pytest.raises(StageError, match=r"did you mean '0.5 %/K'\?"):
        parse_per_kelvin(0.5)


def test_gain_in_db_and_vv() -> None:
    # Voltage ratio in decibels: G_dB = 20 log10(V2/V1) (IEC 60027-3, from memory).
    assert parse_gain("20 dB") == 10.0
    assert parse_gain("40 dB") == 100.0
    assert parse_gain("6 dB") == pytest.approx(1.9953, rel=1e-4)
    assert parse_gain("-20 dB") == pytest.approx(0.1, rel=1e-15)
    assert parse_gain("10 V/V") == 10.0
    assert parse_gain(10) == 10.0
    with pytest.raises(StageError, match="positive"):
        parse_gain("-10 V/V")
    with pytest.raises(StageError, match="frequency"):
        parse_gain("20 Hz")
    assert parse_db("1 dB") == 1.0
    assert parse_db(0.5) == 0.5


def test_temperature() -> None:
    # T/°C = T/K − 273.15, exact (SI Brochure 9th ed., 2.3.1, from memory).
    assert parse_temperature("25 °C") == 25.0
    assert parse_temperature("25 degC") == 25.0
    assert parse_temperature("25 \u2103") == 25.0  # U+2103 DEGREE CELSIUS
    assert parse_temperature("-40 °C") == -40.0
    assert parse_temperature("298.15 K") == 25.0
    assert parse_temperature(273.15) == 0.0
    with pytest.raises(StageError) as err:
        parse_temperature(25, key="require.ambient", file="s.toml")
    message = str(err.value)
    assert "bare numbers are kelvin" in message
    assert "'25 °C'" in message
    assert "-248.15 °C" in message  # the other reading: 25 K
    with pytest.raises(StageError, match="absolute zero"):
        parse_temperature("-300 °C")
    with pytest.raises(StageError, match="Fahrenheit"):
        parse_temperature("77 °F")


def test_swing() -> None:
    # Sine wave: Vpp = 2 Vpk = 2·sqrt(2)·Vrms (Horowitz & Hill, 3rd ed., 1.3.1, from memory).
    assert parse_swing("3 Vpp") == 3.0
    assert parse_swing("3 V p-p") == 3.0
    assert parse_swing("1.5 Vp") == 3.0
    assert parse_swing("1.5 Vpk") == 3.0
    assert parse_swing("1 Vrms") == pytest.approx(2 * math.sqrt(2), rel=1e-15)
    assert parse_swing("300 mVpp") == pytest.approx(0.3, rel=1e-15)
    assert parse_swing(3) == 3.0  # bare numbers: volts peak-to-peak
    with pytest.raises(StageError, match="peak-to-peak, peak or rms"):
        parse_swing("3 V")


def test_plain_number() -> None:
    assert parse_number("175") == 175.0
    with pytest.raises(StageError, match="plain number"):
        parse_number("175 V")


def test_wrong_unit_message_names_file_key_value_and_accepted() -> None:
    with pytest.raises(StageError) as err:
        parse_quantity("4.7 kF", "Ω", key="load.resistance", file="spec.toml")
    e = err.value
    assert (e.file, e.key) == ("spec.toml", "load.resistance")
    text = str(e)
    assert text.startswith("spec.toml: load.resistance: '4.7 kF'")
    assert "capacitance, not a resistance" in text
    assert "'4.7 kΩ', '4k7' or 4700" in text


@pytest.mark.parametrize(
    ("text", "unit", "fragment"),
    [("12 Hz", "V", "frequency, not a voltage"),
     ("3 furlongs", "V", "not a voltage"),
     ("1.2.3k", "Ω", "not a resistance"),
     ("k47k", "Ω", "not a resistance"),
     ("", "Ω", "empty"),
     ("nan", "Ω", "not a resistance"),
     ("inf", "F", "not a capacitance"),
     (math.nan, "Ω", "not a finite number"),
     (math.inf, "Ω", "not a finite number"),
     ("1e400 Ω", "Ω", "not a finite number"),
     (True, "V", "boolean"),
     ([1, 2], "V", "list"),
     ("4,7 k", "Ω", "decimal point"),
     ("2 Vpp", "V", "peak-to-peak voltage, not a voltage"),
     ("R", "Ω", "not a resistance")],
)
def test_rejections(text: object, unit: str, fragment: str) -> None:
    with pytest.raises(StageError, match="accepted") as err:
        parse_quantity(text, unit, key="k", file="f.toml")
    assert fragment in str(err.value)
