"""Independent AC, noise, supply and verdict figures of JFET designs (contract §2).

From the contract text alone, on refjfet's operating points: one nodal network per condition
(supply and, with a source capacitance, the EMF side of Cs as nodes of their own), solved for
all frequencies and all noise generators at once; the JFET as gm, ro, c_gs, c_gd; the
bipolar transistor as refmodel's hybrid-pi. Every figure at nominal and every corner.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from . import refjfet as rj
from . import refmodel as rm

T0 = 290.0  # K: the source resistance's noise temperature
SRC = "source EMF side"  # node between the EMF (behind Rs) and Cs


class Network:
    """G and C of the linear circuit at one operating point; source and load kept apart."""

    def __init__(self, cir: rj.Circuit, op: rj.OperatingPoint) -> None:
        self.cir, self.op = cir, op
        self.src = SRC if cir.source_capacitance > 0 else cir.input
        names = sorted({n for n in op.voltages if n != cir.ground} | {cir.supply_node, self.src})
        self.idx = {n: i for i, n in enumerate(names)}
        n = len(names)
        self.g, self.c = np.zeros((n, n)), np.zeros((n, n))
        self.gl, self.cl = np.zeros((n, n)), np.zeros((n, n))
        self.gs, self.cs = np.zeros((n, n)), np.zeros((n, n))
        for _, a, b, r in cir.resistors:
            self.two(self.g, a, b, 1.0 / r)
        for _, a, b, cv in cir.capacitors:
            self.two(self.c, a, b, cv)
        self.two(self.gl, cir.output, cir.ground, 1.0 / cir.load_resistance)
        self.two(self.cl, cir.output, cir.ground, cir.load_capacitance)
        if cir.source_resistance > 0:
            self.two(self.gs, self.src, cir.ground, 1.0 / cir.source_resistance)
        if cir.source_capacitance > 0:
            self.two(self.cs, self.src, cir.input, cir.source_capacitance)
        for j in cir.jfets:
            t = op.jfets[j.ref]
            self.two(self.g, j.d, j.s, 1.0 / t.ro)
            self.two(self.c, j.g, j.s, t.c_gs)
            self.two(self.c, j.g, j.d, t.c_gd)
            self.vccs(j.d, j.s, j.g, j.s, t.gm)
        for q in cir.bjts:
            d, t = cir.bdevices[q.device], op.bjts[q.ref]
            bi = rm.internal_base(q, d)
            if d.r_bb > 0:
                self.two(self.g, q.b, bi, 1.0 / d.r_bb)
            self.two(self.g, bi, q.e, 1.0 / t.rpi)
            self.two(self.c, bi, q.e, t.cpi)
            self.two(self.c, bi, q.c, t.cmu)
            self.two(self.g, q.c, q.e, 1.0 / t.ro)
            self.vccs(q.c, q.e, bi, q.e, t.gm)

    def stamp(self, m: np.ndarray, r: str, c: str, val: float) -> None:
        """Add val at (r, c); ground rows and columns are dropped."""
        if r in self.idx and c in self.idx:
            m[self.idx[r], self.idx[c]] += val

    def two(self, m: np.ndarray, a: str, b: str, y: float) -> None:
        """A two-terminal admittance between a and b."""
        for r, sr in ((a, 1.0), (b, -1.0)):
            for c, sc in ((a, 1.0), (b, -1.0)):
                self.stamp(m, r, c, sr * sc * y)

    def vccs(self, out_p: str, out_n: str, in_p: str, in_n: str, gm: float) -> None:
        """gm*v(in_p, in_n) flowing from out_p through the device to out_n."""
        for r, sr in ((out_p, 1.0), (out_n, -1.0)):
            for c, sc in ((in_p, 1.0), (in_n, -1.0)):
                self.stamp(self.g, r, c, sr * sc * gm)

    def solve(self, freqs: Any, *, load: bool, source: bool, fixed: Mapping[str, complex],
              inject: np.ndarray | Mapping[str, complex]) -> np.ndarray:
        """Node voltages (F, n[, k]) for fixed node voltages and injected currents (a dict,
        or an (n, k) matrix of k right-hand sides), at every frequency at once."""
        f = np.atleast_1d(np.asarray(freqs, dtype=float))
        g, c = self.g.copy(), self.c.copy()
        if load:
            g, c = g + self.gl, c + self.cl
        fix = dict(fixed)
        if source:
            g, c = g + self.gs, c + self.cs
        elif self.src != self.cir.input:
            fix[self.src] = 0.0  # the detached EMF side of Cs
        n = len(self.idx)
        if isinstance(inject, Mapping):
            rhs = np.zeros((n, 1), dtype=complex)
            for k, val in inject.items():
                rhs[self.idx[k], 0] += val
        else:
            rhs = np.asarray(inject, dtype=complex)
        fi = [self.idx[k] for k in fix]
        fv = np.array(list(fix.values()), dtype=complex)
        free = [i for i in range(n) if i not in fi]
        y = g[None] + 2j * math.pi * f[:, None, None] * c[None]
        b = rhs[free][None] - (y[:, free][:, :, fi] @ fv)[..., None]
        out = np.zeros((f.size, n, rhs.shape[1]), dtype=complex)
        out[:, fi, :] = fv[None, :, None]
        out[:, free, :] = np.linalg.solve(y[:, free][:, :, free], b)
        return out if not isinstance(inject, Mapping) else out[..., 0]

    def emf(self, freqs: Any, *, load: bool = True, emf: float = 1.0,
            inject: Mapping[str, complex] | None = None) -> np.ndarray:
        """Node voltages with the source in place (EMF `emf` behind Rs and Cs), supply at AC
        ground, plus optional injected currents."""
        fixed: dict[str, complex] = {self.cir.supply_node: 0.0}
        inj = dict(inject or {})
        if self.cir.source_resistance > 0:
            inj[self.src] = inj.get(self.src, 0.0) + emf / self.cir.source_resistance
        else:
            fixed[self.src] = emf
        return self.solve(freqs, load=load, source=True, fixed=fixed, inject=inj)

    def v(self, sol: np.ndarray, node: str) -> np.ndarray:
        """One node's column (zeros for ground)."""
        if node not in self.idx:
            return np.zeros(sol.shape[0], dtype=complex)
        return sol[:, self.idx[node]]


# --------------------------------------------------------------------------- figures


def gain(net: Network, freqs: Any) -> np.ndarray:
    """v_load / v_emf: source (EMF, Rs, Cs) and load in place, supply = AC ground."""
    return net.v(net.emf(freqs), net.cir.output)


def z_in(net: Network, f: float) -> float:
    """|Z| into the input terminal, load in place, source removed."""
    sol = net.solve([f], load=True, source=False, fixed={net.cir.supply_node: 0.0},
                    inject={net.cir.input: 1.0})
    return abs(complex(net.v(sol, net.cir.input)[0]))


def z_out(net: Network, f: float) -> float:
    """|Z| back into the output terminal, source in place with EMF 0, load removed."""
    sol = net.emf([f], load=False, emf=0.0, inject={net.cir.output: 1.0})
    return abs(complex(net.v(sol, net.cir.output)[0]))


def _edge(net: Network, fm: float, up: bool) -> float:
    """Nearest frequency beyond fm where |gain| is 3.0 dB below |gain(fm)| (0 / inf: never)."""
    from scipy.optimize import brentq

    ref = abs(complex(gain(net, [fm])[0]))
    dec = math.log10(1e13 / fm) if up else math.log10(fm / 1e-4)
    steps = np.arange(0.0, dec + 1e-9, 1.0 / 40.0)
    grid = fm * 10.0 ** (steps if up else -steps)
    below = np.nonzero(np.abs(gain(net, grid)) / ref < rm.THREE_DB)[0]
    if below.size == 0:
        return math.inf if up else 0.0
    i = int(below[0])
    return 10.0 ** brentq(lambda lf: abs(complex(gain(net, [10.0**lf])[0])) / ref - rm.THREE_DB,
                          math.log10(grid[i - 1]), math.log10(grid[i]), xtol=1e-12)


def swing_vpp(net: Network, f: float) -> float:
    """Largest symmetric load sine (Vpp) before a JFET cuts off (ID = 0) or leaves saturation
    (VDS = VGS - VP), or a bipolar one cuts off or saturates; small-signal ratios at f."""
    op, cir = net.op, net.cir
    if not op.active:
        return 0.0
    sol = net.emf([f])
    v = {n: complex(sol[0, i]) for n, i in net.idx.items()} | {cir.ground: 0j}
    vl = v[cir.output]
    amp = math.inf
    for j in cir.jfets:
        t = op.jfets[j.ref]
        vgs, vds = v[j.g] - v[j.s], v[j.d] - v[j.s]
        i_d = t.gm * vgs + vds / t.ro  # the channel current, intrinsic
        if abs(i_d) > 0:
            amp = min(amp, t.id / abs(i_d / vl))
        if abs(vds - vgs) > 0:  # margin VDS - (VGS - VP) moves with v(d) - v(g)
            amp = min(amp, (t.vds - t.vgs + t.vp) / abs((vds - vgs) / vl))
    for q in cir.bjts:
        t, d = op.bjts[q.ref], cir.bdevices[q.device]
        vbe, vce = v[rm.internal_base(q, d)] - v[q.e], v[q.c] - v[q.e]
        ic = t.gm * vbe + vce / t.ro
        if abs(ic) > 0:
            amp = min(amp, t.ic / abs(ic / vl))
        if abs(vce) > 0:
            amp = min(amp, (t.vce - d.vce_sat) / abs(vce / vl))
    return 2.0 * amp


def generators(net: Network, flicker: Mapping[str, float]
               ) -> list[tuple[str, str, float, float]]:
    """(node a, node b, white density A^2/Hz, 1/f corner) of every stage noise source."""
    cir, op = net.cir, net.op
    ta = op.conditions.ambient + rm.ZERO_CELSIUS
    k, q = rm.K_BOLTZMANN, rm.Q_ELECTRON
    gens = [(a, b, 4 * k * ta / r, 0.0) for _, a, b, r in cir.resistors]
    for j in cir.jfets:
        t = op.jfets[j.ref]
        tj = t.tj + rm.ZERO_CELSIUS
        gens.append((j.d, j.s, 4 * k * tj * (2.0 / 3.0) * t.gm,
                     cir.jdevices[j.device].flicker_corner))
        gens.append((j.g, j.s, 2 * q * t.i_gss, 0.0))
    for b in cir.bjts:
        d, t = cir.bdevices[b.device], op.bjts[b.ref]
        bi = rm.internal_base(b, d)
        gens.append((bi, b.e, 2 * q * t.ib, flicker.get(b.device, 0.0)))
        gens.append((b.c, b.e, 2 * q * t.ic, 0.0))
        if d.r_bb > 0:
            gens.append((b.b, bi, 4 * k * (t.tj + rm.ZERO_CELSIUS) / d.r_bb, 0.0))
    return gens


def densities(net: Network, flicker: Mapping[str, float], freqs: Any
              ) -> tuple[np.ndarray, np.ndarray]:
    """(S_amp, S_src) at the load, V^2/Hz: each generator alone, EMF at zero."""
    f = np.atleast_1d(np.asarray(freqs, dtype=float))
    gens = generators(net, flicker)
    cols = [*gens, (net.src, net.cir.ground, 0.0, 0.0)]  # last: the source resistance
    rhs = np.zeros((len(net.idx), len(cols)))
    for m, (a, b, _, _) in enumerate(cols):
        for node, s in ((a, 1.0), (b, -1.0)):
            if node in net.idx:
                rhs[net.idx[node], m] += s
    fixed: dict[str, complex] = {net.cir.supply_node: 0.0}
    if net.cir.source_resistance <= 0:
        fixed[net.src] = 0.0
    sol = net.solve(f, load=True, source=True, fixed=fixed, inject=rhs)
    h2 = np.abs(sol[:, net.idx[net.cir.output], :]) ** 2
    white = np.array([w for _, _, w, _ in gens])
    corner = np.array([c for _, _, _, c in gens])
    s_amp = (h2[:, :-1] * white[None] * (1.0 + corner[None] / f[:, None])).sum(axis=1)
    rs = net.cir.source_resistance
    s_src = h2[:, -1] * 4 * rm.K_BOLTZMANN * T0 / rs if rs > 0 else np.zeros(f.size)
    return s_amp, s_src


def supply_rejection_db(net: Network, f: float) -> float:
    """-20 log10 |v_load / v_supply| with the signal EMF at zero."""
    fixed: dict[str, complex] = {net.cir.supply_node: 1.0}
    if net.cir.source_resistance <= 0:
        fixed[net.src] = 0.0
    sol = net.solve([f], load=True, source=True, fixed=fixed, inject={})
    return -20.0 * math.log10(abs(complex(net.v(sol, net.cir.output)[0])))


def peaking_db(net: Network, fm: float) -> float:
    """Largest |gain| over midband |gain| in dB: 40 points a decade, then a bounded search."""
    from scipy.optimize import minimize_scalar

    ref = abs(complex(gain(net, [fm])[0]))
    lg = np.arange(-3.0, 12.0 + 1e-9, 1.0 / 40.0)
    mag = np.abs(gain(net, 10.0**lg))
    i = int(np.argmax(mag))
    res = minimize_scalar(lambda x: -abs(complex(gain(net, [10.0**x])[0])),
                          bounds=(lg[max(i - 1, 0)], lg[min(i + 1, lg.size - 1)]),
                          method="bounded", options={"xatol": 1e-7})
    best = max(mag[i], -res.fun)
    return 20.0 * math.log10(best / ref) if best > ref else 0.0


def stable(net: Network) -> bool:
    """Every finite root of det(G + sC) (supply grounded, EMF zero) in the left half-plane."""
    from scipy.linalg import eig

    drop = {net.idx[net.cir.supply_node]}
    if net.cir.source_resistance <= 0:
        drop.add(net.idx[net.src])
    keep = [i for i in range(len(net.idx)) if i not in drop]
    g = (net.g + net.gl + net.gs)[np.ix_(keep, keep)]
    c = (net.c + net.cl + net.cs)[np.ix_(keep, keep)]
    alpha, beta = eig(g, -c, right=False, homogeneous_eigvals=True)
    fin = np.abs(beta) > 1e-12 * np.abs(alpha)
    p = alpha[fin] / beta[fin]
    return bool(np.all(p.real < 1e-6 * np.maximum(np.abs(p), 1.0)))


# --------------------------------------------------------------------------- analysis


@dataclass(frozen=True)
class Figures:
    """Every compared figure at one condition (nominal or a corner)."""

    conditions: rj.Conditions
    op: rj.OperatingPoint
    active: bool
    gain_db: float
    inverting: bool
    f_low: float
    f_high: float
    z_in: float
    z_out: float
    swing_vpp: float
    supply_current: float
    noise: float
    noise_figure: float | None
    noise_rms: float
    supply_rejection: float
    peaking_db: float
    stable: bool


def figures(cir: rj.Circuit, op: rj.OperatingPoint, req: Mapping[str, Any],
            flicker: Mapping[str, float]) -> Figures:
    """The contract's figures at one operating point for a requirement dict (SI units)."""
    net = Network(cir, op)
    band = (float(req["f_low"]), float(req["f_high"]))
    fm = math.sqrt(band[0] * band[1])
    h = complex(gain(net, [fm])[0])
    f_spot = float(req.get("noise_at", fm))
    s_amp, s_src = densities(net, flicker, [f_spot])
    grid = np.geomspace(band[0], band[1], 2001)
    s_band, _ = densities(net, flicker, grid)
    a_spot = abs(complex(gain(net, [f_spot])[0]))
    sw = min(swing_vpp(net, fm), swing_vpp(net, band[1])) if op.active else 0.0
    return Figures(
        conditions=op.conditions, op=op, active=op.active,
        gain_db=20.0 * math.log10(abs(h)), inverting=bool(h.real < 0),
        f_low=_edge(net, fm, up=False), f_high=_edge(net, fm, up=True),
        z_in=z_in(net, fm), z_out=z_out(net, fm), swing_vpp=sw,
        supply_current=op.supply_current, noise=math.sqrt(s_amp[0]) / a_spot,
        noise_figure=10 * math.log10(1 + s_amp[0] / s_src[0]) if s_src[0] > 0 else None,
        noise_rms=math.sqrt(np.trapezoid(s_band, grid)) / abs(h),
        supply_rejection=supply_rejection_db(net, float(req.get("ripple_at", 100.0))),
        peaking_db=peaking_db(net, fm), stable=stable(net))


@dataclass(frozen=True)
class Analysis:
    """Nominal figures, every corner's, and the verdict rows."""

    nominal: Figures
    corners: tuple[Figures, ...]
    checks: tuple[rm.Check, ...]

    @property
    def swing_vpp(self) -> float:
        """The smallest swing over the corners (contract §4)."""
        return min(c.swing_vpp for c in self.corners)

    @property
    def meets(self) -> bool:
        """Every requirement met at nominal and every corner."""
        return all(c.ok for c in self.checks)


def analyze(design: Mapping[str, Any], spec: Mapping[str, Any]) -> Analysis:
    """All figures of a design at nominal and every corner for a spec dict (SI, degC)."""
    req = spec["require"]
    cir = rj.circuit_from_design(design)
    flicker = {k: float(d.get("flicker_corner") or 0.0)
               for k, d in design.get("devices", {}).items()}
    nom = rj.solve_dc(cir, rj.nominal_conditions(cir))
    guess = rj.guess_vector(cir, nom)
    conds = rj.corner_conditions(cir, tuple(req.get("ambient", (25.0,))),
                                 float(spec.get("supply", {}).get("tolerance", 0.0)))
    corners = tuple(figures(cir, rj.solve_dc(cir, c, guess=guess), req, flicker)
                    for c in conds)
    nominal = figures(cir, nom, req, flicker)
    checks = judge(nominal, corners, req)
    if req.get("thd") is not None:  # distortion: the worst over nominal and every corner
        from .refjfetthd import distortion

        level = float(req.get("thd_level", req["swing"]))
        at = float(req.get("thd_at", math.sqrt(float(req["f_low"]) * float(req["f_high"]))))
        w = max(distortion(cir, f.op, level, at).thd for f in (nominal, *corners))
        checks += (rm.Check("thd", w, req["thd"], w <= req["thd"]),)
    return Analysis(nominal, corners, checks)


def judge(nom: Figures, corners: tuple[Figures, ...], req: Mapping[str, Any]
          ) -> tuple[rm.Check, ...]:
    """Contract §2 second release: each requirement at its worst over nominal and corners."""
    every = (nom, *corners)
    out = []

    def worst(key: str, high_is_bad: bool) -> float:
        vals = [getattr(p, key) for p in every]
        return max(vals) if high_is_bad else min(vals)

    if "gain_db" in req:
        g, tol = float(req["gain_db"]), float(req.get("gain_tolerance_db", 1.0))
        far = max((p.gain_db for p in every), key=lambda x: abs(x - g))
        out.append(rm.Check("gain", far, g, abs(far - g) <= tol))
    for key, bad_high in (("f_low", True), ("f_high", False), ("z_out", True),
                          ("noise", True), ("noise_rms", True), ("noise_figure", True),
                          ("supply_current", True)):
        if req.get(key) is not None:
            w = worst(key, bad_high)
            out.append(rm.Check(key, w, req[key], w <= req[key] if bad_high else w >= req[key]))
    w = worst("z_in", False)
    out.append(rm.Check("z_in", w, float(req.get("z_in", 0.0)), w >= req.get("z_in", 0.0)))
    if "swing" in req:
        w = min(c.swing_vpp for c in corners)
        out.append(rm.Check("swing", w, req["swing"], w >= req["swing"]))
    act = all(c.active for c in corners)
    out.append(rm.Check("active", float(act), 1.0, act))
    if req.get("supply_rejection") is not None:
        w = worst("supply_rejection", False)
        out.append(rm.Check("supply_rejection", w, req["supply_rejection"],
                            w >= req["supply_rejection"]))
    lim = float(req.get("peaking", 3.0))
    w = worst("peaking_db", True)
    out.append(rm.Check("peaking", w, lim, w <= lim))
    st = all(p.stable for p in every)
    out.append(rm.Check("stable", float(st), 1.0, st))
    inv = str(req.get("inverting", "any"))
    if inv in ("yes", "no"):
        out.append(rm.Check("inverting", float(nom.inverting), inv,
                            all(p.inverting == (inv == "yes") for p in every)))
    return tuple(rm.Check(c.name, float(c.value), c.limit, bool(c.ok)) for c in out)
