"""The [supply], [source], [load], [require] and [parts] sections of a spec, as frozen values.

Read and validated from parsed TOML (contract section 1); every error names the file,
the key path and what would be accepted.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from stagesynth.contracts.tomlread import _missing, _pair, _quantity, _tolerance
from stagesynth.quantities import eseries
from stagesynth.quantities.errors import StageError
from stagesynth.quantities.limits import AMBIENT_LIMIT, SUPPLY_LIMIT, out_of_range
from stagesynth.quantities.units import (
    format_quantity,
    parse_db,
    parse_fraction,
    parse_gain,
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



# ---------------------------------------------------------------------------
# Supply and impedance ranges, input match
# ---------------------------------------------------------------------------
_RANGE_ACCEPTED = '[min, max] such as ["6.6 V", "9.5 V"]'


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
