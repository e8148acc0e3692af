"""Engineering quantities: read "4.7 kΩ", "4k7", "20 dB", "25 °C" into SI floats; print them back.

Parsing is strict and case-sensitive where SI is ("1 m" is milli, "1 M" mega), so a
typo becomes a clear StageError rather than a silently wrong value. The rest of the
package sees only plain SI floats (temperatures in degrees Celsius, gains in V/V).

Accepted forms, for a unit U with SI prefix P (y z a f p n u µ μ m k M G T):

- a bare number (int or float, or a string holding only a number): SI base units;
- "<number> [P]U" with optional spaces: "4.7 kΩ", "100nF", "250 MHz", "4.7e3 Ω",
  and the unit may be left out: "4.7k", "100n";
- an IEC 60062 letter-and-digit code, where the prefix letter stands in for the
  decimal point: "4k7" = 4.7 k, "1M5", "4n7", "p47" = 0.47 p, "2u2"/"2µ2", and for
  resistance "R" (unit) and "K" (kilo, as IEC 60062 writes it): "2R2", "R47", "4K7".
"""

from __future__ import annotations

import math
import re
import unicodedata
from collections.abc import Mapping
from decimal import Decimal, DecimalException

from stagesynth.quantities.errors import StageError

# SI prefixes (BIPM SI Brochure, 9th ed., table 7) as decimal exponents.
PREFIXES: dict[str, int] = {
    "y": -24,
    "z": -21,
    "a": -18,
    "f": -15,
    "p": -12,
    "n": -9,
    "u": -6,
    "µ": -6,  # U+00B5 MICRO SIGN
    "μ": -6,  # U+03BC GREEK SMALL LETTER MU (NFKC form of the micro sign)
    "m": -3,
    "k": 3,
    "M": 6,
    "G": 9,
    "T": 12,
}
# Extra letters IEC 60062 uses in resistance codes: "R" marks the decimal point at
# unity, "K" is its spelling of kilo ("4K7").
_RESISTANCE_LETTERS: dict[str, int] = {"R": 0, "K": 3}

# Prefix printed for each engineering exponent.
_PRINT_PREFIX: dict[int, str] = {
    -24: "y", -21: "z", -18: "a", -15: "f", -12: "p", -9: "n", -6: "µ", -3: "m",
    0: "", 3: "k", 6: "M", 9: "G", 12: "T",
}

# unit -> (name of the quantity, accepted unit spellings, example for messages).
# Spellings are matched at the end of the string, longest first.
UNITS: dict[str, tuple[str, tuple[str, ...], str]] = {
    "Ω": ("resistance", ("Ω", "ohms", "ohm", "R"), "'4.7 kΩ', '4k7' or 4700"),
    "F": ("capacitance", ("F",), "'100 nF', '4n7' or 1e-7"),
    "V": ("voltage", ("V",), "'0.65 V', '12 V' or 12"),
    "A": ("current", ("A",), "'1 mA', '100 µA' or 0.001"),
    "Hz": ("frequency", ("Hz",), "'20 Hz', '250 MHz' or 2.5e8"),
    "W": ("power", ("W",), "'500 mW' or 0.5"),
    "K/W": ("thermal resistance", ("K/W", "°C/W", "degC/W"), "'250 K/W' or 250"),
    "V/K": ("voltage temperature coefficient", ("V/K", "V/°C", "V/degC"), "'-2 mV/K' or -0.002"),
    "s": ("time", ("s",), "'10 ms' or 0.01"),
    # noise: a spectral density (spellings of the square root of hertz as people write it)
    "V/√Hz": ("noise density", ("V/√Hz", "V/√(Hz)", "V/rtHz", "V/sqrt(Hz)", "V/sqrtHz",
                                "V/Hz^0.5", "V/Hz^(1/2)"), "'3 nV/√Hz', '3 nV/rtHz' or 3e-9"),
}
# Other things a user might write, only to name them in a "wrong unit" message.
_OTHER_UNITS: dict[str, str] = {
    "%/K": "temperature coefficient in %/K",
    "%": "percentage",
    "dB": "ratio in dB",
    "V/V": "gain in V/V",
    "°C": "temperature",
    "degC": "temperature",
    "Vpp": "peak-to-peak voltage",
    "Vrms": "rms voltage",
    "H": "inductance",
}
_CASELESS_ALIASES = {"ohm", "ohms"}

_NUMBER = r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_NUMBER_RE = re.compile(rf"^{_NUMBER}$")


def _fail(message: str, key: str, file: str, accepted: str | None) -> StageError:
    return StageError(message, file=file or None, key=key or None, accepted=accepted)


def _normalize(text: str) -> str:
    """NFKC (Ω U+2126 -> Ω, µ -> μ, ℃ -> °C, odd spaces -> space), real minus, trimmed."""
    text = unicodedata.normalize("NFKC", text)
    return text.replace("\u2212", "-").strip()


def _show(value: object) -> str:
    """How a value the user wrote is quoted in messages."""
    if isinstance(value, str):
        return f"'{value}'"
    return repr(value)


def _finite(x: float, shown: str, key: str, file: str, accepted: str | None) -> float:
    if not math.isfinite(x):
        raise _fail(f"{shown} is not a finite number", key, file, accepted)
    return x


def _bare_number(value: object, key: str, file: str, accepted: str | None) -> float | None:
    """The float of an int/float or an all-number string; None when it is a string with more."""
    if isinstance(value, bool):
        raise _fail(f"{_show(value)} is a boolean, not a quantity", key, file, accepted)
    if isinstance(value, int | float):
        return _finite(float(value), _show(value), key, file, accepted)
    if isinstance(value, str):
        text = _normalize(value)
        if not text:
            raise _fail("is an empty string", key, file, accepted)
        if _NUMBER_RE.match(text):
            return _finite(float(text), _show(value), key, file, accepted)
        return None
    if isinstance(value, list | tuple):
        what = "a list"
    elif isinstance(value, Mapping):
        what = "a table"
    else:
        what = f"a {type(value).__name__}"
    raise _fail(f"{_show(value)} is {what}, not a quantity", key, file, accepted)


def parse_number(value: object, *, key: str = "", file: str = "") -> float:
    """Read a plain dimensionless number (int, float or a string holding only a number)."""
    accepted = "a plain number such as 175"
    x = _bare_number(value, key, file, accepted)
    if x is None:
        raise _fail(f"{_show(value)} is not a plain number", key, file, accepted)
    return x


def _scaled(number: str, exponent: int) -> float:
    """float of number * 10**exponent, rounded once (so "100 n" gives exactly 1e-7).

    An exponent beyond Decimal's range gives inf (or 0), which the callers refuse as
    not finite, instead of a decimal.Overflow.
    """
    try:
        return float(Decimal(number).scaleb(exponent))
    except (DecimalException, ValueError, OverflowError):
        return _overflowed(number)


def _overflowed(number: str) -> float:
    """inf (signed) for a number too large for Decimal, 0.0 for one too small."""
    mantissa, _, exp = number.lower().partition("e")
    sign = -1.0 if mantissa.strip().startswith("-") else 1.0
    return sign * math.inf if exp and not exp.strip().startswith("-") else 0.0


def _strip_suffix(text: str, spellings: tuple[str, ...]) -> str | None:
    """Text without a trailing unit spelling (longest match first), or None."""
    for spelling in sorted(spellings, key=len, reverse=True):
        if spelling in _CASELESS_ALIASES:
            if text.lower().endswith(spelling):
                return text[: -len(spelling)]
        elif text.endswith(spelling):
            return text[: -len(spelling)]
    return None


def _magnitude(text: str, letters: Mapping[str, int]) -> float | None:
    """Number with an optional prefix ("4.7 k"), or an IEC 60062 code ("4k7"); None if neither."""
    text = text.strip()
    if not text:
        return None
    alternatives = "|".join(re.escape(p) for p in sorted(letters, key=len, reverse=True))
    m = re.fullmatch(rf"({_NUMBER})\s*({alternatives})?", text)
    if m:
        return _scaled(m.group(1), letters[m.group(2)] if m.group(2) else 0)
    # IEC 60062: the letter replaces the decimal point, digits on either side ("4k7", "R47").
    m = re.fullmatch(rf"([+-]?)(\d*)({alternatives})(\d+)", text)
    if m:
        sign, whole, letter, frac = m.groups()
        return _scaled(f"{sign}{whole or '0'}.{frac}", letters[letter])
    return None


def _what_unit(text: str) -> str | None:
    """Name of the quantity a string seems to carry, to say what was read instead."""
    candidates: list[tuple[str, str]] = []
    for _unit, (name, spellings, _example) in UNITS.items():
        candidates.extend((s, name) for s in spellings if s != "R")
    candidates.extend(_OTHER_UNITS.items())
    for spelling, name in sorted(candidates, key=lambda c: len(c[0]), reverse=True):
        rest = _strip_suffix(text, (spelling,))
        if rest is not None and _magnitude(rest, PREFIXES) is not None:
            return name
    return None


def accepted_for(unit: str) -> str:
    """Human description of what parse_quantity accepts for `unit`."""
    name, _spellings, example = UNITS[unit]
    return f"a {name} such as {example}"


def parse_quantity(value: object, unit: str, *, key: str = "", file: str = "") -> float:
    """Read a quantity in `unit` (one of UNITS) into an SI float; StageError on anything else."""
    if unit not in UNITS:
        raise ValueError(f"parse_quantity: unknown unit {unit!r}; use one of {list(UNITS)}")
    name, spellings, _example = UNITS[unit]
    accepted = accepted_for(unit)
    bare = _bare_number(value, key, file, accepted)
    if bare is not None:
        return bare
    assert isinstance(value, str)
    text = _normalize(value)
    if "," in text:
        raise _fail(f"{_show(value)} has a comma; write the decimal point as '.'", key, file,
                    accepted)
    letters = {**PREFIXES, **_RESISTANCE_LETTERS} if unit == "Ω" else PREFIXES
    rest = _strip_suffix(text, spellings)
    result = _magnitude(rest if rest is not None else text, letters)
    if result is None:
        other = _what_unit(text)
        if other is not None and other != name:
            message = f"{_show(value)} reads as a {other}, not a {name}"
        else:
            message = f"{_show(value)} is not a {name}"
        raise _fail(message, key, file, accepted)
    return _finite(result, _show(value), key, file, accepted)


def _number_and_suffix(
    value: object, suffixes: Mapping[str, float], *, key: str, file: str, accepted: str,
    what: str,
) -> tuple[float, str | None]:
    """Split "<number> <suffix>" with one of `suffixes` (no SI prefix); suffix None if bare."""
    bare = _bare_number(value, key, file, accepted)
    if bare is not None:
        return bare, None
    assert isinstance(value, str)
    text = _normalize(value)
    for suffix in sorted(suffixes, key=len, reverse=True):
        rest = text[: -len(suffix)] if text.endswith(suffix) else None
        if rest is not None and _NUMBER_RE.match(rest.strip()):
            try:
                x = float(Decimal(rest.strip()) * Decimal(repr(suffixes[suffix])))
            except (DecimalException, ValueError, OverflowError):
                x = _overflowed(rest.strip())
            return _finite(x, _show(value), key, file, accepted), suffix
    other = _what_unit(text)
    message = f"{_show(value)} reads as a {other}, not a {what}" if other else (
        f"{_show(value)} is not a {what}")
    raise _fail(message, key, file, accepted)


def parse_fraction(value: object, *, key: str = "", file: str = "") -> float:
    """Read a share or tolerance: "5%" -> 0.05, "500 ppm" -> 5e-4; a bare number is a fraction."""
    accepted = "a percentage such as '5 %' or '99 %', or a fraction such as 0.05"
    x, suffix = _number_and_suffix(
        value, {"%": 1e-2, "ppm": 1e-6}, key=key, file=file, accepted=accepted,
        what="percentage",
    )
    if x < 0:
        raise _fail(f"{_show(value)} is negative", key, file, accepted)
    if suffix is None and x > 1:
        raise _fail(
            f"{_show(value)} is read as a fraction ({x:g} = {x * 100:g} %); "
            f"did you mean '{x:g} %'?", key, file, accepted)
    return x


def parse_per_kelvin(value: object, *, key: str = "", file: str = "") -> float:
    """Read a relative temperature coefficient: "0.5 %/K" -> 0.005; a bare number is per kelvin."""
    accepted = "a coefficient such as '0.5 %/K', '5000 ppm/K' or 0.005 (per kelvin)"
    suffixes = {"%/K": 1e-2, "%/°C": 1e-2, "%/degC": 1e-2, "ppm/K": 1e-6, "ppm/°C": 1e-6,
                "/K": 1.0, "/°C": 1.0}
    x, suffix = _number_and_suffix(value, suffixes, key=key, file=file, accepted=accepted,
                                   what="relative temperature coefficient")
    if suffix is None and abs(x) > 0.1:
        raise _fail(
            f"{_show(value)} is read as {x * 100:g} %/K; did you mean '{x:g} %/K'?",
            key, file, accepted)
    return x


def parse_gain(value: object, *, key: str = "", file: str = "") -> float:
    """Read a voltage gain magnitude in V/V: "20 dB" -> 10.0, "10 V/V" -> 10; bare = V/V."""
    accepted = "a gain such as '20 dB', '10 V/V' or 10 (V/V)"
    x, suffix = _number_and_suffix(value, {"dB": 1.0, "db": 1.0, "DB": 1.0, "V/V": 1.0},
                                   key=key, file=file, accepted=accepted, what="gain")
    if suffix is not None and suffix.lower() == "db":
        if not -400.0 <= x <= 400.0:  # beyond what a float holds (10**(x/20))
            raise _fail(f"{_show(value)} is out of range", key, file,
                        "a gain between -400 dB and +400 dB")
        return 10.0 ** (x / 20.0)
    if x <= 0:
        raise _fail(f"{_show(value)} must be a positive magnitude", key, file,
                    accepted + "; for an inverting stage use inverting = \"yes\"")
    return x


def parse_db(value: object, *, key: str = "", file: str = "") -> float:
    """Read a level in decibels: "1 dB" -> 1.0; a bare number is in dB."""
    accepted = "a value in decibels such as '1 dB' or 1"
    x, _ = _number_and_suffix(value, {"dB": 1.0, "db": 1.0, "DB": 1.0}, key=key, file=file,
                              accepted=accepted, what="value in dB")
    return x


def parse_thd(value: object, *, key: str = "", file: str = "") -> float:
    """Read a distortion ratio: "0.5 %", "300 ppm", "-46 dB" (below the fundamental);
    a bare number is a fraction. Returns the ratio (0.005 for "0.5 %")."""
    accepted = ("a distortion such as '0.5 %', '300 ppm', '-46 dB' (relative to the "
                "fundamental) or 0.005 (a fraction)")
    x, suffix = _number_and_suffix(
        value, {"%": 1e-2, "ppm": 1e-6, "dB": 1.0, "db": 1.0, "dBc": 1.0},
        key=key, file=file, accepted=accepted, what="distortion ratio")
    if suffix is not None and suffix.lower().startswith("db"):
        if not x < 0:
            raise _fail(f"{_show(value)} is not below the fundamental; distortion in dB "
                        "is negative (e.g. '-46 dB' = 0.5 %)", key, file, accepted)
        return 10.0 ** (x / 20.0)
    if not x > 0:
        raise _fail(f"{_show(value)} must be greater than zero", key, file, accepted)
    if suffix is None and x >= 1:
        raise _fail(f"{_show(value)} is read as a fraction ({x:g} = {x * 100:g} %); "
                    f"did you mean '{x:g} %'?", key, file, accepted)
    if x >= 1:
        raise _fail(f"{_show(value)} is 100 % or more of the fundamental", key, file, accepted)
    return x


ZERO_CELSIUS_K = 273.15
_BARE_KELVIN_FLOOR = 150.0  # a bare number below this was almost surely meant as Celsius


def parse_temperature(value: object, *, key: str = "", file: str = "") -> float:
    """Read a temperature into degrees Celsius: "25 °C", "25 degC", "298.15 K"; bare = kelvin."""
    accepted = "a temperature such as '25 °C', '-40 degC' or '298.15 K'"
    suffixes = {"°C": 1.0, "degC": 1.0, "deg C": 1.0, "C": 1.0, "K": 1.0}
    text = _normalize(value) if isinstance(value, str) else ""
    if text.endswith(("°F", "degF")):
        raise _fail(f"{_show(value)} is in Fahrenheit", key, file, accepted)
    x, suffix = _number_and_suffix(value, suffixes, key=key, file=file, accepted=accepted,
                                   what="temperature")
    if suffix is None or suffix == "K":
        if suffix is None and x < _BARE_KELVIN_FLOOR:
            raise _fail(
                f"{_show(value)} would be {x:g} K ({x - ZERO_CELSIUS_K:g} °C): bare numbers are "
                f"kelvin; write '{x:g} °C' for Celsius", key, file, accepted)
        if x < 0:
            raise _fail(f"{_show(value)} is below absolute zero", key, file, accepted)
        return float(Decimal(repr(x)) - Decimal("273.15"))
    if x < -ZERO_CELSIUS_K:
        raise _fail(f"{_show(value)} is below absolute zero", key, file, accepted)
    return x


_SWING_FACTORS = {
    "pp": 1.0, "p-p": 1.0, "ptp": 1.0,
    "p": 2.0, "pk": 2.0, "peak": 2.0,
    "rms": 2.0 * math.sqrt(2.0), "RMS": 2.0 * math.sqrt(2.0),
}


def parse_swing(value: object, *, key: str = "", file: str = "") -> float:
    """Read a signal swing into volts peak-to-peak: "3 Vpp", "1.5 Vpk", "1 Vrms"; bare = Vpp.

    A string in plain volts ("3 V") is refused: it does not say which of the three is meant.
    """
    accepted = "a swing such as '3 Vpp', '3 V p-p', '1.5 Vpk' or '1 Vrms' (bare numbers: Vpp)"
    bare = _bare_number(value, key, file, accepted)
    if bare is not None:
        if bare < 0:
            raise _fail(f"{_show(value)} is negative", key, file, accepted)
        return bare
    assert isinstance(value, str)
    text = _normalize(value)
    m = re.fullmatch(r"(.*?V)\s*(pp|p-p|ptp|pk|peak|p|rms|RMS)", text)
    if m is None:
        if _strip_suffix(text, ("V",)) is not None and _magnitude(text[:-1], PREFIXES) is not None:
            raise _fail(f"{_show(value)} does not say peak-to-peak, peak or rms", key, file,
                        accepted)
        other = _what_unit(text)
        message = (f"{_show(value)} reads as a {other}, not a swing" if other
                   else f"{_show(value)} is not a swing")
        raise _fail(message, key, file, accepted)
    volts = parse_quantity(m.group(1), "V", key=key, file=file)
    if volts < 0:
        raise _fail(f"{_show(value)} is negative", key, file, accepted)
    return volts * _SWING_FACTORS[m.group(2)]


# ---------------------------------------------------------------------------
# Printing
# ---------------------------------------------------------------------------
_NO_PREFIX_UNITS = {"%": 100.0, "%/K": 100.0, "dB": 1.0, "°C": 1.0, "V/V": 1.0}


def _decimal(value: float, digits: int | None) -> Decimal:
    """`value` as a Decimal: rounded to `digits` significant digits, or shortest exact (None)."""
    if digits is None:
        return Decimal(repr(value))
    if digits < 1:
        raise ValueError("digits must be at least 1")
    return Decimal(f"{value:.{digits - 1}e}")


def _plain(d: Decimal) -> str:
    """Fixed-point text of a Decimal without trailing zeros ("4.70" -> "4.7", "1E+2" -> "100")."""
    text = format(d.normalize(), "f")
    return "0" if text in ("-0", "0") else text


def format_quantity(value: float, unit: str = "", digits: int | None = 3) -> str:
    """Engineering notation with an SI prefix: 4700 -> "4.7 kΩ", 1e-7 -> "100 nF", 0 -> "0 Ω".

    `digits` significant digits, trailing zeros dropped; digits=None prints the shortest
    text that reads back to exactly the same float. "%" and "%/K" print fractions as
    percent, and "dB", "°C", "V/V" take no prefix.
    """
    value = float(value)
    space_unit = f" {unit}" if unit else ""
    if math.isnan(value):
        return "NaN"
    if math.isinf(value):
        return "∞" if value > 0 else "-∞"
    if unit in _NO_PREFIX_UNITS:
        d = _decimal(value, digits) * Decimal(repr(_NO_PREFIX_UNITS[unit]))
        return f"{_plain(d)}{space_unit}"
    if value == 0:
        return f"0{space_unit}"
    d = _decimal(value, digits)
    exponent = d.adjusted()  # power of ten of the leading digit, after rounding
    if not -24 <= exponent < 15:  # beyond the prefixes printed: a power of ten
        return f"{format_number(value, digits or 17)}{space_unit}"
    eng = min(max(3 * math.floor(exponent / 3), -24), 12)
    mantissa = _plain(d.scaleb(-eng))
    return f"{mantissa} {_PRINT_PREFIX[eng]}{unit}".rstrip()


_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def format_number(value: float, digits: int = 3) -> str:
    """A plain number (no unit, so no prefix): "0.00103", "1520", and "1.2 × 10⁻⁶" only
    outside 10⁻³ … 10⁶, never "1.2e-06" (ISO 80000-1 / IEC 60027-1 write powers of ten)."""
    value = float(value)
    if math.isnan(value):
        return "NaN"
    if math.isinf(value):
        return "∞" if value > 0 else "-∞"
    if value == 0:
        return "0"
    d = _decimal(value, digits)
    exponent = d.adjusted()
    if -3 <= exponent < 6:
        return _plain(d)
    mantissa = _plain(d.scaleb(-exponent))
    return f"{mantissa} × 10{str(exponent).translate(_SUPERSCRIPT)}"


_IEC60062_LETTERS = {0: "R", 3: "k", 6: "M", 9: "G", 12: "T"}


def format_iec60062(value: float, digits: int = 3) -> str:
    """Resistance as an IEC 60062 code: 4700 -> "4k7", 2.2 -> "2R2", 0.47 -> "R47", 1e5 -> "100k".

    Uses lower-case "k" as in SI; a bare single digit gets a trailing "0" ("1k0"), as in
    the standard's examples, so the letter cannot be misread as a unit.
    """
    if not math.isfinite(value) or value <= 0:
        raise ValueError(f"format_iec60062 needs a positive finite resistance, got {value!r}")
    value = float(value)
    d = _decimal(value, digits)
    exponent = d.adjusted()
    if exponent < 0:  # below 1 ohm: "R" then the fraction digits ("R47", "R047")
        frac = _plain(d).split(".")[1]
        return "R" + (frac if len(frac) >= 2 else frac + "0")
    eng = min(3 * (exponent // 3), 12)
    letter = _IEC60062_LETTERS[eng]
    whole, _, frac = _plain(d.scaleb(-eng)).partition(".")
    if not frac and len(whole) == 1:
        frac = "0"
    return f"{whole}{letter}{frac}"
