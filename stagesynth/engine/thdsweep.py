"""Distortion against output level, spectrum and waveforms of one design (for the report).

Engine side: everything here comes from the harmonic-balance solution of the nominal
stage (harmonic.py); the report only draws it. The level sweep runs from 1 % of the
nominal swing limit up to that limit, all levels as one batch.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stagesynth.engine.analysis import Analysis
from stagesynth.engine.circuit import compile_design

LEVELS = 20


@dataclass(frozen=True)
class DistortionViews:
    freq: float
    levels: np.ndarray  # (L,) Vpp at the load
    thd: np.ndarray  # (L,)
    hd2: np.ndarray
    hd3: np.ndarray
    converged: np.ndarray  # (L,) bool
    swing_vpp: float  # nominal swing limit (clipping) of the small-signal load line
    level_vpp: float  # the THD level (thd_level, or half the swing without a spec)
    thd_limit: float | None  # the spec's thd, if any
    thd_at_level: float  # THD at level_vpp
    spectrum: np.ndarray  # (10,) |V_k| / |V_1| for k = 1..10 at level_vpp
    phase: np.ndarray  # (S,) one period, 0..1
    wave_level: np.ndarray  # (S,) load voltage at level_vpp
    wave_clip: np.ndarray  # (S,) load voltage at the swing limit
    clip_edge: str  # "Q1 cutoff", "Q2 saturation", ...
    clip_side: str  # "positive" or "negative" output peaks
    clip_reason: str  # one sentence


def distortion_views(analysis: Analysis, thd_limit: float | None = None,
                     samples: int = 256) -> DistortionViews | None:
    """The THD-vs-level curve, spectrum and waveforms of the nominal stage (None when the
    design has no transistor or no swing)."""
    from stagesynth.contracts.netlist import Design
    from stagesynth.engine.distortion import _dc_subset
    from stagesynth.engine.harmonic import LargeSignal, solve_periodic

    design: Design = analysis.design
    fig = analysis.figures
    swing = analysis.nominal.swing_vpp
    if fig is None or not design.transistors or not swing > 0 or analysis.thd_level is None:
        return None
    circuit = compile_design(design)
    from stagesynth.engine.analysis import batch_values

    r, c = batch_values(design, circuit)
    level = float(analysis.thd_level)
    freq = float(analysis.thd_at)
    levels = np.logspace(np.log10(0.01 * swing), np.log10(swing), LEVELS)
    targets = np.concatenate([levels, [level]])
    idx = np.zeros(targets.size, dtype=int)  # every member is the nominal condition
    model = LargeSignal(circuit, _dc_subset(fig.dc, idx), np.repeat(r, idx.size, 0),
                        np.repeat(c, idx.size, 0), design.source_resistance,
                        design.load_resistance, design.load_capacitance,
                        design.source_capacitance)
    # hard clipping (a follower cut off) needs many harmonics; past 64 the point is drawn
    # as not converged rather than paid for
    sol = solve_periodic(model, freq, level=targets / 2.0, h_max=64)
    mags = np.abs(sol.load[-1, 1:11])
    spectrum = np.zeros(10)
    spectrum[: mags.size] = mags / max(mags[0], 1e-300)
    phase, waves = sol.load_waveform(samples)
    tw = sol.transistor_waveforms(samples)
    edge = analysis.nominal.swing_limit
    vp = None if fig.dc.vp is None or not circuit.jfets else fig.dc.vp[0]
    side, reason = _clipping(edge, circuit, tw, waves[LEVELS - 1], design, vp)
    return DistortionViews(
        freq=freq, levels=levels, thd=sol.thd[:LEVELS], hd2=sol.hd2[:LEVELS],
        hd3=sol.hd3[:LEVELS], converged=sol.converged[:LEVELS], swing_vpp=float(swing),
        level_vpp=level, thd_limit=thd_limit, thd_at_level=float(sol.thd[-1]),
        spectrum=spectrum, phase=phase,
        wave_level=waves[-1], wave_clip=waves[LEVELS - 1], clip_edge=edge, clip_side=side,
        clip_reason=reason,
    )


def _clipping(edge: str, circuit, tw: dict[str, np.ndarray], wave: np.ndarray,
              design, vp: np.ndarray | None = None) -> tuple[str, str]:
    """Which output peak meets the limiting edge first, and why (from the waveforms).
    `vp`: the junction FETs' VP at the nominal point (N frame), for the triode edge."""
    refs = [q.ref for q in circuit.transistors]
    parts = edge.split()
    if len(parts) < 2 or parts[0] not in refs:
        return "", edge
    ref, kind = parts[0], parts[1] if len(parts) == 2 else "triode"
    k = refs.index(ref)
    member = LEVELS - 1
    nb = len(circuit.bjts)
    if k >= nb and vp is not None:  # a junction FET
        return _fet_clipping(ref, kind, tw, wave, k, float(vp[k - nb]), member)
    trace = tw["ic"][member, k] if kind == "cutoff" else tw["vce"][member, k]
    at = int(np.argmin(trace))
    side = "positive" if wave[at] >= np.mean(wave) else "negative"
    dev = design.devices[design.part(ref).device]
    if kind == "cutoff":
        ic = tw["ic"][member, k]
        share = ic[at] / np.mean(ic)
        low = "essentially zero" if share < 1e-3 else f"{100 * share:.2g} % of its average"
        why = (f"{ref} runs out of current first: at the {side} output peak its collector "
               f"current falls to {low} (the bias "
               "current times the AC load sets this edge; more bias current or a larger AC "
               "load resistance moves it out)")
    else:
        why = (f"{ref} runs out of voltage first: at the {side} output peak its VCE comes down "
               f"to {trace[at]:.3g} V against VCE(sat) = {dev.vce_sat:.3g} V (the collector's "
               "DC headroom sets this edge; the contract's forward-active law does not bend "
               "there, so the waveform past it is the model's, not a real transistor's)")
    return side, why


def _fet_clipping(ref: str, kind: str, tw: dict[str, np.ndarray], wave: np.ndarray, k: int,
                  vp: float, member: int) -> tuple[str, str]:
    """The clipping side and reason for a junction FET: its drain current reaching zero,
    or VDS reaching VGS - VP (the channel leaves saturation for the triode region)."""
    i_d = tw["ic"][member, k]
    margin = tw["vce"][member, k] - (tw["vbe"][member, k] - vp)
    trace = i_d if kind == "cutoff" else margin
    at = int(np.argmin(trace))
    side = "positive" if wave[at] >= np.mean(wave) else "negative"
    if kind == "cutoff":
        share = i_d[at] / max(float(np.mean(i_d)), 1e-300)
        low = "essentially zero" if share < 1e-3 else f"{100 * share:.2g} % of its average"
        why = (f"{ref} runs out of current first: at the {side} output peak its drain "
               f"current falls to {low} (the bias current times the AC load sets this edge; "
               "more drain current or a larger AC load resistance moves it out)")
    else:
        why = (f"{ref} runs out of voltage first: at the {side} output peak its VDS comes "
               f"within {trace[at]:.3g} V of VGS − VP, where the channel leaves saturation "
               "for the triode region (the drain's DC headroom above the pinch-off edge "
               "sets this edge)")
    return side, why

