"""Bias stability of junction FETs: how the drain current follows IDSS, VP and temperature.

The bipolar factors (S_I, S_V, S_β) have no meaning for a FET; what moves its bias is
the unit's IDSS and pinch-off voltage (several-fold between units) and the temperature
(IDSS falls with mobility, |VP| grows). Per FET: the relative sensitivity
S_IDSS = (∂ID/ID)/(∂IDSS/IDSS), S_VP = ∂ID/∂|VP| (A/V) and S_T = ∂ID/∂Ta (A/K, with
self-heating and every tempco), by central differences of the DC solver, plus the
drain current at both ends of the IDSS/VP pairing and at the ambient extremes.
One batched solve on stacked copies of the netlist (stability._stack), as the
bipolar factors are taken.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from stagesynth.contracts.device import T_REF_C
from stagesynth.contracts.jfet import NOMINAL_U
from stagesynth.contracts.netlist import Design
from stagesynth.engine.analysis import Environment
from stagesynth.engine.circuit import compile_design
from stagesynth.engine.dc import solve_dc

IDSS_STEP = 0.01  # relative step of IDSS (both ends of the spread)
VP_STEP = 0.01  # relative step of |VP| (both ends of the pairing)
T_STEP = 1.0  # K, ambient step for S_T


@dataclass(frozen=True)
class JfetStability:
    """Bias sensitivities of one junction FET at the nominal unit, 25 degC."""

    ref: str
    id: float  # A, nominal drain current
    s_idss: float  # (dID/ID) / (dIDSS/IDSS), dimensionless
    s_vp: float  # A/V, dID / d|VP|
    s_t: float  # A/K, dID / dTa (self-heating and tempcos included)
    id_unit_low: float  # A, at u = 0 (idss min with the vp nearest zero), 25 degC
    id_unit_high: float  # A, at u = 1
    id_ambient_low: float
    id_ambient_high: float
    ambient: tuple[float, float]
    converged: bool

    @property
    def id_spread_pct(self) -> float:
        """Drain-current change across the pairing, % of nominal."""
        return 100.0 * (self.id_unit_high - self.id_unit_low) / self.id if self.id > 0 \
            else math.nan

    @property
    def id_ambient_pct(self) -> float:
        return 100.0 * (self.id_ambient_high - self.id_ambient_low) / self.id if self.id > 0 \
            else math.nan


def jfet_stability(design: Design, env: Environment | None = None) -> tuple[JfetStability, ...]:
    """The bias sensitivities of every junction FET of `design` (empty without one)."""
    from stagesynth.judging.stability import _stack

    env = env or Environment.for_design(design)
    circuit = compile_design(design)
    nj = len(circuit.jfets)
    if nj == 0:
        return ()
    nb = len(circuit.bjts)
    base = [q.device for q in circuit.transistors]
    devices = [list(base)]  # copy 0 as designed, then IDSS +-, |VP| +- per FET
    for j in range(nj):
        d = base[nb + j]
        for f in (1.0 + IDSS_STEP, 1.0 - IDSS_STEP):
            devs = list(base)
            devs[nb + j] = d.with_overrides(idss_min=d.idss_min * f, idss_max=d.idss_max * f)
            devices.append(devs)
        for f in (1.0 + VP_STEP, 1.0 - VP_STEP):
            devs = list(base)
            devs[nb + j] = d.with_overrides(vp=(d.vp[0] * f, d.vp[1] * f))
            devices.append(devs)
    k = len(devices)
    stacked = _stack(circuit, devices, design.source_resistance)
    amb_lo, amb_hi = float(min(env.ambient)), float(max(env.ambient))
    # rows: nominal; Ta +- step; u = 0 and 1; the ambient extremes
    rows = [(NOMINAL_U, T_REF_C), (NOMINAL_U, T_REF_C + T_STEP), (NOMINAL_U, T_REF_C - T_STEP),
            (0.0, T_REF_C), (1.0, T_REF_C), (NOMINAL_U, amb_lo), (NOMINAL_U, amb_hi)]
    b = len(rows)
    hfe = np.array([q.device.hfe_nominal for q in circuit.bjts])
    spread = np.concatenate([np.tile(hfe, (b, k)),
                             np.repeat(np.array([[u] for u, _ in rows]), nj * k, axis=1)], 1)
    vals = design.values()
    row = [vals[ref] for ref, _, _ in circuit.resistors] + [design.load_resistance]
    if design.source_resistance > 0:
        row.append(design.source_resistance)
    dc = solve_dc(stacked, np.tile(np.array(row * k), (b, 1)),
                  np.full(b, design.supply_voltage), spread, np.array([t for _, t in rows]),
                  0.0 if design.source_resistance <= 0 else math.inf, math.inf)
    i_d = dc.ic[:, nb * k:].reshape(b, k, nj)
    out = []
    for j, q in enumerate(circuit.jfets):
        id0 = float(i_d[0, 0, j])
        c = 1 + 4 * j
        s_idss = (i_d[0, c, j] - i_d[0, c + 1, j]) / (2.0 * IDSS_STEP * max(id0, 1e-30))
        vp_mag = abs(float(q.device.unit(NOMINAL_U)[1]))
        s_vp = (i_d[0, c + 2, j] - i_d[0, c + 3, j]) / (2.0 * VP_STEP * vp_mag)
        s_t = (i_d[1, 0, j] - i_d[2, 0, j]) / (2.0 * T_STEP)
        out.append(JfetStability(
            ref=q.ref, id=id0, s_idss=float(s_idss), s_vp=float(s_vp), s_t=float(s_t),
            id_unit_low=float(i_d[3, 0, j]), id_unit_high=float(i_d[4, 0, j]),
            id_ambient_low=float(i_d[5, 0, j]), id_ambient_high=float(i_d[6, 0, j]),
            ambient=(amb_lo, amb_hi), converged=bool(np.all(dc.converged))))
    return tuple(out)


def jfet_stability_dicts(factors: tuple[JfetStability, ...]) -> list[dict]:
    """JSON-ready records (inf/nan as null)."""
    def num(x: float) -> float | None:
        return float(x) if math.isfinite(x) else None

    return [{"ref": f.ref, "id": num(f.id), "s_idss": num(f.s_idss), "s_vp": num(f.s_vp),
             "s_t": num(f.s_t), "id_unit_low": num(f.id_unit_low),
             "id_unit_high": num(f.id_unit_high), "id_spread_pct": num(f.id_spread_pct),
             "id_ambient_low": num(f.id_ambient_low), "id_ambient_high": num(f.id_ambient_high),
             "id_ambient_pct": num(f.id_ambient_pct), "ambient_c": list(f.ambient),
             "converged": f.converged} for f in factors]
