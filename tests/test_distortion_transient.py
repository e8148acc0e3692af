"""Harmonic balance against a brute-force time-domain integration of the same netlist.

The integrator here is our own and shares nothing with the engine's harmonic balance:
its nodal matrices are stamped from the design's parts, the operating point comes from
the independent reference model (tests/independent/refmodel.py, written from the
contract), the transistor law is the contract's (section 2, "Distortion": the DC
equations on instantaneous values, rx, Cπ, Cμ linear at the operating point, Tj
frozen). Second-order backward differences (BDF2) with Newton at every step, run from
the operating point until one period repeats the previous one (Aitken's extrapolation
across the slow capacitor modes), then numpy's FFT of the last period.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import ce_follower, npn_ce
from independent import refmodel as rm

from stagesynth.engine.analysis import analyze, batch_values
from stagesynth.engine.circuit import compile_design
from stagesynth.engine.distortion import _dc_subset
from stagesynth.engine.harmonic import LargeSignal, solve_periodic

STEPS = 256  # per period: the BDF2 error at 3f is about (3ωh)²/3 = 2e-3 relative (0.02 dB)


def _transient(design_dict: dict, freq: float, emf: float, periods: int = 60) -> np.ndarray:
    """Phasors (peak) of harmonics 0..10 at the load in the periodic steady state."""
    cir = rm.circuit_from_design(design_dict)
    op = rm.solve_dc(cir, rm.nominal_conditions(cir))
    fixed = {cir.ground: lambda t: 0.0, cir.supply_node: lambda t: cir.supply_voltage}
    names = sorted(n for n in op.voltages if n not in fixed)
    idx = {n: i for i, n in enumerate(names)}
    n = len(names)
    g = np.zeros((n, n))
    c = np.zeros((n, n))
    j_dc = np.zeros(n)

    def two(m: np.ndarray, a: str, b: str, y: float) -> None:
        for p, q, s in ((a, a, 1.0), (b, b, 1.0), (a, b, -1.0), (b, a, -1.0)):
            if p in idx and q in idx:
                m[idx[p], idx[q]] += s * y
            elif p in idx and q == cir.supply_node and m is g:
                j_dc[idx[p]] -= s * y * cir.supply_voltage  # supply column moved right

    for _, a, b, r in cir.resistors:
        two(g, a, b, 1.0 / r)
    for _, a, b, cv in cir.capacitors:
        two(c, a, b, cv)
    two(g, cir.output, cir.ground, 1.0 / cir.load_resistance)
    two(c, cir.output, cir.ground, cir.load_capacitance)
    gs = 1.0 / cir.source_resistance
    two(g, cir.input, cir.ground, gs)
    devs = []
    for q in cir.bjts:
        d = cir.devices[q.device]
        t = op.transistors[q.ref]
        bi = rm.internal_base(q, d)
        if d.r_bb > 0:
            two(g, q.b, bi, 1.0 / d.r_bb)
        two(c, bi, q.e, t.cpi)
        two(c, bi, q.c, t.cmu)
        devs.append((d.sign, idx.get(q.c), idx.get(bi), idx.get(q.e),
                     float(rm.saturation_current(d, t.tj)), t.vt, t.hfe, d.early_voltage,
                     op.voltages.get(q.c) if q.c not in idx else None,
                     op.voltages.get(q.e) if q.e not in idx else None))

    def volt(v: np.ndarray, k: int | None, fixed_v: float | None) -> float:
        return v[k] if k is not None else (fixed_v or 0.0)

    def device(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        i = np.zeros(n)
        jac = np.zeros((n, n))
        for s, kc, kb, ke, i_s, vt, hfe, va, vc_fix, ve_fix in devs:
            vc, vb, ve = volt(v, kc, vc_fix), volt(v, kb, None), volt(v, ke, ve_fix)
            vbe, vce = s * (vb - ve), s * (vc - ve)
            ex = math.exp(vbe / vt)
            ic = i_s * ex * (1.0 + vce / va)
            gm = ic / vt
            go = i_s * ex / va
            for k, share in ((kc, 1.0), (kb, 1.0 / hfe), (ke, -(1.0 + 1.0 / hfe))):
                if k is None:
                    continue
                i[k] += s * share * ic
                if kb is not None:
                    jac[k, kb] += share * gm
                if ke is not None:
                    jac[k, ke] -= share * (gm + go)
                if kc is not None:
                    jac[k, kc] += share * go
        return i, jac

    h = 1.0 / (freq * STEPS)
    v = np.array([op.voltages[nm] for nm in names])
    e_in = (np.arange(n) == idx[cir.input]).astype(float)

    def src(t: float) -> np.ndarray:
        return j_dc + gs * emf * math.cos(2 * math.pi * freq * t) * e_in

    out = idx[cir.output]
    prev = None
    ends: list[np.ndarray] = []
    v_old = None  # the state one step back (None: the next step is backward Euler)
    for p in range(periods):
        wave = np.empty(STEPS)
        for s in range(STEPS):
            j1 = src((p * STEPS + s + 1) * h)
            # BDF2 (Gear): (3x - 4v + v_old)/(2h); backward Euler to start and after a jump
            if v_old is None:
                a0, hist = 1.0, v
            else:
                a0, hist = 1.5, (4.0 * v - v_old) / 3.0
            x = v.copy() if v_old is None else 2.0 * v - v_old  # linear predictor
            for _ in range(40):
                i_x, jx = device(x)
                res = c @ (a0 * x - a0 * hist) / h + g @ x + i_x - j1
                dx = np.linalg.solve(a0 * c / h + g + jx, -res)
                x += dx * min(1.0, 0.1 / max(np.max(np.abs(dx)), 1e-300))  # damped
                if np.max(np.abs(dx)) < 1e-13:
                    break
            v_old, v = v, x
            wave[s] = v[out]
        # settled: a period repeats the last to 2e-6 of the swing; the ramp this leaves moves
        # no harmonic by more than about 1e-6 of the fundamental
        if prev is not None and np.max(np.abs(wave - prev)) < 2e-6 * np.ptp(wave):
            break
        prev = wave
        ends.append(v.copy())
        if len(ends) >= 4:
            # the slow remainder decays geometrically from period to period (the coupling
            # and bypass capacitors): Aitken's extrapolation jumps to its limit once the
            # ratio has settled
            d = [ends[i - 3] - ends[i - 4] for i in range(3)]
            r1 = float(d[1] @ d[0]) / max(float(d[0] @ d[0]), 1e-300)
            r2 = float(d[2] @ d[1]) / max(float(d[1] @ d[1]), 1e-300)
            if 0.0 < r2 < 0.97 and abs(r2 - r1) < 0.02:
                v = v + d[2] * r2 / (1.0 - r2)
                v_old = None
                ends.clear()
    assert p < periods - 1, "the integration did not settle"
    spec = np.fft.rfft(wave) / STEPS
    spec[1:] *= 2.0
    # the samples are taken at the end of each step: phase is irrelevant for magnitudes
    return spec[:11]


@pytest.mark.parametrize("builder, share", [(npn_ce, 0.3), (ce_follower, 0.3)])
def test_harmonic_balance_matches_time_domain(builder, share) -> None:
    """HD2 and HD3 within 0.3 dB at a moderate level; the fundamental within 0.1 %."""
    design = builder()
    a = analyze(design)
    circuit = compile_design(design)
    r, c = batch_values(design, circuit)
    model = LargeSignal(circuit, _dc_subset(a.figures.dc, np.array([0])), r, c,
                        design.source_resistance, design.load_resistance,
                        design.load_capacitance)
    freq = 100.0  # inside the band, where the bypass capacitor already plays a part
    level = share * a.figures.swing_vpp[0, 0] / 2
    hb = solve_periodic(model, freq, level=level)
    td = np.abs(_transient(design.to_dict(), freq, float(hb.emf[0])))
    # the independent integration, driven by the EMF harmonic balance found, gives the level
    assert td[1] == pytest.approx(level, rel=1e-3)
    assert 20 * math.log10(td[2] / td[1] / hb.hd2[0]) == pytest.approx(0.0, abs=0.3)
    assert 20 * math.log10(td[3] / td[1] / hb.hd3[0]) == pytest.approx(0.0, abs=0.3)
    thd_td = math.sqrt(np.sum(td[2:11] ** 2)) / td[1]
    assert 20 * math.log10(thd_td / hb.thd[0]) == pytest.approx(0.0, abs=0.3)
