"""The stage's gain v_load/v_emf as an ordinary state-space system (A, B, C, D).

The nodal equations with the source and load attached are a descriptor system
(G + sC) v = (b0 + s·b1) u, y = e_out·v. A source that feeds the input through a
capacitance (or an ideal source, Rs = 0, whose node is then fixed) gives b1 ≠ 0;
the shift v = w + m·u with C·m = b1 removes that derivative. The algebraic part
(the null space of C: nodes without capacitance, floating capacitor groups) is
eliminated exactly by a Schur complement, leaving x' = A x + B u, y = C x + D u.
The poles of A are the finite generalized eigenvalues of (G, −C): the same roots
as `polezero`, and the frequency response is the AC analysis' gain.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # pragma: no cover - typing only
    from stagesynth.engine.ac import AcSystem

_RANK_TOL = 1e-11  # singular values of the scaled C below this (relative) count as zero


@dataclass(frozen=True)
class StateSpaceMatrices:
    """x' = A x + B u, y = C x + D u: A in rad/s, u the source EMF, y the load voltage."""

    A: np.ndarray  # (n, n)
    B: np.ndarray  # (n, 1)
    C: np.ndarray  # (1, n)
    D: np.ndarray  # (1, 1)

    def to_dict(self) -> dict:
        return {"A": self.A.tolist(), "B": self.B.tolist(), "C": self.C.tolist(),
                "D": self.D.tolist()}


def loaded_descriptor(
    system: AcSystem, member: int = 0
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(G, C, b0, b1, e_out) of one member with source and load stamped in.

    The source is the EMF behind its resistance (and its series capacitance when the
    system carries one); an ideal source (Rs = 0, no capacitance) fixes the input
    node, whose column then moves to the right-hand side.
    """
    c = system.circuit
    n = c.n
    g = system.G[member].astype(float).copy()
    cap = system.C[member].astype(float).copy()
    g[c.output, c.output] += 1.0 / float(system.load_resistance[member])
    cap[c.output, c.output] += float(system.load_capacitance[member])
    rs = float(system.source_resistance[member])
    cs_arr = getattr(system, "source_capacitance", None)
    cs = float(cs_arr[member]) if cs_arr is not None else 0.0
    e_out = np.zeros(n)
    e_out[c.output] = 1.0
    if cs > 0 and np.isfinite(cs):
        # EMF -> Rs -> Cs -> input: one extra node x between Rs and Cs (or none if Rs = 0)
        if rs > 0:
            g2 = np.zeros((n + 1, n + 1))
            c2 = np.zeros((n + 1, n + 1))
            g2[:n, :n], c2[:n, :n] = g, cap
            x, i = n, c.input
            g2[x, x] += 1.0 / rs
            c2[x, x] += cs
            c2[i, i] += cs
            c2[x, i] -= cs
            c2[i, x] -= cs
            b0 = np.zeros(n + 1)
            b0[x] = 1.0 / rs
            return g2, c2, b0, np.zeros(n + 1), np.append(e_out, 0.0)
        cap[c.input, c.input] += cs
        b1 = np.zeros(n)
        b1[c.input] = cs
        return g, cap, np.zeros(n), b1, e_out
    if rs > 0:
        g[c.input, c.input] += 1.0 / rs
        b0 = np.zeros(n)
        b0[c.input] = 1.0 / rs
        return g, cap, b0, np.zeros(n), e_out
    keep = np.array([k for k in range(n) if k != c.input])
    return (g[np.ix_(keep, keep)], cap[np.ix_(keep, keep)], -g[keep, c.input],
            -cap[keep, c.input], e_out[keep])


def descriptor_to_state_space(
    g: np.ndarray, cap: np.ndarray, b0: np.ndarray, b1: np.ndarray, e_out: np.ndarray
) -> StateSpaceMatrices:
    """Reduce (G + sC) v = (b0 + s b1) u, y = e_out·v to a proper state space.

    Index-1 reduction: C is scaled to unit diagonal (Jacobi), split by its SVD into
    dynamic and algebraic coordinates, the algebraic ones solved out (Schur complement).
    Raises ValueError where the gain is not proper (a derivative feedthrough).
    """
    n = g.shape[0]
    d_shift = 0.0
    b = b0.astype(float).copy()
    if np.any(b1 != 0):
        m, *_ = np.linalg.lstsq(cap, b1, rcond=None)
        if not np.allclose(cap @ m, b1, rtol=1e-9, atol=1e-12 * np.abs(b1).max()):
            raise ValueError("the gain is not proper: the source reaches a node with no "
                             "capacitance through a capacitor alone")
        b = b - g @ m
        d_shift = float(e_out @ m)
    diag = np.abs(np.diag(cap))
    scale = np.where(diag > 0, 1.0 / np.sqrt(np.where(diag > 0, diag, 1.0)), 1.0)
    gs = scale[:, None] * g * scale[None, :]
    cs = scale[:, None] * cap * scale[None, :]
    bs = scale * b
    es = e_out * scale
    u, sv, vt = np.linalg.svd(cs)
    r = int(np.sum(sv > _RANK_TOL * (sv[0] if sv.size and sv[0] > 0 else 1.0)))
    v = vt.T
    at, bt, ct = u.T @ gs @ v, u.T @ bs, es @ v
    a11, a12, a21, a22 = at[:r, :r], at[:r, r:], at[r:, :r], at[r:, r:]
    if r < n:
        if np.linalg.cond(a22) > 1e14:
            raise ValueError("the nodal equations are singular (a node without any path "
                             "for DC or AC current)")
        k = np.linalg.solve(a22, a21)
        kb = np.linalg.solve(a22, bt[r:])
    else:
        k, kb = np.zeros((0, r)), np.zeros(0)
    root = np.sqrt(sv[:r])  # x = Sigma^-1/2 xi keeps A well scaled
    a_red = a11 - a12 @ k
    a_ss = -(a_red / root[:, None]) / root[None, :]
    b_ss = (bt[:r] - a12 @ kb) / root
    c_ss = (ct[:r] - ct[r:] @ k) / root
    d_ss = float(ct[r:] @ kb) + d_shift
    if r:  # diagonal balancing (exact powers of two): better conditioned eigenvalues
        from scipy.linalg import matrix_balance

        a_ss, t = matrix_balance(a_ss, permute=False, separate=True)
        sc = t[0]
        b_ss, c_ss = b_ss / sc, c_ss * sc
    return StateSpaceMatrices(a_ss, b_ss[:, None], c_ss[None, :], np.array([[d_ss]]))


def state_space(system: AcSystem, member: int = 0) -> StateSpaceMatrices:
    """The gain of one member of a linearized stage as state-space matrices."""
    return descriptor_to_state_space(*loaded_descriptor(system, member))
