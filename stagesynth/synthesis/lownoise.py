"""Closed forms of bipolar noise for synthesis and the report's rationale.

The two-generator model of the input transistor (Gray, Hurst, Lewis & Meyer, noise
chapter; Motchenbacher & Connelly): en² = 4kT(rx + 1/(2gm)), in² = 2q·IB·(1 + fc/f).
With a source resistance Rs the stage adds about 4kT·rx + 2kT·VT/IC + 2q·IC/β·(Rs + rx)²
(1 + fc/f) at the input; minimising over IC gives the noise-optimal current
IC_opt = VT·√(β/(1 + fc/f))/(Rs + rx) and the floor 4kT·[rx + (Rs + rx)·√((1 + fc/f)/β)]
(the shot terms balance there). The verdict never uses these: it uses noise.py.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from stagesynth.contracts.device import BOLTZMANN, ELEMENTARY_CHARGE, ZERO_CELSIUS, Device, hfe_at
from stagesynth.engine.noise import T0
from stagesynth.quantities.units import format_quantity as fq

FLOOR_SLACK = 0.97  # a requirement below this share of the floor is refused outright


def _kt(t_c: float) -> float:
    return BOLTZMANN * (t_c + ZERO_CELSIUS)


def flicker_factor(device: Device, f: float | np.ndarray) -> float | np.ndarray:
    """1 + fc/f: the base current noise relative to its white value."""
    return 1.0 + device.flicker_corner / np.asarray(f, dtype=float)


def generators(device: Device, ic: float, beta: float, f: float, t_c: float = 25.0
               ) -> tuple[float, float]:
    """(en², in²) of the two-generator model at collector current ic (V²/Hz, A²/Hz)."""
    kt = _kt(t_c)
    gm = ic * ELEMENTARY_CHARGE / kt
    en2 = 4.0 * kt * (device.r_bb + 1.0 / (2.0 * gm))
    in2 = 2.0 * ELEMENTARY_CHARGE * ic / beta * float(flicker_factor(device, f))
    return en2, in2


def optimum_source_resistance(device: Device, ic: float, beta: float, f: float,
                              t_c: float = 25.0) -> float:
    """Rs_opt = en/in: the source resistance this bias point serves best."""
    en2, in2 = generators(device, ic, beta, f, t_c)
    return math.sqrt(en2 / in2)


def optimal_current(device: Device, rs: float, beta: float, f: float, t_c: float = 25.0
                    ) -> float:
    """IC_opt = VT·√(β/(1 + fc/f))/(Rs + rx): where the shot terms balance (∞ if Rs + rx = 0)."""
    vt = _kt(t_c) / ELEMENTARY_CHARGE
    r = rs + device.r_bb
    if r <= 0:
        return math.inf
    return vt * math.sqrt(beta / float(flicker_factor(device, f))) / r


def floor_density2(device: Device, rs: float, beta: float, f, t_c: float = 25.0):
    """Least input-referred density² (V²/Hz) any bias current gives this transistor with
    source resistance rs at frequency f: 4kT·[rx + (Rs + rx)·√((1 + fc/f)/β)]."""
    ff = flicker_factor(device, f)
    return 4.0 * _kt(t_c) * (device.r_bb + (rs + device.r_bb) * np.sqrt(ff / beta))


@dataclass(frozen=True)
class Floor:
    """The floor a noise requirement meets, and what sets it."""

    name: str  # "noise", "noise_figure" or "noise_rms"
    value: float  # in the requirement's unit (V/√Hz, dB or V)
    cause: str  # plain words: which term dominates the floor
    condition: str  # the corner where the floor is highest


def _worst_corners(spec) -> list[tuple[str, float, float]]:
    """(label, β at the junction, temperature) at the corners that bound the floor."""
    dev = spec.transistor
    out = []
    for t in sorted(set(spec.require.ambient)):
        out.append((f"hFE min, {t:g} °C", float(hfe_at(dev, dev.hfe_min, t)), t))
    return out


def _cause(device: Device, rs: float, beta: float, f: float) -> str:
    rx_term = device.r_bb
    ff = float(flicker_factor(device, f))
    shot = (rs + device.r_bb) * math.sqrt(ff / beta)
    if rx_term >= shot:
        main = f"the base spreading resistance rx = {device.r_bb:g} Ω (4kT·rx)"
    elif rs >= device.r_bb:
        main = (f"the shot noise of the base and collector currents, the base current's "
                f"noise flowing in the source's own resistance ({rs:g} Ω); β = {beta:.0f}")
    else:
        main = f"the shot noise of the base and collector currents (β = {beta:.0f}) through rx"
    if ff > 1.5:
        main += (f", with the base current's 1/f noise ({ff:.1f}× its white value at "
                 f"{fq(f, 'Hz')}, flicker corner {fq(device.flicker_corner, 'Hz')})")
    return main


def floors(spec) -> list[Floor]:
    """The physical floor of each noise requirement of `spec` at its worst corner.

    Lower bounds over every bias current and circuit (the input transistor's own
    generators only; resistors add to them), so a spec below one is unreachable.
    """
    r = spec.require
    dev = spec.transistor
    rs = spec.source.resistance
    f = r.noise_frequency
    out: list[Floor] = []
    corners = _worst_corners(spec)
    if r.noise is not None:
        vals = [(math.sqrt(float(floor_density2(dev, rs, b, f, t))), lab, b) for lab, b, t
                in corners]
        v, lab, b = max(vals)
        out.append(Floor("noise", v, _cause(dev, rs, b, f), lab))
    if r.noise_figure_db is not None and rs > 0:
        vals = [(10 * math.log10(1 + float(floor_density2(dev, rs, b, f, t)) /
                                 (4 * BOLTZMANN * T0 * rs)), lab, b) for lab, b, t in corners]
        v, lab, b = max(vals)
        out.append(Floor("noise_figure", v, _cause(dev, rs, b, f), lab))
    if r.noise_rms is not None:
        grid = np.geomspace(r.f_low, r.f_high, 401)
        vals = []
        for lab, b, t in corners:
            s = floor_density2(dev, rs, b, grid, t)
            vals.append((math.sqrt(float(np.trapezoid(s, grid))), lab, b))
        v, lab, b = max(vals)
        out.append(Floor("noise_rms", v, _cause(dev, rs, b, math.sqrt(r.f_low * r.f_high)),
                         lab))
    return out


def unreachable(spec) -> list[tuple[Floor, float]]:
    """(floor, limit) for each noise requirement below its physical floor."""
    r = spec.require
    limits = {"noise": r.noise, "noise_figure": r.noise_figure_db, "noise_rms": r.noise_rms}
    out = []
    for fl in floors(spec):
        limit = limits[fl.name]
        if fl.name == "noise_figure":
            if limit < FLOOR_SLACK * fl.value:
                out.append((fl, limit))
        elif limit < FLOOR_SLACK * fl.value:
            out.append((fl, limit))
    return out


def advice(spec, name: str) -> str:
    """What to relax for a noise requirement the transistor cannot reach."""
    dev = spec.transistor
    parts = []
    if spec.source.resistance > 4 * dev.r_bb:
        parts.append("a lower source resistance (a step-up transformer or parallel sensors)")
    parts.append(f"a transistor with a smaller rx (r_bb, now {dev.r_bb:g} Ω), a higher hFE"
                 + (" or a lower flicker corner" if dev.flicker_corner else ""))
    parts.append(f"a wider noise budget ({name})")
    return "; ".join(parts)


def dominant_terms(rows, f: float) -> str:
    """One sentence: the input-referred total at `f` and its largest terms, from the
    engine's `contributions` (largest first)."""
    total = math.sqrt(sum(x.density2 for x in rows))
    rest = ", ".join(f"{x.label} {100 * x.share:.0f} %" for x in rows[1:4])
    return (f"Noise at {fq(f, 'Hz')}: {fq(total, 'V/√Hz')} input-referred; the largest term "
            f"is {rows[0].label} ({100 * rows[0].share:.0f} %)"
            + (f", then {rest}" if rest else "") + ".")


def rationale(spec, analysis) -> list[str]:
    """Why this bias current, and which noise term dominates at noise_at (report notes)."""
    from stagesynth.engine.noise import contributions

    r = spec.require
    f = r.noise_frequency
    rows = contributions(analysis, f)
    if not rows:
        return []
    dev = spec.transistor
    rs = spec.source.resistance
    lines = [dominant_terms(rows, f)]
    q = next(iter(analysis.nominal.transistors.items()), None)
    if q is None:
        return lines
    ref, state = q
    beta = state.hfe
    rs_opt = optimum_source_resistance(dev, state.ic, beta, f, state.tj)
    ic_opt = optimal_current(dev, rs, beta, f, state.tj)
    en2, in2 = generators(dev, state.ic, beta, f, state.tj)
    text = (f"Input transistor {ref} at IC = {state.ic * 1e6:.4g} µA: en = "
            f"{math.sqrt(en2) * 1e9:.3g} nV/√Hz, in = {math.sqrt(in2) * 1e12:.3g} pA/√Hz, so "
            f"it serves best a source of en/in ≈ {rs_opt:.4g} Ω (two-generator model, Gray, "
            "Hurst, Lewis & Meyer; Motchenbacher & Connelly).")
    if rs > 0 and math.isfinite(ic_opt):
        ratio = state.ic / ic_opt
        text += (f" For this source ({rs:g} Ω) the noise-optimal current is VT·√β/(Rs + rx) "
                 f"≈ {ic_opt * 1e6:.4g} µA; the design runs at {ratio:.2g}× that")
        text += (" (near the optimum: the noise figure is flat within a factor of two)."
                 if 0.5 <= ratio <= 2.0 else
                 " (away from the optimum: gain, swing, bandwidth or the supply current "
                 "weigh more in the choice of the current at this noise budget).")
    lines.append(text)
    return lines
