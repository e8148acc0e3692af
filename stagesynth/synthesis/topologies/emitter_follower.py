"""Emitter follower with divider bias (NPN, and its PNP mirror): a non-inverting buffer.

Roles and reference designators:

    R1  divider, supply side          C1  input coupling (in -> base)
    R2  divider, ground side          C2  output coupling (emitter -> out)
    R3  emitter resistor RE           Q1  the transistor, collector on the supply

For the PNP mirror the emitter resistor goes to the supply and the collector to
ground. There is no DC-preserving gain knob: a follower's gain is fixed near
unity by the emitter load and the input divider, so the first cut spans IC,
VE and divider stiffness, and adds per bias point the divider that puts the
gain on target when the spec asks for more loss than the follower has by itself.
ef_bootstrap.py builds on these helpers for the bootstrapped variant.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.device import T_REF_C, Device, thermal_voltage
from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.quantities.units import format_number as num
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.topologies.base import Conflict, FirstCut, make_design

NAME = "ef"
TITLE = "emitter follower, divider bias"
STAGES = 1
RESISTORS = ("R1", "R2", "R3")  # divider top, divider bottom, RE
CAPACITORS = ("C1", "C2")
GAIN_SPLIT = None  # a follower's gain has no DC-preserving knob
OPTIONAL: frozenset[str] = frozenset()

ROLES = {
    "R1": "bias divider, supply side",
    "R2": "bias divider, ground side",
    "R3": "emitter resistor RE (DC bias and emitter load)",
    "C1": "input coupling",
    "C2": "output coupling from the emitter",
    "Q1": "follower transistor (collector on the supply rail)",
}


def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator); NPN or PNP from the spec."""
    pnp = spec.transistor.polarity == "pnp"
    rail_e = "vcc" if pnp else "0"  # where the emitter resistor returns
    rail_c = "0" if pnp else "vcc"  # where the collector sits
    nodes = {
        "R1": ("vcc", "b1"),
        "R2": ("b1", "0"),
        "R3": ("e1", rail_e),
        "C1": ("in", "b1"),
        "C2": ("e1", "out"),
    }
    return make_design(spec, NAME, nodes, values, {"Q1": (rail_c, "b1", "e1")}, ROLES, title)


def vbe25(dev: Device, ic: np.ndarray) -> np.ndarray:
    """Junction voltage at 25 degC for collector current ic (Early factor ignored)."""
    return dev.vbe + thermal_voltage(T_REF_C) * np.log(ic / dev.vbe_current)


def follower_ic_range(spec: Spec, lo_floor: float = 20e-6) -> tuple[float, float]:
    """Collector currents worth trying for a follower: from what the swing into the load and
    the output impedance need (re = VT/IC must stay below z_out) to what the limits allow."""
    dev = spec.transistor
    r = spec.require
    vt = float(thermal_voltage(T_REF_C))
    amp = max(r.swing_vpp / 2.0, 0.05)
    lo = max(0.7 * amp / spec.load.resistance, lo_floor)
    if r.z_out is not None:
        lo = max(lo, 0.7 * vt / r.z_out)
    hi = 30e-3
    if dev.ic_max:
        hi = min(hi, 0.5 * dev.ic_max)
    if dev.p_max:
        hi = min(hi, 0.5 * dev.p_max / max(spec.supply.voltage / 2.0, 0.1))
    if r.supply_current is not None:
        hi = min(hi, 0.9 * r.supply_current)
    lo = min(lo, hi / 8.0)
    return lo, hi


def divider(spec: Spec, rth: np.ndarray, vth: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(R1 supply side, R2 ground side) for Thevenin resistance rth and a base voltage vth
    measured from the emitter rail (ground for NPN, the supply for PNP)."""
    vcc = spec.supply.voltage
    to_emitter_rail = rth * vcc / vth  # NPN: the divider top carries VCC - VTH
    to_other_rail = rth * vcc / (vcc - vth)
    if spec.transistor.polarity == "pnp":
        return to_other_rail, to_emitter_rail
    return to_emitter_rail, to_other_rail


def follower_gain(spec: Spec, ic: np.ndarray, re: np.ndarray, rth: np.ndarray
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(overall gain, base-to-emitter gain, base input resistance) of a follower.

    Sedra & Smith, emitter follower (from memory): Rib = rpi + rx + (beta + 1) R'E with
    R'E = RE || RL || ro, A_e = (beta + 1) R'E / Rib, and the source divider
    Rin / (Rin + Rs) with Rin = RTH || Rib.
    """
    dev = spec.transistor
    beta = dev.hfe_nominal
    vt = float(thermal_voltage(T_REF_C))
    rpi = beta * vt / ic
    ro = (dev.early_voltage + spec.supply.voltage / 2.0) / ic
    rl = spec.load.resistance
    rep = 1.0 / (1.0 / re + 1.0 / rl + 1.0 / ro)
    rib = rpi + dev.r_bb + (beta + 1.0) * rep
    a_e = (beta + 1.0) * rep / rib
    rin = 1.0 / (1.0 / rth + 1.0 / rib)
    return a_e * rin / (rin + spec.source.resistance), a_e, rib


def first_cut(spec: Spec, *, ic_points: int = 16) -> FirstCut:
    """A grid over IC, VE and divider stiffness, turned into part values.

    Common practice (no single source): the emitter near the middle of the supply so
    that cutoff (IE * (RE || RL)) and saturation (VCE - VCEsat) clip together, and a
    stiff divider RTH <= (hFE_min + 1) * RE / K. The grid brackets both.
    """
    dev = spec.transistor
    vcc = spec.supply.voltage
    lo, hi = follower_ic_range(spec)
    ic = np.geomspace(lo, hi, ic_points)
    ve_frac = np.array([0.3, 0.4, 0.5, 0.6, 0.7])
    stiff = np.array([1.0, 2.0, 4.0, 8.0, 16.0, 32.0])
    IC, VEf, K = (a.ravel() for a in np.meshgrid(ic, ve_frac, stiff, indexing="ij"))
    beta = dev.hfe_nominal
    ve = VEf * vcc
    re = ve / (IC * (1.0 + 1.0 / beta))
    rth = (dev.hfe_min + 1.0) * re / K
    # one more candidate per (IC, VE): the divider that puts the gain on target when the
    # spec asks for more loss than the follower has by itself (Rin = Rs * k / (1 - k))
    ic2, ve2 = (a.ravel() for a in np.meshgrid(ic, ve_frac * vcc, indexing="ij"))
    re2 = ve2 / (ic2 * (1.0 + 1.0 / beta))
    _, a_e, rib = follower_gain(spec, ic2, re2, np.full_like(re2, np.inf))
    k_in = np.clip(spec.require.gain / a_e, 1e-3, 0.999)
    rin = spec.source.resistance * k_in / (1.0 - k_in)
    rth2 = np.where(rin < 0.95 * rib, rin * rib / np.maximum(rib - rin, 1e-9), np.nan)
    IC = np.concatenate([IC, ic2])
    ve = np.concatenate([ve, ve2])
    re = np.concatenate([re, re2])
    rth = np.concatenate([rth, rth2])
    K = np.concatenate([K, (dev.hfe_min + 1.0) * re2 / rth2])
    vth = ve + vbe25(dev, IC) + IC / beta * (rth + dev.r_bb)
    vce = vcc - ve
    keep = (np.isfinite(rth) & (rth > 10.0) & (vth < 0.97 * vcc) & (re > 1.0)
            & (vce > dev.vce_sat + 0.3))
    r1, r2 = divider(spec, rth, vth)
    values = {"R1": r1[keep], "R2": r2[keep], "R3": re[keep]}
    info = {"ic": IC[keep], "ve": ve[keep], "stiffness": K[keep]}
    return FirstCut(values=values, knob=None, info=info)


def follower_conflicts(spec: Spec) -> list[Conflict]:
    """What any emitter follower can never do: gain at or above unity, or inversion."""
    out = []
    r = spec.require
    lo_db, hi_db = r.gain_db - r.gain_tolerance_db, r.gain_db + r.gain_tolerance_db
    if lo_db >= 0.0:
        out.append(Conflict(
            "gain", f"{num(lo_db, 3)} … {num(hi_db, 3)} dB",
            "a follower's voltage gain is below unity (below 0 dB): the emitter follows the "
            "base less a small drop across re",
            "ask for a gain below 0 dB (e.g. -1 dB ± 1 dB), or use a circuit with voltage gain"))
    if r.inverting == "yes":
        out.append(Conflict("inverting", "yes",
                            "an emitter follower never inverts: the emitter follows the base",
                            'set inverting = "any" or "no", or use a common-emitter stage'))
    return out


def precheck(spec: Spec) -> list[Conflict]:
    """What a single emitter follower can never do."""
    return follower_conflicts(spec)


def follower_notes(spec: Spec, analysis, re: float, rth: float, r_base: float = 0.0
                   ) -> list[str]:
    """The rationale lines shared by the plain and the bootstrapped follower."""
    dev = spec.transistor
    vcc = spec.supply.voltage
    q = analysis.nominal.transistors["Q1"]
    ic, vce = q.ic, q.vce
    rl = spec.load.resistance
    rel = re * rl / (re + rl)
    v_e = analysis.nominal.node_voltages["e1"]
    ve = vcc - v_e if dev.polarity == "pnp" else v_e  # emitter voltage from its own rail
    vt = float(thermal_voltage(T_REF_C))
    stiff = (dev.hfe_min + 1) * re / (rth + r_base)
    return [
        f"Bias point IC ≈ {eng(ic, 'A', 3)}, VCE ≈ {eng(vce, 'V', 3)}, emitter ≈ "
        f"{eng(ve, 'V', 3)} from "
        f"its rail ({100 * ve / vcc:.0f} % of the supply; near half the supply the two "
        "clipping edges meet).",
        f"Emitter load RE ∥ RL ≈ {eng(rel, 'Ω', 4)}: the half-wave that pulls the emitter toward "
        f"its rail clips at cutoff after about IE·(RE ∥ RL) ≈ {eng(ic * rel, 'V', 3)} peak, the "
        f"other at saturation after about VCE − VCEsat ≈ {eng(vce - dev.vce_sat, 'V', 3)} (the "
        "verdict uses the exact analysis at every corner).",
        f"Gain ≈ (β + 1)·R'E / (rπ + (β + 1)·R'E) times the input divider (Sedra & Smith): "
        f"{analysis.gain_db:.2f} dB here, below unity as for every follower; "
        f"non-inverting.",
        f"Output impedance ≈ RE ∥ (re + (Rs ∥ RTH + rx)/(β + 1)) with re = VT/IC ≈ "
        f"{eng(vt / ic, 'Ω', 3)}; with C2's reactance in series, "
        f"{eng(analysis.z_out, 'Ω', 3)} at midband "
        "(a low output impedance is what a follower is for: cable and load driving).",
        f"Divider: RTH ≈ {eng(rth, 'Ω', 4)}, i.e. (hFE_min + 1)·RE / (RTH + series base "
        f"resistance) "
        f"≈ {num(stiff, 3)} (common practice asks for about 10 for a stiff bias; a smaller "
        "figure trades bias stability for input impedance).",
    ]


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for this bias point and divider (for the report)."""
    values = design.values()
    rth = values["R1"] * values["R2"] / (values["R1"] + values["R2"])
    notes = follower_notes(spec, analysis, values["R3"], rth)
    notes.append(f"Input impedance ≈ RTH ∥ (rπ + (β + 1)·R'E): {eng(analysis.z_in, 'Ω', 4)} at "
                 "midband; the divider sets the ceiling. For far more, the bootstrapped "
                 "follower lifts the divider's AC loading.")
    return notes
