"""Poles and zeros of the gain, checked against python-control and textbook corner rules.

The outside judge is python-control: each stage is turned into an ordinary state-space
model (descriptor system -> state space by eliminating the algebraic part, done here in
the test from the engine's nodal matrices, independently of stagesynth.engine.polezero),
and python-control's own poles, zeros and frequency response are compared with ours.
"""

from __future__ import annotations

import math
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
import conftest as fixtures
from independent import designs as ds

from stagesynth.contracts.netlist import Design, design_from_dict
from stagesynth.engine.analysis import analyze
from stagesynth.engine.polezero import pole_zero_map


def _designs() -> dict[str, Design]:
    """Hand-built stages of our own: single and two-transistor, NPN and PNP, Rs = 0 and > 0."""
    out = {name: build() for name, build in fixtures.FIXTURE_BUILDERS.items()}
    for name in ("ce_pnp", "ce_ce_cap", "ef_hot", "ce_dc_coupled"):
        if name in ds.DESIGNS:
            d = design_from_dict(ds.DESIGNS[name])
            out[name] = d if d.band is not None else replace(d, band=(20.0, 20e3))
    return out


DESIGNS = _designs()


@pytest.fixture(scope="module")
def analyses():
    return {name: analyze(d) for name, d in DESIGNS.items()}


def state_space(analysis):
    """python-control StateSpace of v_load/v_emf built from the nominal nodal matrices.

    (G + sC) v = b u with the source and load stamped in; an ideal source (Rs = 0)
    is handled by shifting v by M u so that no derivative of u remains. The singular
    part of C is eliminated (index-1 descriptor reduction through the SVD of C).
    """
    import control

    s = analysis.system
    c = s.circuit
    g = s.G[0].copy()
    cap = s.C[0].copy()
    g[c.output, c.output] += 1.0 / s.load_resistance[0]
    cap[c.output, c.output] += s.load_capacitance[0]
    rs = float(s.source_resistance[0])
    out = np.zeros(c.n)
    out[c.output] = 1.0
    if rs > 0:
        g[c.input, c.input] += 1.0 / rs
        b = np.zeros(c.n)
        b[c.input] = 1.0 / rs
        d_shift, m_full = 0.0, None
    else:
        keep = [k for k in range(c.n) if k != c.input]
        g_col, c_col = g[keep, c.input], cap[keep, c.input]
        g, cap, out = g[np.ix_(keep, keep)], cap[np.ix_(keep, keep)], out[keep]
        m_full, *_ = np.linalg.lstsq(cap, -c_col, rcond=None)
        assert np.allclose(cap @ m_full, -c_col, atol=1e-18)
        b = -(g_col + g @ m_full)
        d_shift = float(out @ m_full)
    u, sv, vt = np.linalg.svd(cap)
    r = int(np.sum(sv > sv[0] * 1e-13))
    v = vt.T
    at, bt, ct = u.T @ g @ v, u.T @ b, out @ v
    a11, a12, a21, a22 = at[:r, :r], at[:r, r:], at[r:, :r], at[r:, r:]
    k = np.linalg.solve(a22, a21) if r < len(sv) else np.zeros((0, r))
    kb = np.linalg.solve(a22, bt[r:]) if r < len(sv) else np.zeros(0)
    sigma = np.diag(sv[:r])
    a_ss = -np.linalg.solve(sigma, a11 - a12 @ k)
    b_ss = np.linalg.solve(sigma, bt[:r] - a12 @ kb)
    c_ss = ct[:r] - ct[r:] @ k
    d_ss = float(ct[r:] @ kb) + d_shift
    return control.ss(a_ss, b_ss[:, None], c_ss[None, :], [[d_ss]])


def _match(ours: np.ndarray, theirs: np.ndarray, scale: float) -> float:
    """Worst relative mismatch after pairing the two root sets one to one."""
    from scipy.optimize import linear_sum_assignment

    assert len(ours) == len(theirs), (ours, theirs)
    cost = np.abs(ours[:, None] - theirs[None, :]) / (
        np.maximum(np.abs(ours[:, None]), np.abs(theirs[None, :])) + scale)
    i, j = linear_sum_assignment(cost)
    return float(cost[i, j].max())


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_state_space_reproduces_engine_gain(name, analyses):
    """python-control's frequency response of the state-space model = the engine's sweep."""
    a = analyses[name]
    sys_ = state_space(a)
    f = np.logspace(-1, 9, 61)
    theirs = np.array([complex(sys_(2j * math.pi * x)) for x in f])  # python-control evaluation
    ours = a.system.gain(f)[0]
    assert np.allclose(theirs, ours, rtol=1e-6, atol=1e-9 * np.abs(ours).max())


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_poles_match_python_control(name, analyses):
    """Our generalized-eigenvalue poles = python-control's poles of the same system."""
    import control

    a = analyses[name]
    pz = pole_zero_map(a)
    ours = np.array([p.freq for p in pz.poles])
    theirs = control.poles(state_space(a)) / (2 * math.pi)  # python-control
    assert _match(ours, theirs, 1e-9 * a.midband) < 1e-5


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_zeros_match_python_control(name, analyses):
    """Our system-matrix zeros = python-control's transmission zeros.

    Zeros at the origin are counted apart: a k-fold root is ill-conditioned (numerically
    it spreads by about eps^(1/k)), so python-control returns a small cluster there. Each
    series coupling capacitor puts one zero at the origin (textbook, from memory).
    """
    import control

    a = analyses[name]
    pz = pole_zero_map(a)
    ours = np.array([z.freq for z in pz.zeros])
    theirs = control.zeros(state_space(a)) / (2 * math.pi)  # python-control
    tiny = 1e-3 * min(p.magnitude for p in pz.poles)
    assert np.sum(np.abs(ours) < tiny) == np.sum(np.abs(theirs) < tiny)
    rest_ours, rest_theirs = ours[np.abs(ours) >= tiny], theirs[np.abs(theirs) >= tiny]
    assert _match(rest_ours, rest_theirs, 0.0) < 1e-4


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_roots_rebuild_the_response(name, analyses):
    """H(s) = k prod(s - z) / prod(s - p) with our roots matches the engine at every frequency.

    The factored rational form of a lumped linear network's transfer function (textbook,
    e.g. Sedra & Smith, from memory): if a root were missing or wrong, the shape would differ.
    """
    a = analyses[name]
    pz = pole_zero_map(a)
    f = np.logspace(-1, 9, 81)
    s = 2j * math.pi * f
    shape = np.ones_like(s)
    for z in pz.zeros:
        shape = shape * (s - z.s)
    for p in pz.poles:
        shape = shape / (s - p.s)
    h = a.system.gain(f)[0]
    k = h[40] / shape[40]
    assert np.allclose(k * shape, h, rtol=1e-5, atol=1e-7 * np.abs(h).max())


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_stable_and_labelled(name, analyses):
    """Passive-biased single-supply stages are stable: every pole in the left half-plane.

    Labels follow the root: real/complex, half-plane, side of midband.
    """
    pz = pole_zero_map(analyses[name])
    assert pz.stable
    for r in (*pz.poles, *pz.zeros):
        if r.freq == 0:
            assert "origin" in r.label
            continue
        assert ("left half-plane" in r.label) == (r.freq.real < 0)
        assert ("complex pair" in r.label) == (r.freq.imag != 0)
        assert ("below midband" in r.label) == (abs(r.freq) < pz.midband)
    mags = [r.magnitude for r in pz.poles]
    assert mags == sorted(mags)


def _root_sum_square(analysis) -> tuple[float, float]:
    """(f_low, f_high) by the root-sum-square rules below, from python-control's poles and
    zeros of the state-space model (Hz); 0 / inf where there are no such poles."""
    import control

    sys_ = state_space(analysis)
    mid = analysis.midband
    poles = np.abs(np.asarray(control.poles(sys_))) / (2 * math.pi)
    zeros = np.abs(np.asarray(control.zeros(sys_))) / (2 * math.pi)
    zeros = zeros[np.isfinite(zeros)]
    lows, highs = poles[poles < mid], poles[poles >= mid]
    low_z, high_z = zeros[(zeros > 0) & (zeros < mid)], zeros[zeros >= mid]
    f_low = math.sqrt(max(float(np.sum(lows**2) - 2 * np.sum(low_z**2)), 0.0))
    inv = float(np.sum(1 / highs**2) - 2 * np.sum(1 / high_z**2)) if highs.size else 0.0
    return f_low, (1.0 / math.sqrt(inv) if inv > 0 else math.inf)


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_corners_consistent_with_dominant_poles(name, analyses):
    """The engine's -3 dB corners agree with the poles.

    1. Root-sum-square rule (Sedra & Smith, from memory): f_low ~ sqrt(sum p^2 - 2 sum z^2),
       1/f_high ~ sqrt(sum 1/p^2 - 2 sum 1/z^2), for real roots. It is exact for one pole
       and underestimates n equal poles by the factor sqrt(n (2^(1/n) - 1)) (0.91 for two,
       0.88 for three), so 20 % is the right allowance for a few poles.
    2. The dominant pole (highest below midband, lowest above) lies within a factor of two
       of the corner, complex pairs included (a Q up to about 2 moves the -3 dB point by at
       most ~1.6x from the natural frequency; second-order response, textbook).
    """
    a = analyses[name]
    pz = pole_zero_map(a)
    est_lo, est_hi = _root_sum_square(a)
    lows, highs = pz.low_poles(), pz.high_poles()
    if a.f_low > 0:
        assert lows
        if all(r.is_real for r in (*lows, *pz.zeros) if abs(r.freq) < pz.midband):
            assert 0.8 < est_lo / a.f_low < 1.2
        dominant = max(p.magnitude for p in lows)
        assert 0.5 < a.f_low / dominant < 2.0
    else:
        assert est_lo == 0.0 or all(p.magnitude >= pz.midband for p in pz.poles)
    if math.isfinite(a.f_high):
        assert highs
        if all(r.is_real for r in highs):
            assert 0.8 < est_hi / a.f_high < 1.2
        dominant = min(p.magnitude for p in highs)
        assert 0.5 < a.f_high / dominant < 2.0
