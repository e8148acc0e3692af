"""The command results of section 4: an analysis (and verdict) as a JSON-ready dict.

One place builds this object, so `analyze --json`, the design file's
`predicted` block and the report all quote the same figures.
"""

from __future__ import annotations

import math
from typing import Any

from stagesynth.engine.analysis import Analysis, PointResult, TransistorState
from stagesynth.judging.verdict import Verdict


def _num(x: float) -> float | None:
    """JSON-safe float: inf/nan become None (the text report says 'none' / 'n/a')."""
    return float(x) if math.isfinite(x) else None


def transistor_dict(s: TransistorState) -> dict[str, Any]:
    """One transistor's DC state; a junction FET's ic is ID and vce VDS (polarity-
    normalized, as the bipolar magnitudes), with vgs, idss and vp (its unit at Tj)."""
    out: dict[str, Any] = {
        "kind": s.kind,
        "ic": s.ic,
        "vce": s.vce,
        "vbe": s.vbe,
        "ib": s.ib,
        "tj": s.tj,
        "hfe": _num(s.hfe),
        "power": s.power,
        "active": s.active,
        "region": s.region,
    }
    if s.kind == "jfet":
        out.update(vgs=s.vgs, ig=s.ib, vds_edge=_num(s.vsat), idss=s.idss, vp=s.vp)
        del out["vbe"], out["ib"], out["hfe"]
    return out


def point_to_dict(p: PointResult) -> dict[str, Any]:
    """One condition: the section 4 figures for it, its DC state and swing."""
    return {
        "conditions": p.condition.to_dict(),
        "gain_db": p.gain_db,
        "inverting": p.inverting,
        "f_low": _num(p.f_low),
        "f_high": _num(p.f_high),
        "z_in": p.z_in,
        "z_out": p.z_out,
        "converged": p.converged,
        "active": p.active,
        "swing_vpp": p.swing_vpp,
        "swing_limit": p.swing_limit,
        "supply_current": p.supply_current,
        "transistors": {ref: transistor_dict(s) for ref, s in p.transistors.items()},
        "node_voltages": dict(p.node_voltages),
        **_noise_keys(p),
        **response_dict(p),
        "thd": p.thd,
        "hd2": p.hd2,
        "hd3": p.hd3,
    }


def response_dict(p: PointResult) -> dict[str, Any]:
    """Supply rejection, peaking and stability of one condition (contract §4 keys)."""
    return {
        "supply_rejection": _num(p.supply_rejection),
        "peaking_db": _num(p.peaking_db),
        "peak_frequency": _num(p.peak_freq),
        "stable": p.stable,
        "swing_midband_vpp": _num(p.swing_mid_vpp),
        "swing_f_high_vpp": _num(p.swing_top_vpp),
    }


def _noise_keys(p: PointResult) -> dict[str, float | None]:
    """Contract §4 noise keys of one condition: V/√Hz, dB (None without a source
    resistance), V."""
    return {"noise": p.noise, "noise_figure": p.noise_figure, "noise_rms": p.noise_rms}


def analysis_to_dict(analysis: Analysis, verdict: Verdict | None = None) -> dict[str, Any]:
    """The object `stagesynth analyze --json` prints (section 4 keys first)."""
    out: dict[str, Any] = {
        "gain_db": analysis.gain_db,
        "inverting": analysis.inverting,
        "f_low": _num(analysis.f_low),
        "f_high": _num(analysis.f_high),
        "z_in": analysis.z_in,
        "z_out": analysis.z_out,
        "supply_current": analysis.supply_current,
        "swing_vpp": analysis.swing_vpp,
        "midband": analysis.midband,
        "gain_phase_deg": math.degrees(math.atan2(analysis.gain.imag, analysis.gain.real)),
        "converged": analysis.converged,
        **distortion_keys(analysis),
        "nominal": point_to_dict(analysis.nominal),
        "corners": [point_to_dict(c) for c in analysis.corners],
        **_noise_keys(analysis.nominal),
        "supply_rejection": _num(analysis.nominal.supply_rejection),
        "ripple_at": analysis.environment.ripple_at,
        "peaking_db": _num(analysis.nominal.peaking_db),
        "stable": analysis.nominal.stable,
        "stable_everywhere": analysis.stable_everywhere,
    }
    _add_return_loss(out, analysis)
    if verdict is not None:
        out["meets_spec"] = verdict.meets_spec
        from stagesynth.judging.textout import margin_text, status_text

        out["checks"] = [{**c.to_dict(), "margin_text": margin_text(c), "status": status_text(c)}
                         for c in verdict.checks]
    return out


def _add_return_loss(out: dict[str, Any], analysis: Analysis) -> None:
    """`return_loss` (dB) at nominal and in each corner entry (the input match)."""
    from stagesynth.judging.match import condition_return_loss

    rl = condition_return_loss(analysis)
    if len(rl) != 1 + len(out["corners"]):
        return
    out["return_loss"] = _num(rl[0])
    for entry, value in zip(out["corners"], rl[1:], strict=True):
        entry["return_loss"] = _num(value)


def distortion_keys(analysis: Analysis) -> dict[str, Any]:
    """thd, hd2, hd3 at nominal (ratios; None where undefined) and where they were taken."""
    return {
        "thd": analysis.nominal.thd,
        "hd2": analysis.nominal.hd2,
        "hd3": analysis.nominal.hd3,
        "thd_level_vpp": analysis.thd_level,
        "thd_at": analysis.thd_at,
    }


def predicted_block(analysis: Analysis) -> dict[str, Any]:
    """The design file's `predicted` figures (section 3), from the engine's analysis."""
    return {
        "gain_db": analysis.gain_db,
        "inverting": analysis.inverting,
        "f_low": _num(analysis.f_low),
        "f_high": _num(analysis.f_high),
        "z_in": analysis.z_in,
        "z_out": analysis.z_out,
        "swing_vpp": analysis.swing_vpp,
        "supply_current": analysis.supply_current,
        "supply_current_max": analysis.max_corner("supply_current"),
        **_noise_keys(analysis.nominal),
        "supply_rejection": _num(analysis.nominal.supply_rejection),
        "ripple_at": analysis.environment.ripple_at,
        "peaking_db": _num(analysis.nominal.peaking_db),
        "stable": analysis.nominal.stable,
        "supply_rejection_worst": _num(min(
            (p.supply_rejection for p in (analysis.nominal, *analysis.corners)),
            default=math.nan)),
        "peaking_db_worst": _num(max(
            (p.peaking_db for p in (analysis.nominal, *analysis.corners)), default=math.nan)),
        "stable_everywhere": analysis.stable_everywhere,
        **distortion_keys(analysis),
        "thd_max": _worst(c.thd for c in analysis.corners),
    }


def _worst(values) -> float | None:
    """The largest of the defined values (None when none is)."""
    vals = [v for v in values if v is not None]
    return max(vals) if vals else None
