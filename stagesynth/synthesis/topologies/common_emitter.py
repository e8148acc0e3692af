"""Common emitter with divider bias and a split emitter resistor (NPN, and its PNP mirror).

Roles and reference designators:

    R1  divider, supply side          C1  input coupling (in -> base)
    R2  divider, ground side          C2  output coupling (collector -> out)
    R3  collector resistor RC         C3  emitter bypass across RE2
    R4  unbypassed emitter RE1        Q1  the transistor
    R5  bypassed emitter RE2

For the PNP mirror the emitter network and bypass go to the supply and the
collector resistor to ground. The first cut spans the physical design
variables (IC, VE, VCE, divider stiffness) on a grid sized from the spec; the
split RE1/RE2 is then set by the synthesizer so that the exact gain is on target.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.device import T_REF_C, Device, thermal_voltage
from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.quantities.units import format_number as num
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.topologies.base import Conflict, FirstCut, make_design

NAME = "ce"
TITLE = "common emitter, divider bias, split emitter resistor"
STAGES = 1
RESISTORS = ("R1", "R2", "R3", "R4", "R5")  # top, bottom, RC, RE1, RE2
CAPACITORS = ("C1", "C2", "C3")
RESISTOR_ROLES, CAPACITOR_ROLES = RESISTORS, CAPACITORS
GAIN_SPLIT = ("R4", "R5")  # moving resistance between these keeps the DC point
OPTIONAL = frozenset({"R4"})  # a fully bypassed emitter needs no RE1


def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator); NPN or PNP from the spec."""
    pnp = spec.transistor.polarity == "pnp"
    rail_e = "vcc" if pnp else "0"  # where the emitter network returns
    rail_c = "0" if pnp else "vcc"  # where the collector resistor returns
    nodes = {
        "R1": ("vcc", "b1"),
        "R2": ("b1", "0"),
        "R3": (rail_c, "c1"),
        "R4": ("e1", "x1"),
        "R5": ("x1", rail_e),
        "C1": ("in", "b1"),
        "C2": ("c1", "out"),
        "C3": ("x1", rail_e),
    }
    roles = {
        "R1": "bias divider, supply side",
        "R2": "bias divider, ground side",
        "R3": "collector load RC",
        "R4": "emitter degeneration RE1 (unbypassed)",
        "R5": "emitter bias RE2 (bypassed)",
        "C1": "input coupling",
        "C2": "output coupling",
        "C3": "emitter bypass",
        "Q1": "amplifying transistor",
    }
    return make_design(spec, NAME, nodes, values, {"Q1": ("c1", "b1", "e1")}, roles, title)


def _vbe(dev: Device, ic: np.ndarray) -> np.ndarray:
    """Junction voltage at 25 degC for collector current ic (Early factor ignored)."""
    return dev.vbe + thermal_voltage(T_REF_C) * np.log(ic / dev.vbe_current)


def ic_range(spec: Spec) -> tuple[float, float]:
    """Collector currents worth trying: from what the swing needs to what limits allow."""
    dev = spec.transistor
    r = spec.require
    amp = max(r.swing_vpp / 2.0, 0.05)
    lo = max(0.5 * amp / spec.load.resistance, 10e-6)
    hi = 30e-3
    if r.f_high > 5e6:
        hi = 60e-3
    if dev.ic_max:
        hi = min(hi, 0.5 * dev.ic_max)
    if dev.p_max:
        hi = min(hi, 0.5 * dev.p_max / max(spec.supply.voltage / 2.0, 0.1))
    if r.supply_current is not None:
        hi = min(hi, 0.9 * r.supply_current)
    lo = min(lo, hi / 4.0)
    ic_opt = noise_optimal_current(spec)
    if ic_opt is not None:  # cover the noise optimum, within the same limits
        lo = min(lo, 0.3 * ic_opt)
        cap = hi if r.supply_current is not None else 30e-3
        if dev.ic_max:
            cap = min(max(cap, hi), 0.5 * dev.ic_max)
        hi = max(hi, min(3.0 * ic_opt, cap))
        lo = max(min(lo, hi / 4.0), 1e-6)
    return lo, hi


def noise_optimal_current(spec: Spec) -> float | None:
    """IC ≈ VT·√β/(Rs + rx) at the spot frequency when the spec asks for noise (else None)."""
    if not spec.require.wants_noise:
        return None
    from stagesynth.synthesis.lownoise import optimal_current

    dev = spec.transistor
    ic = optimal_current(dev, spec.source.resistance, dev.hfe_nominal,
                         spec.require.noise_frequency)
    return ic if np.isfinite(ic) else None


def noise_grid(spec: Spec, ic: np.ndarray, lo: float, hi: float) -> np.ndarray:
    """The current grid with the noise-optimal current and its neighbours added."""
    ic_opt = noise_optimal_current(spec)
    if ic_opt is None:
        return ic
    extra = ic_opt * np.array([0.5, 0.7, 1.0, 1.4, 2.0])
    return np.unique(np.concatenate([ic, np.clip(extra, lo, hi)]))


def first_cut(spec: Spec, *, ic_points: int = 14) -> FirstCut:
    """A grid over IC, VE, VCE and divider stiffness, turned into part values.

    Common practice (no single source): VE of roughly a tenth of the supply, a
    stiff divider RTH <= (hFE_min + 1) * RE / 10, the Q point near the middle of
    the AC load line. The grid brackets each of these rather than fixing it.
    """
    dev = spec.transistor
    vcc = spec.supply.voltage
    lo, hi = ic_range(spec)
    if spec.require.wants_noise:  # five more points around the noise optimum follow
        ic_points = max(ic_points - 5, 8)
    ic = noise_grid(spec, np.geomspace(lo, hi, ic_points), lo, hi)
    ve_frac = np.array([0.05, 0.09, 0.14, 0.2])
    vce_frac = np.array([0.2, 0.3, 0.4, 0.5, 0.6, 0.7])
    if spec.require.wants_noise:  # a small RC lets RE1 (4kT·RE1 at the input) shrink
        vce_frac = np.array([0.2, 0.35, 0.5, 0.65, 0.8, 0.9])
    # a divider's thermal noise current flows in the source resistance: when noise is
    # asked, a softer (larger) divider is tried too
    stiff = np.array([1.5, 3.0, 6.0, 12.0] if spec.require.wants_noise
                     else [3.0, 6.0, 12.0, 24.0])
    IC, VEf, VCEf, K = (a.ravel() for a in np.meshgrid(ic, ve_frac, vce_frac, stiff,
                                                           indexing="ij"))
    beta = dev.hfe_nominal
    ve = np.maximum(VEf * vcc, 0.25)
    vce = VCEf * (vcc - ve)
    rc = (vcc - ve - vce) / IC
    ie = IC * (1.0 + 1.0 / beta)
    re = ve / ie
    rth = (dev.hfe_min + 1.0) * re / K
    ib = IC / beta
    vth = ve + _vbe(dev, IC) + ib * (rth + dev.r_bb)
    keep = (vth < 0.95 * vcc) & (rc > 1.0) & (vce > dev.vce_sat + 0.2)
    r_supply_side = rth * vcc / vth  # NPN: divider top carries VCC - VTH
    r_ground_side = rth * vcc / (vcc - vth)
    if dev.polarity == "pnp":  # mirror: the base sits VTH below the supply
        r_supply_side, r_ground_side = r_ground_side, r_supply_side
    values = {
        "R1": r_supply_side,
        "R2": r_ground_side,
        "R3": rc,
        "R4": np.zeros_like(re),  # the synthesizer moves part of RE here for the gain
        "R5": re,
    }
    values = {k: v[keep] for k, v in values.items()}
    info = {"ic": IC[keep], "ve": ve[keep], "vce": vce[keep], "stiffness": K[keep]}
    return FirstCut(values=values, knob=_first_re1(spec, values, IC[keep]), info=info)


def _first_re1(spec: Spec, values: dict[str, np.ndarray], ic: np.ndarray) -> np.ndarray:
    """Analytic RE1 for the target gain: |A| = Kin * Rac / (re + RE1) (Sedra & Smith form).

    Kin = Rin / (Rin + Rs) with Rin = RTH || (beta + 1)(re + RE1), iterated twice.
    The synthesizer then corrects RE1 against the exact analysis.
    """
    dev = spec.transistor
    beta = dev.hfe_nominal
    re_small = thermal_voltage(T_REF_C) / ic + dev.r_bb / (beta + 1.0)
    rac = values["R3"] * spec.load.resistance / (values["R3"] + spec.load.resistance)
    rth = values["R1"] * values["R2"] / (values["R1"] + values["R2"])
    target = spec.require.gain
    re1 = np.zeros_like(rac)
    for _ in range(3):
        rin = rth * (beta + 1) * (re_small + re1) / (rth + (beta + 1) * (re_small + re1))
        kin = rin / (rin + spec.source.resistance)
        re1 = np.clip(kin * rac / target - re_small, 0.0, values["R5"])
    return re1


def precheck(spec: Spec) -> list[Conflict]:
    """What a single common-emitter stage can never do."""
    out = []
    r = spec.require
    if r.inverting == "no":
        out.append(Conflict("inverting", "no", "a common-emitter stage always inverts",
                            'set inverting = "any" or "yes", or use a non-inverting circuit'))
    return out


def unlikely(spec: Spec) -> list[Conflict]:
    """Rules of thumb that make this family a poor first try (they order the search only)."""
    from stagesynth.synthesis.topologies.ce_ef import gbw_conflict

    return gbw_conflict(spec, 1)


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for this bias point and split (for the report)."""
    values = design.values()
    ic = analysis.nominal.transistors["Q1"].ic
    vce = analysis.nominal.transistors["Q1"].vce
    dev = spec.transistor
    vcc = spec.supply.voltage
    rc, re1, re2 = values["R3"], values.get("R4", 0.0), values.get("R5", 0.0)
    rl = spec.load.resistance
    rac = rc * rl / (rc + rl)
    re_total = re1 + re2
    rth = values["R1"] * values["R2"] / (values["R1"] + values["R2"])
    ve = ic * re_total
    stiff = (dev.hfe_min + 1) * re_total / rth
    vt = float(thermal_voltage(T_REF_C))
    notes = [
        f"Bias point IC ≈ {eng(ic, 'A', 3)}, VCE ≈ {eng(vce, 'V', 3)}, VE ≈ {eng(ve, 'V', 3)} "
        f"({100 * ve / vcc:.0f} % of the supply; common practice is about 10 %).",
        f"AC load line: Rac = RC ∥ RL ≈ {eng(rac, 'Ω', 4)}. Before cutoff the load can swing "
        f"IC·Rac ≈ {eng(ic * rac, 'V', 3)} peak; before saturation about (VCE − VCEsat)/(1 + "
        f"RE1/Rac) ≈ "
        f"{eng((vce - dev.vce_sat) / (1 + re1 / rac), 'V', 3)} peak (design-notes relations; the "
        "verdict uses the exact analysis at every corner).",
        f"Emitter split: RE1 = {eng(re1, 'Ω', 4)} unbypassed sets the gain ≈ Rac/(re + RE1) with "
        f"re = VT/IC ≈ {eng(vt / ic, 'Ω', 3)}, linearises the stage and raises the input "
        f"resistance; RE2 = {eng(re2, 'Ω', 4)} is bypassed and only sets the DC bias.",
        f"Divider: RTH = R1 ∥ R2 ≈ {eng(rth, 'Ω', 4)}, i.e. (hFE_min + 1)·RE / RTH ≈ "
        f"{num(stiff, 3)} "
        "(common practice asks for about 10 or more for a stiff bias; a smaller figure "
        "trades bias stability for input impedance).",
    ]
    return notes
