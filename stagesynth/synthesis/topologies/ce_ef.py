"""Common emitter driving an emitter follower, direct-coupled (NPN, and its PNP mirror).

Roles and reference designators:

    R1  divider, supply side          C1  input coupling (in -> base of Q1)
    R2  divider, ground side          C2  output coupling (follower emitter -> out)
    R3  collector resistor RC         C3  emitter bypass across RE2
    R4  unbypassed emitter RE1        Q1  common-emitter amplifier
    R5  bypassed emitter RE2          Q2  emitter follower (base on Q1's collector)
    R6  follower emitter resistor

The follower's base sits on Q1's collector, so the CE stage is loaded by the
follower's high input resistance (hFE + 1)(re + R6 || RL) instead of the load:
RC can be large and the gain high, while the output impedance is the
follower's, about re2 + RC/(hFE + 1). The first cut sizes the follower for the
swing and output impedance first, then the CE stage around it. The split
RE1/RE2 of the CE stage is the gain knob, as in common_emitter.py.

This module also holds the small helpers the cascade families share
(make_design, divider, solve_re1).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

import numpy as np

from stagesynth.contracts.device import T_REF_C, Device, thermal_voltage
from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.quantities.units import format_number as num
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.topologies.base import Conflict, FirstCut, make_design
from stagesynth.synthesis.topologies.common_emitter import _vbe, ic_range

NAME = "ce_ef"
TITLE = "common emitter driving an emitter follower (direct-coupled)"
STAGES = 2
RESISTORS = ("R1", "R2", "R3", "R4", "R5", "R6")
CAPACITORS = ("C1", "C2", "C3")
GAIN_SPLIT = ("R4", "R5")  # the CE stage's RE1/RE2: sum fixed keeps every DC point
OPTIONAL = frozenset({"R4"})

VT25 = float(thermal_voltage(T_REF_C))


# ---------------------------------------------------------------------------
# helpers shared by the cascade families (ce_ef, ce_ce, ef_ce)
# ---------------------------------------------------------------------------
def rails(spec: Spec) -> tuple[bool, str, str]:
    """(pnp, emitter rail, collector rail): the PNP mirror swaps supply and ground."""
    pnp = spec.transistor.polarity == "pnp"
    return pnp, ("vcc" if pnp else "0"), ("0" if pnp else "vcc")


def divider(dev: Device, vcc: float, vth: np.ndarray, rth: np.ndarray
            ) -> tuple[np.ndarray, np.ndarray]:
    """(R1 supply side, R2 ground side) giving Thevenin VTH (from the emitter rail) and RTH.

    Thevenin equivalent of a divider (from memory, any circuits text): VTH = VCC*Rb/(Ra+Rb),
    RTH = Ra || Rb. For the PNP mirror VTH is measured down from the supply.
    """
    r_top = rth * vcc / vth  # carries VCC - VTH when the emitter rail is ground
    r_bottom = rth * vcc / (vcc - vth)
    if dev.polarity == "pnp":
        r_top, r_bottom = r_bottom, r_top
    return r_top, r_bottom


def par(a: np.ndarray | float, b: np.ndarray | float) -> np.ndarray:
    """Parallel combination a || b."""
    return a * b / (a + b)


def solve_re1(
    target: float,
    rac: np.ndarray,
    re_small: np.ndarray,
    upper: np.ndarray,
    pre: Callable[[np.ndarray], np.ndarray],
) -> np.ndarray:
    """RE1 so that pre(RE1) * Rac / (re + RE1) = target (degenerated CE, Sedra & Smith form).

    `pre` is the rest of the cascade's gain (input division, other stages), which may
    depend on RE1 through the input resistance: fixed-point iteration, three passes.
    """
    re1 = np.zeros_like(rac)
    for _ in range(3):
        re1 = np.clip(pre(re1) * rac / target - re_small, 0.0, upper)
    return re1


def prefer(keep: np.ndarray, wish: np.ndarray) -> np.ndarray:
    """keep & wish when some candidate satisfies both, else keep: a grid never comes back empty
    for a wish (such as z_out) the family may not reach; the verdict then names it."""
    both = keep & wish
    return both if np.any(both) else keep


def within_current(spec: Spec, keep: np.ndarray, estimate: np.ndarray) -> np.ndarray:
    """Prefer candidates whose estimated supply current (collector currents plus divider
    currents) leaves 5 % of the limit for the corners, when a limit is asked."""
    limit = spec.require.supply_current
    return keep if limit is None else prefer(keep, estimate <= 0.95 * limit)


def nonempty(keep: np.ndarray, values: Mapping[str, np.ndarray]) -> np.ndarray:
    """keep, or when it filtered out everything, every candidate with finite values >= 0."""
    if np.any(keep):
        return keep
    ok = np.ones_like(keep, dtype=bool)
    for v in values.values():
        ok &= np.isfinite(v) & (v >= 0)
    if not np.any(ok):
        raise ValueError("first cut: no candidate with finite, non-negative part values")
    return ok


def gbw_conflict(spec: Spec, stages: int) -> list[Conflict]:
    """Rule of thumb (common practice): a stage's gain x bandwidth stays below fT. With
    `stages` gain stages one carries at least gain**(1/stages). Not a bound of the model
    (a low source resistance exceeds it), so it only orders the search, never refuses."""
    r = spec.require
    need = r.gain ** (1.0 / stages) * r.f_high
    if need <= spec.transistor.ft:
        return []
    return [Conflict(
        "f_high", f"{eng(r.f_high, 'Hz', 4)} at {eng(r.gain, 'V/V', 3)}",
        f"each gain stage's gain × bandwidth stays below fT = {eng(spec.transistor.ft, 'Hz', 4)}; "
        f"this asks about {eng(need, 'Hz', 4)} per stage",
        "lower the gain or f_high, or choose a transistor with a higher fT")]


# ---------------------------------------------------------------------------
# the family
# ---------------------------------------------------------------------------
def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator); NPN or PNP from the spec."""
    _, rail_e, rail_c = rails(spec)
    nodes = {
        "R1": ("vcc", "b1"),
        "R2": ("b1", "0"),
        "R3": (rail_c, "c1"),
        "R4": ("e1", "x1"),
        "R5": ("x1", rail_e),
        "R6": ("e2", rail_e),
        "C1": ("in", "b1"),
        "C2": ("e2", "out"),
        "C3": ("x1", rail_e),
    }
    roles = {
        "R1": "bias divider, supply side",
        "R2": "bias divider, ground side",
        "R3": "collector load RC of the gain stage (also biases the follower's base)",
        "R4": "emitter degeneration RE1 (unbypassed)",
        "R5": "emitter bias RE2 (bypassed)",
        "R6": "follower emitter resistor (sets its current and pull-down drive)",
        "C1": "input coupling",
        "C2": "output coupling",
        "C3": "emitter bypass",
        "Q1": "common-emitter gain transistor",
        "Q2": "emitter follower (output buffer)",
    }
    bjts = {"Q1": ("c1", "b1", "e1"), "Q2": (rail_c, "c1", "e2")}
    return make_design(spec, NAME, nodes, values, bjts, roles, title)


def follower_current(spec: Spec, ve2: np.ndarray) -> np.ndarray:
    """Least follower current for the swing and output impedance asked.

    Cutoff on the negative peak: IE2 * (R6 || RL) >= A with R6 = VE2 / IE2, so
    IE2 >= (A / RL) / (1 - A / VE2) (common practice, class-A follower into a load).
    For z_out, the follower's re = VT/IE2 takes at most a quarter of the limit.
    """
    r = spec.require
    amp = max(r.swing_vpp / 2.0, 0.05)
    # past VE2 = 1.15 A no current gives the swing: stay finite and let the verdict say so
    ratio = np.clip(amp / np.maximum(ve2, 1e-3), 0.0, 1.0 / 1.15)
    need = (amp / spec.load.resistance) / (1.0 - ratio)
    if r.z_out is not None:
        need = np.maximum(need, VT25 / (0.25 * r.z_out))
    return np.maximum(need, 50e-6)


def first_cut(spec: Spec) -> FirstCut:
    """Follower first (current for swing and z_out), then the CE stage around it.

    Grid: follower current (multiples of the least), CE emitter voltage, the CE
    collector's place between its emitter and the supply, CE collector current,
    divider stiffness (common practice: RTH <= (hFE_min + 1) * RE / 10 for a stiff
    bias; the grid brackets it).
    """
    dev = spec.transistor
    vcc = spec.supply.voltage
    r = spec.require
    beta, bmin = dev.hfe_nominal, dev.hfe_min
    _, hi = ic_range(spec)
    m2 = np.array([1.4, 2.2, 3.5])
    ve_frac = np.array([0.05, 0.1, 0.16])
    vc_pos = np.array([0.4, 0.5, 0.6])
    steps = np.linspace(0.0, 1.0, 10)
    stiff = np.array([2.5, 5.0, 10.0, 20.0])
    M2, VEf, P, S, K = (a.ravel() for a in np.meshgrid(m2, ve_frac, vc_pos, steps, stiff,
                                                        indexing="ij"))
    ve1 = np.maximum(VEf * vcc, 0.3)
    vc1 = ve1 + P * (vcc - ve1)
    ve2 = vc1 - dev.vbe
    ie2 = np.minimum(follower_current(spec, ve2) * M2, 2.0 * hi)
    ve2 = vc1 - _vbe(dev, ie2)
    r6 = ve2 / ie2
    ib2 = ie2 / (beta + 1.0)
    rl = spec.load.resistance
    rin2 = (beta + 1.0) * (VT25 / ie2 + par(r6, rl))  # AC input resistance of the follower
    # the CE collector resistor: at most half the follower's input resistance, and small
    # enough that RC/(hFE + 1) keeps the output impedance within the limit
    rc_max = 0.5 * rin2
    if r.z_out is not None:
        rc_max = np.minimum(rc_max, (beta + 1.0) * (0.75 * r.z_out - VT25 / ie2) - dev.r_bb)
    head = vcc - vc1
    lo1 = np.maximum(head / np.maximum(rc_max, 1.0), 10e-6)
    hi1 = np.maximum(np.minimum(hi, 10e-3), 1.5 * lo1)
    ic1 = lo1 * (hi1 / lo1) ** S
    rc = head / (ic1 + ib2)
    ie1 = ic1 * (1.0 + 1.0 / beta)
    re = ve1 / ie1
    rth = (bmin + 1.0) * re / K
    vth = ve1 + _vbe(dev, ic1) + ic1 / beta * (rth + dev.r_bb)
    keep = ((vth < 0.95 * vcc) & (rc > 1.0)
            & (vc1 - ve1 > dev.vce_sat + 0.3) & (ve2 > 0.2))
    keep = prefer(keep, rc_max > 1.0)
    r1, r2 = divider(dev, vcc, vth, rth)
    keep = within_current(spec, keep, ic1 + ie2 + vcc / (r1 + r2))
    values = {"R1": r1, "R2": r2, "R3": rc, "R4": np.zeros_like(re), "R5": re, "R6": r6}
    keep = nonempty(keep, values)
    values = {k: v[keep] for k, v in values.items()}
    info = {"ic1": ic1[keep], "ie2": ie2[keep], "ve1": ve1[keep], "vc1": vc1[keep],
            "stiffness": K[keep]}
    return FirstCut(values=values, knob=_first_re1(spec, values, ic1[keep], ie2[keep]),
                    info=info)


def _first_re1(spec: Spec, v: dict[str, np.ndarray], ic1: np.ndarray,
               ie2: np.ndarray) -> np.ndarray:
    """Analytic RE1: |A| = Kin * (RC || Rin2) / (re1 + RE1) * Af (textbook cascade product).

    Rin2 = (beta + 1)(re2 + R6 || RL) and Af = R6||RL / (R6||RL + re2 + (RC + rbb)/(beta + 1))
    (emitter follower driven from RC; Sedra & Smith, from memory).
    """
    dev = spec.transistor
    beta = dev.hfe_nominal
    rl = spec.load.resistance
    rload2 = par(v["R6"], rl)
    re2 = VT25 / ie2
    rin2 = (beta + 1.0) * (re2 + rload2)
    af = rload2 / (rload2 + re2 + (v["R3"] + dev.r_bb) / (beta + 1.0))
    rac = par(v["R3"], rin2)
    re_small = VT25 / ic1 + dev.r_bb / (beta + 1.0)
    rth = par(v["R1"], v["R2"])
    rs = spec.source.resistance

    def pre(re1: np.ndarray) -> np.ndarray:
        rin = par(rth, (beta + 1.0) * (re_small + re1))
        return rin / (rin + rs) * af

    return solve_re1(spec.require.gain, rac, re_small, v["R5"], pre)


def precheck(spec: Spec) -> list[Conflict]:
    """What a common emitter plus follower can never do."""
    out = []
    r = spec.require
    if r.inverting == "no":
        out.append(Conflict("inverting", "no",
                            "the common-emitter stage inverts and the follower does not",
                            'set inverting = "any" or "yes", or use a non-inverting circuit'))
    return out


def unlikely(spec: Spec) -> list[Conflict]:
    """Rules of thumb that make this family a poor first try (they order the search only)."""
    return gbw_conflict(spec, 1)


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for the two bias points and the split (for the report)."""
    v = design.values()
    dev = spec.transistor
    q1 = analysis.nominal.transistors["Q1"]
    q2 = analysis.nominal.transistors["Q2"]
    beta = dev.hfe_nominal
    rl = spec.load.resistance
    rc, re1, re2, r6 = v["R3"], v.get("R4", 0.0), v.get("R5", 0.0), v["R6"]
    rin2 = (beta + 1.0) * (VT25 / q2.ic + par(r6, rl))
    rth = par(v["R1"], v["R2"])
    stiff = (dev.hfe_min + 1) * (re1 + re2) / rth
    zout_est = par(r6, VT25 / q2.ic + (rc + dev.r_bb) / (beta + 1.0))
    return [
        f"Gain stage Q1: IC ≈ {eng(q1.ic, 'A', 3)}, VCE ≈ {eng(q1.vce, 'V', 3)}; its collector "
        f"resistor RC = {eng(rc, 'Ω', 4)} sees the follower's input resistance "
        f"(hFE + 1)(re2 + R6 ∥ RL) ≈ {eng(rin2, 'Ω', 4)} instead of the {eng(rl, 'Ω', 4)} "
        f"load, so the "
        f"stage gain is about (RC ∥ Rin2)/(re1 + RE1) ≈ "
        f"{eng(par(rc, rin2) / (VT25 / q1.ic + re1), 'V/V', 3)}.",
        f"Follower Q2: IE ≈ {eng(q2.ic, 'A', 3)} through R6 = {eng(r6, 'Ω', 4)}, VCE ≈ "
        f"{eng(q2.vce, 'V', 3)}. "
        f"Before cutoff it can pull the load down by IE·(R6 ∥ RL) ≈ "
        f"{eng(q2.ic * par(r6, rl), 'V', 3)} peak; its output impedance is about "
        f"re2 + RC/(hFE + 1) ≈ {eng(zout_est, 'Ω', 3)} (analysis: {eng(analysis.z_out, 'Ω', 3)}).",
        "Direct coupling: the follower's base sits on Q1's collector, so the CE bias "
        "sets the follower's emitter at VC1 − VBE; no interstage capacitor, one pole less "
        "at the low end.",
        f"Emitter split of Q1: RE1 = {eng(re1, 'Ω', 4)} unbypassed sets the gain, RE2 = "
        f"{eng(re2, 'Ω', 4)} "
        f"is bypassed. Divider RTH ≈ {eng(rth, 'Ω', 4)}, (hFE_min + 1)·RE / RTH ≈ {num(stiff, 3)} "
        "(common practice asks about 10 for a stiff bias).",
    ]
