"""DC operating point of a compiled circuit, batched over conditions.

Both junctions in the Ebers-Moll transport form (the contract's forward-active law,
plus the base-collector junction so that saturation is a convergent, physical state).
Newton-Raphson on node voltages with junction-voltage limiting, self-heating
iterated inside the same loop (Tj = Ta + theta_ja*VCE*IC), and supply stepping
as a fallback from a cold start. Every batch member gets its own convergence
flag; nothing is hidden: callers report non-convergence.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stagesynth.contracts.device import hfe_at, saturation_current, thermal_voltage
from stagesynth.engine import jfet_dc
from stagesynth.engine.circuit import Circuit

GMIN = 1e-12  # S to ground from a node no DC path defines (between capacitors, a lone gate)
GMIN_PATH = 1e-15  # S from every other node: keeps Newton's matrix regular at cutoff while
# leaving gigaohm gate returns (1 GOhm against 1 POhm: 1e-6) as the contract draws them


def node_gmin(circuit: Circuit, source_dc: bool = True) -> np.ndarray:
    """(n,) conductance to ground per unknown node: GMIN where no resistor, load, source
    or transistor (bipolar terminals; a FET's drain-source channel, not its gate) joins it
    to ground or the supply, else GMIN_PATH."""
    parent = list(range(circuit.n + 2))

    def find(x: int) -> int:
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    def join(a: int, b: int) -> None:
        parent[find(a)] = find(b)

    join(circuit.ground, circuit.supply)
    join(circuit.output, circuit.ground)  # the load
    if source_dc:  # the source resistance (a series source capacitor blocks it)
        join(circuit.input, circuit.ground)
    for _, a, b in circuit.resistors:
        join(a, b)
    for q in circuit.bjts:
        join(q.c, q.e)
        join(q.bi, q.e)
        join(q.b, q.bi)
    for q in circuit.jfets:
        join(q.d, q.s)
    root = find(circuit.ground)
    return np.array([GMIN_PATH if find(i) == root else GMIN for i in range(circuit.n)])
VNTOL = 1e-7  # V, absolute node-voltage tolerance of the last Newton step
RELTOL = 1e-7  # relative node-voltage tolerance of the last Newton step
ABSTOL = 1e-13  # A, KCL residual floor
_MAX_EXP_ARG = 80.0  # beyond this the exponential is continued linearly


@dataclass(frozen=True)
class DcBatch:
    """Operating points of B copies of one circuit.

    Transistor arrays are (B, nQ), bipolar transistors first, then junction FETs
    (circuit.transistors), polarity-normalized: ic, ib, vbe, vce are positive in the
    forward-active region for NPN and PNP alike. For a junction FET they hold ID, the
    gate current (-i_gss: leakage flows out of the gate), VGS and VDS (N-channel frame).
    """

    v: np.ndarray  # (B, n+2) node voltages, ground and supply last
    ic: np.ndarray
    ib: np.ndarray
    vbe: np.ndarray  # internal junction voltage
    vce: np.ndarray
    tj: np.ndarray  # junction temperature, degC
    hfe: np.ndarray  # DC gain at Tj
    supply_current: np.ndarray  # (B,) A drawn from the supply
    converged: np.ndarray  # (B,) bool
    iterations: int
    # junction FETs (second release): where each transistor leaves its active region,
    # (B, nQ): vce_sat for a bipolar transistor, VGS - VP(Tj) for a FET (saturation ends)
    vsat: np.ndarray | None = None
    idss: np.ndarray | None = None  # (B, nJ) IDSS(Tj) of each FET's unit
    vp: np.ndarray | None = None  # (B, nJ) VP(Tj), N frame (negative)

    @property
    def power(self) -> np.ndarray:
        """Collector dissipation VCE*IC, the figure the self-heating model uses (0 where
        VCE or IC is not positive: a reversed or cut-off transistor heats by neither)."""
        return np.where((self.vce > 0) & (self.ic > 0), self.vce * self.ic, 0.0)


def _limexp(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """exp(x) continued linearly above _MAX_EXP_ARG (value, derivative)."""
    xc = np.minimum(x, _MAX_EXP_ARG)
    ex = np.exp(xc)
    val = np.where(x > _MAX_EXP_ARG, ex * (1.0 + x - _MAX_EXP_ARG), ex)
    return val, ex


class _Model:
    """Vectorized evaluation of KCL residuals and Jacobian for a batch."""

    def __init__(
        self,
        circuit: Circuit,
        r_values: np.ndarray,
        supply: np.ndarray,
        hfe25: np.ndarray,
        ambient: np.ndarray,
        source_resistance: np.ndarray,
        load_resistance: np.ndarray,
        leakage: np.ndarray | None = None,
        source_capacitance: np.ndarray | None = None,
    ) -> None:
        self.c = circuit
        self.leakage = leakage  # (B, nQ) collector-base leakage ICBO, or None
        n = circuit.n
        self.B = supply.shape[0]
        branches = list(circuit.resistors)
        cond = [1.0 / r_values[:, k] for k in range(len(circuit.resistors))]
        # the load, and the source resistance (the source EMF is 0 V at DC)
        branches.append(("RL", circuit.output, circuit.ground))
        cond.append(1.0 / load_resistance)
        blocked = source_capacitance is not None and bool(np.all(source_capacitance > 0))
        self.input_fixed = bool(np.all(source_resistance == 0)) and not blocked
        if not self.input_fixed and not blocked:  # a series source capacitor blocks DC
            branches.append(("RS", circuit.input, circuit.ground))
            cond.append(1.0 / np.maximum(source_resistance, 1e-9))
        a = circuit.incidence(tuple(branches))
        g = np.stack(cond, axis=1)  # (B, k)
        self.G = np.einsum("ik,bk,jk->bij", a, g, a)
        idx = np.arange(n)
        self.G[:, idx, idx] += node_gmin(circuit, not blocked)
        free = np.ones(n + 2, dtype=bool)
        free[[circuit.ground, circuit.supply]] = False
        if self.input_fixed:
            free[circuit.input] = False
        self.free = np.flatnonzero(free)
        self.supply = supply
        self.ambient = ambient
        self.hfe25 = hfe25
        self.bjts = circuit.bjts
        self.jfets = circuit.jfets
        self.nb = len(circuit.bjts)
        self.terms = [(q.c, q.bi, q.e) for q in circuit.transistors]
        self.signs = [q.device.sign for q in circuit.transistors]
        self.rbb = np.array([q.device.r_bb for q in self.bjts])
        self.sign = np.array([q.device.sign for q in self.bjts], dtype=float)
        self.va = np.array([q.device.early_voltage for q in self.bjts])
        self.theta = np.array([q.device.theta_ja or 0.0 for q in circuit.transistors])
        self.vce_sat = np.array([q.device.vce_sat for q in self.bjts])
        self.beta_r = np.array([q.device.hfe_reverse for q in self.bjts])

    def device_params(self, tj: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(IS, VT, hFE) at junction temperatures tj (B, nQ)."""
        is_ = np.empty_like(tj)
        hfe = np.empty_like(tj)
        for k, q in enumerate(self.bjts):
            is_[:, k] = saturation_current(q.device, tj[:, k])
            hfe[:, k] = hfe_at(q.device, self.hfe25[:, k], tj[:, k])
        return is_, thermal_voltage(tj), hfe

    def junctions(self, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(VBE, VCE) of every transistor, (B, nQ): junction FETs give (VGS, VDS)."""
        vbe = np.empty((self.B, len(self.terms)))
        vce = np.empty_like(vbe)
        for k, ((c, bi, e), s) in enumerate(zip(self.terms, self.signs, strict=True)):
            vbe[:, k] = s * (v[:, bi] - v[:, e])
            vce[:, k] = s * (v[:, c] - v[:, e])
        return vbe, vce

    def evaluate(self, v: np.ndarray, tj: np.ndarray, pivot: np.ndarray | None = None):
        """KCL residual F (B, n+2), Jacobian J (B, n+2, n+2) and BJT quantities.

        With `pivot` (B, nQ) the junctions are linearized about VBE = pivot instead
        of their present voltage: one Newton step then solves the circuit with each
        transistor as its tangent model at that point (a warm start from cold).
        """
        F = np.einsum("bij,bj->bi", self.G, v)
        J = self.G.copy()
        nb = self.nb
        fet = jfet_dc.stamp(self.jfets, v, self.hfe25[:, nb:], tj[:, nb:], F, J)
        tj = tj[:, :nb]
        is_, vt, hfe = self.device_params(tj)
        vbe, vce = self.junctions(v)
        vbe, vce = vbe[:, :nb], vce[:, :nb]
        at = vbe if pivot is None else pivot
        ex, dex = _limexp(at / vt)
        early = 1.0 + vce / self.va
        gm = is_ * dex / vt * early
        i_f = is_ * ex * early  # forward transport current (contract: IC when active)
        if pivot is not None:
            i_f = i_f + gm * (vbe - pivot)
        go = is_ * ex / self.va
        # base-collector junction, Ebers-Moll transport form (reverse gain beta_R):
        # IC = iF - iR (1 + 1/beta_R), IB = iF/hFE + iR/beta_R, with iR = IS exp(VBC/VT);
        # in the active region iR is ~exp(-VCB/VT) of iF: nothing measurable changes
        er, der = _limexp((vbe - vce) / vt)
        i_r = is_ * er
        g_r = is_ * der / vt  # d iR / d VBC
        k_r = 1.0 + 1.0 / self.beta_r
        ic = i_f - i_r * k_r
        ib = i_f / hfe + i_r / self.beta_r
        # derivatives: VBC = VBE - VCE
        dic_dvbe = gm - g_r * k_r
        dic_dvce = go + g_r * k_r
        dib_dvbe = gm / hfe + g_r / self.beta_r
        dib_dvce = go / hfe - g_r / self.beta_r
        for k, q in enumerate(self.bjts):
            s = q.device.sign
            # base current flows through r_bb between b and b'
            if q.bi != q.b:
                gx = 1.0 / q.device.r_bb
                F[:, q.b] += gx * (v[:, q.b] - v[:, q.bi])
                F[:, q.bi] -= gx * (v[:, q.b] - v[:, q.bi])
                J[:, q.b, q.b] += gx
                J[:, q.b, q.bi] -= gx
                J[:, q.bi, q.b] -= gx
                J[:, q.bi, q.bi] += gx
            terms = (q.c, q.bi, q.e)
            i_loc = (ic[:, k], ib[:, k], -(ic[:, k] + ib[:, k]))
            d_vbe = (dic_dvbe[:, k], dib_dvbe[:, k], -(dic_dvbe[:, k] + dib_dvbe[:, k]))
            d_vce = (dic_dvce[:, k], dib_dvce[:, k], -(dic_dvce[:, k] + dib_dvce[:, k]))
            if self.leakage is not None:  # ICBO: into the collector, out of the base
                F[:, q.c] += s * self.leakage[:, k]
                F[:, q.bi] -= s * self.leakage[:, k]
            for t, node in enumerate(terms):
                F[:, node] += s * i_loc[t]
                # d(vbe)/dv = s*(0, 1, -1), d(vce)/dv = s*(1, 0, -1); s*s = 1
                J[:, node, q.bi] += d_vbe[t]
                J[:, node, q.e] -= d_vbe[t] + d_vce[t]
                J[:, node, q.c] += d_vce[t]
        def cat(a, b):
            return np.concatenate([a, b], axis=1) if b.shape[1] else a

        nan = np.full_like(fet["ic"], np.nan)
        vsat = cat(np.broadcast_to(self.vce_sat, ic.shape), fet["vsat"])
        return F, J, dict(ic=cat(ic, fet["ic"]), ib=cat(ib, fet["ib"]),
                          vbe=cat(vbe, fet["vbe"]), vce=cat(vce, fet["vce"]),
                          hfe=cat(hfe, nan), vt=vt, is_=is_, gm=cat(dic_dvbe, fet["gm"]),
                          go=cat(dic_dvce, fet["go"]), vsat=vsat, idss=fet["idss"],
                          vp=fet["vp"])


def _newton(
    model: _Model,
    v: np.ndarray,
    tj: np.ndarray,
    supply_scale: float,
    max_iter: int,
    pivot: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
    """Damped Newton on node voltages and junction temperatures together.

    Unknowns: the free node voltages and each transistor's Tj, with the thermal
    equation Tj = Ta + theta_ja*VCE*IC beside Kirchhoff's current law (dF/dTj by
    a forward difference, dP/dv analytic), so self-heating converges quadratically.
    Logarithmic junction-voltage limiting (the classic rule for exponential
    devices) scales the whole step.

    Converged: the last full step moved no node by more than VNTOL + RELTOL*|v|
    (Newton's error after that step is far smaller still), KCL holds to ABSTOL
    plus a relative share of the largest branch current, and Tj has settled.
    """
    free = model.free
    nf = free.size
    nq = len(model.terms)
    nb = model.nb
    B = model.B
    v = v.copy()
    tj = tj.copy()
    v[:, model.c.supply] = model.supply * supply_scale
    v[:, model.c.ground] = 0.0
    if model.input_fixed:
        v[:, model.c.input] = 0.0
    # critical junction voltage VT*ln(VT/(sqrt(2)*IS)) above which steps are limited
    is_amb = np.array([[saturation_current(b.device, 25.0) for b in model.bjts]])
    vt25 = thermal_voltage(25.0)
    vcrit = vt25 * np.log(vt25 / (np.sqrt(2.0) * is_amb))
    converged = np.zeros(B, dtype=bool)
    it = 0
    heats = np.any(model.theta > 0)
    for it in range(1, max_iter + 1):
        F, J, q = model.evaluate(v, tj, pivot if it == 1 else None)
        Ff = F[:, free]
        A = np.zeros((B, nf + nq, nf + nq))
        A[:, :nf, :nf] = J[:, free[:, None], free[None, :]]
        rhs = np.zeros((B, nf + nq))
        rhs[:, :nf] = Ff
        ic, vce = q["ic"], q["vce"]
        hot = (vce > 0) & (ic > 0)
        p = np.where(hot, vce * ic, 0.0)
        rhs[:, nf:] = tj - model.ambient[:, None] - model.theta * p
        A[:, nf:, nf:] = np.eye(nq)
        if heats:
            col = {int(node): k for k, node in enumerate(free)}
            for k, ((tc, tb, te), s_) in enumerate(zip(model.terms, model.signs, strict=True)):
                if model.theta[k] == 0:
                    continue
                dt = 1e-3
                tj2 = tj.copy()
                tj2[:, k] += dt
                F2, _, q2 = model.evaluate(v, tj2, pivot if it == 1 else None)
                A[:, :nf, nf + k] = (F2[:, free] - Ff) / dt
                dp_dt = np.where(hot[:, k], vce[:, k] * (q2["ic"][:, k] - ic[:, k]) / dt, 0.0)
                A[:, nf + k, nf + k] -= model.theta[k] * dp_dt
                # dP/dv at the terminals (sign s cancels pairwise as in the KCL stamps)
                gm = q["gm"][:, k]
                go = q["go"][:, k]
                dp = {
                    tc: s_ * (ic[:, k] + vce[:, k] * go),
                    tb: s_ * vce[:, k] * gm,
                    te: -s_ * (ic[:, k] + vce[:, k] * (gm + go)),
                }
                for node, val in dp.items():
                    if node in col:
                        A[:, nf + k, col[node]] -= model.theta[k] * np.where(hot[:, k], val, 0.0)
        try:
            dx = -np.linalg.solve(A, rhs[..., None])[..., 0]
        except np.linalg.LinAlgError:
            dx = -np.einsum("bij,bj->bi", np.linalg.pinv(A), rhs)
        step = np.zeros_like(v)
        step[:, free] = dx[:, :nf]
        dtj = dx[:, nf:]
        # junction limiting: above vcrit a junction may grow by VT*ln(1 + dV/VT)
        vbe_all, vce_all = model.junctions(v + step)
        vbe_new, vce_new = vbe_all[:, :nb], vce_all[:, :nb]
        vt = q["vt"]
        limit = np.ones_like(vbe_new)
        if nq > nb:  # junction FETs: VGS moves by a bounded amount per step
            limit = np.concatenate([limit, jfet_dc.step_limit(
                model.jfets, q["vbe"][:, nb:], vbe_all[:, nb:])], axis=1)
        for new, old in ((vbe_new, q["vbe"][:, :nb]),
                         (vbe_new - vce_new, q["vbe"][:, :nb] - q["vce"][:, :nb])):
            dj = new - old  # the base-emitter, then the base-collector junction
            limit[:, :nb] = np.minimum(limit[:, :nb], np.where(
                (new > vcrit) & (dj > 2.0 * vt),
                vt * np.log1p(np.maximum(dj, 0.0) / vt) / np.where(dj > 0, dj, 1.0),
                1.0,
            ))
        # keep any node from jumping more than the supply, and Tj by 50 K, in one step
        span = np.max(np.abs(step), axis=1) / np.maximum(np.abs(model.supply), 1.0)
        tspan = np.max(np.abs(dtj), axis=1, initial=0.0) / 50.0
        junction = np.min(limit, axis=1) if limit.size else 1.0
        alpha = np.minimum(junction, 1.0 / np.maximum(np.maximum(span, tspan), 1.0))
        v = v + alpha[:, None] * step
        tj = tj + alpha[:, None] * dtj
        scale = VNTOL + RELTOL * np.max(np.abs(v), axis=1)
        small_step = np.max(np.abs(alpha[:, None] * step), axis=1) < scale
        fres = np.max(np.abs(Ff), axis=1) if Ff.size else np.zeros(B)
        # rounding sets the floor: compare with the largest current any branch carries
        i_scale = np.maximum(
            np.max(np.abs(ic), axis=1, initial=0.0),
            np.max(np.einsum("bij,bj->bi", np.abs(model.G), np.abs(v)), axis=1),
        )
        converged = (
            small_step
            & (fres < ABSTOL + 1e-9 * i_scale)
            & (np.max(np.abs(dtj), axis=1, initial=0.0) < 1e-6)
            & (alpha >= 1.0)
        )
        if np.all(converged) or not np.all(np.isfinite(v)):
            break
    return v, tj, converged, it


def solve_dc(
    circuit: Circuit,
    r_values: np.ndarray,
    supply: np.ndarray,
    hfe25: np.ndarray,
    ambient: np.ndarray,
    source_resistance: np.ndarray | float,
    load_resistance: np.ndarray | float,
    *,
    leakage: np.ndarray | None = None,
    max_iter: int = 200,
    source_capacitance: float = 0.0,
) -> DcBatch:
    """Operating points for B conditions at once.

    r_values (B, nR) in circuit.resistors order; supply, ambient (B,); hfe25 (B, nQ);
    leakage (B, nQ), optional: a collector-base leakage current ICBO per transistor.
    The source (EMF 0 V behind its resistance) and the load are part of the DC circuit;
    a `source_capacitance` > 0 in series with the source blocks its DC path.
    Cold start from a tangent-model step at each device's datasheet VBE; members
    that have not converged after a few dozen iterations continue on their own,
    and any still failing are retried by stepping the supply up from 10 %.
    """
    supply = np.asarray(supply, dtype=float)
    B = supply.shape[0]
    nq = circuit.nq
    args = (
        np.asarray(r_values, dtype=float).reshape(B, -1),
        supply,
        np.asarray(hfe25, dtype=float).reshape(B, nq),
        np.asarray(ambient, dtype=float).reshape(B),
        np.broadcast_to(np.asarray(source_resistance, dtype=float), (B,)),
        np.broadcast_to(np.asarray(load_resistance, dtype=float), (B,)),
        None if leakage is None else np.asarray(leakage, dtype=float).reshape(B, nq),
        np.full(B, float(source_capacitance)),
    )

    def model_for(idx: np.ndarray) -> _Model:
        return _Model(circuit, *(None if a is None else a[idx] for a in args))

    everyone = np.arange(B)
    model = model_for(everyone)
    pivot = np.tile(np.array([q.device.vbe for q in circuit.bjts]), (B, 1))
    v = np.zeros((B, circuit.n + 2))
    tj = np.repeat(model.ambient[:, None], nq, axis=1)
    v, tj, ok, iters = _newton(model, v, tj, 1.0, min(40, max_iter), pivot)
    if not np.all(ok) and max_iter > 40:  # stragglers continue on their own
        idx = np.flatnonzero(~ok)
        sub = model_for(idx)
        v2, tj2, ok2, k = _newton(sub, v[idx], tj[idx], 1.0, max_iter)
        v[idx], tj[idx], ok[idx] = v2, tj2, ok2
        iters += k
    if not np.all(ok):  # supply stepping from a cold start
        idx = np.flatnonzero(~ok)
        sub = model_for(idx)
        vs = np.zeros((idx.size, circuit.n + 2))
        tjs = np.repeat(sub.ambient[:, None], nq, axis=1)
        for scale in np.linspace(0.1, 1.0, 10):
            vs, tjs, ok_s, k = _newton(sub, vs, tjs, float(scale), max_iter)
            iters += k
        v[idx], tj[idx], ok[idx] = vs, tjs, ok_s
    F, _, q = model.evaluate(v, tj)
    # current out of the supply node into the network = KCL sum at that node
    supply_current = F[:, circuit.supply]
    return DcBatch(
        v=v,
        ic=q["ic"],
        ib=q["ib"],
        vbe=q["vbe"],
        vce=q["vce"],
        tj=tj,
        hfe=q["hfe"],
        supply_current=supply_current,
        converged=ok & np.all(np.isfinite(v), axis=1),
        iterations=iters,
        vsat=q["vsat"],
        idss=q["idss"],
        vp=q["vp"],
    )
