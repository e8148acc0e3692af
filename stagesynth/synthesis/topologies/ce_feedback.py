"""Common emitter with collector-to-base feedback bias (NPN, and its PNP mirror).

Roles and reference designators:

    R1  feedback RF, collector half   C1  input coupling (in -> base)
    R2  feedback RF, base half        C2  output coupling (collector -> out)
    R3  collector resistor RC         C3  emitter bypass across RE2
    R4  unbypassed emitter RE1        C4  feedback decoupling (midpoint m1 to AC ground)
    R5  bypassed emitter RE2          Q1  the transistor

The base takes its bias current from the collector through RF = R1 + R2: if IC
rises, the collector falls and starves the base (Sedra & Smith, from memory:
IC = beta (VCC - VBE) / (RF + (beta + 1)(RC + RE))). No divider is needed.

RF is split, and its midpoint decoupled to AC ground by C4, so the feedback acts
at DC only. Without C4 the same resistor is shunt feedback at signal frequencies
too: it appears at the input as RF / (1 + |A|) (Miller), which swamps the input
impedance and makes the gain depend on the source resistance. With C4 the AC
picture is the plain common emitter's, loaded by R2 at the input and by R1 at
the collector, so the RE1/RE2 split sets the gain exactly as in the CE family
(GAIN_SPLIT works the same way: the DC point depends on RE1 + RE2 only). For
the PNP mirror RC goes to ground and the emitter network and both bypasses to
the supply.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.device import T_REF_C, thermal_voltage
from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.quantities.units import format_number as num
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.topologies import common_emitter
from stagesynth.synthesis.topologies.base import Conflict, FirstCut, make_design
from stagesynth.synthesis.topologies.emitter_follower import vbe25

NAME = "ce_fb"
TITLE = "common emitter, collector-feedback bias, split emitter resistor"
STAGES = 1
RESISTORS = ("R1", "R2", "R3", "R4", "R5")  # RF collector half, RF base half, RC, RE1, RE2
CAPACITORS = ("C1", "C2", "C3", "C4")
GAIN_SPLIT = ("R4", "R5")  # moving resistance between these keeps the DC point
OPTIONAL = frozenset({"R4"})  # a fully bypassed emitter needs no RE1

ROLES = {
    "R1": "feedback bias RF, collector half",
    "R2": "feedback bias RF, base half (loads the input)",
    "R3": "collector load RC",
    "R4": "emitter degeneration RE1 (unbypassed)",
    "R5": "emitter bias RE2 (bypassed)",
    "C1": "input coupling",
    "C2": "output coupling",
    "C3": "emitter bypass",
    "C4": "feedback decoupling: keeps RF's feedback to DC",
    "Q1": "amplifying transistor",
}


def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator); NPN or PNP from the spec."""
    pnp = spec.transistor.polarity == "pnp"
    rail_e = "vcc" if pnp else "0"
    rail_c = "0" if pnp else "vcc"
    nodes = {
        "R1": ("c1", "m1"),
        "R2": ("m1", "b1"),
        "R3": (rail_c, "c1"),
        "R4": ("e1", "x1"),
        "R5": ("x1", rail_e),
        "C1": ("in", "b1"),
        "C2": ("c1", "out"),
        "C3": ("x1", rail_e),
        "C4": ("m1", rail_e),
    }
    return make_design(spec, NAME, nodes, values, {"Q1": ("c1", "b1", "e1")}, ROLES, title)


def feedback_ic(beta: float | np.ndarray, vcc: float, vbe: float | np.ndarray,
                rf: np.ndarray, rc: np.ndarray, re: np.ndarray) -> np.ndarray:
    """Collector current of collector-feedback bias (Sedra & Smith, from memory).

    KVL supply -> RC -> RF -> base -> emitter -> RE: RC and RE both carry IE = (beta+1) IB.
    """
    return beta * (vcc - vbe) / (rf + (beta + 1.0) * (rc + re))


def first_cut(spec: Spec, *, ic_points: int = 14) -> FirstCut:
    """A grid over IC, feedback stiffness K, VE and the share of RF on the base side.

    With RF = (hFE_min + 1)(RC + RE) / K the feedback closed form fixes RC + RE for a
    given IC, and VCE = VBE + IB RF follows from K alone (the classic trade of this
    bias: a stiffer loop leaves less VCE). VE then splits RC + RE.
    """
    from stagesynth.synthesis.topologies.common_emitter import ic_range, noise_grid

    dev = spec.transistor
    vcc = spec.supply.voltage
    lo, hi = ic_range(spec)
    ic = noise_grid(spec, np.geomspace(lo, hi, ic_points), lo, hi)
    stiff = np.array([0.35, 0.5, 0.7, 1.0, 1.4, 2.0, 3.0])
    ve_frac = np.array([0.05, 0.1, 0.15, 0.22])
    share = np.array([0.3, 0.6, 0.85])  # of RF on the base side (R2)
    IC, K, VEf, F = (a.ravel() for a in np.meshgrid(ic, stiff, ve_frac, share, indexing="ij"))
    beta = dev.hfe_nominal
    vbe = vbe25(dev, IC)
    m = (dev.hfe_min + 1.0) / K
    s = beta * (vcc - vbe) / (IC * (m + beta + 1.0))  # RC + RE from the closed form
    rf = m * s
    ie = IC * (1.0 + 1.0 / beta)
    ve = VEf * vcc
    re = ve / ie
    rc = s - re
    vce = vcc - ie * s
    keep = (rc > 1.0) & (vce > dev.vce_sat + 0.3) & (ve > 0.1)
    values = {
        "R1": ((1.0 - F) * rf)[keep],
        "R2": (F * rf)[keep],
        "R3": rc[keep],
        "R4": np.zeros_like(re)[keep],  # the synthesizer moves part of RE here for the gain
        "R5": re[keep],
    }
    info = {"ic": IC[keep], "ve": ve[keep], "vce": vce[keep], "stiffness": K[keep]}
    return FirstCut(values=values, knob=_first_re1(spec, values, IC[keep]), info=info)


def _first_re1(spec: Spec, values: dict[str, np.ndarray], ic: np.ndarray) -> np.ndarray:
    """Analytic RE1 for the target gain: |A| = Kin * Rac / (re + RE1) (Sedra & Smith form).

    Rac = RC || RL || R1 (the collector half of RF is at AC ground on C4); Kin = Rin/(Rin +
    Rs) with Rin = R2 || (beta + 1)(re + RE1), iterated. The synthesizer then corrects RE1.
    """
    dev = spec.transistor
    beta = dev.hfe_nominal
    re_small = thermal_voltage(T_REF_C) / ic + dev.r_bb / (beta + 1.0)
    rac = 1.0 / (1.0 / values["R3"] + 1.0 / spec.load.resistance + 1.0 / values["R1"])
    rb = values["R2"]
    target = spec.require.gain
    re1 = np.zeros_like(rac)
    for _ in range(3):
        rib = (beta + 1) * (re_small + re1)
        rin = rb * rib / (rb + rib)
        kin = rin / (rin + spec.source.resistance)
        re1 = np.clip(kin * rac / target - re_small, 0.0, values["R5"])
    return re1


def precheck(spec: Spec) -> list[Conflict]:
    """What a single common-emitter stage, however biased, can never do."""
    return common_emitter.precheck(spec)


def unlikely(spec: Spec) -> list[Conflict]:
    """Rules of thumb that make this family a poor first try (they order the search only)."""
    return common_emitter.unlikely(spec)


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for this bias point, feedback and split (for the report)."""
    values = design.values()
    dev = spec.transistor
    q = analysis.nominal.transistors["Q1"]
    ic, vce = q.ic, q.vce
    vt = float(thermal_voltage(T_REF_C))
    rf = values["R1"] + values["R2"]
    rc, re1, re2 = values["R3"], values.get("R4", 0.0), values.get("R5", 0.0)
    re_total = re1 + re2
    rl = spec.load.resistance
    rac = 1.0 / (1.0 / rc + 1.0 / rl + 1.0 / values["R1"])
    ic_lo = feedback_ic(dev.hfe_min, spec.supply.voltage, q.vbe, rf, rc, re_total)
    ic_hi = feedback_ic(dev.hfe_max, spec.supply.voltage, q.vbe, rf, rc, re_total)
    return [
        f"Bias point IC ≈ {eng(ic, 'A', 3)}, VCE ≈ {eng(vce, 'V', 3)}. Collector feedback: "
        f"IC = β(VCC − VBE)/(RF + (β + 1)(RC + RE)) with RF = {eng(rf, 'Ω', 4)} (Sedra & Smith); "
        f"over hFE {dev.hfe_min:g} … {dev.hfe_max:g} that gives IC ≈ {num(ic_lo * 1e3, 3)} … "
        f"{eng(ic_hi, 'A', 3)} at 25 °C. VCE = VBE + IB·RF, so a stiffer loop (smaller RF) "
        "holds IC better but leaves less headroom: the classic trade of this bias.",
        f"RF is split ({eng(values['R1'], 'Ω', 4)} + {eng(values['R2'], 'Ω', 4)}) with C4 to "
        f"AC ground at "
        "the midpoint, so the feedback acts at DC only and does not lower the gain or the "
        "input impedance.",
        f"Emitter split: RE1 = {eng(re1, 'Ω', 4)} unbypassed sets the gain ≈ Rac/(re + RE1) with "
        f"Rac = RC ∥ RL ∥ R1 ≈ {eng(rac, 'Ω', 4)} and re = VT/IC ≈ {eng(vt / ic, 'Ω', 3)}; RE2 = "
        f"{eng(re2, 'Ω', 4)} is bypassed and adds to the DC loop only.",
        f"Input impedance ≈ R2 ∥ (β + 1)(re + RE1): {eng(analysis.z_in, 'Ω', 4)} at midband.",
    ]
