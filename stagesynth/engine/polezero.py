"""Poles and zeros of the overall gain v_load/v_emf, from the nodal matrices (engine).

With the source (EMF behind its resistance) and the load attached, the node
equations are (G + sC) v = b u and the output is y = e_out^T v. The poles are the
finite generalized eigenvalues of the pencil (G, -C); the zeros are those of the
system matrix [[G + sC, -b], [e_out^T, 0]] (the standard invariant-zero pencil).
Singular C gives infinite eigenvalues, which are dropped. Results are in Hz (s/2pi).
`batch_poles` does the same for every member of a batch at once (stability at every
corner) with a shifted standard eigenproblem, which numpy solves batched.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from stagesynth.quantities.units import format_number as num

if TYPE_CHECKING:  # pragma: no cover - typing only
    from stagesynth.engine.ac import AcSystem
    from stagesynth.engine.analysis import Analysis

_INFINITE = 1e-11  # |beta| / |alpha| below this (after scaling) counts as an infinite root
_ORIGIN = 1e-9  # |s| / w_mid below this counts as a root at the origin
_REAL = 1e-7  # |Im| / |s| below this counts as real


@dataclass(frozen=True)
class Root:
    """One pole or zero: `freq` = s / 2pi in Hz (complex), with a plain-words label."""

    freq: complex
    label: str  # e.g. "real, left half-plane, below midband"

    @property
    def s(self) -> complex:
        """The root in rad/s."""
        return 2.0 * math.pi * self.freq

    @property
    def magnitude(self) -> float:
        """|s| / 2pi: the natural frequency in Hz."""
        return abs(self.freq)

    @property
    def q(self) -> float:
        """Quality factor |s| / (2 |Re s|); 0.5 or less for real roots, inf on the axis."""
        re = abs(self.freq.real)
        return math.inf if re == 0 else abs(self.freq) / (2.0 * re)

    @property
    def is_real(self) -> bool:
        return self.freq.imag == 0.0


@dataclass(frozen=True)
class PoleZeroMap:
    """Poles and zeros of v_load/v_emf, each sorted by natural frequency."""

    poles: tuple[Root, ...]
    zeros: tuple[Root, ...]
    midband: float  # Hz, separates the low-frequency from the high-frequency roots

    def low_poles(self) -> tuple[Root, ...]:
        return tuple(p for p in self.poles if p.magnitude < self.midband)

    def high_poles(self) -> tuple[Root, ...]:
        return tuple(p for p in self.poles if p.magnitude >= self.midband)

    @property
    def stable(self) -> bool:
        return all(p.freq.real < 0 for p in self.poles)


def _loaded_pencil(system: AcSystem) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray,
                                              np.ndarray]:
    """(G, C, b0, b1, e_out) of the loaded stage: (G + sC) v = (b0 + s b1) u, y = e_out·v.

    The same stamping as the state-space form (lti.loaded_descriptor), so the roots here
    and python-control's of `to_lti` are those of one system.
    """
    from stagesynth.engine.lti import loaded_descriptor

    return loaded_descriptor(system, 0)


def loaded_pencils(system: AcSystem) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray,
                                                int]:
    """Batched (G, C, B0, B1, out): (B, m, m), (B, m, m), (B, m), (B, m) and the output row.

    The stage with source and load attached, as in `_loaded_pencil`, for every member.
    """
    c = system.circuit
    g = system.G.copy()
    cap = system.C.copy()
    o, i_in = c.output, c.input
    g[:, o, o] += 1.0 / system.load_resistance
    cap[:, o, o] += system.load_capacitance
    rs = system.source_resistance
    bsz, n = g.shape[0], c.n
    if np.all(rs > 0):
        g[:, i_in, i_in] += 1.0 / rs
        b0 = np.zeros((bsz, n))
        b0[:, i_in] = 1.0 / rs
        return g, cap, b0, np.zeros((bsz, n)), o
    keep = np.array([k for k in range(n) if k != i_in])
    out = int(np.flatnonzero(keep == o)[0])
    return (g[:, keep[:, None], keep[None, :]], cap[:, keep[:, None], keep[None, :]],
            -g[:, keep, i_in], -cap[:, keep, i_in], out)


_BATCH_INFINITE = 1e-9  # |lambda| below this times the largest counts as an infinite root


def batch_poles(system: AcSystem, w0: np.ndarray | float) -> np.ndarray:
    """Poles (rad/s) of every member: (B, m) complex, nan where a root is infinite.

    det(G + sC) = 0 with the shift s0 = w0 (a real frequency near midband, not a pole):
    lambda = eig(s0 (G + s0 C)^-1 C) = s0 / (s0 - s), so s = s0 (1 - 1/lambda); lambda = 0
    is a root at infinity (singular C).
    """
    g, cap, _, _, _ = loaded_pencils(system)
    s0 = np.broadcast_to(np.asarray(w0, dtype=float), (g.shape[0],))
    m = g + s0[:, None, None] * cap
    a = s0[:, None, None] * np.linalg.solve(m, cap)
    lam = np.linalg.eigvals(a)
    big = np.max(np.abs(lam), axis=1, keepdims=True)
    finite = np.abs(lam) > _BATCH_INFINITE * np.maximum(big, 1.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = s0[:, None] * (1.0 - 1.0 / lam)
    return np.where(finite, s, np.nan + 0j)


def right_half_plane(poles: np.ndarray, w0: np.ndarray | float) -> np.ndarray:
    """(B, m) bool: poles with a positive real part beyond rounding (origin excluded)."""
    s0 = np.broadcast_to(np.asarray(w0, dtype=float), (poles.shape[0],))[:, None]
    mag = np.abs(poles)
    tol = 1e-9 * s0 + 1e-7 * mag
    return np.isfinite(poles) & (poles.real > tol)


def _finite_eigs(a: np.ndarray, e: np.ndarray, w0: float) -> np.ndarray:
    """Finite s with det(a + s e) = 0, computed with s scaled by w0 for conditioning."""
    from scipy.linalg import eig

    w = eig(a, -e * w0, right=False, homogeneous_eigvals=True)
    alpha, beta = w[0], w[1]
    finite = np.abs(beta) > _INFINITE * np.abs(alpha)
    return alpha[finite] / beta[finite] * w0


def _clean(roots: np.ndarray, w0: float) -> np.ndarray:
    """Snap roots at the origin to 0 and nearly real roots to the real axis."""
    out = []
    for r in roots:
        if abs(r) < _ORIGIN * w0:
            out.append(0j)
        elif abs(r.imag) < _REAL * abs(r):
            out.append(complex(r.real, 0.0))
        else:
            out.append(complex(r))
    return np.array(out, dtype=complex)


def _label(f: complex, midband: float) -> str:
    if f == 0:
        return "at the origin (DC blocked)"
    side = "left half-plane" if f.real < 0 else "right half-plane" if f.real > 0 else "on the axis"
    where = "below midband" if abs(f) < midband else "above midband"
    if f.imag == 0:
        return f"real, {side}, {where}"
    q = abs(f) / (2.0 * abs(f.real)) if f.real != 0 else math.inf
    return f"complex pair, {side}, Q = {num(q, 2)}, {where}"


def _roots(values: np.ndarray, midband: float) -> tuple[Root, ...]:
    f = values / (2.0 * math.pi)
    order = np.lexsort((f.imag, np.abs(f)))
    return tuple(Root(complex(f[i]), _label(complex(f[i]), midband)) for i in order)


def pole_zero_map(analysis: Analysis) -> PoleZeroMap:
    """Poles and zeros of the nominal v_load/v_emf as generalized eigenvalues."""
    g, cap, b0, b1, out = _loaded_pencil(analysis.system)
    w0 = 2.0 * math.pi * analysis.midband
    poles = _clean(_finite_eigs(g, cap, w0), w0)
    n = g.shape[0]
    a = np.zeros((n + 1, n + 1))
    e = np.zeros((n + 1, n + 1))
    a[:n, :n], e[:n, :n] = g, cap
    a[:n, n], e[:n, n] = -b0, -b1
    a[n, :n] = out
    zeros = _clean(_finite_eigs(a, e, w0), w0)
    return PoleZeroMap(_roots(poles, analysis.midband), _roots(zeros, analysis.midband),
                       analysis.midband)


def corner_estimates(pz: PoleZeroMap) -> tuple[float, float]:
    """(f_low, f_high) estimated from the roots, for a cross-check of the exact corners.

    The root-sum-square rules for several real poles (Sedra & Smith, from memory):
    f_low ~ sqrt(sum p^2 - 2 sum z^2) over the low-frequency roots and
    1/f_high ~ sqrt(sum 1/p^2 - 2 sum 1/z^2) over the high-frequency ones. They hold
    best when one pole dominates; 0 / inf when there are no such poles.
    """
    lows = [p.magnitude for p in pz.poles if p.magnitude < pz.midband]
    low_zeros = [z.magnitude for z in pz.zeros if 0 < z.magnitude < pz.midband]
    highs = [p.magnitude for p in pz.poles if p.magnitude >= pz.midband]
    high_zeros = [z.magnitude for z in pz.zeros if z.magnitude >= pz.midband]
    f_low = math.sqrt(max(sum(p * p for p in lows) - 2 * sum(z * z for z in low_zeros), 0.0))
    if highs:
        inv = sum(1 / (p * p) for p in highs) - 2 * sum(1 / (z * z) for z in high_zeros)
        f_high = 1.0 / math.sqrt(inv) if inv > 0 else math.inf
    else:
        f_high = math.inf
    return f_low, f_high


def poles_zeros_dict(pz: PoleZeroMap) -> dict:
    """JSON-ready form for the design file: each root as [real, imag] of s/2π in Hz."""

    def rows(roots: tuple[Root, ...]) -> list[dict]:
        return [{"hz": [r.freq.real, r.freq.imag], "type": r.label} for r in roots]

    return {"poles": rows(pz.poles), "zeros": rows(pz.zeros),
            "method": "generalized eigenvalues of the nodal matrices; s/2π in Hz"}
