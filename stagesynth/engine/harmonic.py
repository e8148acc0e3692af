"""Periodic steady state under a sine drive by harmonic balance (contract section 2, "Distortion").

The large-signal circuit: the DC device law on instantaneous values (forward active,
IC = IS·exp(VBE'/VT)·(1 + VCE/VA), IB = IC/hFE) with IS, VT and hFE frozen at each
member's DC junction temperature; rx, Cπ and Cμ linear at the operating point; every
capacitor linear; the source EMF behind its resistance, the load R‖C attached.
The linear network is reduced per harmonic to the transistor terminals (a Schur
complement of the nodal matrix G + jkωC); the transistor currents are evaluated on
time samples and brought back by a discrete Fourier transform; Newton's Jacobian is
assembled from the conductance waveforms. Harmonic 0 of every capacitor current is
zero, so coupling and bypass capacitors take their own DC shift under drive.
Batched over members (nominal, corners, levels): one dense solve per Newton step.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from stagesynth.contracts.device import hybrid_pi, saturation_current, thermal_voltage
from stagesynth.engine.circuit import Circuit
from stagesynth.engine.dc import DcBatch, node_gmin

RS_MIN = 1e-3  # ohm: an ideal source (Rs = 0) is taken as this, 1e-6 of any real input
H_START = 16  # first harmonic count; doubled until the spectrum's tail is negligible
H_MAX = 128
TAIL_REL = 1e-3  # the tail (top quarter of harmonics) below this share of the distortion
STEP_LIMIT = 0.1  # V: largest rise of any junction voltage sample in one Newton step
_MAX_EXP_ARG = 60.0
VTOL = 1e-10  # V: Newton has converged when no harmonic moves by more than this


def _limexp(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """exp(x) continued linearly above _MAX_EXP_ARG: (value, derivative)."""
    xc = np.minimum(x, _MAX_EXP_ARG)
    ex = np.exp(xc)
    return np.where(x > _MAX_EXP_ARG, ex * (1.0 + x - _MAX_EXP_ARG), ex), ex


def _transforms(h: int) -> tuple[np.ndarray, np.ndarray, int]:
    """(Γ, Φ, N): spectrum -> time samples Φ (N, 2H+1) and back Γ (2H+1, N).

    Real layout of one waveform's spectrum: [Re V0, Re V1, Im V1, ..., Re VH, Im VH],
    v(t) = Re Σ V_k e^{jkωt}. N = 4H samples keep aliasing of the products far below
    the harmonics kept.
    """
    n = 4 * h
    wt = 2.0 * math.pi * np.arange(n) / n
    k = np.arange(1, h + 1)
    phi = np.empty((n, 2 * h + 1))
    phi[:, 0] = 1.0
    phi[:, 1::2] = np.cos(np.outer(wt, k))
    phi[:, 2::2] = -np.sin(np.outer(wt, k))
    gamma = np.empty((2 * h + 1, n))
    gamma[0] = 1.0 / n
    gamma[1::2] = 2.0 / n * np.cos(np.outer(k, wt))
    gamma[2::2] = -2.0 / n * np.sin(np.outer(k, wt))
    return gamma, phi, n


def to_complex(x: np.ndarray) -> np.ndarray:
    """Real layout (..., 2H+1) -> complex phasors (..., H+1)."""
    out = np.empty((*x.shape[:-1], (x.shape[-1] + 1) // 2), dtype=complex)
    out[..., 0] = x[..., 0]
    out[..., 1:] = x[..., 1::2] + 1j * x[..., 2::2]
    return out


def _resize(x: np.ndarray, h: int) -> np.ndarray:
    """A real-layout spectrum cut or zero-padded to H harmonics."""
    out = np.zeros((*x.shape[:-1], 2 * h + 1))
    m = min(x.shape[-1], 2 * h + 1)
    out[..., :m] = x[..., :m]
    return out


@dataclass(frozen=True)
class Periodic:
    """Periodic steady state of B members: phasors (peak) at the load and the ports."""

    freq: np.ndarray  # (B,) Hz
    emf: np.ndarray  # (B,) peak EMF amplitude
    load: np.ndarray  # (B, H+1) complex phasors at the load, harmonic 0 = DC
    ports: np.ndarray  # (B, P, 2H+1) real layout at the transistor terminals
    converged: np.ndarray  # (B,) bool: Newton converged and the spectrum's tail is small
    harmonics: int  # harmonic count H used
    model: LargeSignal = field(repr=False)

    def ratio(self, k: int) -> np.ndarray:
        """|V_k| / |V_1| at the load, (B,)."""
        v1 = np.maximum(np.abs(self.load[:, 1]), 1e-300)
        return np.abs(self.load[:, k]) / v1 if k <= self.harmonics else np.zeros(len(v1))

    @property
    def thd(self) -> np.ndarray:
        """sqrt(Σ_{k=2..10} V_k²) / V_1 at the load, (B,)."""
        top = min(10, self.harmonics)
        v = np.abs(self.load[:, 2:top + 1])
        return np.sqrt(np.sum(v * v, axis=1)) / np.maximum(np.abs(self.load[:, 1]), 1e-300)

    @property
    def hd2(self) -> np.ndarray:
        return self.ratio(2)

    @property
    def hd3(self) -> np.ndarray:
        return self.ratio(3)

    @property
    def amplitude(self) -> np.ndarray:
        """Peak of the fundamental at the load, (B,)."""
        return np.abs(self.load[:, 1])

    def load_waveform(self, samples: int = 256) -> tuple[np.ndarray, np.ndarray]:
        """(phase in periods (S,), load voltage (B, S)) over one period, DC included."""
        t = np.arange(samples) / samples
        k = np.arange(self.load.shape[1])
        e = np.exp(2j * math.pi * np.outer(k, t))
        return t, np.real(self.load @ e)

    def transistor_waveforms(self, samples: int = 256) -> dict[str, np.ndarray]:
        """ic(t), vce(t) and vbe(t), each (B, nQ, S), polarity-normalized, over one period."""
        h = self.harmonics
        t = 2.0 * math.pi * np.arange(samples) / samples
        k = np.arange(1, h + 1)
        phi = np.empty((samples, 2 * h + 1))
        phi[:, 0] = 1.0
        phi[:, 1::2] = np.cos(np.outer(t, k))
        phi[:, 2::2] = -np.sin(np.outer(t, k))
        v = np.einsum("bph,nh->bpn", self.ports, phi)
        ic, _, vbe, vce = self.model.device_currents(v)[:4]
        return {"ic": ic, "vbe": vbe, "vce": vce}


class LargeSignal:
    """The large-signal circuit around B operating points: linear network + device laws."""

    def __init__(
        self,
        circuit: Circuit,
        dc: DcBatch,
        r_values: np.ndarray,
        c_values: np.ndarray,
        source_resistance: np.ndarray | float,
        load_resistance: np.ndarray | float,
        load_capacitance: np.ndarray | float,
        source_capacitance: np.ndarray | float = 0.0,
    ) -> None:
        b = dc.v.shape[0]
        n = circuit.n
        self.circuit = circuit
        self.B = b
        bc = lambda x: np.broadcast_to(np.asarray(x, dtype=float), (b,)).copy()  # noqa: E731
        r_values = np.asarray(r_values, dtype=float).reshape(b, -1)
        c_values = np.asarray(c_values, dtype=float).reshape(b, -1)
        ar = circuit.incidence(circuit.resistors)
        acap = circuit.incidence(circuit.capacitors)
        g = np.einsum("ik,bk,jk->bij", ar, 1.0 / r_values, ar)
        c = np.einsum("ik,bk,jk->bij", acap, c_values, acap)
        nq = len(circuit.bjts)
        self.nb = nq
        self.is_ = np.empty((b, nq))
        self.vt = np.asarray(thermal_voltage(dc.tj[:, :nq]), dtype=float).reshape(b, nq)
        # junction FETs after the bipolar columns: no base current (hFE infinite)
        self.hfe = np.concatenate([np.asarray(dc.hfe[:, :nq], dtype=float).reshape(b, nq),
                                   np.full((b, len(circuit.jfets)), np.inf)], axis=1)
        self.va = np.array([q.device.early_voltage for q in circuit.bjts])
        self.sign = np.array([q.device.sign for q in circuit.transistors], dtype=float)
        for k, q in enumerate(circuit.bjts):
            self.is_[:, k] = saturation_current(q.device, dc.tj[:, k])
            hp = hybrid_pi(q.device, dc.ic[:, k], dc.vce[:, k], dc.hfe[:, k], dc.tj[:, k])
            if q.bi != q.b:
                _stamp(g, q.b, q.bi, 1.0 / q.device.r_bb)
            _stamp(c, q.bi, q.e, hp.c_pi)
            _stamp(c, q.bi, q.c, hp.c_mu)
        from stagesynth.engine import jfet_hb

        self.__dict__.update(jfet_hb.setup(circuit, dc, c))
        out, inp = circuit.output, circuit.input
        g[:, out, out] += 1.0 / bc(load_resistance)
        c[:, out, out] += bc(load_capacitance)
        self.gs = 1.0 / np.maximum(bc(source_resistance), RS_MIN)
        # a source capacitance in series with the EMF (contract): the source branch is
        # then Rs + 1/(jkwCs) at harmonic k >= 1 and open at DC (added per harmonic)
        self.cs_src = bc(source_capacitance)
        g[:, inp, inp] += np.where(self.cs_src > 0, 0.0, self.gs)
        idx = np.arange(n)
        g[:, idx, idx] += node_gmin(circuit)
        self.G = g[:, :n, :n]
        self.C = c[:, :n, :n]
        self.vcc = dc.v[:, circuit.supply].copy()
        self.j_supply = -g[:, :n, circuit.supply] * self.vcc[:, None]  # (B, n) at DC
        ports = sorted({t for q in circuit.transistors for t in (q.c, q.bi, q.e) if t < n})
        self.ports = np.array(ports, dtype=int)
        self.rest = np.array([i for i in range(n) if i not in ports], dtype=int)
        self.P = len(ports)
        pos = {node: i for i, node in enumerate(ports)}
        # terminal -> port index, or -1 ground / -2 supply (fixed waveforms)
        def where(node: int) -> int:
            return pos.get(node, -1 if node == circuit.ground else -2)
        self.term = np.array([[where(q.c), where(q.bi), where(q.e)]
                              for q in circuit.transistors], dtype=int).reshape(-1, 3)
        self.dc_ports = dc.v[:, self.ports].copy()

    def subset(self, idx: np.ndarray) -> LargeSignal:
        """Members `idx` as a smaller batch (shares the circuit)."""
        new = object.__new__(LargeSignal)
        new.__dict__.update(self.__dict__)
        for name in ("is_", "vt", "hfe", "gs", "cs_src", "G", "C", "vcc", "j_supply",
                     "dc_ports",
                     "j_idss", "j_vp", "j_leak"):
            setattr(new, name, getattr(self, name)[idx])
        new.B = len(idx)
        return new

    # -- the linear part, reduced to the ports ------------------------------------
    def reduce(self, freq: np.ndarray, h: int) -> dict[str, np.ndarray]:
        """Per harmonic 0..H: port admittance, port sources and the load row."""
        w = 2.0 * math.pi * np.asarray(freq, dtype=float).reshape(self.B)
        kw = w[:, None] * np.arange(h + 1)[None, :]
        y = self.G[:, None] + 1j * kw[:, :, None, None] * self.C[:, None]  # (B, H+1, n, n)
        p, r = self.ports, self.rest
        j_emf = np.zeros((self.B, self.G.shape[1]), dtype=complex)
        inp = self.circuit.input
        j_emf[:, inp] = self.gs
        if np.any(self.cs_src > 0):
            cs = self.cs_src[:, None]
            with np.errstate(divide="ignore", invalid="ignore"):
                ys = np.where((cs > 0) & (kw > 0), 1.0 / (1.0 / self.gs[:, None] + 1.0 / (
                    1j * np.where(kw > 0, kw, 1.0) * np.where(cs > 0, cs, 1.0))), 0.0)
            y[:, :, inp, inp] += np.where(cs > 0, ys, 0.0)
            j_emf[:, inp] = np.where(self.cs_src > 0, ys[:, 1], self.gs)
        y_pp = y[:, :, p[:, None], p[None, :]]
        if r.size:
            y_pr = y[:, :, p[:, None], r[None, :]]
            y_rp = y[:, :, r[:, None], p[None, :]]
            y_rr = y[:, :, r[:, None], r[None, :]]
            rhs = np.concatenate([
                y_rp,
                np.broadcast_to(self.j_supply[:, None, r, None], (*y_rp.shape[:3], 1)),
                np.broadcast_to(j_emf[:, None, r, None], (*y_rp.shape[:3], 1)),
            ], axis=3)
            s = np.linalg.solve(y_rr, rhs)  # (B, H+1, nR, P+2)
            yred = y_pp - y_pr @ s[..., :self.P]
            jsup = self.j_supply[:, p] - (y_pr[:, 0] @ s[:, 0, :, self.P, None])[..., 0]
            jemf = j_emf[:, p] - (y_pr[:, 1] @ s[:, 1, :, self.P + 1, None])[..., 0]
        else:
            s = np.zeros((self.B, h + 1, 0, self.P + 2), dtype=complex)
            yred, jsup, jemf = y_pp, self.j_supply[:, p], j_emf[:, p]
        out = self.circuit.output
        if out in set(self.ports.tolist()):
            out_row = np.zeros((self.B, h + 1, self.P + 2), dtype=complex)
            out_row[:, :, int(np.flatnonzero(self.ports == out)[0])] = -1.0  # V_out = V_p
        else:
            out_row = s[:, :, int(np.flatnonzero(r == out)[0]), :]
        return {"yred": yred, "jsup": jsup.real, "jemf": jemf, "out": out_row}

    # -- the device law on instantaneous values -----------------------------------
    def device_currents(self, v: np.ndarray):
        """From port waveforms v (B, P, N): ic, ib, vbe, vce, gm, go (each (B, nQ, N))."""
        b, _, n = v.shape
        fixed = {-1: np.zeros((b, n)), -2: np.repeat(self.vcc[:, None], n, axis=1)}
        def node(t: int) -> np.ndarray:
            return v[:, t] if t >= 0 else fixed[t]
        vc = np.stack([node(t) for t in self.term[:, 0]], axis=1)
        vb = np.stack([node(t) for t in self.term[:, 1]], axis=1)
        ve = np.stack([node(t) for t in self.term[:, 2]], axis=1)
        s = self.sign[None, :, None]
        vbe = s * (vb - ve)
        vce = s * (vc - ve)
        nb = self.nb
        vt = self.vt[:, :, None]
        ex, dex = _limexp(vbe[:, :nb] / vt)
        early = 1.0 + vce[:, :nb] / self.va[None, :, None]
        i0 = self.is_[:, :, None]
        ic = i0 * ex * early
        gm = i0 * dex / vt * early
        go = i0 * ex / self.va[None, :, None]
        ib = ic / self.hfe[:, :nb, None]
        if self.term.shape[0] > nb:  # junction FETs: the drain law, gate leakage
            from stagesynth.engine.jfet_hb import currents

            i_d, ig, gm_j, gds_j = currents(self, vbe[:, nb:], vce[:, nb:])
            ic, ib = np.concatenate([ic, i_d], 1), np.concatenate([ib, ig], 1)
            gm, go = np.concatenate([gm, gm_j], 1), np.concatenate([go, gds_j], 1)
        return ic, ib, vbe, vce, gm, go

    # -- Newton ---------------------------------------------------------------------
    def _system(self, red, h):
        """The reduced linear network in the real layout: (B, D, D), D = P(2H+1)."""
        y = red["yred"]
        lin = np.zeros((self.B, self.P, 2 * h + 1, self.P, 2 * h + 1))
        lin[:, :, 0, :, 0] = y[:, 0].real
        for k in range(1, h + 1):
            re, im = 2 * k - 1, 2 * k
            lin[:, :, re, :, re] = lin[:, :, im, :, im] = y[:, k].real
            lin[:, :, re, :, im] = -y[:, k].imag
            lin[:, :, im, :, re] = y[:, k].imag
        d = self.P * (2 * h + 1)
        return lin.reshape(self.B, d, d)

    def _source(self, red, emf: np.ndarray, h: int) -> np.ndarray:
        j = np.zeros((self.B, self.P, 2 * h + 1))
        j[:, :, 0] = red["jsup"]
        j[:, :, 1] = (red["jemf"] * emf[:, None]).real
        j[:, :, 2] = (red["jemf"] * emf[:, None]).imag
        return j

    def newton(self, red, lin, x, emf, h, max_iter: int = 60, target=None):
        """Damped Newton at EMF amplitudes emf (B,) from x (B, P, 2H+1): (x, converged, emf).

        With `target` (B,) the EMF is an unknown too, bordered by the equation
        |V_load,1| = target: one Newton solve finds the drive and the waveform together.
        """
        gamma, phi, _ = _transforms(h)
        nq = self.term.shape[0]
        d = self.P * (2 * h + 1)
        unit = self._source(red, np.ones(self.B), h)
        unit[:, :, 0] = 0.0  # the EMF's own columns (harmonic 1 only)
        sup = self._source(red, np.zeros(self.B), h)
        x = x.copy()
        emf = np.asarray(emf, dtype=float).copy()
        conv = np.zeros(self.B, dtype=bool)
        s = self.sign
        border = target is not None
        row = red["out"][:, 1]  # (B, P+2): the load's fundamental from the ports
        for _ in range(max_iter):
            todo = np.flatnonzero(~conv)
            if todo.size == 0:
                break
            b = todo.size
            xs = x[todo]
            v = xs @ phi.T  # (b, P, N)
            sub = self if b == self.B else self.subset(todo)
            ic, ib, _, _, gm, go = sub.device_currents(v)
            inj = np.zeros_like(v)
            jac = lin[todo].reshape(b, self.P, 2 * h + 1, self.P, 2 * h + 1).copy()
            hf = sub.hfe[:, :, None]
            mgm = (gamma * gm[:, :, None, :]) @ phi  # Γ·diag(gm(t))·Φ per transistor
            mgo = (gamma * go[:, :, None, :]) @ phi
            for q in range(nq):
                tc, tb, te = self.term[q]
                cur = (ic[:, q], ib[:, q], -(ic[:, q] + ib[:, q]))
                scale = (np.ones(b), 1.0 / hf[:, q, 0], -(1.0 + 1.0 / hf[:, q, 0]))
                for t, i_t, sc in zip((tc, tb, te), cur, scale, strict=True):
                    if t < 0:
                        continue
                    inj[:, t] += s[q] * i_t
                    a = sc[:, None, None]
                    if tb >= 0:
                        jac[:, t, :, tb] += a * mgm[:, q]
                    if te >= 0:
                        jac[:, t, :, te] -= a * (mgm[:, q] + mgo[:, q])
                    if tc >= 0:
                        jac[:, t, :, tc] += a * mgo[:, q]
            e = emf[todo]
            f = np.einsum("bij,bj->bi", lin[todo], xs.reshape(b, d)) + (
                inj @ gamma.T).reshape(b, d) - (sup[todo] + unit[todo] * e[:, None, None]
                                               ).reshape(b, d)
            jac = jac.reshape(b, d, d)
            if border:
                r = row[todo]
                v1 = -np.einsum("bp,bp->b", r[:, :self.P], xs[:, :, 1] + 1j * xs[:, :, 2]) + (
                    r[:, self.P + 1] * e)
                amp = target[todo]
                big = np.zeros((b, d + 1, d + 1))
                big[:, :d, :d] = jac
                big[:, :d, d] = -unit[todo].reshape(b, d)
                g_re = np.zeros((b, self.P, 2 * h + 1))
                g_re[:, :, 1] = np.real(np.conj(v1)[:, None] * -r[:, :self.P])
                g_re[:, :, 2] = np.real(np.conj(v1)[:, None] * -1j * r[:, :self.P])
                big[:, d, :d] = g_re.reshape(b, d) / amp[:, None]
                big[:, d, d] = np.real(np.conj(v1) * r[:, self.P + 1]) / amp
                f = np.concatenate([f, ((np.abs(v1) ** 2 - amp**2) / (2 * amp))[:, None]], 1)
                jac = big
            try:
                dx = -np.linalg.solve(jac, f[..., None])[..., 0]
            except np.linalg.LinAlgError:
                dx = -np.einsum("bij,bj->bi", np.linalg.pinv(jac), f)
            de = dx[:, d] if border else np.zeros(b)
            dx = dx[:, :d].reshape(b, self.P, 2 * h + 1)
            # junction limiting: no sample of any VBE rises by more than STEP_LIMIT
            dv = dx @ phi.T
            zero = np.zeros_like(dv[:, 0])
            rise = np.zeros(b)
            for q in range(nq):
                _, tb, te = self.term[q]
                db = dv[:, tb] if tb >= 0 else zero
                dee = dv[:, te] if te >= 0 else zero
                rise = np.maximum(rise, np.max(s[q] * (db - dee), axis=1))
            alpha = np.minimum(1.0, STEP_LIMIT / np.maximum(rise, 1e-30))
            step = alpha[:, None, None] * dx
            bad = ~(np.all(np.isfinite(step), axis=(1, 2)) & np.isfinite(de))
            step[bad] = 0.0
            x[todo] = xs + step
            if border:
                emf[todo] = np.where(bad, e, np.clip(e + alpha * de, 0.5 * e, 2.0 * e))
            done = (alpha >= 1.0) & (np.max(np.abs(step), axis=(1, 2)) < VTOL + 1e-9 * np.max(
                np.abs(xs[:, :, 1:]), axis=(1, 2))) & ~bad
            if border:
                done &= np.abs(f[:, d]) < 1e-9 * target[todo]
            conv[todo[done]] = True
        return x, conv, emf

    def linear_gain(self, red, h: int) -> tuple[np.ndarray, np.ndarray]:
        """(|V_load,1| per volt of EMF, port response per volt (B, P, 2H+1)) with every
        transistor at its tangent: one Newton step from the operating point."""
        x0 = self.start(h)
        tiny = np.full(self.B, 1e-6)
        x1, _, _ = self.newton(red, self._system(red, h), x0, tiny, h, max_iter=1)
        return np.abs(self.load_phasors(red, x1, tiny)[:, 1]) / 1e-6, (x1 - x0) / 1e-6

    def start(self, h: int) -> np.ndarray:
        x = np.zeros((self.B, self.P, 2 * h + 1))
        x[:, :, 0] = self.dc_ports
        return x

    def load_phasors(self, red, x: np.ndarray, emf: np.ndarray) -> np.ndarray:
        """Phasors at the load (B, H+1) from port solution x."""
        vp = to_complex(x)  # (B, P, H+1)
        row = red["out"]  # (B, H+1, P+2)
        v = -np.einsum("bkp,bpk->bk", row[..., :self.P], vp)
        v[:, 0] += row[:, 0, self.P].real
        v[:, 1] += row[:, 1, self.P + 1] * emf
        return v


def _stamp(m: np.ndarray, i: int, j: int, y) -> None:
    m[:, i, i] += y
    m[:, j, j] += y
    m[:, i, j] -= y
    m[:, j, i] -= y


def solve_periodic(
    model: LargeSignal,
    freq: np.ndarray | float,
    *,
    level: np.ndarray | float | None = None,
    emf: np.ndarray | float | None = None,
    harmonics: int = H_START,
    h_max: int = H_MAX,
) -> Periodic:
    """Steady state at a peak output `level` (V, fundamental at the load) or a given `emf`.

    `level`: the EMF is found by a secant search on |V_load,1| (to 1e-6 relative).
    Robustness: each solve starts from the nearest solved drive; a member whose Newton
    fails is retried by source stepping from the operating point. The harmonic count
    starts at `harmonics` and doubles (to `h_max`) until the top quarter of the load
    spectrum is below TAIL_REL of the distortion (the convergence test).
    """
    from stagesynth.engine.hbsolve import _secant, _stepped

    b = model.B
    freq = np.broadcast_to(np.asarray(freq, dtype=float), (b,)).copy()
    h = harmonics
    x = model.start(h)
    while True:
        red = model.reduce(freq, h)
        lin = model._system(red, h)
        if level is not None:
            target = np.broadcast_to(np.asarray(level, dtype=float), (b,)).copy()
            e, x, conv = _secant(model, red, lin, x, target, h)
        else:
            e = np.broadcast_to(np.asarray(emf, dtype=float), (b,)).copy()
            x, conv = _stepped(model, red, lin, x, e, h)
        load = model.load_phasors(red, x, e)
        mag = np.abs(load)
        top = int(0.75 * h)
        tail = np.sqrt(np.sum(mag[:, top + 1:] ** 2, axis=1))
        dist = np.sqrt(np.sum(mag[:, 2:min(10, h) + 1] ** 2, axis=1))
        ok_tail = tail <= TAIL_REL * dist + 1e-12 * mag[:, 1]
        if np.all(ok_tail | ~conv) or 2 * h > h_max:
            return Periodic(freq, e, load, x, conv & ok_tail, h, model)
        x = _resize(x, 2 * h)
        h *= 2
