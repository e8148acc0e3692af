"""Independent reference of the contract's "Supply and stability" figures (spec-format.md §2).

Written from the contract text alone, on top of refmodel's DC solution: its own nodal
matrices with the supply node kept as an unknown, so that the rail can be driven as an
AC source (signal EMF at zero) or held at AC ground (gain); peaking by a dense sweep
refined with scipy.optimize; poles as generalized eigenvalues (scipy.linalg.eig);
swing as the smaller of refmodel's swing at midband and at the required f_high.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from . import refmodel as rm


@dataclass(frozen=True)
class Network:
    """G and C over every node but ground (the supply included), with source and load."""

    names: tuple[str, ...]
    g: np.ndarray
    c: np.ndarray
    cir: rm.Circuit

    def index(self, node: str) -> int:
        return self.names.index(node)


def network(cir: rm.Circuit, op: rm.OperatingPoint) -> Network:
    """Stamp resistors, capacitors, hybrid-pi transistors, load and source resistance."""
    # the source: EMF behind Rs, and Cs in series when given (second release); with Cs the
    # EMF side of the capacitor is a node of its own, "source EMF node"
    src = _source_node(cir)
    names = sorted({n for n in op.voltages if n != cir.ground} | {cir.supply_node, src})
    idx = {n: i for i, n in enumerate(names)}
    n = len(names)
    g, c = np.zeros((n, n)), np.zeros((n, n))

    def two(m: np.ndarray, a: str, b: str, y: float) -> None:
        for r, s in ((a, 1.0), (b, -1.0)):
            for col, t in ((a, 1.0), (b, -1.0)):
                if r in idx and col in idx:
                    m[idx[r], idx[col]] += s * t * y

    for _, a, b, r in cir.resistors:
        two(g, a, b, 1.0 / r)
    for _, a, b, cv in cir.capacitors:
        two(c, a, b, cv)
    two(g, cir.output, cir.ground, 1.0 / cir.load_resistance)
    two(c, cir.output, cir.ground, cir.load_capacitance)
    if cir.source_capacitance > 0:
        two(c, src, cir.input, cir.source_capacitance)
    if cir.source_resistance > 0:
        two(g, src, cir.ground, 1.0 / cir.source_resistance)
    for q in cir.bjts:
        d = cir.devices[q.device]
        t = op.transistors[q.ref]
        bi = rm.internal_base(q, d)
        if d.r_bb > 0:
            two(g, q.b, bi, 1.0 / d.r_bb)
        two(g, bi, q.e, 1.0 / t.rpi)
        two(c, bi, q.e, t.cpi)
        two(c, bi, q.c, t.cmu)
        two(g, q.c, q.e, 1.0 / t.ro)
        for row, sr in ((q.c, 1.0), (q.e, -1.0)):
            for col, sc in ((bi, 1.0), (q.e, -1.0)):
                if row in idx and col in idx:
                    g[idx[row], idx[col]] += sr * sc * t.gm
    return Network(tuple(names), g, c, cir)


def _source_node(cir: rm.Circuit) -> str:
    """Where the source resistance meets the EMF side: the input, or a node behind Cs."""
    return "source EMF node" if cir.source_capacitance > 0 else cir.input


def _solve(net: Network, freqs: np.ndarray, fixed: Mapping[str, complex],
           inject: Mapping[str, complex]) -> np.ndarray:
    """Node voltages (F, n) with some nodes held at given voltages and currents injected."""
    freqs = np.atleast_1d(np.asarray(freqs, dtype=float))
    n = len(net.names)
    fi = np.array([net.index(k) for k in fixed], dtype=int)
    fv = np.array(list(fixed.values()), dtype=complex)
    free = np.array([i for i in range(n) if i not in set(fi.tolist())], dtype=int)
    y = net.g[None] + 2j * math.pi * freqs[:, None, None] * net.c[None]
    rhs = np.zeros((len(freqs), n), dtype=complex)
    for k, val in inject.items():
        rhs[:, net.index(k)] += val
    b = rhs[:, free] - np.einsum("fij,j->fi", y[:, free][:, :, fi], fv)
    out = np.zeros((len(freqs), n), dtype=complex)
    out[:, fi] = fv
    out[:, free] = np.linalg.solve(y[:, free][:, :, free], b[..., None])[..., 0]
    return out


def signal_gain(net: Network, freqs: np.ndarray) -> np.ndarray:
    """v_load / v_emf with the supply at AC ground (contract §2)."""
    cir = net.cir
    src = _source_node(cir)
    if cir.source_resistance > 0:
        v = _solve(net, freqs, {cir.supply_node: 0.0}, {src: 1.0 / cir.source_resistance})
    else:
        v = _solve(net, freqs, {cir.supply_node: 0.0, src: 1.0}, {})
    return v[:, net.index(cir.output)]


def supply_transfer(net: Network, freqs: np.ndarray) -> np.ndarray:
    """v_load / v_supply with the signal EMF at zero (source resistance to ground)."""
    cir = net.cir
    fixed: dict[str, complex] = {cir.supply_node: 1.0}
    if cir.source_resistance <= 0:
        fixed[_source_node(cir)] = 0.0
    v = _solve(net, freqs, fixed, {})
    return v[:, net.index(cir.output)]


def supply_rejection_db(net: Network, ripple_at: float) -> float:
    """-20 log10 |v_load / v_supply| at ripple_at."""
    return -20.0 * math.log10(abs(complex(supply_transfer(net, [ripple_at])[0])))


def peaking_db(net: Network, fm: float) -> tuple[float, float]:
    """(largest |gain| over midband |gain| in dB, its frequency): 40 points a decade from
    1 mHz to 1 THz, then scipy's bounded scalar search between the neighbours of the best."""
    from scipy.optimize import minimize_scalar

    ref = abs(complex(signal_gain(net, [fm])[0]))
    lg = np.arange(-3.0, 12.0 + 1e-9, 1.0 / 40.0)
    mag = np.abs(signal_gain(net, 10.0 ** lg))
    i = int(np.argmax(mag))
    lo, hi = lg[max(i - 1, 0)], lg[min(i + 1, lg.size - 1)]
    res = minimize_scalar(lambda x: -abs(complex(signal_gain(net, [10.0 ** x])[0])),
                          bounds=(lo, hi), method="bounded", options={"xatol": 1e-7})
    best, where = max((mag[i], lg[i]), (-res.fun, res.x))
    if best <= ref:
        return 0.0, fm
    return 20.0 * math.log10(best / ref), 10.0 ** where


def poles_hz(net: Network) -> np.ndarray:
    """Finite roots of det(G + sC) with the supply at AC ground and the EMF at zero, in Hz."""
    from scipy.linalg import eig

    cir = net.cir
    drop = {net.index(cir.supply_node)}
    if cir.source_resistance <= 0:
        drop.add(net.index(_source_node(cir)))
    keep = [i for i in range(len(net.names)) if i not in drop]
    g = net.g[np.ix_(keep, keep)]
    c = net.c[np.ix_(keep, keep)]
    w = eig(g, -c, right=False, homogeneous_eigvals=True)
    alpha, beta = w[0], w[1]
    finite = np.abs(beta) > 1e-12 * np.abs(alpha)
    return alpha[finite] / beta[finite] / (2.0 * math.pi)


def is_stable(net: Network) -> bool:
    """Every pole strictly in the left half-plane (rounding allowed at the origin)."""
    p = poles_hz(net)
    return bool(np.all(p.real < 1e-6 * np.maximum(np.abs(p), 1.0)))


@dataclass(frozen=True)
class ConditionFigures:
    """The supply and stability figures of one operating condition."""

    supply_rejection: float
    peaking_db: float
    peak_freq: float
    stable: bool
    swing_mid: float
    swing_top: float


def figures(cir: rm.Circuit, op: rm.OperatingPoint, band: tuple[float, float],
            ripple_at: float) -> ConditionFigures:
    """Everything of this module at one operating point."""
    fm = math.sqrt(band[0] * band[1])
    net = network(cir, op)
    pk, fp = peaking_db(net, fm)
    active = all(t.active for t in op.transistors.values())
    mid = rm.swing_vpp(cir, op, fm) if active else 0.0
    top = rm.swing_vpp(cir, op, band[1]) if active else 0.0
    return ConditionFigures(supply_rejection_db(net, ripple_at), pk, fp, is_stable(net), mid,
                            top)


def every_condition(design: Mapping[str, Any], spec: Mapping[str, Any]
                    ) -> list[ConditionFigures]:
    """Nominal first, then every corner of the reference model."""
    req = spec["require"]
    cir = rm.circuit_from_design(design)
    band = (float(req["f_low"]), float(req["f_high"]))
    ripple_at = float(req.get("ripple_at", 100.0))
    conds = [rm.nominal_conditions(cir), *rm.corner_conditions(
        cir, tuple(req.get("ambient", (25.0,))),
        float(spec.get("supply", {}).get("tolerance", 0.0)))]
    nom = rm.solve_dc(cir, conds[0])
    guess = rm._guess_vector(cir, nom)
    out = [figures(cir, nom, band, ripple_at)]
    for cond in conds[1:]:
        out.append(figures(cir, rm.solve_dc(cir, cond, guess=guess), band, ripple_at))
    return out


def checks(design: Mapping[str, Any], spec: Mapping[str, Any]) -> tuple[rm.Check, ...]:
    """The second-release rows: supply rejection (when asked), peaking, stability (always),
    each at its worst over nominal and every corner (the swing at midband and f_high is
    refmodel's own)."""
    req = spec["require"]
    figs = every_condition(design, spec)
    out = []
    if req.get("supply_rejection") is not None:
        worst = min(f.supply_rejection for f in figs)
        out.append(rm.Check("supply_rejection", worst, req["supply_rejection"],
                            worst >= req["supply_rejection"]))
    limit = float(req.get("peaking", 3.0))
    worst = max(f.peaking_db for f in figs)
    out.append(rm.Check("peaking", worst, limit, worst <= limit))
    stable = all(f.stable for f in figs)
    out.append(rm.Check("stable", float(stable), 1.0, stable))
    return tuple(out)
