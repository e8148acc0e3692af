"""Small-signal AC analysis: modified nodal analysis with the hybrid-pi model.

The stage's admittance matrix is Y(s) = G + s*C over the nodes other than ground
and supply (both AC ground). Sweeps are one batched `numpy.linalg.solve` over
(batch, frequency). The source (EMF behind its resistance) and the load (R || C)
are added per measurement: gain, input impedance, output impedance.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from stagesynth.contracts.device import hybrid_pi
from stagesynth.engine.circuit import Circuit
from stagesynth.engine.dc import DcBatch

_GRID_PER_DECADE = 6  # bracketing grid; false position then gives full precision
_ILLINOIS_STEPS = 30
_NOISE_FLOOR = 1e-7  # |log|H| - log target| below which a stalled refinement stops
DB3 = 10.0 ** (-3.0 / 20.0)  # the contract's "falls 3 dB": literally 3 dB


@dataclass(frozen=True)
class AcSystem:
    """Linearized stage for a batch of operating points: Y = G + jwC, (B, n, n).

    The matrices hold the parts and transistors only; source and load are kept
    apart so that each measurement can attach them as the contract says.
    """

    circuit: Circuit
    G: np.ndarray
    C: np.ndarray
    gm: np.ndarray  # (B, nQ) for the swing ratios
    r_o: np.ndarray  # (B, nQ)
    source_resistance: np.ndarray  # (B,)
    load_resistance: np.ndarray  # (B,)
    load_capacitance: np.ndarray  # (B,)
    source_capacitance: np.ndarray | None = None  # (B,) in series with the EMF; 0: none
    # the supply node's column of G and C (B, n): how ripple on the rail drives each node
    g_supply: np.ndarray | None = None
    c_supply: np.ndarray | None = None

    @property
    def batch(self) -> int:
        return self.G.shape[0]

    # -- matrices ------------------------------------------------------------
    def _y(self, freqs: np.ndarray, *, load: bool) -> np.ndarray:
        """Y(jw) for every batch member and frequency: (B, F, n, n)."""
        w = 2.0 * math.pi * np.asarray(freqs, dtype=float).reshape(self.batch, -1)
        # real and imaginary parts written in place: the same values as G + 1j*w*C without
        # the complex temporaries (this is the hot path of every sweep and corner search)
        b, n = self.G.shape[0], self.G.shape[1]
        y = np.empty((b, w.shape[1], n, n), dtype=complex)
        y.real[...] = self.G[:, None, :, :]
        np.multiply(w[:, :, None, None], self.C[:, None, :, :], out=y.imag)
        if load:
            o = self.circuit.output
            y[:, :, o, o] += 1.0 / self.load_resistance[:, None] + (
                1j * w * self.load_capacitance[:, None]
            )
        return y

    def _freqs(self, freqs: np.ndarray) -> np.ndarray:
        f = np.asarray(freqs, dtype=float)
        if f.ndim == 1:
            f = np.broadcast_to(f, (self.batch, f.size))
        return f

    def _source_admittance(self, f: np.ndarray) -> np.ndarray | None:
        """(B, F) admittance of the source branch, Rs in series with Cs; None without Cs."""
        cs = self.source_capacitance
        if cs is None or not np.any(cs > 0):
            return None
        w = 2.0 * math.pi * f
        with np.errstate(divide="ignore"):
            zc = np.where(cs[:, None] > 0, 1.0 / (1j * w * np.where(cs > 0, cs, 1.0)[:, None]),
                          0.0)
        return 1.0 / (self.source_resistance[:, None] + zc)

    # -- measurements ----------------------------------------------------------
    def node_voltages(self, freqs: np.ndarray) -> np.ndarray:
        """Node voltages (B, F, n) per volt of source EMF, source and load attached."""
        f = self._freqs(freqs)
        y = self._y(f, load=True)
        i_in = self.circuit.input
        n = self.circuit.n
        rs = self.source_resistance
        ys = self._source_admittance(f)
        if ys is not None:  # EMF behind Rs and Cs in series: a Norton source
            y[:, :, i_in, i_in] += ys
            rhs = np.zeros(y.shape[:3], dtype=complex)
            rhs[:, :, i_in] = ys
            return np.linalg.solve(y, rhs[..., None])[..., 0]
        if np.all(rs > 0):
            gs = (1.0 / rs)[:, None]
            y[:, :, i_in, i_in] += gs
            rhs = np.zeros(y.shape[:3], dtype=complex)
            rhs[:, :, i_in] = gs
            return np.linalg.solve(y, rhs[..., None])[..., 0]
        # an ideal source fixes the input node at 1 V: move its column to the right side
        keep = np.array([k for k in range(n) if k != i_in])
        y_red = y[:, :, keep[:, None], keep[None, :]]
        rhs = -y[:, :, keep, i_in]
        sol = np.linalg.solve(y_red, rhs[..., None])[..., 0]
        v = np.empty(y.shape[:3], dtype=complex)
        v[:, :, keep] = sol
        v[:, :, i_in] = 1.0
        return v

    def gain(self, freqs: np.ndarray) -> np.ndarray:
        """v_load / v_source_emf, (B, F) complex."""
        return self.node_voltages(freqs)[:, :, self.circuit.output]

    def supply_gain(self, freqs: np.ndarray) -> np.ndarray:
        """v_load / v_supply with the signal EMF at zero (contract: supply rejection), (B, F).

        The rail is an AC source: its column of G + jwC, moved to the right-hand side,
        drives the loaded stage; the source resistance ties the input to ground (an
        ideal source holds it there).
        """
        if self.g_supply is None or self.c_supply is None:
            raise ValueError("this linearized system was built without the supply column")
        f = self._freqs(freqs)
        y = self._y(f, load=True)
        w = 2.0 * math.pi * f
        rhs = -(self.g_supply[:, None, :] + 1j * w[:, :, None] * self.c_supply[:, None, :])
        i_in = self.circuit.input
        rs = self.source_resistance
        out = self.circuit.output
        ys = self._source_admittance(f)
        if ys is not None:  # Rs and Cs in series from the input to ground
            y[:, :, i_in, i_in] += ys
            return np.linalg.solve(y, rhs[..., None])[..., 0][:, :, out]
        if np.all(rs > 0):
            y[:, :, i_in, i_in] += (1.0 / rs)[:, None]
            return np.linalg.solve(y, rhs[..., None])[..., 0][:, :, out]
        keep = np.array([k for k in range(self.circuit.n) if k != i_in])
        y_red = y[:, :, keep[:, None], keep[None, :]]
        sol = np.linalg.solve(y_red, rhs[:, :, keep][..., None])[..., 0]
        return sol[:, :, int(np.flatnonzero(keep == out)[0])]

    def z_in(self, freqs: np.ndarray) -> np.ndarray:
        """Impedance into the input terminal, load in place, source removed: (B, F)."""
        f = self._freqs(freqs)
        y = self._y(f, load=True)
        return self._driving_point(y, self.circuit.input)

    def z_out(self, freqs: np.ndarray) -> np.ndarray:
        """Impedance back into the output, source resistance in place, load removed."""
        f = self._freqs(freqs)
        y = self._y(f, load=False)
        i_in = self.circuit.input
        rs = self.source_resistance
        ys = self._source_admittance(f)
        if ys is not None:
            y[:, :, i_in, i_in] += ys
            return self._driving_point(y, self.circuit.output)
        if np.all(rs > 0):
            y[:, :, i_in, i_in] += (1.0 / rs)[:, None]
            return self._driving_point(y, self.circuit.output)
        n = self.circuit.n
        keep = np.array([k for k in range(n) if k != i_in])  # input shorted to ground
        y_red = y[:, :, keep[:, None], keep[None, :]]
        out = int(np.flatnonzero(keep == self.circuit.output)[0])
        return self._driving_point(y_red, out)

    @staticmethod
    def _driving_point(y: np.ndarray, node: int) -> np.ndarray:
        rhs = np.zeros(y.shape[:3], dtype=complex)
        rhs[:, :, node] = 1.0
        return np.linalg.solve(y, rhs[..., None])[..., 0][:, :, node]

    # -- corners ---------------------------------------------------------------
    def corners(
        self, midband: np.ndarray, *, decades: float = 9.0, which: str = "both"
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(|H| at midband, f_low, f_high): where |H| first falls 3 dB below midband.

        Bracketed on a log grid walking away from midband, then bisected in log f;
        f_low is 0 where the gain never falls (DC coupled), f_high inf likewise.
        `which` = "low" or "high" skips the other search (its result is nan).
        """
        fm = np.asarray(midband, dtype=float).reshape(self.batch)
        h_mid = np.abs(self.gain(fm[:, None]))[:, 0]
        target = h_mid * DB3
        steps = np.arange(1, int(decades * _GRID_PER_DECADE) + 1) / _GRID_PER_DECADE
        nan = np.full(self.batch, np.nan)
        lows = highs = nan
        if which in ("both", "low"):
            lows = self._crossing(fm, -steps, target)
            lows = np.where(np.isnan(lows), 0.0, lows)
        if which in ("both", "high"):
            highs = self._crossing(fm, steps, target)
            highs = np.where(np.isnan(highs), np.inf, highs)
        return h_mid, lows, highs

    def corners_near(
        self,
        midband: np.ndarray,
        guess_low: np.ndarray | float,
        guess_high: np.ndarray | float,
        *,
        which: str = "both",
    ) -> tuple[np.ndarray, np.ndarray]:
        """(f_low, f_high) for members expected near known corners (a Monte Carlo, the
        corners of a design whose nominal corners are known).

        Guesses are scalars or one per member. Brackets a factor of two either side of
        the guess and refines by the Illinois variant of false position in log f;
        members whose bracket does not hold (or whose guess is 0 or infinite) fall back
        to the full outward search, so the result is the same corner either way.
        `which` = "low" or "high" skips the other search (its result is nan).
        """
        fm = np.asarray(midband, dtype=float).reshape(self.batch)
        target = np.abs(self.gain(fm[:, None]))[:, 0] * DB3
        out = []
        for guess, side in ((guess_low, -1.0), (guess_high, 1.0)):
            if which != "both" and which != ("low" if side < 0 else "high"):
                out.append(np.full(self.batch, np.nan))
                continue
            g = np.broadcast_to(np.asarray(guess, dtype=float), (self.batch,))
            usable = np.isfinite(g) & (g > 0)
            found = np.full(self.batch, np.nan)
            if np.any(usable):
                lg = np.log10(np.where(usable, g, 1.0))
                lf = np.log10(fm)
                lg_in = lg - side * 0.3
                lg_in = np.minimum(lg_in, lf) if side < 0 else np.maximum(lg_in, lf)
                lg_out = lg + side * 0.3
                idx = np.flatnonzero(usable)
                sub = self if idx.size == self.batch else self.subset(idx)
                found[idx] = sub._illinois(lg_in[idx], lg_out[idx], target[idx])
            bad = np.isnan(found)
            if np.any(bad):
                idx = np.flatnonzero(bad)
                sub = self.subset(idx)
                steps = side * np.arange(1, 9 * _GRID_PER_DECADE + 1) / _GRID_PER_DECADE
                found[idx] = sub._crossing(fm[idx], steps, target[idx])
            empty = 0.0 if side < 0 else np.inf
            out.append(np.where(np.isnan(found), empty, found))
        return out[0], out[1]

    def _illinois(self, lg_in: np.ndarray, lg_out: np.ndarray, target: np.ndarray) -> np.ndarray:
        """Root of log|H| = log(target) between lg_in (above) and lg_out (below); nan if
        the bracket does not hold.

        Each step solves only the members still short of the tolerance. A member leaves
        the batch when |H| is within 1e-10 of the target, or within 1e-7 with a step that
        no longer improves it tenfold: rounding in the solve of an ill-conditioned nodal
        matrix (the search's large placeholder capacitors) leaves a floor near 1e-8 that
        further steps only wander about."""
        log_target = np.log(target)
        ends = np.abs(self.gain(10.0 ** np.stack([lg_in, lg_out], axis=1)))
        g_in = np.log(ends[:, 0]) - log_target
        g_out = np.log(ends[:, 1]) - log_target
        valid = (g_in >= 0) & (g_out < 0)
        x = lg_in.copy()
        act = np.flatnonzero(valid)
        sys_ = self if act.size == self.batch else self.subset(act)
        a_in, a_out, ga_in, ga_out = lg_in[act], lg_out[act], g_in[act], g_out[act]
        lt = log_target[act]
        side = np.zeros(act.size)
        g_prev = np.full(act.size, np.inf)
        for _ in range(_ILLINOIS_STEPS):
            if act.size == 0:
                break
            denom = np.where(ga_in - ga_out != 0, ga_in - ga_out, 1.0)
            xa = a_out - ga_out * (a_in - a_out) / denom
            gx = np.log(np.abs(sys_.gain(10.0 ** xa[:, None]))[:, 0]) - lt
            x[act] = xa
            upper = gx >= 0
            ga_out = np.where(upper & (side > 0), ga_out / 2, ga_out)
            ga_in = np.where(~upper & (side < 0), ga_in / 2, ga_in)
            a_in = np.where(upper, xa, a_in)
            ga_in = np.where(upper, gx, ga_in)
            a_out = np.where(upper, a_out, xa)
            ga_out = np.where(upper, ga_out, gx)
            side = np.where(upper, 1.0, -1.0)
            err = np.abs(gx)
            stalled = (g_prev < _NOISE_FLOOR) & (err > 0.1 * g_prev)
            keep = ~((err < 1e-10) | stalled)
            g_prev = err
            if not np.all(keep):
                k = np.flatnonzero(keep)
                act, lt, side, g_prev = act[k], lt[k], side[k], g_prev[k]
                a_in, a_out, ga_in, ga_out = a_in[k], a_out[k], ga_in[k], ga_out[k]
                sys_ = sys_.subset(k)
        return np.where(valid, 10.0 ** x, np.nan)

    def subset(self, idx: np.ndarray) -> AcSystem:
        """Members `idx` of this batch, as a smaller batch."""
        return AcSystem(
            circuit=self.circuit,
            G=self.G[idx],
            C=self.C[idx],
            gm=self.gm[idx],
            r_o=self.r_o[idx],
            source_resistance=self.source_resistance[idx],
            load_resistance=self.load_resistance[idx],
            load_capacitance=self.load_capacitance[idx],
            source_capacitance=None if self.source_capacitance is None
            else self.source_capacitance[idx],
            g_supply=None if self.g_supply is None else self.g_supply[idx],
            c_supply=None if self.c_supply is None else self.c_supply[idx],
        )

    def _crossing(self, fm: np.ndarray, log_steps: np.ndarray, target: np.ndarray) -> np.ndarray:
        grid = fm[:, None] * 10.0 ** log_steps[None, :]
        mag = np.abs(self.gain(grid))
        below = mag < target[:, None]
        found = below.any(axis=1)
        first = np.argmax(below, axis=1)
        lg_out = np.log10(grid[np.arange(self.batch), first])  # first point past the corner
        prev = np.where(first > 0, first - 1, 0)
        lg_in = np.where(first > 0, np.log10(grid[np.arange(self.batch), prev]), np.log10(fm))
        # the grid brackets the first crossing; false position (Illinois) refines it
        return np.where(found, self._illinois(lg_in, lg_out, target), np.nan)

    # -- swing -------------------------------------------------------------------
    def swing_ratios(self, freq: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per volt at the load: |ic| and |vce| of each transistor at `freq`: (B, nQ) each.

        ic is the intrinsic collector current gm*v_b'e + v_ce/ro, the current that
        reaches zero at cutoff; for a junction FET the drain current and |v_ds - v_gs|,
        the signal on its distance from the saturation edge VDS = VGS - VP.
        """
        v = self.node_voltages(np.asarray(freq, dtype=float).reshape(self.batch, 1))[:, 0, :]
        return self.swing_ratios_of(v)

    def swing_ratios_of(self, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """`swing_ratios` from node voltages (B, n) already solved at one frequency."""
        v_load = np.abs(v[:, self.circuit.output])
        v_ext = np.concatenate([v, np.zeros((self.batch, 2), dtype=complex)], axis=1)
        ic = np.empty(self.gm.shape)
        vce = np.empty(self.gm.shape)
        nb = len(self.circuit.bjts)
        for k, q in enumerate(self.circuit.transistors):
            vpi = v_ext[:, q.bi] - v_ext[:, q.e]
            vc_e = v_ext[:, q.c] - v_ext[:, q.e]
            ic[:, k] = np.abs(self.gm[:, k] * vpi + vc_e / self.r_o[:, k]) / v_load
            # a FET leaves saturation where VDS - (VGS - VP) reaches 0: that margin
            # moves with v_ds - v_gs = v_dg
            vce[:, k] = np.abs(vc_e - vpi if k >= nb else vc_e) / v_load
        return ic, vce


def linearize(
    circuit: Circuit,
    dc: DcBatch,
    r_values: np.ndarray,
    c_values: np.ndarray,
    source_resistance: np.ndarray | float,
    load_resistance: np.ndarray | float,
    load_capacitance: np.ndarray | float,
    source_capacitance: np.ndarray | float = 0.0,
) -> AcSystem:
    """Stamp parts and hybrid-pi transistors at the operating points `dc` into G and C."""
    B = dc.v.shape[0]
    n = circuit.n
    r_values = np.asarray(r_values, dtype=float).reshape(B, -1)
    c_values = np.asarray(c_values, dtype=float).reshape(B, -1)
    ar = circuit.incidence(circuit.resistors)
    ac = circuit.incidence(circuit.capacitors)
    G = np.einsum("ik,bk,jk->bij", ar, 1.0 / r_values, ar) if ar.shape[1] else np.zeros(
        (B, n + 2, n + 2)
    )
    C = np.einsum("ik,bk,jk->bij", ac, c_values, ac) if ac.shape[1] else np.zeros(
        (B, n + 2, n + 2)
    )
    nq = circuit.nq
    gms = np.empty((B, nq))
    ros = np.empty((B, nq))
    for k, q in enumerate(circuit.bjts):
        hp = hybrid_pi(q.device, dc.ic[:, k], dc.vce[:, k], dc.hfe[:, k], dc.tj[:, k])
        gms[:, k] = hp.gm
        ros[:, k] = hp.r_o
        _stamp(G, q.b, q.bi, 1.0 / hp.r_x if q.bi != q.b else 0.0)
        _stamp(G, q.bi, q.e, 1.0 / hp.r_pi)
        _stamp(G, q.c, q.e, 1.0 / hp.r_o)
        _stamp(C, q.bi, q.e, hp.c_pi)
        _stamp(C, q.bi, q.c, hp.c_mu)
        # VCCS gm * v(b'e) from collector to emitter
        G[:, q.c, q.bi] += hp.gm
        G[:, q.c, q.e] -= hp.gm
        G[:, q.e, q.bi] -= hp.gm
        G[:, q.e, q.e] += hp.gm
    if circuit.jfets:
        from stagesynth.engine.jfet_ac import stamp_jfets

        nb = len(circuit.bjts)
        gms[:, nb:], ros[:, nb:] = stamp_jfets(circuit, dc, G, C)
    bc = lambda x: np.broadcast_to(np.asarray(x, dtype=float), (B,)).copy()  # noqa: E731
    return AcSystem(
        circuit=circuit,
        G=G[:, :n, :n].copy(),
        C=C[:, :n, :n].copy(),
        gm=gms,
        r_o=ros,
        source_resistance=bc(source_resistance),
        load_resistance=bc(load_resistance),
        load_capacitance=bc(load_capacitance),
        source_capacitance=bc(source_capacitance),
        g_supply=G[:, :n, n + 1].copy(),
        c_supply=C[:, :n, n + 1].copy(),
    )


def _stamp(m: np.ndarray, i: int, j: int, y) -> None:
    """Two-terminal admittance y (scalar or (B,)) between nodes i and j."""
    if i == j:
        return
    m[:, i, i] += y
    m[:, j, j] += y
    m[:, i, j] -= y
    m[:, j, i] -= y
