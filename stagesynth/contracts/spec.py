"""The stage spec: what the user asks for (section 1 of the contract), as frozen values.

All quantities are plain SI floats; temperatures in degrees Celsius; gains as
V/V magnitudes with their dB forms alongside. `load_spec` reads and validates a
TOML file; every error names the file, the key path and what would be accepted.
The sections live in their own modules: requirements.py ([supply] ... [parts]),
transistor.py ([transistor], [companion]: bipolar or junction FET), tomlread.py.
"""

from __future__ import annotations

import dataclasses
import math
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any

from stagesynth.contracts.device import PRESETS, Device
from stagesynth.contracts.jfet import Jfet
from stagesynth.contracts.requirements import (
    Load,
    Parts,
    Requirements,
    Source,
    Supply,
    _check_limits,
    _parts,
    _ranges_and_match,
    _requirements,
    _scalar_bounds,
    _supply_range,
)
from stagesynth.contracts.tomlread import (  # noqa: F401  (re-exported)
    _bound,
    _did_you_mean,
    _missing,
    _q,
    _quantity,
    _read_toml,
    _tolerance,
    _toml_str,
    _where,
)
from stagesynth.contracts.tomlread import _check_keys as _check_keys_in
from stagesynth.contracts.transistor import (  # noqa: F401  (re-exported)
    _DEVICE_NUMBERS,
    _DEVICE_QUANTITIES,
    DEVICE_KEYS,
    REQUIRED_DEVICE_KEYS,
    device_from_mapping,
    load_device_file,
    transistor_toml_lines,
)
from stagesynth.quantities.errors import StageError
from stagesynth.quantities.limits import SUPPLY_CURRENT_FLOOR
from stagesynth.quantities.units import format_quantity, parse_gain


@dataclass(frozen=True)
class Spec:
    supply: Supply
    load: Load
    require: Requirements
    transistor: Device | Jfet
    source: Source = Source()  # noqa: RUF009 (a frozen dataclass)
    parts: Parts = Parts()  # noqa: RUF009 (a frozen dataclass)
    title: str = ""
    path: str = ""  # the file it was read from, for messages
    warnings: tuple[str, ...] = ()  # values accepted but unlikely for their key
    # junction FET (second release): a transistor of the other kind for mixed families
    # ([companion]); None when the spec gives none
    companion: Device | Jfet | None = None

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
TOP_KEYS: tuple[str, ...] = ("title", "supply", "source", "load", "require", "transistor", "parts",
                             "companion")
_ALL_SECTIONS = {**_SECTION_KEYS, "transistor": DEVICE_KEYS}


def _check_keys(table: Mapping[str, Any], allowed: Sequence[str], prefix: str, file: str) -> None:
    """Refuse unknown keys, with a hint: a near spelling, or the section the key belongs in."""
    _check_keys_in(table, allowed, prefix, file, _ALL_SECTIONS)


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
    companion = None
    if "companion" in data:  # junction FET (second release): the other kind, for mixed families
        companion = device_from_mapping(data["companion"], file, "companion", base_dir=folder)
        if getattr(companion, "kind", "bjt") == getattr(transistor, "kind", "bjt"):
            other = "a bipolar transistor" if getattr(transistor, "kind", "bjt") == "jfet" \
                else "a junction FET"
            raise StageError("must be a transistor of the other kind than [transistor]",
                             file=file, key="companion",
                             accepted=f"{other}: e.g. preset = "
                             + ('"generic-npn"' if other.startswith("a bip") else
                                '"generic-njfet"'))

    parts = _parts(_table(data, "parts", file, required=False), file)
    for volts in (supply.voltage, *(getattr(supply, "range", None) or ())):
        _check_limits(volts, require.ambient, file)
    if require.supply_current is not None and require.supply_current < SUPPLY_CURRENT_FLOOR:
        raise StageError(f"{format_quantity(require.supply_current, 'A')} is below what a "
                         "discrete stage's leakage allows", file=file,
                         key="require.supply_current",
                         accepted=f"at least {format_quantity(SUPPLY_CURRENT_FLOOR, 'A')}")
    spec = Spec(supply=supply, load=load, require=require, transistor=transistor,
                source=source, parts=parts, title=title, path=file, companion=companion)
    from stagesynth.contracts.plausible import spec_warnings

    return dataclasses.replace(spec, warnings=tuple(spec_warnings(spec)))

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
    lines += ["", "[transistor]", *transistor_toml_lines(d)]
    if spec.companion is not None:
        lines += ["", "[companion]", *transistor_toml_lines(spec.companion)]
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
