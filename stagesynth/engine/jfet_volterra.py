"""Junction FETs in the power-series estimate of the harmonics (volterra.py).

In saturation the drain current about the operating point is exactly
ID = K (vov + x)^2 (E0 + c/VA), K = IDSS/VP^2, vov = VGS - VP, E0 = 1 + VDS/VA, with
x = v_gs and c = v_ds the signal parts: a cubic polynomial, so the series in the drive
terminates (no exponential recurrence). With the drive's orders x = sum E^n x_n,
c = sum E^n c_n, the order-n current beyond the linear terms is
K E0 sum x_j x_(n-j) + (2 K vov/VA) sum x_j c_(n-j) + (K/VA) sum x_i x_j c_l
(indices from 1, summing to n), injected into the drain and out of the source.
"""

from __future__ import annotations

import numpy as np


class JfetSeries:
    """Order-by-order bookkeeping of the FETs' signal voltages and nonlinear currents."""

    def __init__(self, circuit, dc) -> None:
        nb = len(circuit.bjts)
        self.fets = circuit.jfets
        va = np.array([q.device.early_voltage for q in self.fets])[None, :, None]
        vgs = dc.vbe[:, nb:, None]
        vds = dc.vce[:, nb:, None]
        vp = dc.vp[:, :, None]
        vov = np.maximum(vgs - vp, 0.0)
        k = dc.idss[:, :, None] / (vp * vp)
        self.k2 = k * (1.0 + vds / va)  # x^2 coefficient
        self.kxc = 2.0 * k * vov / va  # x*c coefficient
        self.kxxc = k / va  # x^2*c coefficient
        self.sign = np.array([q.device.sign for q in self.fets], dtype=float)[None, :, None]
        self.d = np.array([q.d for q in self.fets], dtype=int)
        self.g = np.array([q.g for q in self.fets], dtype=int)
        self.s = np.array([q.s for q in self.fets], dtype=int)
        self.xs: list[np.ndarray | None] = [None]
        self.cs: list[np.ndarray | None] = [None]

    def record(self, w: np.ndarray) -> None:
        """Store order n's v_gs and v_ds samples (N frame) from node samples w (B, n+2, N)."""
        self.xs.append(self.sign * (w[:, self.g] - w[:, self.s]))
        self.cs.append(self.sign * (w[:, self.d] - w[:, self.s]))

    def current(self, n: int) -> np.ndarray:
        """The order-n nonlinear drain current samples, (B, nJ, N)."""
        xs, cs = self.xs, self.cs
        cur = self.k2 * sum(xs[j] * xs[n - j] for j in range(1, n))
        cur = cur + self.kxc * sum(xs[j] * cs[n - j] for j in range(1, n))
        for i in range(1, n - 1):
            for j in range(1, n - i):
                cur = cur + self.kxxc * xs[i] * xs[j] * cs[n - i - j]
        return cur

    def inject(self, n: int, basis: np.ndarray, ns: int, rhs: np.ndarray) -> None:
        """Add the order-n currents' harmonics to rhs (B, K, n+2) as node injections."""
        if not self.fets or n < 2:
            return
        spec = self.current(n) @ basis.conj().T / ns  # (B, nJ, K)
        spec[..., 1:] *= 2.0
        contrib = self.sign * spec
        for q in range(len(self.fets)):
            rhs[:, :, self.d[q]] -= contrib[:, q, :]
            rhs[:, :, self.s[q]] += contrib[:, q, :]
