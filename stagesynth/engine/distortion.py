"""Distortion figures for K value sets at M conditions: THD, HD2, HD3 at the load.

The bridge between the batched evaluator and the two distortion engines:
harmonic balance (harmonic.py: the verdict and every written figure) and the
weakly nonlinear power series (volterra.py: the synthesizer's screen). A member
out of the active region, or whose periodic solution does not converge, gets an
infinite THD (it fails any limit).
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from stagesynth.engine.ac import AcSystem
from stagesynth.engine.circuit import Circuit
from stagesynth.engine.dc import DcBatch

METHODS = ("hb", "estimate")


@dataclass(frozen=True)
class DistortionRequest:
    """What to measure: output level (Vpp), frequency, and which engine."""

    level_vpp: float | None = None  # None: half the nominal swing of each value set
    freq: float | None = None  # None: midband
    method: str = "hb"  # "hb" (harmonic balance) or "estimate" (power series)


@dataclass(frozen=True)
class DistortionFigures:
    thd: np.ndarray  # (K, M)
    hd2: np.ndarray  # (K, M)
    hd3: np.ndarray  # (K, M)
    level_vpp: np.ndarray  # (K,)
    freq: np.ndarray  # (K,)
    method: str


def distortion_figures(
    circuit: Circuit,
    dc: DcBatch,
    system: AcSystem,
    r_rep: np.ndarray,
    c_rep: np.ndarray,
    request: DistortionRequest,
    *,
    k: int,
    m: int,
    midband: np.ndarray,
    nominal_swing: np.ndarray,
    active: np.ndarray,
    source_resistance: float,
    load_resistance: float,
    load_capacitance: float,
) -> DistortionFigures:
    """THD, HD2, HD3 (K, M) of every member (ordered k*M + m) at the requested level."""
    if request.method not in METHODS:
        raise ValueError(f"unknown distortion method {request.method!r}")
    level = (np.full(k, float(request.level_vpp)) if request.level_vpp is not None
             else 0.5 * np.asarray(nominal_swing, dtype=float))
    freq = np.full(k, float(request.freq)) if request.freq is not None else np.asarray(
        midband, dtype=float)
    thd = np.full(k * m, np.inf)
    hd2 = np.full(k * m, np.inf)
    hd3 = np.full(k * m, np.inf)
    lv = np.repeat(level, m)
    fr = np.repeat(freq, m)
    run = np.flatnonzero(np.asarray(active).reshape(-1) & (lv > 0) & np.isfinite(lv))
    if run.size and circuit.nq:
        if request.method == "estimate":
            from stagesynth.engine.volterra import harmonics

            sub = system.subset(run)
            h2, h3, t, _ = harmonics(sub, _dc_subset(dc, run), fr[run], lv[run] / 2.0)
            ok = np.isfinite(t)
        else:
            from stagesynth.engine.harmonic import LargeSignal, solve_periodic

            cs = None if system.source_capacitance is None else system.source_capacitance[run]
            model = LargeSignal(circuit, _dc_subset(dc, run), r_rep[run], c_rep[run],
                                source_resistance, load_resistance, load_capacitance,
                                0.0 if cs is None else cs)
            # 64 harmonics resolve every level up to the swing limit; a member driven into
            # hard clipping beyond it that needs more is reported as not converged
            sol = solve_periodic(model, fr[run], level=lv[run] / 2.0, h_max=64)
            h2, h3, t, ok = sol.hd2, sol.hd3, sol.thd, sol.converged
        thd[run] = np.where(ok, t, np.inf)
        hd2[run] = np.where(ok, h2, np.inf)
        hd3[run] = np.where(ok, h3, np.inf)
    elif run.size:  # no transistor: a linear network does not distort
        thd[run] = hd2[run] = hd3[run] = 0.0
    return DistortionFigures(thd.reshape(k, m), hd2.reshape(k, m), hd3.reshape(k, m), level,
                             freq, request.method)


def _dc_subset(dc: DcBatch, idx: np.ndarray) -> DcBatch:
    """Members `idx` of a DC batch (every per-member array sliced)."""
    b = dc.v.shape[0]
    values = {}
    for f in fields(dc):
        x = getattr(dc, f.name)
        values[f.name] = x[idx] if isinstance(x, np.ndarray) and x.shape[:1] == (b,) else x
    return DcBatch(**values)
