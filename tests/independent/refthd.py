"""Independent reference for the contract's distortion figures (spec-format.md section 2).

Written from the contract text alone: "the periodic steady state of the large-signal
circuit: the DC equations applied to instantaneous values (forward active), rx, Cπ and
Cμ linear at their operating-point values, every capacitor linear, Tj held at its DC
value; the source EMF a sine at thd_at, its amplitude set so that the fundamental at
the load is thd_level peak to peak; THD = sqrt(Σ_{k=2..10} V_k²)/V_1".

Formulation (different from the engine's): time-domain collocation. The unknowns are
every node voltage at N equally spaced instants of one period; Kirchhoff's current
law holds at every instant, capacitor currents through the exact spectral derivative
of the sampled waveforms (so their mean is zero: each capacitor takes its own DC
shift). Newton on the full (nodes × instants) system with source stepping; the EMF
amplitude by the secant rule. Operating point and hybrid-pi values from refmodel.py.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from . import refmodel as rm

SAMPLES = 32  # harmonics up to 15: the products of the exponential alias far below 1e-6


@dataclass(frozen=True)
class RefDistortion:
    thd: float
    hd2: float
    hd3: float
    emf: float  # peak EMF amplitude that gives the level
    fundamental: float  # peak of the fundamental at the load


def _derivative_matrix(n: int, freq: float) -> np.ndarray:
    """d/dt of a sampled periodic waveform (harmonics below Nyquist), (N, N) real."""
    eye = np.eye(n)
    spec = np.fft.rfft(eye, axis=0)
    k = np.arange(spec.shape[0])
    mult = 2j * math.pi * freq * k
    if n % 2 == 0:
        mult[-1] = 0.0  # the Nyquist term has no defined derivative
    return np.fft.irfft(spec * mult[:, None], n=n, axis=0)


class _Network:
    """Nodal matrices and transistor data of one design at one operating point."""

    def __init__(self, cir: rm.Circuit, op: rm.OperatingPoint) -> None:
        self.cir = cir
        self.supply = op.conditions.supply  # the condition's supply, not the design's nominal
        fixed = {cir.ground, cir.supply_node}
        self.ideal_source = cir.source_resistance <= 0
        if self.ideal_source:
            fixed.add(cir.input)
        names = sorted(n for n in op.voltages if n not in fixed)
        self.idx = {n: i for i, n in enumerate(names)}
        n = len(names)
        self.g = np.zeros((n, n))
        self.c = np.zeros((n, n))
        self.j_dc = np.zeros(n)
        self.src_col = np.zeros(n)  # current into each node per volt at the input terminal
        self.src_dcol = np.zeros(n)  # ... per volt/second there (capacitors to a driven input)
        for _, a, b, r in cir.resistors:
            self._two(self.g, a, b, 1.0 / r, True)
        for _, a, b, cv in cir.capacitors:
            self._two(self.c, a, b, cv, False)
        self._two(self.g, cir.output, cir.ground, 1.0 / cir.load_resistance, True)
        self._two(self.c, cir.output, cir.ground, cir.load_capacitance, False)
        if not self.ideal_source:
            gs = 1.0 / cir.source_resistance
            self._two(self.g, cir.input, cir.ground, gs, True)
            self.src_col[self.idx[cir.input]] = gs
        self.q = []
        for b in cir.bjts:
            d = cir.devices[b.device]
            t = op.transistors[b.ref]
            bi = rm.internal_base(b, d)
            if d.r_bb > 0:
                self._two(self.g, b.b, bi, 1.0 / d.r_bb, True)
            self._two(self.c, bi, b.e, t.cpi, False)
            self._two(self.c, bi, b.c, t.cmu, False)
            self.q.append((d.sign, b.c, bi, b.e, float(rm.saturation_current(d, t.tj)), t.vt,
                           t.hfe, d.early_voltage))
        self.n = n

    def _two(self, m: np.ndarray, a: str, b: str, y: float, conductance: bool) -> None:
        for p, r, s in ((a, a, 1.0), (b, b, 1.0), (a, b, -1.0), (b, a, -1.0)):
            if p not in self.idx:
                continue
            if r in self.idx:
                m[self.idx[p], self.idx[r]] += s * y
            elif conductance and r == self.cir.supply_node:
                self.j_dc[self.idx[p]] -= s * y * self.supply
            elif r == self.cir.input and self.ideal_source:  # driven terminal
                col = self.src_col if conductance else self.src_dcol
                col[self.idx[p]] -= s * y

    def node_wave(self, v: np.ndarray, name: str, drive: np.ndarray) -> np.ndarray:
        """Waveform of one node: unknown, ground, supply or the driven input."""
        if name in self.idx:
            return v[self.idx[name]]
        if name == self.cir.supply_node:
            return np.full(v.shape[1], self.supply)
        if name == self.cir.input and self.ideal_source:
            return drive
        return np.zeros(v.shape[1])

    def residual(self, v: np.ndarray, drive: np.ndarray, dmat: np.ndarray):
        """KCL at every node and instant (n, N) and its Jacobian (nN, nN)."""
        n, ns = v.shape
        f = (self.g @ v + self.c @ (v @ dmat.T) - self.j_dc[:, None]
             - np.outer(self.src_col, drive) - np.outer(self.src_dcol, dmat @ drive))
        if getattr(self, "_lin", None) is None or self._lin.shape[0] != n * ns:
            self._lin = np.kron(self.g, np.eye(ns)) + np.kron(self.c, dmat)
        jac = self._lin.copy()
        for s, c, b, e, i_s, vt, hfe, va in self.q:
            vb, ve, vc = (self.node_wave(v, x, drive) for x in (b, e, c))
            vbe, vce = s * (vb - ve), s * (vc - ve)
            ex = np.exp(vbe / vt)
            ic = i_s * ex * (1.0 + vce / va)
            gm, go = ic / vt, i_s * ex / va
            for node, share in ((c, 1.0), (b, 1.0 / hfe), (e, -(1.0 + 1.0 / hfe))):
                if node not in self.idx:
                    continue
                r = self.idx[node]
                f[r] += s * share * ic
                for ctrl, dval in ((b, gm), (e, -(gm + go)), (c, go)):
                    if ctrl in self.idx:
                        k = self.idx[ctrl]
                        rows = r * ns + np.arange(ns)
                        cols = k * ns + np.arange(ns)
                        jac[rows, cols] += share * dval
        return f, jac


def _solve(net: _Network, v0: np.ndarray, drive: np.ndarray, dmat: np.ndarray) -> np.ndarray:
    """Newton with a limit on each step (0.1 V per node and instant)."""
    v = v0.copy()
    for _ in range(100):
        f, jac = net.residual(v, drive, dmat)
        dx = np.linalg.solve(jac, -f.reshape(-1)).reshape(v.shape)
        big = np.max(np.abs(dx))
        v = v + dx * min(1.0, 0.1 / max(big, 1e-300))
        if big < 1e-11:
            return v
    raise rm.ConvergenceError("periodic steady state did not converge")


def distortion(design: Mapping[str, Any], conditions: rm.Conditions, level_vpp: float,
               freq: float, samples: int = SAMPLES) -> RefDistortion:
    """THD, HD2, HD3 at the load for a fundamental of `level_vpp` at `freq` (contract §2)."""
    cir = rm.circuit_from_design(design)
    op = rm.solve_dc(cir, conditions)
    net = _Network(cir, op)
    dmat = _derivative_matrix(samples, freq)
    wt = 2.0 * math.pi * np.arange(samples) / samples
    names = sorted(net.idx, key=net.idx.get)
    v_dc = np.array([op.voltages[x] for x in names])
    out = net.idx.get(cir.output)

    def run(emf: float, start: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        v = _solve(net, start, emf * np.cos(wt), dmat)
        spec = np.fft.rfft(v[out]) / samples
        spec[1:] *= 2.0
        return v, spec

    # small-signal estimate of the EMF, then source stepping up to it
    probe = 1e-4
    v, spec = run(probe, np.repeat(v_dc[:, None], samples, axis=1))
    target = level_vpp / 2.0
    emf = target / abs(spec[1]) * probe
    for frac in (0.5, 1.0):
        v, spec = run(emf * frac, v)
    e_prev, a_prev = probe, abs(spec[1]) * 0 + target * probe / emf
    a = abs(spec[1])
    for _ in range(30):
        if abs(a / target - 1.0) < 1e-9:
            break
        e_new = emf + (target - a) * (emf - e_prev) / (a - a_prev)
        e_prev, a_prev = emf, a
        emf = e_new
        v, spec = run(emf, v)
        a = abs(spec[1])
    mags = np.abs(spec)
    return RefDistortion(
        thd=float(np.sqrt(np.sum(mags[2:11] ** 2)) / mags[1]),
        hd2=float(mags[2] / mags[1]),
        hd3=float(mags[3] / mags[1]),
        emf=float(emf),
        fundamental=float(mags[1]),
    )
