"""Where the model stops making physical sense: one set of limits for spec and design files.

The spec loader and the design-file reader both check a transistor and the
operating conditions here, so stagesynth never writes a design file it would
then refuse to read back. The ranges are wide (every small-signal and power
bipolar transistor on the market lies well inside; common practice), and narrow
only where the hybrid-pi model and the Newton solver stop meaning anything
(a junction voltage of a microvolt, a tempco of a volt per kelvin, 0 K).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from stagesynth.quantities.units import format_quantity


@dataclass(frozen=True)
class Limit:
    """Closed range [low, high] of one field, in SI units (°C for temperatures)."""

    low: float
    high: float
    unit: str
    why: str = ""

    def accepted(self) -> str:
        lo = format_quantity(self.low, self.unit)
        hi = format_quantity(self.high, self.unit)
        return f"{lo} to {hi}" + (f" ({self.why})" if self.why else "")


# Device fields (contract section 1 [transistor]; the design file's "devices").
# vbe and vce_sat are magnitudes; hFE bounds apply to min, typ and max alike. The
# upper ends of early_voltage and ft and the lower end of c_cb stay open enough for
# the textbook's ideal device (VA, fT -> infinity, C_mu -> 0) used to check formulas.
DEVICE_LIMITS: dict[str, Limit] = {
    "hfe": Limit(1.0, 1e5, "", "a current gain, Darlington pairs included"),
    "vbe": Limit(0.1, 1.5, "V", "a junction voltage magnitude"),
    "vbe_current": Limit(1e-9, 100.0, "A"),
    "early_voltage": Limit(1.0, 1e15, "V"),
    "ft": Limit(1e4, 1e21, "Hz"),
    "c_cb": Limit(0.0, 1e-8, "F"),
    "r_bb": Limit(0.0, 1e4, "Ω"),
    "vce_sat": Limit(0.0, 5.0, "V"),
    "ic_max": Limit(1e-5, 1000.0, "A"),
    "vce_max": Limit(1.0, 1e4, "V"),
    "p_max": Limit(1e-3, 1e4, "W"),
    "theta_ja": Limit(0.1, 1e4, "K/W"),
    "vbe_tempco": Limit(-0.01, 0.01, "V/K", "silicon: about -2 mV/K"),
    "hfe_tempco": Limit(-0.05, 0.05, "%/K", "about +0.5 %/K"),
}

# Operating conditions.
AMBIENT_LIMIT = Limit(-100.0, 200.0, "°C", "where silicon transistors work")
SUPPLY_LIMIT = Limit(0.1, 1000.0, "V")
# Below a microamp the leakage of a discrete transistor (I_CBO, nA at 25 °C and
# a hundred times more when hot) is of the order of the bias itself (common practice).
SUPPLY_CURRENT_FLOOR = 1e-6
# Largest netlist analysed. The solvers are dense and batched (the right choice for
# a gain stage of 10 to 30 parts); time grows as the cube of the node count: 300
# resistors take about 7 s to analyse on a loaded 2-core machine, 1000 take three
# minutes (benchmarks/bench_engine.py). Far above any stage this tool designs.
MAX_PARTS = 400


def out_of_range(value: float, limit: Limit) -> bool:
    """True when value is not finite or lies outside [low, high]."""
    return not (math.isfinite(value) and limit.low <= value <= limit.high)


def device_problem(device) -> tuple[str, str, str] | None:
    """The first field of `device` outside its limits: (field, what is wrong, accepted).

    `field` is the spec/design key ("hfe" for the spread and hfe_typ), or None if the
    device is within every limit.
    """
    hfe = DEVICE_LIMITS["hfe"]
    for name, value in (("hfe", device.hfe_min), ("hfe", device.hfe_max),
                        ("hfe_typ", device.hfe_typ)):
        if value is not None and out_of_range(value, hfe):
            return name, f"{value:g} is not a plausible current gain", hfe.accepted()
    for key, limit in DEVICE_LIMITS.items():
        if key == "hfe":
            continue
        value = getattr(device, key, None)
        if value is None:
            continue
        if out_of_range(float(value), limit):
            return (key, f"{format_quantity(value, limit.unit)} is outside the range the "
                    "model holds for", limit.accepted())
    return None


MAX_DEPTH = 64  # spec and design files are four levels deep; far deeper is not one of them


def nesting_depth(obj: Any) -> int:
    """Nesting depth of parsed JSON/TOML (stops counting past MAX_DEPTH), without recursion."""
    deepest, stack = 0, [(obj, 1)]
    while stack:
        item, level = stack.pop()
        deepest = max(deepest, level)
        if level > MAX_DEPTH:
            return level
        if isinstance(item, Mapping):
            stack.extend((v, level + 1) for v in item.values())
        elif isinstance(item, list | tuple):
            stack.extend((v, level + 1) for v in item)
    return deepest


# Junction-FET fields (contract section 2, "Junction FET"); |vp| bounds apply to both ends.
JFET_LIMITS: dict[str, Limit] = {
    "idss": Limit(1e-7, 10.0, "A", "a drain current at VGS = 0"),
    "vp": Limit(0.05, 30.0, "V", "a pinch-off voltage magnitude"),
    "early_voltage": Limit(1.0, 1e15, "V"),
    "c_gs": Limit(0.0, 1e-8, "F"),
    "c_gd": Limit(0.0, 1e-8, "F"),
    "i_gss": Limit(0.0, 1e-5, "A", "a gate leakage current"),
    "vp_tempco": Limit(-0.02, 0.02, "V/K", "about -2 mV/K"),
    "idss_tempco": Limit(-0.05, 0.05, "%/K", "about -0.6 %/K"),
    "flicker_corner": Limit(0.0, 1e9, "Hz"),
    "vds_max": Limit(1.0, 1e4, "V"),
    "p_max": Limit(1e-3, 1e4, "W"),
    "theta_ja": Limit(0.1, 1e4, "K/W"),
}


def jfet_problem(device) -> tuple[str, str, str] | None:
    """The first field of a junction-FET record outside its limits (as `device_problem`)."""
    for name, values in (("idss", (device.idss_min, device.idss_max)),
                         ("vp", tuple(abs(v) for v in device.vp))):
        limit = JFET_LIMITS[name]
        for value in values:
            if out_of_range(float(value), limit):
                return (name, f"{format_quantity(value, limit.unit)} is outside the range "
                        "the model holds for", limit.accepted())
    for key, limit in JFET_LIMITS.items():
        if key in ("idss", "vp"):
            continue
        value = getattr(device, key, None)
        if value is not None and out_of_range(float(value), limit):
            return (key, f"{format_quantity(value, limit.unit)} is outside the range the "
                    "model holds for", limit.accepted())
    return None
