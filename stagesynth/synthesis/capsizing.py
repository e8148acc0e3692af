"""Size coupling and bypass capacitors for a low corner, on any netlist.

Short-circuit time constants allocate the corner: each capacitor's resistance
is found numerically from the nodal matrix with the other capacitors shorted
(so it works for any circuit the design file holds). The capacitor that sees
the smallest resistance (usually the emitter bypass) takes the dominant share,
the others smaller ones; the set is then scaled against the exact response
with every capacitor at the low end of its tolerance, and snapped to the
series by an exact search over the neighbouring standard values.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from stagesynth.contracts.netlist import Design
from stagesynth.engine.analysis import (
    Environment,
    batch_values,
    condition_arrays,
    corner_conditions,
)
from stagesynth.engine.circuit import Circuit, compile_design
from stagesynth.engine.evaluate import evaluate
from stagesynth.quantities.eseries import nearest, neighbours
from stagesynth.quantities.units import format_quantity as eng

DOMINANT_SHARE = 0.8  # of the corner's angular frequency, given to the dominant capacitor
MINOR_SHARE = 0.02  # of the corner, for a capacitor that must act well below it
F_LOW_MARGIN = 0.97  # the worst-case corner must land at or below this fraction of the target


@dataclass(frozen=True)
class CapSizing:
    design: Design
    shorted_resistance: dict[str, float]  # ohm seen by each capacitor, others shorted
    share: dict[str, float]  # fraction of the corner allocated to each
    f_low_nominal: float  # nominal capacitor values, worst condition
    f_low_worst: float  # every capacitor at -tolerance, worst condition
    target: float
    notes: tuple[str, ...]


def shorted_resistances(design: Design, circuit: Circuit, g: np.ndarray) -> dict[str, float]:
    """Resistance each capacitor sees with the other capacitors shorted (low frequencies).

    `g` is the (n, n) small-signal conductance matrix at the nominal point. The
    source resistance and load resistance are attached; device capacitances are
    open at these frequencies.
    """
    n = circuit.n
    y0 = g.copy()
    o = circuit.output
    y0[o, o] += 1.0 / design.load_resistance
    keep = np.ones(n, dtype=bool)
    if design.source_resistance > 0:
        y0[circuit.input, circuit.input] += 1.0 / design.source_resistance
    else:
        keep[circuit.input] = False  # an ideal source holds the input at AC ground
    big = 1e4 * max(float(np.max(np.abs(np.diag(y0)))), 1.0)
    out = {}
    for ref, a, b in circuit.capacitors:
        y = y0.copy()
        for ref2, a2, b2 in circuit.capacitors:
            if ref2 != ref:
                _stamp(y, a2, b2, big, n)
        idx = np.flatnonzero(keep)
        rhs = np.zeros(n)
        if a < n:
            rhs[a] += 1.0
        if b < n:
            rhs[b] -= 1.0
        sol = np.zeros(n)
        sol[idx] = np.linalg.solve(y[np.ix_(idx, idx)], rhs[idx])
        va = sol[a] if a < n else 0.0
        vb = sol[b] if b < n else 0.0
        out[ref] = float(abs(va - vb))
    return out


def _stamp(y: np.ndarray, a: int, b: int, val: float, n: int) -> None:
    if a < n:
        y[a, a] += val
    if b < n:
        y[b, b] += val
    if a < n and b < n:
        y[a, b] -= val
        y[b, a] -= val


def size_capacitors(
    design: Design,
    f_low: float,
    *,
    env: Environment,
    series: str = "E6",
    tolerance: float = 0.1,
    z_out_max: float | None = None,
    capacitor_max: float = math.inf,
    limits: dict[str, float] | None = None,
    minor: tuple[str, ...] = (),
) -> CapSizing:
    """Capacitor values (from `series`) so that f_low holds with every capacitor at -tolerance,
    at nominal and at every corner of `env`.

    With `z_out_max`, the capacitors in the output path are also made large enough that
    their reactance at midband keeps the output impedance within it. No capacitor exceeds
    `capacitor_max`, nor its own entry in `limits` (e.g. a film-sized ceiling where an
    electrolytic's leakage would move the bias): a capacitor held at its ceiling leaves
    its share of the corner to the others. The capacitors named in `minor` (a bootstrap,
    whose fading near the corner would make the response peak) take only MINOR_SHARE.
    """
    circuit = compile_design(design)
    conds = condition_arrays(circuit, corner_conditions(design, env))  # nominal + corners
    r, c = batch_values(design, circuit)
    refs = [ref for ref, _, _ in circuit.capacitors]
    fig = evaluate(circuit, r, c, conds, source_resistance=design.source_resistance,
                   load_resistance=design.load_resistance,
                   load_capacitance=design.load_capacitance,
                   source_capacitance=design.source_capacitance, band=env.band, corners="none",
                   response=False)
    res = shorted_resistances(design, circuit, fig.nominal.G[0])
    share = _shares(res, minor)
    target = f_low * F_LOW_MARGIN
    cont = np.array([1.0 / (2 * math.pi * target * share[ref] * res[ref]) for ref in refs])
    ceiling = np.array([min(capacitor_max, (limits or {}).get(ref, math.inf)) for ref in refs])
    # the largest standard value at or below each ceiling
    top = np.array([_at_most(x, series) for x in ceiling])

    zcache: dict[bytes, np.ndarray] = {}

    def worst_f_low(cap_sets: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        k = cap_sets.shape[0]
        rr = np.repeat(r, k, axis=0)
        both = np.concatenate([cap_sets, cap_sets * (1.0 - tolerance)], axis=0)
        f = evaluate(circuit, np.concatenate([rr, rr]), both, conds,
                     source_resistance=design.source_resistance,
                     load_resistance=design.load_resistance,
                     load_capacitance=design.load_capacitance,
                   source_capacitance=design.source_capacitance, band=env.band,
                     corners="low", response=False)
        # worst over nominal and every corner (contract section 2, second release)
        zcache[cap_sets.tobytes()] = np.max(f.z_out[k:], axis=1)  # with the low capacitors
        f_low = np.max(f.f_low, axis=1)
        return f_low[:k], f_low[k:]

    cont = np.minimum(cont, top)
    # uniform scaling moves every low-frequency time constant together: refine (the
    # capacitors held at their ceiling stay there, the others take up their share)
    for _ in range(6):
        _, worst = worst_f_low(cont[None, :])
        if not np.isfinite(worst[0]) or worst[0] <= 0:
            break
        free = cont < top * (1 - 1e-9)
        if not np.any(free):
            break
        scale = worst[0] / target
        if abs(scale - 1.0) < 0.01:
            break
        cont = np.where(free, np.minimum(cont * scale, top), cont)
    z_limit = None if z_out_max is None else F_LOW_MARGIN * z_out_max
    if z_limit is not None:
        cont = np.minimum(_widen_for_z_out(cont, worst_f_low, zcache, z_limit), top)
    # exact search over the neighbouring standard values of every capacitor
    options = [sorted({nearest(v, series), *neighbours(v, series, 1)}) for v in cont]
    options = [[x for x in opt if 0.5 * v <= x <= 2.5 * v and x <= cap * (1 + 1e-9)]
               or [min(nearest(v, series), cap)]
               for opt, v, cap in zip(options, cont, top, strict=True)]
    combos = np.array(list(itertools.product(*options)))
    nominal, worst = worst_f_low(combos)
    ok = worst <= target
    if z_limit is not None:
        ok &= zcache[combos.tobytes()] <= z_out_max
    if np.any(ok):
        cost = np.sum(combos, axis=1)  # total capacitance: a fair proxy for size and cost
        pick = int(np.flatnonzero(ok)[np.argmin(cost[ok])])
    else:
        pick = int(np.argmin(worst))
    chosen = dict(zip(refs, combos[pick], strict=True))
    sized = design.with_values(chosen)
    dominant = max(share, key=share.get)
    notes = (
        f"Low corner: short-circuit time constants allocate {100 * share[dominant]:.0f} % of "
        f"the corner to {dominant} (it sees the smallest resistance"
        + (" of the others" if minor else "") + f", {eng(res[dominant], 'Ω', 4)}), "
        + (f"{100 * MINOR_SHARE:.0f} % each to "
           f"{', '.join(sorted(m for m in minor if m in share))} so they act well below "
           "the corner, the rest equally to the others." if minor
           else "the rest equally to the others."),
        f"Capacitors then scaled on the exact response and snapped to {series} so that "
        f"f_low ≤ {eng(target, 'Hz', 4)} even with every capacitor {100 * tolerance:.0f} % "
        f"low, at nominal and every corner (worst case {eng(worst[pick], 'Hz', 4)}; with "
        f"nominal capacitors {eng(nominal[pick], 'Hz', 4)}).",
    )
    return CapSizing(sized, res, share, float(nominal[pick]), float(worst[pick]), target,
                     notes)


def _widen_for_z_out(cont: np.ndarray, run, zcache, z_limit: float) -> np.ndarray:
    """Enlarge the capacitors whose reactance adds to the output impedance until it fits.

    Which capacitors matter is found by trying each ten times larger (one batch); those
    that lower z_out noticeably are doubled together, a few times at most.
    """
    for _ in range(12):
        run(cont[None, :])
        z_now = float(zcache[cont[None, :].tobytes()][0])
        if z_now <= z_limit:
            break
        trials = cont[None, :] * (1.0 + 9.0 * np.eye(cont.size))
        run(trials)
        gain = z_now - zcache[trials.tobytes()]
        if not np.any(gain > 0):
            break  # capacitors cannot help: the resistors set z_out
        cont = np.where(gain >= 0.2 * np.max(gain), cont * 2.0, cont)
    return cont


def _at_most(limit: float, series: str) -> float:
    """The largest standard value of `series` at or below `limit` (inf stays inf)."""
    if not math.isfinite(limit):
        return math.inf
    near = nearest(limit, series)
    if near <= limit * (1 + 1e-9):
        return near
    below = [x for x in neighbours(limit, series, 1) if x <= limit * (1 + 1e-9)]
    return max(below) if below else limit


def _shares(res: dict[str, float], minor: tuple[str, ...] = ()) -> dict[str, float]:
    """Dominant share to the capacitor with the smallest resistance, the rest split evenly;
    the `minor` ones take MINOR_SHARE each off the top."""
    small = {ref: MINOR_SHARE for ref in res if ref in minor}
    main = {ref: r for ref, r in res.items() if ref not in small}
    if not main:
        return {ref: 1.0 / len(res) for ref in res}
    whole = 1.0 - MINOR_SHARE * len(small)
    if len(main) == 1:
        return {**small, **{ref: whole for ref in main}}
    dominant = min(main, key=main.get)
    rest = whole * (1.0 - DOMINANT_SHARE) / (len(main) - 1)
    return {**small, **{ref: (whole * DOMINANT_SHARE if ref == dominant else rest)
                        for ref in main}}
