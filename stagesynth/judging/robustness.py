"""Everything the report says about building many units: yield, spread, bias, heat.

Gathers, for one design and spec: the Monte Carlo yield (the seed and unit count
recorded so it is reproducible from the design file), the sensitivity ranking
and linear worst case, the tolerance advice, the bias stability factors and the
thermal checks. Pure assembly: the physics lives in montecarlo, sensitivity and
stability.
"""

from __future__ import annotations

from dataclasses import dataclass

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.engine.analysis import Analysis, Environment
from stagesynth.judging.montecarlo import YieldEstimate, monte_carlo
from stagesynth.judging.sensitivity import FigureSpread, recommendations, spreads

REPORT_UNITS = 2000  # units for a report's yield when the spec sets no yield target
TARGET_UNITS = 10_000  # units when it does (the figure written by synthesis uses as many)


@dataclass(frozen=True)
class Robustness:
    yield_estimate: YieldEstimate | None
    spreads: tuple[FigureSpread, ...]
    advice: tuple[str, ...]
    stability: tuple  # stability.StabilityFactors per transistor
    thermal: tuple  # stability.ThermalCheck per transistor
    jfet: tuple = ()  # jfet_stability.JfetStability per junction FET

    @property
    def violations(self) -> tuple[str, ...]:
        return tuple(v for t in self.thermal for v in t.violations)


def assess_robustness(
    design: Design, analysis: Analysis, spec: Spec | None, *, units: int | None = None
) -> Robustness:
    """Yield, spread, bias stability and thermal margins of `design`."""
    from stagesynth.judging.jfet_stability import jfet_stability
    from stagesynth.judging.stability import stability_factors, thermal_checks

    env = Environment.for_design(design, spec)
    stab = stability_factors(design, env)
    therm = thermal_checks(analysis)
    fets = jfet_stability(design, env)
    if spec is None:
        return Robustness(None, (), (), tuple(stab), tuple(therm), fets)
    n = units or (TARGET_UNITS if spec.require.yield_target is not None else REPORT_UNITS)
    est = monte_carlo(design, spec, n)
    sp = spreads(design, spec)
    advice = recommendations(sp, spec, tuple(est.failures))
    return Robustness(est, sp, tuple(advice), tuple(stab), tuple(therm), fets)
