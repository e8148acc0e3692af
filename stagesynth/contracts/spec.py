"""The stage spec: what the user asks for (section 1 of the contract), as frozen values.

All quantities are plain SI floats; temperatures in degrees Celsius; gains as
V/V magnitudes with their dB forms alongside. `load_spec` reads and validates a
TOML file; every error names the file, the key path and what would be accepted.
"""

from __future__ import annotations

import dataclasses
import difflib
import json
import math
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any

from stagesynth.contracts.device import PRESETS, Device
from stagesynth.quantities import eseries
from stagesynth.quantities.errors import StageError
from stagesynth.quantities.limits import (
    AMBIENT_LIMIT,
    MAX_DEPTH,
    SUPPLY_CURRENT_FLOOR,
    SUPPLY_LIMIT,
    device_problem,
    nesting_depth,
    out_of_range,
)
from stagesynth.quantities.units import (
    accepted_for,
    format_quantity,
    parse_db,
    parse_fraction,
    parse_gain,
    parse_number,
    parse_per_kelvin,
    parse_quantity,
    parse_swing,
    parse_temperature,
    parse_thd,
)


@dataclass(frozen=True)
class Supply:
    voltage: float  # V, single positive supply to ground
    tolerance: float = 0.0  # fraction, e.g. 0.05 for 5 %
    # a range [lo, hi] as written (a battery); voltage is then its middle and tolerance
    # its half-width, so the corners and the Monte Carlo span exactly the range
    range: tuple[float, float] | None = None


@dataclass(frozen=True)
class Source:
    resistance: float = 0.0  # ohm, Thevenin resistance of the signal source
    capacitance: float | None = None  # F in series with the EMF (second release); None: none


@dataclass(frozen=True)
class Load:
    resistance: float  # ohm
    capacitance: float = 0.0  # F


@dataclass(frozen=True)
class Requirements:
    gain: float  # V/V, midband |v_load / v_source_emf|
    f_low: float  # Hz, lower -3 dB corner at or below this
    f_high: float  # Hz, upper -3 dB corner at or above this
    gain_tolerance_db: float = 1.0  # dB, nominal gain within +- this
    z_in: float = 0.0  # ohm, at least
    swing_vpp: float = 0.0  # V peak-to-peak at the load, at every corner
    supply_current: float | None = None  # A, at most, at every corner
    ambient: tuple[float, float] = (25.0, 25.0)  # degC, (min, max)
    inverting: str = "any"  # "any", "yes" or "no"
    z_out: float | None = None  # ohm, at most
    yield_target: float | None = None  # fraction, e.g. 0.99
    # ranges and input match (a block of their own)
    z_in_max: float | None = None  # ohm: z_in written as a range [z_in, z_in_max]
    z_out_min: float | None = None  # ohm: z_out written as a range [z_out_min, z_out]
    return_loss: float | None = None  # dB, at least, over f_low..f_high
    # noise (second release): input-referred density V/sqrt(Hz), spot noise figure dB,
    # band rms V (all "at most"), and the spot frequency (None: midband)
    noise: float | None = None
    noise_figure_db: float | None = None
    noise_rms: float | None = None
    noise_at: float | None = None

    @property
    def noise_frequency(self) -> float:
        """Where `noise` and `noise_figure` are judged: noise_at, else midband."""
        return self.noise_at if self.noise_at is not None else self.midband

    @property
    def wants_noise(self) -> bool:
        """Whether any noise requirement is given."""
        return any(x is not None for x in (self.noise, self.noise_figure_db, self.noise_rms))
    # supply and stability (second release)
    supply_rejection_db: float | None = None  # dB at ripple_at, at least
    ripple_at: float = 100.0  # Hz
    peaking_db: float = 3.0  # dB, |gain| nowhere more than this above midband
    # distortion (second release): THD at the load at most `thd` (a ratio), at an output
    # level `thd_level` (Vpp; None: the required swing) and frequency `thd_at` (None: midband)
    thd: float | None = None
    thd_level: float | None = None
    thd_at: float | None = None

    @property
    def gain_db(self) -> float:
        return 20.0 * math.log10(self.gain)

    @property
    def midband(self) -> float:
        """Geometric mean of the required corners: where midband figures are taken."""
        return math.sqrt(self.f_low * self.f_high)

    @property
    def thd_level_vpp(self) -> float:
        """Output level (Vpp) at which THD is judged: thd_level, else the required swing."""
        return self.thd_level if self.thd_level is not None else self.swing_vpp

    @property
    def thd_freq(self) -> float:
        """Frequency at which THD is judged: thd_at, else midband."""
        return self.thd_at if self.thd_at is not None else self.midband


@dataclass(frozen=True)
class Parts:
    resistors: str = "E24"
    resistor_tolerance: float = 0.01
    capacitors: str = "E6"
    capacitor_tolerance: float = 0.10
    resistor_max: float = 1e6  # ohm: the largest resistor the synthesizer may choose
    capacitor_max: float = 470e-6  # farad: the largest capacitor it may choose


@dataclass(frozen=True)
class Spec:
    supply: Supply
    load: Load
    require: Requirements
    transistor: Device
    source: Source = Source()
    parts: Parts = Parts()
    title: str = ""
    path: str = ""  # the file it was read from, for messages
    warnings: tuple[str, ...] = ()  # values accepted but unlikely for their key

    def to_dict(self) -> dict[str, Any]:
        """The spec as the dict of its TOML file (load_spec accepts it back)."""
        return tomllib.loads(spec_to_toml(self))


# ---------------------------------------------------------------------------
# Loading and validation (section 1 of the contract)
# ---------------------------------------------------------------------------
_SECTION_KEYS: dict[str, tuple[str, ...]] = {
    "supply": ("voltage", "tolerance"),
    "source": ("resistance", "capacitance"),
    "load": ("resistance", "capacitance"),
    "require": (
        "gain", "gain_tolerance", "f_low", "f_high", "z_in", "swing", "supply_current",
        "ambient", "inverting", "z_out", "yield",
        "return_loss",
        # supply and stability (second release)
        "supply_rejection", "ripple_at", "peaking",
        "thd", "thd_level", "thd_at",
    ),
    "parts": ("resistors", "resistor_tolerance", "capacitors", "capacitor_tolerance",
              "resistor_max", "capacitor_max"),
}
# noise requirements (second release), a block of their own
NOISE_REQUIRE_KEYS: tuple[str, ...] = ("noise", "noise_figure", "noise_rms", "noise_at")
_SECTION_KEYS["require"] = (*_SECTION_KEYS["require"], *NOISE_REQUIRE_KEYS)
TOP_KEYS: tuple[str, ...] = ("title", "supply", "source", "load", "require", "transistor", "parts")
REQUIRED_DEVICE_KEYS: tuple[str, ...] = ("polarity", "hfe", "vbe", "ft", "c_cb")
# [transistor] keys: quantity keys map to (unit or parser, lower bound: ">0", ">=0" or "").
_DEVICE_QUANTITIES: dict[str, tuple[str, str]] = {
    "vbe": ("V", ">0"),
    "vbe_current": ("A", ">0"),
    "early_voltage": ("V", ">0"),
    "ft": ("Hz", ">0"),
    "c_cb": ("F", ">0"),
    "r_bb": ("Ω", ">=0"),
    "vce_sat": ("V", ">=0"),
    "ic_max": ("A", ">0"),
    "vce_max": ("V", ">0"),
    "p_max": ("W", ">0"),
    "theta_ja": ("K/W", ">0"),
    "vbe_tempco": ("V/K", ""),
    "hfe_tempco": ("%/K", ""),
    # second release, contract section 2: charge-control capacitance model
    "ft_current": ("A", ">0"),
    "c_je": ("F", ">=0"),
    "flicker_corner": ("Hz", ">=0"),  # noise (second release)
}
# bare-number [transistor] keys (second release): the Ebers-Moll reverse current gain
_DEVICE_NUMBERS: dict[str, str] = {"hfe_reverse": "a reverse current gain such as 1"}
DEVICE_KEYS: tuple[str, ...] = (
    "preset", "file", "name", "polarity", "hfe", "hfe_typ", *_DEVICE_QUANTITIES,
    *_DEVICE_NUMBERS,
)
_MAGNITUDE_KEYS = ("vbe", "vce_sat", "vce_max")
_ALL_SECTIONS = {**_SECTION_KEYS, "transistor": DEVICE_KEYS}


def _where(prefix: str, key: str) -> str:
    return f"{prefix}.{key}" if prefix else key


def _did_you_mean(word: str, choices: Sequence[str]) -> str:
    """"; did you mean 'x'?" for the closest choice (case-insensitive), else ""."""
    lowered = {c.lower(): c for c in choices}
    match = difflib.get_close_matches(word.lower(), list(lowered), n=1, cutoff=0.6)
    return f"; did you mean '{lowered[match[0]]}'?" if match else ""


def _check_keys(table: Mapping[str, Any], allowed: Sequence[str], prefix: str, file: str) -> None:
    """Refuse unknown keys, with a hint: a near spelling, or the section the key belongs in."""
    for key in table:
        if key in allowed:
            continue
        hint = _did_you_mean(key, allowed)
        if not hint:
            homes = [s for s, keys in _ALL_SECTIONS.items() if key in keys and s != prefix]
            if homes:
                hint = f"; '{key}' belongs in [{homes[0]}]"
        raise StageError(f"unknown key{hint}", file=file, key=_where(prefix, key),
                         accepted=", ".join(allowed))


def _table(data: Mapping[str, Any], name: str, file: str, *, required: bool) -> Mapping[str, Any]:
    if name not in data:
        if required:
            keys = ", ".join(_SECTION_KEYS.get(name, ()))
            raise StageError(f"the section [{name}] is missing", file=file, key=name,
                             accepted=f"a [{name}] table with {keys}")
        return {}
    value = data[name]
    if not isinstance(value, Mapping):
        raise StageError(f"must be a table [{name}], not {value!r}", file=file, key=name,
                         accepted=f"[{name}] on its own line, then its keys")
    return value


def _missing(file: str, key: str, example: str) -> StageError:
    return StageError("is missing (required)", file=file, key=key, accepted=f"e.g. {example}")


def _bound(value: float, rule: str, file: str, key: str, unit: str, accepted: str) -> float:
    """Apply a sign rule (">0", ">=0" or "") with a message that prints the value read."""
    shown = format_quantity(value, unit)
    if rule == ">0" and value <= 0:
        raise StageError(f"must be greater than zero, got {shown}", file=file, key=key,
                         accepted=accepted)
    if rule == ">=0" and value < 0:
        raise StageError(f"must not be negative, got {shown}", file=file, key=key,
                         accepted=accepted)
    return value


def _quantity(table: Mapping[str, Any], key: str, prefix: str, file: str, unit: str,
              rule: str, default: Any = None, *, required_example: str = "") -> Any:
    """Read table[key] in `unit`; default when absent; StageError when required and absent."""
    where = _where(prefix, key)
    if key not in table:
        if required_example:
            raise _missing(file, where, required_example)
        return default
    value = parse_quantity(table[key], unit, key=where, file=file)
    return _bound(value, rule, file, where, unit, accepted_for(unit))


def _tolerance(table: Mapping[str, Any], key: str, prefix: str, file: str, default: float) -> float:
    """A tolerance: a fraction in [0, 1)."""
    where = _where(prefix, key)
    if key not in table:
        return default
    value = parse_fraction(table[key], key=where, file=file)
    if not value < 1:
        raise StageError(f"must be below 100 %, got {format_quantity(value, '%')}", file=file,
                         key=where, accepted="a tolerance such as '5 %' (0 to below 100 %)")
    return value


def _hfe_spread(value: Any, file: str, key: str) -> tuple[float, float]:
    accepted = "the production spread [min, max] at 25 °C, e.g. [100, 300]"
    if not isinstance(value, list | tuple):
        hint = ""
        if isinstance(value, int | float | str) and not isinstance(value, bool):
            hint = f"; for one fixed value write [{value}, {value}]"
        raise StageError(f"{value!r} is not a [min, max] pair{hint}", file=file, key=key,
                         accepted=accepted)
    if len(value) != 2:
        raise StageError(f"{value!r} has {len(value)} entries, not 2", file=file, key=key,
                         accepted=accepted)
    lo, hi = (parse_number(v, key=key, file=file) for v in value)
    if not 0 < lo <= hi:
        raise StageError(f"{value!r} must have 0 < min <= max", file=file, key=key,
                         accepted=accepted)
    return lo, hi


def _read_toml(path: Path, *, file_key: tuple[str, str] | None = None) -> dict[str, Any]:
    """Parse a TOML file; every failure is one StageError (no traceback).

    `file_key` = (referring file, key) names where a missing file was referenced from.
    """
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        if file_key:
            raise StageError(f"file {str(path)!r} not found", file=file_key[0], key=file_key[1],
                             accepted="a path relative to the spec file") from None
        raise StageError("file not found", file=str(path)) from None
    except IsADirectoryError:
        raise StageError("is a directory, not a TOML file", file=str(path)) from None
    except OSError as exc:
        raise StageError(f"cannot be read: {exc.strerror}", file=str(path)) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise StageError(f"is not UTF-8 text (byte {exc.start})", file=str(path),
                         accepted="a UTF-8 TOML file") from None
    if text.lstrip().startswith("{"):
        raise StageError("is JSON, not a TOML spec (a design file?)", file=str(path),
                         accepted="a spec file such as 'stagesynth new' writes; design files "
                         "go to analyze, caps, report and plot")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise StageError(f"is not valid TOML: {exc}", file=str(path),
                         accepted="TOML, e.g. key = \"value\" lines under [section] headers"
                         ) from None
    except RecursionError:
        raise StageError("is nested too deeply to be a spec", file=str(path),
                         accepted="TOML, e.g. key = \"value\" lines under [section] headers"
                         ) from None
    if nesting_depth(data) > MAX_DEPTH:
        raise StageError(f"is nested more than {MAX_DEPTH} levels deep", file=str(path),
                         accepted="a spec file: [section] headers with key = value lines")
    return data


def device_from_mapping(
    data: Mapping[str, Any],
    file: str,
    key_prefix: str = "transistor",
    *,
    base_dir: str | Path | None = None,
    allow_file: bool = True,
) -> Device:
    """Build a Device from [transistor]-style keys: a preset or a device file, then overrides.

    Quantities take units as in the spec ("0.65 V", "250 MHz"); `vbe` and `vce_sat` are
    magnitudes for either polarity. A `file` is read relative to `base_dir` (default: the
    directory of `file`). Giving `hfe` without `hfe_typ` over a preset drops the preset's
    hfe_typ, so the nominal becomes sqrt(min * max) of the new spread.
    """
    if not isinstance(data, Mapping):
        raise StageError(f"must be a table, not {data!r}", file=file, key=key_prefix or None,
                         accepted="keys such as polarity, hfe, vbe, ft, c_cb")
    if not allow_file and "file" in data:
        raise StageError("a device file cannot refer to another file", file=file,
                         key=_where(key_prefix, "file"), accepted="preset = \"...\" or the fields")
    allowed = DEVICE_KEYS if allow_file else tuple(k for k in DEVICE_KEYS if k != "file")
    _check_keys(data, allowed, key_prefix, file)
    presets = ", ".join(PRESETS)

    base: Device | None = None
    if "preset" in data and "file" in data:
        raise StageError("give either preset or file, not both", file=file,
                         key=_where(key_prefix, "file"),
                         accepted="preset = \"generic-npn\" or file = \"my-device.toml\"")
    if "preset" in data:
        name = data["preset"]
        if not isinstance(name, str) or name.strip().lower() not in PRESETS:
            hint = _did_you_mean(str(name), list(PRESETS)) if isinstance(name, str) else ""
            raise StageError(f"{name!r} is not a built-in preset{hint}", file=file,
                             key=_where(key_prefix, "preset"), accepted=presets)
        base = PRESETS[name.strip().lower()]
    elif "file" in data:
        rel = data["file"]
        where = _where(key_prefix, "file")
        if not isinstance(rel, str) or not rel.strip():
            raise StageError(f"{rel!r} is not a file name", file=file, key=where,
                             accepted="a path to a device TOML file, relative to this file")
        folder = Path(base_dir) if base_dir is not None else Path(file).parent
        base = load_device_file(folder / rel, _referrer=(file, where))

    values: dict[str, Any] = {}
    if "name" in data:
        if not isinstance(data["name"], str):
            raise StageError(f"{data['name']!r} is not text", file=file,
                             key=_where(key_prefix, "name"), accepted="a free-text name")
        values["name"] = data["name"]
    if "polarity" in data:
        polarity = data["polarity"]
        norm = polarity.strip().lower() if isinstance(polarity, str) else None
        if norm not in ("npn", "pnp"):
            raise StageError(f"{polarity!r} is not a polarity", file=file,
                             key=_where(key_prefix, "polarity"), accepted='"npn" or "pnp"')
        values["polarity"] = norm
    if "hfe" in data:
        values["hfe_min"], values["hfe_max"] = _hfe_spread(
            data["hfe"], file, _where(key_prefix, "hfe"))
        if "hfe_typ" not in data:
            values["hfe_typ"] = None
    if "hfe_typ" in data:
        where = _where(key_prefix, "hfe_typ")
        typ = parse_number(data["hfe_typ"], key=where, file=file)
        values["hfe_typ"] = _bound(typ, ">0", file, where, "", "a typical hFE such as 175")
    for key, (unit, rule) in _DEVICE_QUANTITIES.items():
        if key not in data:
            continue
        where = _where(key_prefix, key)
        if unit == "%/K":
            values[key] = parse_per_kelvin(data[key], key=where, file=file)
            continue
        value = parse_quantity(data[key], unit, key=where, file=file)
        if key in _MAGNITUDE_KEYS and value < 0:
            raise StageError(f"is negative ({format_quantity(value, unit)}): give the magnitude, "
                             "as datasheets do for either polarity", file=file, key=where,
                             accepted=f"a positive value such as {format_quantity(-value, unit)}")
        values[key] = _bound(value, rule, file, where, unit, accepted_for(unit))
    for key, accepted in _DEVICE_NUMBERS.items():
        if key in data:
            where = _where(key_prefix, key)
            values[key] = _bound(parse_number(data[key], key=where, file=file), ">0", file,
                                 where, "", accepted)

    if base is None:
        for key in REQUIRED_DEVICE_KEYS:
            if key not in data:
                raise StageError(
                    "is missing (required unless a preset or device file gives it)", file=file,
                    key=_where(key_prefix, key),
                    accepted=f"the key, or preset = one of {presets}, or file = \"...toml\"")
        device = Device(**values)
    else:
        overrides = {k: v for k, v in values.items() if k != "name"}
        device = base.with_overrides(**overrides)
        if "name" in values:
            device = device.with_overrides(name=values["name"])
        elif device != base and base.name:
            device = device.with_overrides(name=f"{base.name} (modified)")
    if device.hfe_typ is not None and not device.hfe_min <= device.hfe_typ <= device.hfe_max:
        raise StageError(
            f"hfe_typ {device.hfe_typ:g} lies outside hfe [{device.hfe_min:g}, "
            f"{device.hfe_max:g}]", file=file, key=_where(key_prefix, "hfe_typ"),
            accepted="a value between the hfe min and max")
    problem = device_problem(device)
    if problem is not None:  # the same limits the design-file reader applies
        field, message, accepted = problem
        raise StageError(message, file=file, key=_where(key_prefix, field), accepted=accepted)
    return device


def load_device_file(path: str | Path, *, _referrer: tuple[str, str] | None = None) -> Device:
    """Read a user's device TOML: the [transistor] keys, at top level or under [transistor].

    The device is named after the file (its stem) unless it gives `name`.
    """
    path = Path(path)
    data = _read_toml(path, file_key=_referrer)
    file = str(path)
    if "transistor" in data:
        _check_keys(data, ("transistor",), "", file)
        table, prefix = data["transistor"], "transistor"
    else:
        table, prefix = data, ""
    device = device_from_mapping(table, file, prefix, allow_file=False)
    if not (isinstance(table, Mapping) and "name" in table):
        device = device.with_overrides(name=path.stem)
    return device


def spec_from_mapping(data: Mapping[str, Any], file: str = "<spec>", *,
                      base_dir: str | Path | None = None) -> Spec:
    """Validate parsed TOML (section 1 of the contract) into a Spec; StageError names the key."""
    if not isinstance(data, Mapping):
        raise StageError("a spec must be a TOML table of sections", file=file)
    _check_keys(data, TOP_KEYS, "", file)
    for section, keys in _SECTION_KEYS.items():
        if section in data and isinstance(data[section], Mapping):
            _check_keys(data[section], keys, section, file)

    title = data.get("title", "")
    if not isinstance(title, str):
        raise StageError(f"{title!r} is not text", file=file, key="title",
                         accepted='free text in quotes, e.g. title = "Geophone preamp"')

    s = _table(data, "supply", file, required=True)
    if isinstance(s.get("voltage"), list | tuple):
        supply = _supply_range(s, file)
    else:
        supply = Supply(
            voltage=_quantity(s, "voltage", "supply", file, "V", ">0",
                              required_example='voltage = "12 V"'),
            tolerance=_tolerance(s, "tolerance", "supply", file, 0.0),
        )

    src = _table(data, "source", file, required=False)
    source = Source(resistance=_quantity(src, "resistance", "source", file, "Ω", ">=0", 0.0))
    if "capacitance" in src:  # second release: a capacitance in series with the EMF
        source = Source(source.resistance,
                        _quantity(src, "capacitance", "source", file, "F", ">0", None))

    ld = _table(data, "load", file, required=True)
    load = Load(
        resistance=_quantity(ld, "resistance", "load", file, "Ω", ">0",
                             required_example='resistance = "10 kΩ"'),
        capacitance=_quantity(ld, "capacitance", "load", file, "F", ">=0", 0.0),
    )

    req_table = _table(data, "require", file, required=True)
    require = _requirements(_scalar_bounds(req_table), file)
    require = _ranges_and_match(require, req_table, source, file)
    if require.noise_figure_db is not None and source.resistance <= 0:
        raise StageError(
            "a noise figure needs a source resistance: with 0 Ω the source has no thermal "
            "noise to compare with", file=file, key="require.noise_figure",
            accepted="[source] resistance = \"600 Ω\" (greater than 0), or require.noise "
            "(an input-referred density) instead of noise_figure")

    if "transistor" not in data:
        raise StageError("the section [transistor] is missing", file=file, key="transistor",
                         accepted=f"[transistor] with preset = one of {', '.join(PRESETS)}, "
                         "or the keys polarity, hfe, vbe, ft, c_cb")
    folder = Path(base_dir) if base_dir is not None else Path(file).parent
    transistor = device_from_mapping(data["transistor"], file, "transistor", base_dir=folder)

    parts = _parts(_table(data, "parts", file, required=False), file)
    for volts in (supply.voltage, *(getattr(supply, "range", None) or ())):
        _check_limits(volts, require.ambient, file)
    if require.supply_current is not None and require.supply_current < SUPPLY_CURRENT_FLOOR:
        raise StageError(f"{format_quantity(require.supply_current, 'A')} is below what a "
                         "discrete stage's leakage allows", file=file,
                         key="require.supply_current",
                         accepted=f"at least {format_quantity(SUPPLY_CURRENT_FLOOR, 'A')}")
    spec = Spec(supply=supply, load=load, require=require, transistor=transistor,
                source=source, parts=parts, title=title, path=file)
    from stagesynth.contracts.plausible import spec_warnings

    return dataclasses.replace(spec, warnings=tuple(spec_warnings(spec)))


# ---------------------------------------------------------------------------
# Supply and impedance ranges, input match
# ---------------------------------------------------------------------------
_RANGE_ACCEPTED = '[min, max] such as ["6.6 V", "9.5 V"]'


def _pair(value: Any, key: str, file: str, unit: str, example: str) -> tuple[float, float]:
    """A [min, max] pair of quantities in `unit`, min > 0 and min <= max."""
    accepted = f"[min, max] such as {example}"
    if len(value) != 2:
        raise StageError(f"{value!r} has {len(value)} entries, not 2", file=file, key=key,
                         accepted=accepted)
    lo, hi = (parse_quantity(v, unit, key=key, file=file) for v in value)
    if not 0 < lo <= hi:
        raise StageError(f"[{format_quantity(lo, unit)}, {format_quantity(hi, unit)}] must "
                         f"have 0 < min <= max", file=file, key=key, accepted=accepted)
    return lo, hi


def _supply_range(s: Mapping[str, Any], file: str) -> Supply:
    """voltage = [lo, hi]: nominal is the middle, the corners are the ends."""
    lo, hi = _pair(s["voltage"], "supply.voltage", file, "V", '["6.6 V", "9.5 V"]')
    if "tolerance" in s:
        raise StageError("is not allowed with a supply range: the range already says how "
                         "far the supply moves", file=file, key="supply.tolerance",
                         accepted='either voltage = "9 V" with tolerance = "5 %", or '
                         'voltage = ["6.6 V", "9.5 V"] alone')
    mid = 0.5 * (lo + hi)
    return Supply(voltage=mid, tolerance=(hi - lo) / (hi + lo), range=(lo, hi))


def _scalar_bounds(r: Mapping[str, Any]) -> dict[str, Any]:
    """The [require] table with z_in / z_out ranges reduced to the bound the scalar key
    means (z_in: the lower, z_out: the upper) and the keys read elsewhere taken out."""
    out = dict(r)
    for key, end in (("z_in", 0), ("z_out", -1)):
        if isinstance(out.get(key), list | tuple) and len(out[key]) == 2:
            out[key] = out[key][end]
    out.pop("return_loss", None)
    return out


def _ranges_and_match(req: Requirements, r: Mapping[str, Any], source: Source,
                      file: str) -> Requirements:
    """z_in / z_out ranges and return_loss, added to the requirements read by key."""
    values: dict[str, Any] = {}
    for key, example in (("z_in", '["300 Ω", "360 Ω"]'), ("z_out", '["68 Ω", "82 Ω"]')):
        if isinstance(r.get(key), list | tuple):
            lo, hi = _pair(r[key], f"require.{key}", file, "Ω", example)
            values["z_in_max" if key == "z_in" else "z_out_min"] = hi if key == "z_in" else lo
    if "return_loss" in r:
        rl = parse_db(r["return_loss"], key="require.return_loss", file=file)
        if not rl > 0:
            raise StageError(f"must be greater than 0 dB, got {rl:g} dB", file=file,
                             key="require.return_loss", accepted="e.g. '15 dB' or '20 dB'")
        if source.resistance <= 0:
            raise StageError("needs a source resistance to match: [source] resistance is 0",
                             file=file, key="require.return_loss",
                             accepted='[source] resistance = "600 Ω" (the line or filter '
                             "the input terminates)")
        values["return_loss"] = rl
    return dataclasses.replace(req, **values) if values else req


def _check_limits(voltage: float, ambient: tuple[float, float], file: str) -> None:
    """Supply and ambient within the range the model holds for (limits.py, shared)."""
    if out_of_range(voltage, SUPPLY_LIMIT):
        raise StageError(f"{format_quantity(voltage, 'V')} is outside the supported range",
                         file=file, key="supply.voltage", accepted=SUPPLY_LIMIT.accepted())
    for t in ambient:
        if out_of_range(t, AMBIENT_LIMIT):
            raise StageError(f"{format_quantity(t, '°C')} is outside the supported range",
                             file=file, key="require.ambient", accepted=AMBIENT_LIMIT.accepted())


def _requirements(r: Mapping[str, Any], file: str) -> Requirements:
    p = "require"
    if "gain" not in r:
        raise _missing(file, "require.gain", 'gain = "20 dB" or gain = "10 V/V"')
    gain = parse_gain(r["gain"], key="require.gain", file=file)
    tol_db = 1.0
    if "gain_tolerance" in r:
        tol_db = parse_db(r["gain_tolerance"], key="require.gain_tolerance", file=file)
        if tol_db <= 0:
            raise StageError(f"must be greater than 0 dB, got {tol_db:g} dB", file=file,
                             key="require.gain_tolerance", accepted="e.g. '1 dB' or '0.5 dB'")
    f_low = _quantity(r, "f_low", p, file, "Hz", ">0", required_example='f_low = "20 Hz"')
    f_high = _quantity(r, "f_high", p, file, "Hz", ">0", required_example='f_high = "100 kHz"')
    if not f_low < f_high:
        raise StageError(
            f"f_low ({format_quantity(f_low, 'Hz')}) must be below f_high "
            f"({format_quantity(f_high, 'Hz')})", file=file, key="require.f_low",
            accepted="f_low < f_high: the band the stage must pass")
    swing = 0.0
    if "swing" in r:
        swing = parse_swing(r["swing"], key="require.swing", file=file)
    ambient = (25.0, 25.0)
    if "ambient" in r:
        ambient = _ambient(r["ambient"], file)
    inverting = _inverting(r.get("inverting", "any"), file)
    yield_target = None
    if "yield" in r:
        yield_target = parse_fraction(r["yield"], key="require.yield", file=file)
        if not 0 < yield_target <= 1:
            raise StageError(f"must lie above 0 and at most 100 %, got "
                             f"{format_quantity(yield_target, '%')}", file=file,
                             key="require.yield", accepted="a share such as '99 %'")
    supply_rejection, ripple_at, peaking = _supply_and_stability(r, file)
    thd, thd_level, thd_at = _distortion(r, file, swing)
    return Requirements(
        gain=gain,
        f_low=f_low,
        f_high=f_high,
        gain_tolerance_db=tol_db,
        z_in=_quantity(r, "z_in", p, file, "Ω", ">=0", 0.0),
        swing_vpp=swing,
        supply_current=_quantity(r, "supply_current", p, file, "A", ">0", None),
        ambient=ambient,
        inverting=inverting,
        z_out=_quantity(r, "z_out", p, file, "Ω", ">0", None),
        yield_target=yield_target,
        **_noise_requirements(r, file),
        supply_rejection_db=supply_rejection,
        ripple_at=ripple_at,
        peaking_db=peaking,
        thd=thd,
        thd_level=thd_level,
        thd_at=thd_at,
    )


def _noise_requirements(r: Mapping[str, Any], file: str) -> dict[str, float | None]:
    """noise, noise_figure, noise_rms, noise_at: each optional, each above zero."""
    p = "require"
    out: dict[str, float | None] = {
        "noise": _quantity(r, "noise", p, file, "V/√Hz", ">0", None),
        "noise_rms": _quantity(r, "noise_rms", p, file, "V", ">0", None),
        "noise_at": _quantity(r, "noise_at", p, file, "Hz", ">0", None),
        "noise_figure_db": None,
    }
    if "noise_figure" in r:
        nf = parse_db(r["noise_figure"], key="require.noise_figure", file=file)
        if not nf > 0:
            raise StageError(f"must be greater than 0 dB, got {nf:g} dB (a noiseless "
                             "amplifier has 0 dB)", file=file, key="require.noise_figure",
                             accepted="a noise figure such as '2 dB'")
        out["noise_figure_db"] = nf
    return out


def _supply_and_stability(r: Mapping[str, Any], file: str) -> tuple[float | None, float, float]:
    """(supply_rejection dB or None, ripple_at Hz, peaking dB) from [require]."""
    rejection = None
    if "supply_rejection" in r:
        rejection = parse_db(r["supply_rejection"], key="require.supply_rejection", file=file)
        if not math.isfinite(rejection):
            raise StageError(f"must be a finite level, got {r['supply_rejection']!r}", file=file,
                             key="require.supply_rejection",
                             accepted="a level in dB such as '40 dB'")
    ripple_at = _quantity(r, "ripple_at", "require", file, "Hz", ">0", 100.0)
    peaking = 3.0
    if "peaking" in r:
        peaking = parse_db(r["peaking"], key="require.peaking", file=file)
        if not (math.isfinite(peaking) and peaking >= 0):
            raise StageError(f"must be 0 dB or more, got {r['peaking']!r}", file=file,
                             key="require.peaking",
                             accepted="a level in dB such as '1 dB' (0 dB: no rise at all)")
    return rejection, ripple_at, peaking


def _distortion(r: Mapping[str, Any], file: str,
                swing: float) -> tuple[float | None, float | None, float | None]:
    """thd (a ratio), thd_level (Vpp) and thd_at (Hz), validated (None where absent)."""
    thd = parse_thd(r["thd"], key="require.thd", file=file) if "thd" in r else None
    level = None
    if "thd_level" in r:
        level = parse_swing(r["thd_level"], key="require.thd_level", file=file)
        if level <= 0:
            raise StageError(f"must be greater than zero, got {level:g} Vpp", file=file,
                             key="require.thd_level", accepted="an output level such as '2 Vpp'")
    if thd is not None and level is None and swing <= 0:
        raise StageError("thd needs an output level: neither thd_level nor swing is given",
                         file=file, key="require.thd",
                         accepted='thd_level = "2 Vpp" (or swing = "2 Vpp") beside thd')
    at = _quantity(r, "thd_at", "require", file, "Hz", ">0", None)
    return thd, level, at


def _ambient(value: Any, file: str) -> tuple[float, float]:
    key = "require.ambient"
    if isinstance(value, list | tuple):
        if len(value) not in (1, 2):
            raise StageError(f"{value!r} has {len(value)} entries", file=file, key=key,
                             accepted='one temperature, or [min, max] such as ["0 °C", "50 °C"]')
        temps = [parse_temperature(v, key=key, file=file) for v in value]
        lo, hi = temps[0], temps[-1]
    else:
        lo = hi = parse_temperature(value, key=key, file=file)
    if lo > hi:
        raise StageError(f"min {lo:g} °C is above max {hi:g} °C", file=file, key=key,
                         accepted='[min, max] such as ["0 °C", "50 °C"]')
    return lo, hi


def _inverting(value: Any, file: str) -> str:
    if value is True:
        return "yes"
    if value is False:
        return "no"
    norm = value.strip().lower() if isinstance(value, str) else None
    if norm not in ("any", "yes", "no"):
        raise StageError(f"{value!r} is not a choice", file=file, key="require.inverting",
                         accepted='"any", "yes" or "no" (or true / false)')
    return norm


def _parts(t: Mapping[str, Any], file: str) -> Parts:
    default = Parts()
    values: dict[str, Any] = {}
    for key in ("resistors", "capacitors"):
        if key in t:
            values[key] = eseries.series_name(t[key], key=f"parts.{key}", file=file)
    for key in ("resistor_tolerance", "capacitor_tolerance"):
        values[key] = _tolerance(t, key, "parts", file, getattr(default, key))
    values.update(_part_limits(t, file, default))
    return dataclasses.replace(default, **values)


# the smallest limits that still leave a standard value for every part a family uses
_PART_LIMIT_FLOOR = {"resistor_max": (1e3, "Ω", '"1 MΩ" (at least 1 kΩ)'),
                     "capacitor_max": (100e-9, "F", '"470 µF" (at least 100 nF)')}


def _part_limits(t: Mapping[str, Any], file: str, default: Parts) -> dict[str, float]:
    """resistor_max and capacitor_max: positive, finite and not so small that no bias works."""
    out = {}
    for key, (floor, unit, example) in _PART_LIMIT_FLOOR.items():
        value = _quantity(t, key, "parts", file, unit, ">0", getattr(default, key))
        if not math.isfinite(value) or value < floor:
            raise StageError(f"must be a finite value of at least "
                             f"{format_quantity(floor, unit)}, got "
                             f"{format_quantity(value, unit)}", file=file,
                             key=f"parts.{key}", accepted=f"e.g. {example}")
        out[key] = value
    return out


def load_spec(path: str | Path) -> Spec:
    """Read and validate a stage spec TOML file (errors name the file and key; exit code 2)."""
    path = Path(path)
    data = _read_toml(path)
    return spec_from_mapping(data, str(path), base_dir=path.parent)


def spec_template() -> str:
    """The commented spec template that `stagesynth new` writes (packaged TOML text)."""
    return resources.files("stagesynth").joinpath("templates", "spec_template.toml").read_text(
        encoding="utf-8")


# ---------------------------------------------------------------------------
# Writing a Spec back as TOML (every key explicit, values exact on re-reading)
# ---------------------------------------------------------------------------
def _toml_str(text: str) -> str:
    return json.dumps(text, ensure_ascii=False)


def _q(value: float, unit: str) -> str:
    return _toml_str(format_quantity(value, unit, digits=None))


def _gain_text(gain: float) -> str:
    """The gain in dB when a short dB figure reads back to exactly `gain`, else exact V/V."""
    db = 20.0 * math.log10(gain)
    for digits in range(1, 16):
        text = format_quantity(db, "dB", digits)
        if parse_gain(text) == gain:
            return _toml_str(text)
    return _q(gain, "V/V")


def spec_to_toml(spec: Spec) -> str:
    """The spec as TOML text that `load_spec` reads back to an equal Spec (apart from `path`).

    The transistor is written out field by field (no preset), so the file stands alone.
    """
    r, d = spec.require, spec.transistor
    lines = [f"title = {_toml_str(spec.title)}", "", "[supply]",
             f"voltage = {_q(spec.supply.voltage, 'V')}",
             f"tolerance = {_q(spec.supply.tolerance, '%')}", "", "[source]",
             f"resistance = {_q(spec.source.resistance, 'Ω')}",
             *([f"capacitance = {_q(spec.source.capacitance, 'F')}"]
               if spec.source.capacitance is not None else []), "", "[load]",
             f"resistance = {_q(spec.load.resistance, 'Ω')}",
             f"capacitance = {_q(spec.load.capacitance, 'F')}", "", "[require]",
             f"gain = {_gain_text(r.gain)}",
             f"gain_tolerance = {_q(r.gain_tolerance_db, 'dB')}",
             f"f_low = {_q(r.f_low, 'Hz')}",
             f"f_high = {_q(r.f_high, 'Hz')}",
             f"z_in = {_q(r.z_in, 'Ω')}",
             f"swing = {_q(r.swing_vpp, 'Vpp')}",
             f"ambient = [{_q(r.ambient[0], '°C')}, {_q(r.ambient[1], '°C')}]",
             f"inverting = {_toml_str(r.inverting)}"]
    if r.supply_current is not None:
        lines.append(f"supply_current = {_q(r.supply_current, 'A')}")
    if r.z_out is not None:
        lines.append(f"z_out = {_q(r.z_out, 'Ω')}")
    if r.yield_target is not None:
        lines.append(f"yield = {_q(r.yield_target, '%')}")
    for key, value, unit in (("noise", r.noise, "V/√Hz"), ("noise_figure", r.noise_figure_db,
                             "dB"), ("noise_rms", r.noise_rms, "V"), ("noise_at", r.noise_at,
                             "Hz")):
        if value is not None:
            lines.append(f"{key} = {_q(value, unit)}")
    if r.supply_rejection_db is not None:
        lines.append(f"supply_rejection = {_q(r.supply_rejection_db, 'dB')}")
    lines.append(f"ripple_at = {_q(r.ripple_at, 'Hz')}")
    lines.append(f"peaking = {_q(r.peaking_db, 'dB')}")
    if r.thd is not None:
        lines.append(f"thd = {_q(r.thd, '%')}")
    if r.thd_level is not None:
        lines.append(f"thd_level = {_q(r.thd_level, 'Vpp')}")
    if r.thd_at is not None:
        lines.append(f"thd_at = {_q(r.thd_at, 'Hz')}")
    lines += ["", "[transistor]"]
    if d.name:
        lines.append(f"name = {_toml_str(d.name)}")
    lines += [f"polarity = {_toml_str(d.polarity)}", f"hfe = [{d.hfe_min!r}, {d.hfe_max!r}]"]
    if d.hfe_typ is not None:
        lines.append(f"hfe_typ = {d.hfe_typ!r}")
    for key, (unit, _rule) in _DEVICE_QUANTITIES.items():
        value = getattr(d, key)
        if value is not None:
            lines.append(f"{key} = {_q(value, unit)}")
    for key in _DEVICE_NUMBERS:
        lines.append(f"{key} = {getattr(d, key)!r}")
    p = spec.parts
    lines += ["", "[parts]", f"resistors = {_toml_str(p.resistors)}",
              f"resistor_tolerance = {_q(p.resistor_tolerance, '%')}",
              f"capacitors = {_toml_str(p.capacitors)}",
              f"capacitor_tolerance = {_q(p.capacitor_tolerance, '%')}",
              f"resistor_max = {_q(p.resistor_max, 'Ω')}",
              f"capacitor_max = {_q(p.capacitor_max, 'F')}"]
    return "\n".join(_with_ranges(spec, lines)) + "\n"


def _with_ranges(spec: Spec, lines: list[str]) -> list[str]:
    """Write a supply range, impedance ranges and return_loss as the user wrote them."""
    r, out = spec.require, list(lines)

    def swap(prefix: str, new: str | None) -> None:
        i = next(i for i, line in enumerate(out) if line.startswith(prefix))
        if new is None:
            del out[i]
        else:
            out[i] = new

    if spec.supply.range is not None:
        lo, hi = spec.supply.range
        swap("voltage = ", f"voltage = [{_q(lo, 'V')}, {_q(hi, 'V')}]")
        swap("tolerance = ", None)
    if r.z_in_max is not None:
        swap("z_in = ", f"z_in = [{_q(r.z_in, 'Ω')}, {_q(r.z_in_max, 'Ω')}]")
    if r.z_out_min is not None and r.z_out is not None:
        swap("z_out = ", f"z_out = [{_q(r.z_out_min, 'Ω')}, {_q(r.z_out, 'Ω')}]")
    if r.return_loss is not None:
        at = out.index("[transistor]") - 1  # the blank line closing [require]
        out.insert(at, f"return_loss = {_q(r.return_loss, 'dB')}")
    return out
