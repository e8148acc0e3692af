"""Which parts push each requirement toward its limit, and by how much.

Sensitivities come from central differences of the exact analysis (one batched
evaluation: every part, each transistor's hFE and the supply nudged up and
down). Each source of variation is uniform within its tolerance, so its share
of a figure's variance is (S * tol)^2 / 3 over the sum; the linear worst case
takes every source to the end of its range that hurts. Judged at the nominal
ambient and at the ambient extremes; the worse of them is reported.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from stagesynth.contracts.jfet import NOMINAL_U
from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.engine.analysis import Environment, batch_values
from stagesynth.engine.circuit import compile_design
from stagesynth.engine.evaluate import Conditions, evaluate
from stagesynth.quantities.units import format_number as num

STEP = 1e-3  # relative perturbation for the central differences
METRICS = ("gain_db", "f_low", "f_high", "z_in", "z_out", "swing_vpp", "supply_current")
_UNITS = {"gain_db": "dB", "f_low": "Hz", "f_high": "Hz", "z_in": "Ω", "z_out": "Ω",
          "swing_vpp": "Vpp", "supply_current": "A"}


@dataclass(frozen=True)
class Source:
    """One source of unit-to-unit variation and its half-range (relative)."""

    name: str  # "R3", "C1", "hFE Q1", "supply"
    tolerance: float
    log_range: bool = False  # hFE: log-uniform over [min, max]


@dataclass(frozen=True)
class Contribution:
    source: str
    sensitivity: float  # change of the figure for +1 % of this source (figure units)
    share: float  # of the figure's variance
    worst_direction: str  # "high" or "low": the end of the range that hurts


@dataclass(frozen=True)
class FigureSpread:
    figure: str
    unit: str
    nominal: float
    limit: float | tuple[float, float] | None
    worst_case: float  # linear worst case toward the limit
    worst_ok: bool | None  # None where the spec sets no limit on this figure
    contributions: tuple[Contribution, ...]  # largest share first


def sources(design: Design, spec: Spec) -> list[Source]:
    """Parts, transistors and supply with the tolerance the spec gives them."""
    circuit = compile_design(design)
    out = [Source(ref, spec.parts.resistor_tolerance) for ref, _, _ in circuit.resistors]
    out += [Source(ref, spec.parts.capacitor_tolerance) for ref, _, _ in circuit.capacitors]
    for q in circuit.bjts:
        half = 0.5 * math.log(q.device.hfe_max / q.device.hfe_min)
        out.append(Source(f"hFE {q.ref}", half, log_range=True))
    for q in circuit.jfets:  # u from 0 to 1 about 0.5: the nominal value +- 100 %
        out.append(Source(f"IDSS/VP {q.ref}", 1.0))
    if spec.supply.tolerance > 0:
        out.append(Source("supply", spec.supply.tolerance))
    return out


def spreads(design: Design, spec: Spec) -> tuple[FigureSpread, ...]:
    """Per requirement figure: sensitivities, variance shares and linear worst case."""
    circuit = compile_design(design)
    env = Environment.for_design(design, spec)
    srcs = sources(design, spec)
    r0, c0 = batch_values(design, circuit)
    nr, nc, nq = r0.shape[1], c0.shape[1], circuit.nq
    hfe0 = np.array([q.device.hfe_nominal for q in circuit.bjts]
                    + [NOMINAL_U] * len(circuit.jfets))
    # member 0 nominal, then +/- for every source
    k = 1 + 2 * len(srcs)
    r = np.repeat(r0, k, axis=0)
    c = np.repeat(c0, k, axis=0)
    hfe = np.tile(hfe0, (k, 1))
    supply = np.full(k, design.supply_voltage)
    for i, _ in enumerate(srcs):
        for sign, row in ((1.0, 1 + 2 * i), (-1.0, 2 + 2 * i)):
            f = 1.0 + sign * STEP
            if i < nr:
                r[row, i] *= f
            elif i < nr + nc:
                c[row, i - nr] *= f
            elif i < nr + nc + nq:
                hfe[row, i - nr - nc] *= f
            else:
                supply[row] *= f
    ambients = sorted({25.0, *env.ambient})
    results: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    guess = None
    for amb in ambients:
        conds = Conditions(hfe25=hfe[:, None, :], ambient=np.full((k, 1), amb),
                           supply=supply[:, None])
        fig = evaluate(circuit, r, c, conds, source_resistance=design.source_resistance,
                       load_resistance=design.load_resistance,
                       load_capacitance=design.load_capacitance,
                   source_capacitance=design.source_capacitance, band=env.band,
                       corner_guess=guess, response=False)
        guess = (float(fig.f_low[0, 0]), float(fig.f_high[0, 0]))
        vals = {  # one condition per member: column 0
            "gain_db": fig.gain_db[:, 0], "f_low": fig.f_low[:, 0], "f_high": fig.f_high[:, 0],
            "z_in": fig.z_in[:, 0], "z_out": fig.z_out[:, 0], "swing_vpp": fig.swing_vpp[:, 0],
            "supply_current": fig.supply_current[:, 0],
        }
        for name, v in vals.items():
            v = np.asarray(v, dtype=float)
            # figure change per +1 % of the source (central difference)
            sens = (v[1::2] - v[2::2]) / (2 * STEP) * 0.01
            prev = results.get(name)
            if prev is None or _worse(name, v[0], prev[0][0], spec):
                results[name] = (v, sens)
    return tuple(_spread(name, *results[name], srcs, spec) for name in METRICS)


def _worse(name: str, new: float, old: float, spec: Spec) -> bool:
    """Is `new` nearer the limit than `old` for this figure?"""
    if name in ("f_low", "z_out", "supply_current"):
        return new > old
    if name == "gain_db":
        return abs(new - spec.require.gain_db) > abs(old - spec.require.gain_db)
    return new < old


def _limit(name: str, spec: Spec):
    r = spec.require
    return {
        "gain_db": (r.gain_db - r.gain_tolerance_db, r.gain_db + r.gain_tolerance_db),
        "f_low": r.f_low,
        "f_high": r.f_high,
        "z_in": r.z_in if r.z_in > 0 else None,
        "z_out": r.z_out,
        "swing_vpp": r.swing_vpp if r.swing_vpp > 0 else None,
        "supply_current": r.supply_current,
    }[name]


def _spread(name, values, sens, srcs, spec) -> FigureSpread:
    nominal = float(values[0])
    # each source's swing over its range, per +1 % sensitivity: tolerance in % units
    span = np.array([s.tolerance * 100.0 for s in srcs])
    sens = np.where(np.isfinite(sens), sens, 0.0)
    var = (sens * span) ** 2 / 3.0
    total = float(np.sum(var)) or 1.0
    limit = _limit(name, spec)
    lower_is_bad = name in ("f_high", "z_in", "swing_vpp")
    if name == "gain_db":
        up = nominal + float(np.sum(np.abs(sens) * span))
        down = nominal - float(np.sum(np.abs(sens) * span))
        lo, hi = limit
        worst = up if (up - hi) > (lo - down) else down
        ok = lo <= down and up <= hi
        hurt = np.where(sens > 0, "high", "low") if worst == up else np.where(
            sens > 0, "low", "high")
    else:
        delta = float(np.sum(np.abs(sens) * span))
        worst = nominal - delta if lower_is_bad else nominal + delta
        ok = None if limit is None else (worst >= limit if lower_is_bad else worst <= limit)
        hurt = np.where((sens > 0) == lower_is_bad, "low", "high")
    order = np.argsort(-var)
    contributions = tuple(
        Contribution(srcs[i].name, float(sens[i]), float(var[i] / total), str(hurt[i]))
        for i in order
        if var[i] > 0
    )
    return FigureSpread(name, _UNITS[name], nominal, limit, worst, ok, contributions)


def recommendations(spreads_: tuple[FigureSpread, ...], spec: Spec,
                    failing: tuple[str, ...] = ()) -> list[str]:
    """Which parts deserve a tighter tolerance: the top contributors where the worst
    case crosses a limit, or where the Monte Carlo found failures."""
    out = []
    for sp in spreads_:
        if not (sp.worst_ok is False or sp.figure.split("_vpp")[0] in failing
                or sp.figure in failing):
            continue
        top = [c for c in sp.contributions[:3] if c.share >= 0.15]
        if not top:
            continue
        parts = []
        for c in top:
            if c.source.startswith("R"):
                parts.append(f"{c.source} ({100 * c.share:.0f} % of the spread; a tighter "
                             f"resistor than {100 * spec.parts.resistor_tolerance:g} % helps)")
            elif c.source.startswith("C"):
                parts.append(f"{c.source} ({100 * c.share:.0f} %; a tighter capacitor than "
                             f"{100 * spec.parts.capacitor_tolerance:g} % or a larger value)")
            else:
                parts.append(f"{c.source} ({100 * c.share:.0f} %)")
        out.append(f"{sp.figure}: worst case {num(sp.worst_case, 4)} {sp.unit} against "
                   f"{_limit_text(sp.limit, sp.unit)}; driven by " + ", ".join(parts))
    return out


def _limit_text(limit, unit) -> str:
    if isinstance(limit, tuple):
        return f"{limit[0]:.2f} … {limit[1]:.2f} {unit}"
    return "no limit" if limit is None else f"{num(limit, 4)} {unit}"


def spreads_to_dict(spreads_: tuple[FigureSpread, ...]) -> list[dict]:
    return [
        {
            "figure": sp.figure,
            "unit": sp.unit,
            "nominal": sp.nominal,
            "limit": list(sp.limit) if isinstance(sp.limit, tuple) else sp.limit,
            "worst_case": sp.worst_case,
            "worst_case_ok": sp.worst_ok,
            "contributions": [
                {"source": c.source, "per_percent": c.sensitivity, "share": c.share,
                 "hurts_when": c.worst_direction}
                for c in sp.contributions
            ],
        }
        for sp in spreads_
    ]
