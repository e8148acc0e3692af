"""Monte Carlo yield: the share of built units that meet every requirement.

Exactly as the contract's section 2 defines it: each resistor and capacitor
uniform within its tolerance, each transistor's hFE(25 degC) log-uniform over
its spread, the supply uniform within its tolerance; a unit counts when it
meets every requirement (gain, corners, impedances, swing, supply current) at
both ambient extremes. Units are evaluated in batches by the same engine that
`analyze` uses (batched Newton, batched MNA); seeded and reproducible.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.engine.analysis import Environment, analyze, batch_values
from stagesynth.engine.circuit import compile_design
from stagesynth.engine.distortion import DistortionRequest
from stagesynth.engine.evaluate import Conditions, evaluate
from stagesynth.engine.noise import plan_for
from stagesynth.judging.verdict import Row, assess

CHUNK = 2500  # units per batch: bounds memory (a few tens of MB) without losing speed
# THD of every unit by the power-series estimate; units whose estimate lies within this
# band of the limit (either side) are confirmed by harmonic balance. The estimate stays
# within about 0.3 dB of harmonic balance (tests/test_distortion.py), so no unit is
# counted on the wrong side of the limit by the screen.
THD_CONFIRM_DB = 1.0
Z95 = 1.959963984540054  # standard normal quantile for a two-sided 95 % interval


@dataclass(frozen=True)
class Sample:
    """N built units: part values in circuit order, hFE(25 degC) per transistor, supply."""

    r: np.ndarray  # (N, nR)
    c: np.ndarray  # (N, nC)
    hfe25: np.ndarray  # (N, nQ)
    supply: np.ndarray  # (N,)


@dataclass(frozen=True)
class YieldEstimate:
    units: int
    passed: int
    seed: int
    interval: tuple[float, float]  # Wilson score interval, 95 %
    failures: Mapping[str, int]  # units failing each requirement (a unit may fail several)
    metrics: Mapping[str, np.ndarray] = field(repr=False)  # per unit, worst of the ambients
    ok: np.ndarray = field(repr=False)  # (N,) bool

    @property
    def estimate(self) -> float:
        return self.passed / self.units if self.units else 0.0

    def to_dict(self) -> dict:
        return {
            "estimate": self.estimate,
            "interval_95": list(self.interval),
            "units": self.units,
            "passed": self.passed,
            "seed": self.seed,
            "failures": dict(self.failures),
            "method": "Monte Carlo per spec-format section 2; Wilson score interval"
                      + ("; THD by the power-series estimate, harmonic balance for units "
                         f"within {THD_CONFIRM_DB:g} dB of the limit"
                         if "thd" in self.metrics else ""),
        }


def wilson_interval(passed: int, n: int, z: float = Z95) -> tuple[float, float]:
    """Wilson score interval for a binomial proportion (Wilson, 1927)."""
    if n == 0:
        return (0.0, 1.0)
    p = passed / n
    denom = 1 + z * z / n
    centre = (p + z * z / (2 * n)) / denom
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / denom
    return (max(0.0, centre - half), min(1.0, centre + half))


def sample_units(design: Design, spec: Spec, n: int, rng: np.random.Generator) -> Sample:
    """Draw n units as section 2 says (uniform parts and supply, log-uniform hFE, a junction
    FET's spread position u uniform)."""
    circuit = compile_design(design)
    r0, c0 = batch_values(design, circuit)
    tr, tc = spec.parts.resistor_tolerance, spec.parts.capacitor_tolerance
    r = r0 * (1.0 + rng.uniform(-tr, tr, size=(n, r0.shape[1])))
    c = c0 * (1.0 + rng.uniform(-tc, tc, size=(n, c0.shape[1])))
    nb = len(circuit.bjts)
    lo = np.array([q.device.hfe_min for q in circuit.bjts])
    hi = np.array([q.device.hfe_max for q in circuit.bjts])
    # one draw per transistor: hFE log-uniform; a junction FET's position u along its
    # IDSS/VP pairing uniform in [0, 1] (IDSS and VP drawn together, contract)
    u = rng.uniform(size=(n, circuit.nq))
    hfe25 = u.copy()
    hfe25[:, :nb] = np.exp(np.log(lo) + u[:, :nb] * (np.log(hi) - np.log(lo)))
    ts = spec.supply.tolerance
    supply = design.supply_voltage * (1.0 + rng.uniform(-ts, ts, size=n))
    return Sample(r, c, hfe25, supply)


def _judge_chunk(design, spec, circuit, sample: Sample, ambients, guess) -> tuple[
    np.ndarray, list[Row], dict[str, np.ndarray]
]:
    """Rows for every (unit, ambient) member; member index = unit * A + ambient."""
    n = sample.supply.shape[0]
    a = len(ambients)
    conds = Conditions(
        hfe25=np.repeat(sample.hfe25, a, axis=0)[:, None, :],
        ambient=np.tile(np.asarray(ambients, dtype=float), n)[:, None],
        supply=np.repeat(sample.supply, a)[:, None],
    )
    fig = evaluate(
        circuit,
        np.repeat(sample.r, a, axis=0),
        np.repeat(sample.c, a, axis=0),
        conds,
        source_resistance=design.source_resistance,
        load_resistance=design.load_resistance,
        load_capacitance=design.load_capacitance,
                   source_capacitance=design.source_capacitance,
        band=(spec.require.f_low, spec.require.f_high),
        corner_guess=guess,
        noise=plan_for(spec.require),
        ripple_at=spec.require.ripple_at,
        response=False,  # yield counts peaking and stability not (contract §2)
        distortion=None if spec.require.thd is None else DistortionRequest(
            spec.require.thd_level_vpp, spec.require.thd_freq, "estimate"),
    )
    if spec.require.thd is not None:
        fig = _confirm_thd(fig, circuit, design, spec, np.repeat(sample.r, a, axis=0),
                           np.repeat(sample.c, a, axis=0))
    rows = assess(fig, spec, circuit, first_corner=0, ratings=False)
    ok_member = np.all(np.stack([row.ok for row in rows]), axis=0)
    ok_unit = np.all(ok_member.reshape(n, a), axis=1)

    def worst(values: np.ndarray, how) -> np.ndarray:
        return how(np.asarray(values, dtype=float).reshape(n, a), axis=1)

    gain = fig.gain_db[:, 0].reshape(n, a)  # one condition per (unit, ambient) member
    far = np.argmax(np.abs(gain - spec.require.gain_db), axis=1)
    metrics = {
        "gain_db": gain[np.arange(n), far],  # the ambient farther from the target
        "f_low": worst(fig.f_low[:, 0], np.max),
        "f_high": worst(fig.f_high[:, 0], np.min),
        "z_in": worst(fig.z_in[:, 0], np.min),
        "z_out": worst(fig.z_out[:, 0], np.max),
        "swing_vpp": worst(fig.swing_vpp[:, 0], np.min),
        "supply_current": worst(fig.supply_current[:, 0], np.max),
    }
    for name in ("noise", "noise_figure", "noise_rms"):  # when the spec asks for them
        if getattr(spec.require, "noise_figure_db" if name == "noise_figure" else name) is None:
            continue
        metrics[name] = worst(getattr(fig, name)[:, 0], np.max)
    if fig.thd is not None:
        metrics["thd"] = worst(fig.thd[:, 0], np.max)
    return ok_unit, [_unit_row(row, n, a) for row in rows], metrics


def _confirm_thd(fig, circuit, design: Design, spec: Spec, r: np.ndarray, c: np.ndarray):
    """Members whose estimated THD is within THD_CONFIRM_DB of the limit, by harmonic
    balance (the rest keep the estimate)."""
    from dataclasses import replace

    from stagesynth.engine.distortion import _dc_subset
    from stagesynth.engine.harmonic import LargeSignal, solve_periodic

    est = fig.thd.reshape(-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        gap = np.abs(20.0 * np.log10(est / spec.require.thd))
    idx = np.flatnonzero(np.isfinite(est) & (gap < THD_CONFIRM_DB))
    if idx.size == 0:
        return fig
    model = LargeSignal(circuit, _dc_subset(fig.dc, idx), r[idx], c[idx],
                        design.source_resistance, design.load_resistance,
                        design.load_capacitance, design.source_capacitance)
    sol = solve_periodic(model, np.repeat(fig.thd_freq, fig.thd.shape[1])[idx],
                         level=spec.require.thd_level_vpp / 2.0)
    thd, hd2, hd3 = (np.array(x, dtype=float).reshape(-1) for x in (fig.thd, fig.hd2, fig.hd3))
    for arr, new in ((thd, sol.thd), (hd2, sol.hd2), (hd3, sol.hd3)):
        arr[idx] = np.where(sol.converged, new, np.inf)
    shape = fig.thd.shape
    return replace(fig, thd=thd.reshape(shape), hd2=hd2.reshape(shape), hd3=hd3.reshape(shape),
                   thd_method="estimate; harmonic balance near the limit")


def _unit_row(row: Row, n: int, a: int) -> Row:
    """A requirement row folded over the ambients: a unit fails if any ambient fails."""
    ok = np.all(np.asarray(row.ok).reshape(n, a), axis=1)
    return Row(row.name, row.value, row.limit, ok, row.margin, row.relation, row.unit,
               row.where)


def monte_carlo(
    design: Design,
    spec: Spec,
    n: int = 10_000,
    *,
    seed: int = 20261201,
    progress: Callable[[int], None] | None = None,
    sample: Sample | None = None,
) -> YieldEstimate:
    """Estimate the yield of `design` against `spec` from n simulated units."""
    rng = np.random.default_rng(seed)
    sample = sample or sample_units(design, spec, n, rng)
    n = sample.supply.shape[0]
    circuit = compile_design(design)
    env = Environment.for_design(design, spec)
    ambients = sorted(set(env.ambient))
    nominal = analyze(design, spec)
    guess = (nominal.f_low, nominal.f_high)
    oks = []
    fails: dict[str, int] = {}
    metrics: dict[str, list[np.ndarray]] = {}
    for start in range(0, n, CHUNK):
        sl = slice(start, min(start + CHUNK, n))
        part = Sample(sample.r[sl], sample.c[sl], sample.hfe25[sl], sample.supply[sl])
        ok, rows, met = _judge_chunk(design, spec, circuit, part, ambients, guess)
        oks.append(ok)
        for row in rows:
            fails[row.name] = fails.get(row.name, 0) + int(np.sum(~row.ok))
        for k, v in met.items():
            metrics.setdefault(k, []).append(v)
        if progress is not None:
            progress(sl.stop - sl.start)
    ok = np.concatenate(oks)
    passed = int(np.sum(ok))
    return YieldEstimate(
        units=n,
        passed=passed,
        seed=seed,
        interval=wilson_interval(passed, n),
        failures={k: v for k, v in fails.items() if v},
        metrics={k: np.concatenate(v) for k, v in metrics.items()},
        ok=ok,
    )
