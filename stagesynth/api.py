"""The public Python API: the whole flow as a few calls that return frozen values.

spec → synthesize → Result (design, analysis, verdict) → analyze/monte_carlo after an
edit → write_report; to_lti and to_network hand the stage to python-control and
scikit-rf. The command line is a thin layer over these functions: everything it
prints or writes is computed here or below. Heavy libraries load on first use.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.quantities.errors import StageError
from stagesynth.quantities.units import format_quantity as fq

if TYPE_CHECKING:  # pragma: no cover - typing only
    import control
    import skrf

    from stagesynth.contracts.fileio import OutputDir
    from stagesynth.engine.analysis import Analysis
    from stagesynth.engine.polezero import PoleZeroMap
    from stagesynth.engine.pulse import PulseResponse
    from stagesynth.judging.montecarlo import YieldEstimate
    from stagesynth.judging.verdict import Verdict

SEED = 20261201  # default Monte Carlo seed (reproducible runs)
YIELD_UNITS = 10_000  # units of the Monte Carlo a yield requirement gets by default
PREFER = ("margin", "current")
COMPUTED_EXTRA = ("poles_zeros", "capacitors", "robustness")  # stale after an edit


# ---------------------------------------------------------------------------
# Values
# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class YieldResult:
    """A Monte Carlo yield: estimate, 95 % interval, failures by requirement, advice."""

    estimate: float
    interval: tuple[float, float]
    units: int
    passed: int
    seed: int
    failures: Mapping[str, int]
    advice: tuple[str, ...]
    raw: YieldEstimate = field(repr=False)  # per-unit figures, for histograms

    def to_dict(self) -> dict[str, Any]:
        """Estimate, interval, units, seed, failures by requirement and advice."""
        return {**self.raw.to_dict(), "advice": list(self.advice)}


@dataclass(frozen=True)
class Assessment:
    """One design analysed (nominal and every corner) and, with a spec, judged."""

    design: Design
    spec: Spec | None
    analysis: Analysis = field(repr=False)
    verdict: Verdict | None
    yield_result: YieldResult | None = None

    @property
    def meets_spec(self) -> bool | None:
        """True/False against the spec; None without one."""
        return None if self.verdict is None else self.verdict.meets_spec

    @property
    def converged(self) -> bool:
        """The DC operating point converged at nominal and every corner."""
        return self.analysis.converged

    def to_dict(self) -> dict[str, Any]:
        """The object `stagesynth analyze --json` prints."""
        from stagesynth.contracts.netlist import _clean_floats
        from stagesynth.judging.results import analysis_to_dict
        from stagesynth.judging.stability import robustness

        out = analysis_to_dict(self.analysis, self.verdict)
        out["robustness"] = robustness(self.analysis)
        if self.yield_result is not None:
            y = self.yield_result.to_dict()
            out["tolerance_advice"] = y.pop("advice")
            out["yield"] = y
        return _clean_floats(out)


@dataclass(frozen=True)
class Result:
    """A synthesis: the finished design, its analysis and verdict, why, and what conflicts."""

    spec: Spec
    design: Design
    analysis: Analysis = field(repr=False)
    verdict: Verdict
    rationale: tuple[str, ...]
    conflicts: tuple  # topologies.base.Conflict: name, limit, best, advice
    families: tuple  # synth.FamilyReport: how each circuit family fared
    pole_zero: PoleZeroMap | None = field(default=None, repr=False)

    @property
    def meets_spec(self) -> bool:
        """Every requirement passes (the closest design is returned when none can)."""
        return self.verdict.meets_spec

    def to_dict(self) -> dict[str, Any]:
        """Design file, analysis with verdict, rationale, conflicts and families tried."""
        from stagesynth.contracts.netlist import _clean_floats
        from stagesynth.judging.results import analysis_to_dict

        return _clean_floats({
            "meets_spec": self.meets_spec,
            "design": self.design.to_dict(),
            "analysis": analysis_to_dict(self.analysis, self.verdict),
            "rationale": list(self.rationale),
            "conflicts": [asdict(c) for c in self.conflicts],
            "families": [asdict(f) for f in self.families],
        })


@dataclass(frozen=True)
class CapacitorChange:
    """Coupling and bypass capacitors re-sized for a new low corner, and the outcome."""

    design: Design
    before: Analysis = field(repr=False)
    after: Analysis = field(repr=False)
    target: float
    changes: tuple[tuple[str, float, float, float, float], ...]  # ref, old, new, R seen, share
    f_low_worst: float  # every capacitor at its low tolerance
    tolerance: float
    verdict: Verdict | None = None

    @property
    def meets(self) -> bool:
        """Meets the spec when one was given, else reaches the target corner."""
        if self.verdict is not None:
            return self.verdict.meets_spec
        return self.after.f_low <= self.target

    def to_dict(self) -> dict[str, Any]:
        """Old and new values, the corner before and after, and the verdict."""
        return {"target": self.target, "f_low_before": self.before.f_low,
                "f_low_after": self.after.f_low, "f_low_worst": self.f_low_worst,
                "changes": [{"ref": r, "old": o, "new": n, "resistance_seen": rs, "share": s}
                            for r, o, n, rs, s in self.changes],
                "meets_spec": None if self.verdict is None else self.verdict.meets_spec}


# ---------------------------------------------------------------------------
# Loading
# ---------------------------------------------------------------------------
def load_spec(source: str | Path | Mapping[str, Any] | Spec) -> Spec:
    """A validated spec from a TOML file or a dict of the same shape (StageError if bad)."""
    from stagesynth.contracts.spec import load_spec as _load
    from stagesynth.contracts.spec import spec_from_mapping

    if isinstance(source, Spec):
        return source
    if isinstance(source, Mapping):
        return spec_from_mapping(source, "<dict>", base_dir=Path.cwd())
    return _load(source)


def load_design(source: str | Path | Mapping[str, Any] | Design) -> Design:
    """A validated design from a design.json file or a dict of the same shape."""
    from stagesynth.contracts.netlist import design_from_dict
    from stagesynth.contracts.netlist import load_design as _load

    if isinstance(source, Design):
        return source
    if isinstance(source, Mapping):
        return design_from_dict(source, "<dict>")
    return _load(source)


def _design_of(obj: Any) -> Design:
    if isinstance(obj, (Result, Assessment)):
        return obj.design
    return load_design(obj)


def _spec_or_none(spec: Any) -> Spec | None:
    return None if spec is None else load_spec(spec)


# ---------------------------------------------------------------------------
# The flow
# ---------------------------------------------------------------------------
def finished_design(design: Design, analysis: Analysis,
                    pz: PoleZeroMap | None = None) -> Design:
    """The design file's content: netlist plus pole/zero map, capacitor stress, robustness."""
    from stagesynth.engine.polezero import pole_zero_map, poles_zeros_dict
    from stagesynth.judging.stability import robustness
    from stagesynth.report.bom import capacitor_stress

    pz = pz if pz is not None else pole_zero_map(analysis)
    caps = {p.ref: capacitor_stress(design, analysis, p)
            for p in design.parts if p.kind == "capacitor"}
    return replace(design, extra={**design.extra, "poles_zeros": poles_zeros_dict(pz),
                                  "capacitors": caps, "robustness": robustness(analysis)})


def synthesize(spec: Spec | str | Path | Mapping[str, Any], circuit: str | None = None,
               prefer: str = "margin") -> Result:
    """Design a stage that meets `spec` (the simplest circuit family unless `circuit`)."""
    from stagesynth.engine.polezero import pole_zero_map
    from stagesynth.synthesis.synth import synthesize as _synthesize
    from stagesynth.synthesis.topologies import FAMILIES

    spec = load_spec(spec)
    if prefer not in PREFER:
        raise StageError(f"{prefer!r} is not a choice", key="prefer",
                         accepted=", ".join(PREFER))
    if circuit is not None and circuit not in FAMILIES:
        raise StageError(f"{circuit!r} is not a circuit family", key="circuit",
                         accepted=", ".join(FAMILIES))
    res = _synthesize(spec, prefer=prefer, circuit=circuit)
    pz = pole_zero_map(res.analysis)
    final = finished_design(res.design, res.analysis, pz)
    analysis = replace(res.analysis, design=final)
    return Result(spec, final, analysis, res.verdict, tuple(res.notes), tuple(res.conflicts),
                  tuple(res.families), pz)


def monte_carlo(design: Design | str | Path, spec: Spec | str | Path | Mapping[str, Any],
                units: int = YIELD_UNITS, seed: int = SEED, *,
                progress: Callable[[int], None] | None = None) -> YieldResult:
    """Yield over `units` built units (contract section 2), seeded, with tolerance advice."""
    from stagesynth.judging.montecarlo import monte_carlo as _mc
    from stagesynth.judging.sensitivity import recommendations, spreads

    design, spec = _design_of(design), load_spec(spec)
    if isinstance(units, bool) or not isinstance(units, int) or units < 1:
        raise StageError(f"{units!r} is not a number of units", key="units",
                         accepted="a positive whole number, e.g. 10000")
    est = _mc(design, spec, units, seed=seed, progress=progress)
    advice = tuple(recommendations(spreads(design, spec), spec, tuple(est.failures)))
    return YieldResult(est.estimate, tuple(est.interval), est.units, est.passed, est.seed,
                       dict(est.failures), advice, est)


def analyze(design: Design | str | Path | Mapping[str, Any],
            spec: Spec | str | Path | Mapping[str, Any] | None = None, *,
            units: int | None = None, seed: int = SEED,
            progress: Callable[[int], None] | None = None) -> Assessment:
    """Analyse a design at nominal and every corner; with a spec, judge every requirement.

    A spec asking for a yield gets a Monte Carlo of 10,000 units (`units` sets another
    count, 0 skips it); without a yield requirement `units` runs one for information.
    """
    from stagesynth.engine.analysis import analyze as _analyze
    from stagesynth.judging.verdict import judge, with_checks, yield_check

    design, spec = _design_of(design), _spec_or_none(spec)
    if units is not None and (isinstance(units, bool) or not isinstance(units, int)
                              or units < 0):
        raise StageError(f"{units!r} is not a number of units", key="--yield",
                         accepted="a positive whole number, e.g. 10000")
    if units and spec is None:
        raise StageError("the Monte Carlo needs the part tolerances of a spec", key="--yield",
                         accepted="--spec SPEC.toml together with --yield N")
    analysis = _analyze(design, spec)
    if spec is None:
        return Assessment(design, None, analysis, None)
    verdict = judge(analysis, spec)
    if units is None and spec.require.yield_target is not None:
        units = YIELD_UNITS
    y = None
    if units:
        y = monte_carlo(design, spec, units, seed, progress=progress)
        if spec.require.yield_target is not None:
            verdict = with_checks(verdict, yield_check(y.estimate, y.interval,
                                                       spec.require.yield_target))
    return Assessment(design, spec, analysis, verdict, y)


def write_report(result_or_design: Result | Assessment | Design | str | Path,
                 out_dir: str | Path | OutputDir,
                 spec: Spec | str | Path | Mapping[str, Any] | None = None, *,
                 force: bool = False, pulse_width: float | None = None,
                 report: bool = True) -> tuple[Path, ...]:
    """Write the report files (and, for a synthesis Result, design.json) into out_dir.

    Every target is checked before anything is written; files stagesynth did not
    write are never replaced unless `force`. `report=False` writes design.json only.
    """
    from stagesynth.contracts.fileio import OutputDir

    _check_width(pulse_width)
    if not isinstance(out_dir, OutputDir):  # one locked, all-or-nothing set of files
        with OutputDir(Path(out_dir), force=force) as out:
            return write_report(result_or_design, out, spec, pulse_width=pulse_width,
                                report=report)
    obj = result_or_design
    _check_width(pulse_width)
    out = out_dir
    names = (["design.json"] if isinstance(obj, Result) else []) + (
        report_files() if report else [])
    out.check(names)  # refuse before any work is written
    pz = None
    if isinstance(obj, Result):
        design, analysis, verdict, spec_obj = obj.design, obj.analysis, obj.verdict, obj.spec
        notes, pz = list(obj.rationale), obj.pole_zero
    else:
        a = obj if isinstance(obj, Assessment) else analyze(obj, spec, units=0)
        if isinstance(obj, Assessment) and spec is not None and a.spec is None:
            a = analyze(obj.design, spec, units=0)
        design, analysis, verdict, spec_obj = a.design, a.analysis, a.verdict, a.spec
        syn = design.extra.get("synthesis")
        notes = list(syn.get("notes", [])) if isinstance(syn, Mapping) else []
    written: list[Path] = []
    if isinstance(obj, Result):
        written.append(out.write_text("design.json", design.to_json()))
    if report:
        from stagesynth.report.bundle import write_bundle

        pulse = None
        if pulse_width is not None:
            try:
                pulse = pulse_response(analysis, pulse_width)
            except StageError:  # unstable: no pulse response, the report goes without it
                pulse = None
        written += write_bundle(out, design, analysis, verdict=verdict, spec=spec_obj,
                                notes=notes or None, pz=pz, pulse=pulse)
    return tuple(written)


def report_files() -> list[str]:
    """Names of the report files write_report may write (besides design.json)."""
    from stagesynth.report.bundle import BUNDLE_FILES, JFET_FILES

    return list(BUNDLE_FILES) + list(JFET_FILES)


def _recorded_limit(value, default: float) -> float:
    """A part limit recorded in a design file, when it is a positive finite number."""
    try:
        number = float(value)
    except (TypeError, ValueError):
        return default
    return number if math.isfinite(number) and number > 0 else default


def resize_capacitors(design: Design | str | Path, f_low: float,
                      spec: Spec | str | Path | Mapping[str, Any] | None = None
                      ) -> CapacitorChange:
    """Re-size the coupling and bypass capacitors for a new low corner f_low (Hz)."""
    from stagesynth.engine.analysis import Environment
    from stagesynth.engine.analysis import analyze as _analyze
    from stagesynth.judging.results import predicted_block
    from stagesynth.judging.verdict import judge
    from stagesynth.synthesis.capsizing import size_capacitors

    d, spec_obj = _design_of(design), _spec_or_none(spec)
    target = float(f_low)
    if not target > 0:
        raise StageError("must be positive", key="--f-low", accepted='e.g. "5 Hz"')
    env = Environment.for_design(d, spec_obj)
    f_high = env.band[1] if env.band else _analyze(d).f_high
    if not math.isfinite(f_high):
        f_high = 1e4 * target  # no upper corner: judge well above the new low corner
    if target >= f_high:
        raise StageError(f"{fq(target, 'Hz')} is not below the high corner {fq(f_high, 'Hz')}",
                         key="--f-low", accepted="a frequency below f_high")
    env = replace(env, band=(target, f_high))
    syn = d.extra.get("synthesis")
    recorded = syn if isinstance(syn, Mapping) else {}
    if spec_obj is not None:
        series, tol = spec_obj.parts.capacitors, spec_obj.parts.capacitor_tolerance
        cap_max = spec_obj.parts.capacitor_max
    else:  # what the design was made with, else the spec format's defaults
        series = recorded.get("capacitor_series", "E6")
        tol = float(recorded.get("capacitor_tolerance", 0.1))
        cap_max = _recorded_limit(recorded.get("capacitor_max"), 470e-6)
    before = _analyze(d, environment=env)
    sizing = size_capacitors(d, target, env=env, series=series, tolerance=tol,
                             z_out_max=spec_obj.require.z_out if spec_obj else None,
                             capacitor_max=cap_max)
    new = replace(sizing.design, band=(target, f_high))
    after = _analyze(new, environment=env)
    new = replace(new, predicted={**dict(d.predicted), **predicted_block(after)})
    changes = tuple((ref, d.part(ref).value, new.part(ref).value,
                     sizing.shorted_resistance[ref], sizing.share[ref]) for ref in sizing.share)
    verdict = judge(_analyze(new, spec_obj), spec_obj) if spec_obj is not None else None
    return CapacitorChange(new, before, after, target, changes, sizing.f_low_worst, tol,
                           verdict)


# ---------------------------------------------------------------------------
# Interop: python-control and scikit-rf
# ---------------------------------------------------------------------------
def _analysis_of(obj: Any, spec: Any = None) -> Analysis:
    if isinstance(obj, (Result, Assessment)) and spec is None:
        return obj.analysis
    from stagesynth.engine.analysis import Analysis
    from stagesynth.engine.analysis import analyze as _analyze

    if isinstance(obj, Analysis):
        return obj
    return _analyze(_design_of(obj), _spec_or_none(spec))


def _condition_system(analysis: Analysis, condition: int | str):
    """The linearized stage (batch of one) at nominal or one corner of the analysis."""
    from stagesynth.engine.analysis import batch_values, condition_arrays, corner_conditions
    from stagesynth.engine.circuit import compile_design
    from stagesynth.engine.evaluate import evaluate

    design = analysis.design
    conds = corner_conditions(design, analysis.environment)
    if condition in ("nominal", 0):
        return analysis.system
    if isinstance(condition, str):
        labels = [c.label for c in conds]
        if condition not in labels:
            raise StageError(f"{condition!r} is not a condition of this design",
                             key="condition", accepted="'nominal', a corner index "
                             f"1…{len(conds) - 1}, or a label such as {labels[-1]!r}")
        index = labels.index(condition)
    else:
        index = int(condition)
        if not 0 <= index < len(conds):
            raise StageError(f"{condition!r} is not a condition index", key="condition",
                             accepted=f"0 (nominal) … {len(conds) - 1}")
    circuit = compile_design(design)
    r, c = batch_values(design, circuit)
    fig = evaluate(circuit, r, c, condition_arrays(circuit, [conds[index]]),
                   source_resistance=design.source_resistance,
                   load_resistance=design.load_resistance,
                   load_capacitance=design.load_capacitance,
                   source_capacitance=design.source_capacitance,
                   band=analysis.environment.band, corners="none")
    return fig.nominal


def to_lti(design: Any, condition: int | str = "nominal", spec: Any = None
           ) -> control.StateSpace:
    """The gain v_load/v_emf as a python-control StateSpace (time in seconds).

    `condition`: "nominal", a corner index (1…, as in the analysis' corners) or label.
    """
    import control

    from stagesynth.engine.lti import state_space

    m = state_space(_condition_system(_analysis_of(design, spec), condition))
    return control.ss(m.A, m.B, m.C, m.D, inputs=["emf"], outputs=["v_load"])


def to_network(design: Any, spec: Any = None, *, f_start: float | None = None,
               f_stop: float | None = None, points: int | None = None) -> skrf.Network:
    """The nominal stage as a scikit-rf two-port (S at 50 Ω), as in the Touchstone file."""
    from stagesynth.report.touchstone import stage_network

    analysis = _analysis_of(design, spec)
    return stage_network(analysis.design, analysis, f_start, f_stop, points)


def _check_width(width: Any) -> None:
    if width is not None and not (isinstance(width, (int, float)) and width > 0
                                  and math.isfinite(width)):
        raise StageError(f"{width!r} is not a pulse width", key="--pulse-width",
                         accepted='a positive time in seconds, e.g. 1e-4')


def pulse_response(design: Any, width: float | None = None, spec: Any = None
                   ) -> PulseResponse:
    """Step edge (rise, overshoot, settling) and pulse tilt at the load (python-control)."""
    from stagesynth.engine.pulse import pulse_response as _pulse

    _check_width(width)
    try:
        return _pulse(_analysis_of(design, spec), width)
    except ValueError as exc:  # unstable, or no midband gain: nothing to describe
        raise StageError(str(exc), key="pulse response") from None
