"""Independent distortion figures of JFET designs (contract §2 "Distortion").

From the contract text alone: the periodic steady state of the large-signal circuit, the DC
laws applied to instantaneous values (the JFET's square law, the bipolar transistor forward
active), device capacitances, rx and every capacitor linear, Tj and the gate leakage held at
their DC values; the EMF a sine at thd_at whose amplitude gives a fundamental of thd_level
peak to peak at the load; THD = sqrt(sum V_k^2, k = 2..10)/V_1. Formulation: time-domain
collocation (node voltages at N instants of one period, exact spectral derivative for the
capacitor currents so that each capacitor takes its own DC shift), Newton on the whole
system, the EMF amplitude by the secant rule. Operating points from refjfet.py.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from stagesynth.quantities.errors import ConvergenceError

from . import refjfet as rj
from . import refmodel as rm
from .refjfetac import SRC

SAMPLES = 32  # harmonics up to 15


@dataclass(frozen=True)
class Distortion:
    """THD, HD2, HD3 at the load and the EMF amplitude that gave the level."""

    thd: float
    hd2: float
    hd3: float
    emf: float


def _law(idss: float, vp: float, va: float, vgs: np.ndarray, vds: np.ndarray
         ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """refjfet.drain_law over arrays of instants (VDS >= 0 in a working stage)."""
    out = [rj.drain_law(idss, vp, va, float(a), float(b)) for a, b in zip(vgs, vds, strict=True)]
    return tuple(np.array(x) for x in zip(*out, strict=True))  # type: ignore[return-value]


class _Network:
    """Linear matrices over every non-ground node and the transistors' large-signal data."""

    def __init__(self, cir: rj.Circuit, op: rj.OperatingPoint) -> None:
        self.cir, self.op = cir, op
        self.src = SRC if cir.source_capacitance > 0 else cir.input
        names = sorted({n for n in op.voltages if n != cir.ground} | {cir.supply_node, self.src})
        self.idx = {n: i for i, n in enumerate(names)}
        n = len(names)
        self.g, self.c = np.zeros((n, n)), np.zeros((n, n))
        for _, a, b, r in cir.resistors:
            self.two(self.g, a, b, 1.0 / r)
        for _, a, b, cv in cir.capacitors:
            self.two(self.c, a, b, cv)
        self.two(self.g, cir.output, cir.ground, 1.0 / cir.load_resistance)
        self.two(self.c, cir.output, cir.ground, cir.load_capacitance)
        if cir.source_resistance > 0:
            self.two(self.g, self.src, cir.ground, 1.0 / cir.source_resistance)
        if cir.source_capacitance > 0:
            self.two(self.c, self.src, cir.input, cir.source_capacitance)
        dc = rj.DcSystem(cir, op.conditions)
        for a, b, y in [(a, b, y) for a, b, y in self._gmin(dc)]:
            self.two(self.g, a, b, y)
        for j in cir.jfets:
            self.two(self.c, j.g, j.s, op.jfets[j.ref].c_gs)
            self.two(self.c, j.g, j.d, op.jfets[j.ref].c_gd)
        for q in cir.bjts:
            d, t = cir.bdevices[q.device], op.bjts[q.ref]
            bi = rm.internal_base(q, d)
            if d.r_bb > 0:
                self.two(self.g, q.b, bi, 1.0 / d.r_bb)
            self.two(self.c, bi, q.e, t.cpi)
            self.two(self.c, bi, q.c, t.cmu)
        self.fixed = [cir.supply_node] + ([self.src] if cir.source_resistance <= 0 else [])
        self.free = [i for k, i in self.idx.items() if k not in self.fixed]

    @staticmethod
    def _gmin(dc: rj.DcSystem) -> list[tuple[str, str, float]]:
        """The DC solution's tiny conductances at nodes fed only by capacitors."""
        out = []
        for n in dc.nodes:
            i = dc.idx[n]
            if n not in dc.fixed and abs(dc.g[i, i] - rm.GMIN) < 1e-15 * max(1.0, dc.g[i, i]):
                out.append((n, dc.cir.ground, rm.GMIN))
        return out

    def two(self, m: np.ndarray, a: str, b: str, y: float) -> None:
        for r, sr in ((a, 1.0), (b, -1.0)):
            for c, sc in ((a, 1.0), (b, -1.0)):
                if r in self.idx and c in self.idx:
                    m[self.idx[r], self.idx[c]] += sr * sc * y

    def waves(self, x: np.ndarray, emf: np.ndarray) -> np.ndarray:
        """All node waveforms (n, N) from the unknown ones and the drive."""
        v = np.zeros((len(self.idx), emf.size))
        v[self.free] = x.reshape(len(self.free), emf.size)
        v[self.idx[self.cir.supply_node]] = self.op.conditions.supply
        if self.cir.source_resistance <= 0:
            v[self.idx[self.src]] = emf
        return v

    def residual(self, x: np.ndarray, emf: np.ndarray, dmat: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray]:
        """KCL at every free node and instant, and its Jacobian."""
        ns = emf.size
        v = self.waves(x, emf)
        f = self.g @ v + self.c @ (v @ dmat.T)
        if self.cir.source_resistance > 0:
            f[self.idx[self.src]] -= emf / self.cir.source_resistance
        n = len(self.idx)
        jac = np.kron(self.g, np.eye(ns)) + np.kron(self.c, dmat)

        def add(row: str, col: str, vals: np.ndarray) -> None:
            if row in self.idx and col in self.idx:
                r, c = self.idx[row] * ns, self.idx[col] * ns
                jac[r + np.arange(ns), c + np.arange(ns)] += vals

        def at(node: str) -> np.ndarray:
            return v[self.idx[node]] if node in self.idx else np.zeros(ns)

        for j in self.cir.jfets:
            t, p = self.op.jfets[j.ref], self.cir.jdevices[j.device].sign
            va = self.cir.jdevices[j.device].early_voltage
            i, gm, gds = _law(t.idss, t.vp, va, p * (at(j.g) - at(j.s)), p * (at(j.d) - at(j.s)))
            for row, sr in ((j.d, 1.0), (j.s, -1.0)):
                if row in self.idx:
                    f[self.idx[row]] += sr * p * i
                for col, dv in ((j.g, gm), (j.d, gds), (j.s, -gm - gds)):
                    add(row, col, sr * dv)
            for row, sr in ((j.g, -1.0), (j.s, 1.0)):  # gate leakage at its DC value
                if row in self.idx:
                    f[self.idx[row]] += sr * p * t.i_gss
        for q in self.cir.bjts:
            d, t = self.cir.bdevices[q.device], self.op.bjts[q.ref]
            bi, p = rm.internal_base(q, d), d.sign
            i_s = float(rm.saturation_current(d, t.tj))
            ex = np.exp(p * (at(bi) - at(q.e)) / t.vt)
            early = 1.0 + p * (at(q.c) - at(q.e)) / d.early_voltage
            ic = i_s * ex * early
            gm, go = ic / t.vt, i_s * ex / d.early_voltage
            for row, share in ((q.c, 1.0), (bi, 1.0 / t.hfe), (q.e, -(1.0 + 1.0 / t.hfe))):
                if row in self.idx:
                    f[self.idx[row]] += p * share * ic
                for col, dv in ((bi, gm), (q.c, go), (q.e, -gm - go)):
                    add(row, col, share * dv)
        keep = np.concatenate([i * ns + np.arange(ns) for i in self.free])
        del n
        return f[self.free].reshape(-1), jac[np.ix_(keep, keep)]


def _derivative(ns: int, freq: float) -> np.ndarray:
    """d/dt of a sampled periodic waveform, exact for the harmonics below Nyquist."""
    spec = np.fft.rfft(np.eye(ns), axis=0)
    mult = 2j * math.pi * freq * np.arange(spec.shape[0])
    mult[-1] = 0.0  # (even N) the Nyquist term has no defined derivative
    return np.fft.irfft(spec * mult[:, None], n=ns, axis=0)


def _newton(net: _Network, x: np.ndarray, emf: np.ndarray, dmat: np.ndarray) -> np.ndarray:
    """Newton with each step limited to 0.1 V at any node and instant, until a step moves
    nothing by 1 nV or, after a full step, KCL holds to 1 pA plus 1e-12 of the summed terms
    (the step test alone would chase rounding: at nodes fed only by capacitors, whose DC
    level hangs on the 1e-12 S of the DC solution, and behind huge bypass capacitors)."""
    full = False
    for _ in range(100):
        f, jac = net.residual(x, emf, dmat)
        dx = np.linalg.solve(jac, -f)
        big = float(np.max(np.abs(dx)))
        floor = 1e-12 + 1e-12 * (np.abs(jac) @ np.abs(x))  # rounding of the summed terms
        if big < 1e-9 or (full and np.all(np.abs(f) < floor)):
            return x + dx
        full = big <= 0.1
        x = x + dx * min(1.0, 0.1 / max(big, 1e-300))
    raise ConvergenceError("JFET reference periodic steady state did not converge")


def distortion(cir: rj.Circuit, op: rj.OperatingPoint, level_vpp: float, freq: float,
               samples: int = SAMPLES) -> Distortion:
    """THD, HD2, HD3 at the load for a fundamental of level_vpp at freq."""
    net = _Network(cir, op)
    dmat = _derivative(samples, freq)
    wt = 2.0 * math.pi * np.arange(samples) / samples
    names = sorted(net.idx, key=net.idx.get)
    vdc = np.array([op.voltages.get(k, 0.0) for k in names])
    x = np.repeat(vdc[net.free][:, None], samples, axis=1).reshape(-1)
    out = net.idx[cir.output]

    def run(amp: float, start: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        emf = amp * np.cos(wt)
        xs = _newton(net, start, emf, dmat)
        spec = np.fft.rfft(net.waves(xs, emf)[out]) / samples
        spec[1:] *= 2.0
        return xs, np.abs(spec)

    probe, target = 1e-4, level_vpp / 2.0
    x, mags = run(probe, x)
    emf = target / mags[1] * probe
    for frac in (0.5, 1.0):
        x, mags = run(emf * frac, x)
    e_prev, a_prev = emf * 0.5, None
    a = mags[1]
    _, m_half = run(e_prev, x)
    a_prev = m_half[1]
    for _ in range(40):
        if abs(a / target - 1.0) < 1e-10:
            break
        e_new = emf + (target - a) * (emf - e_prev) / (a - a_prev)
        e_prev, a_prev, emf = emf, a, e_new
        x, mags = run(emf, x)
        a = mags[1]
    return Distortion(float(np.sqrt(np.sum(mags[2:11] ** 2)) / mags[1]),
                      float(mags[2] / mags[1]), float(mags[3] / mags[1]), float(emf))
