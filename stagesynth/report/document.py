"""The design report: one document model rendered as Markdown and as self-contained HTML.

The report quotes the engine (analysis, verdict, parts stresses, poles and zeros) and
never computes physics of its own. The HTML file carries its figures as inline SVG
and its style inline, so it opens offline and prints cleanly; the Markdown file links
to the SVG files written beside it.
"""

from __future__ import annotations

import html
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

from stagesynth.judging.textout import (
    check_limit,
    check_value,
    fmt,
    margin_text,
    status_text,
    transistor_cells,
)
from stagesynth.quantities.units import format_number, format_quantity
from stagesynth.quantities.units import format_number as num
from stagesynth.quantities.units import format_quantity as eng

if TYPE_CHECKING:  # pragma: no cover - typing only
    from stagesynth.contracts.netlist import Design
    from stagesynth.contracts.spec import Spec
    from stagesynth.engine.analysis import Analysis
    from stagesynth.engine.polezero import PoleZeroMap
    from stagesynth.judging.verdict import Verdict

FIGURE_FILES = {"schematic": "schematic.svg", "bode": "bode.svg", "impedance": "impedance.svg",
                "histograms": "histograms.svg", "pulse": "pulse.svg", "noise": "noise.svg",
                "ripple": "ripple.svg",
                "distortion": "distortion.svg"}

SAFETY = (
    "Check every voltage and power rating with margin against the worst case in this "
    "report (the suggested ratings are common practice, not a guarantee); add the signal "
    "swing to the DC voltage where a part sees both.",
    "Electrolytic capacitors are polarized: fit them with the positive end as listed, and "
    "never beyond their rated voltage. A reversed or over-voltage electrolytic can vent or "
    "burst.",
    "Never connect this stage to a mains-derived supply, or to equipment that is, without "
    "proper isolation and protection designed for that purpose.",
    "Local electrical codes, product-safety standards and licensed practice come first; "
    "this report does not replace them.",
    "The figures are predictions from a small-signal model with nominal parts; build and "
    "measure a prototype before relying on the design.",
)


# ---------------------------------------------------------------------------
# A small document model shared by both renderers
# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class Table:
    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    numeric: tuple[int, ...] = ()  # column indices set right-aligned
    status: int | None = None  # column holding "pass"/"FAIL"


@dataclass(frozen=True)
class Figure:
    name: str  # key of FIGURE_FILES
    alt: str  # short description (image alt text)
    caption: str


@dataclass(frozen=True)
class Section:
    title: str
    blocks: tuple = ()  # str (paragraph), list[str] (bullets), Table, Figure
    css_class: str = ""


@dataclass(frozen=True)
class Document:
    title: str
    subtitle: str
    status: str
    status_ok: bool | None  # None when there is nothing to judge against
    sections: tuple[Section, ...] = field(default_factory=tuple)


# ---------------------------------------------------------------------------
# Content
# ---------------------------------------------------------------------------
def _phase_deg(analysis: Analysis) -> float:
    return math.degrees(math.atan2(analysis.gain.imag, analysis.gain.real))


def _summary(analysis: Analysis) -> Table:
    worst = min(analysis.corners, key=lambda c: c.swing_vpp)
    top = max(analysis.corners, key=lambda c: c.supply_current)
    sense = "inverting" if analysis.inverting else "non-inverting"
    rows = [
        ("gain at midband", f"{analysis.gain_db:.2f} dB",
         f"{eng(abs(analysis.gain), 'V/V', 3)}, {sense}, "
         f"phase {_phase_deg(analysis):.0f}°".replace("-", "−")),
        ("lower −3 dB corner f_low",
         fmt(analysis.f_low, "Hz") if analysis.f_low > 0 else "none",
         "DC coupled" if analysis.f_low <= 0 else "|gain| 3 dB below midband"),
        ("upper −3 dB corner f_high", fmt(analysis.f_high, "Hz"),
         "|gain| 3 dB below midband" if math.isfinite(analysis.f_high) else "none found"),
        ("midband", fmt(analysis.midband, "Hz"), "where midband figures are taken"),
        ("input impedance z_in", fmt(analysis.z_in, "Ω"), "load in place"),
        ("output impedance z_out", fmt(analysis.z_out, "Ω"), "source resistance in place"),
        ("supply current", fmt(analysis.supply_current, "A"),
         f"nominal; up to {fmt(top.supply_current, 'A')} at {top.condition.label}"),
        ("output swing", fmt(analysis.swing_vpp, "Vpp"),
         f"smallest over the corners: {worst.condition.label}, {worst.swing_limit}"),
    ]
    return Table(("figure", "value", "conditions"), tuple(rows), numeric=(1,))


def _requirements(verdict: Verdict) -> Table:
    rows = []
    for c in verdict.checks:
        limit = check_limit(c).replace(">=", "≥").replace("<=", "≤")
        rows.append((c.name, check_value(c), limit, margin_text(c), status_text(c),
                     c.condition or c.where, "pass" if c.ok else "FAIL", c.detail))
    return Table(("requirement", "value", "limit", "margin", "status", "worst at", "result",
                  "detail"), tuple(rows), numeric=(1, 2, 3), status=6)


def _circuit_text(design: Design, analysis: Analysis) -> list[str]:
    env = analysis.environment
    tol = (f" ± {format_quantity(env.supply_tolerance, '%')}" if env.supply_tolerance else "")
    if env.supply_tolerance:  # the span it covers, as a battery range is written
        v = design.supply_voltage
        tol += (f" ({fmt(v * (1 - env.supply_tolerance), 'V')} … "
                f"{fmt(v * (1 + env.supply_tolerance), 'V')})")
    load = fmt(design.load_resistance, "Ω")
    if design.load_capacitance > 0:
        load += f" ∥ {fmt(design.load_capacitance, 'F')}"
    src = fmt(design.source_resistance, "Ω") if design.source_resistance > 0 else "no resistance"
    return [
        f"Supply: {fmt(design.supply_voltage, 'V')}{tol} at node {design.supply_node}, "
        f"ground is node {design.ground}.",
        f"Source: an EMF behind {src} drives node {design.input}.",
        f"Load: {load} from node {design.output} to ground.",
    ]


def _bom_table(rows: Sequence[Mapping[str, str]]) -> Table:
    body = []
    for r in rows:
        notes = [s for s in r.get("note", "").split("; ")
                 if s and "common practice" not in s and not s.startswith("positive end")]
        if r["dc_voltage_max"]:
            stress = f"{r['dc_voltage_max']} DC"
        elif r["dissipation_max"]:
            stress = r["dissipation_max"]
        else:
            stress = ""
        body.append((r["ref"], r["kind"], r["value"], r["series"], r["tolerance"], r["nodes"],
                     stress, r["suggested_rating"], r["type"], "; ".join(notes)))
    return Table(("ref", "part", "value", "series", "tolerance", "nodes", "worst stress",
                  "suggested rating", "type", "notes"), tuple(body), numeric=(2, 6))


def _order_table(rows: Sequence[Mapping[str, str]]) -> Table:
    from stagesynth.report.bom import order_rows

    body = tuple((r["qty"], r["refs"], r["part"], r["value"], r["tolerance"], r["rating"],
                  r["type"]) for r in order_rows(list(rows)))
    return Table(("qty", "refs", "part", "value", "tolerance", "rating", "type"), body,
                 numeric=(0,))


def _operating_tables(design: Design, analysis: Analysis) -> tuple[Table, Table]:
    refs = [p.ref for p in design.bjts]
    header = ["condition"]
    for r in refs:
        header += [f"{r} IC", f"{r} VCE", f"{r} Tj", f"{r} dissipation"]
    sat = {p.ref: design.devices[p.device].vce_sat for p in design.bjts}
    header += ["supply I", "swing", "limited by", "active"]
    rows = []
    points = (analysis.nominal, *analysis.corners)
    for p in points:
        row = [p.condition.label]
        for r in refs:
            s = p.transistors[r]
            ic, vce, power = transistor_cells(s, sat[r])
            row += [ic, vce, f"{s.tj:.1f} °C", power]
        row += [fmt(p.supply_current, "A"), fmt(p.swing_vpp, "Vpp"), p.swing_limit,
                "yes" if p.active else "NO"]
        rows.append(tuple(row))
    numeric = tuple(range(1, 1 + 4 * len(refs) + 2))
    ops = Table(tuple(header), tuple(rows), numeric=numeric)

    nodes = [n for n in design.nodes() if n != design.ground]
    key = {n: ("supply" if n == design.supply_node else n) for n in nodes}
    vrows = []
    for p in points:
        vrows.append((p.condition.label,
                      *(fmt(p.node_voltages[key[n]], "V") for n in nodes)))
    volts = Table(("condition", *nodes), tuple(vrows), numeric=tuple(range(1, len(nodes) + 1)))
    return ops, volts


def _root_rows(pz: PoleZeroMap) -> Table:
    rows = []
    for kind, roots in (("pole", pz.poles), ("zero", pz.zeros)):
        for r in roots:
            f = r.freq
            if f.imag < 0:
                continue  # shown with its conjugate
            if f == 0:
                where = "0 (origin)"
            elif f.imag == 0:
                where = f"{'−' if f.real < 0 else '+'}{fmt(abs(f.real), 'Hz')}"
            else:
                where = (f"{'−' if f.real < 0 else '+'}{fmt(abs(f.real), 'Hz')} "
                         f"± j{fmt(abs(f.imag), 'Hz')}")
            q = "" if f == 0 or f.imag == 0 else f"{num(r.q, 2)}"
            rows.append((kind, fmt(r.magnitude, "Hz") if f != 0 else "0", where, q, r.label))
    return Table(("kind", "|s|/2π", "s/2π", "Q", "type"), tuple(rows), numeric=(1, 2))


def build_document(
    design: Design,
    analysis: Analysis,
    verdict: Verdict | None = None,
    spec: Spec | None = None,
    notes: Sequence[str] | None = None,
    *,
    bom: Sequence[Mapping[str, str]] | None = None,
    pz: PoleZeroMap | None = None,
    robustness=None,
    pulse=None,
    distortion=None,
) -> Document:
    """The report's content, independent of the output format."""
    from stagesynth import __version__
    from stagesynth.engine.polezero import corner_estimates, pole_zero_map
    from stagesynth.report.bom import bom_rows

    bom = bom if bom is not None else bom_rows(design, analysis, spec)
    pz = pz if pz is not None else pole_zero_map(analysis)

    title = design.title or (spec.title if spec is not None and spec.title else "Gain stage")
    topo = f"circuit {design.topology}; " if design.topology else ""
    subtitle = (f"Discrete transistor gain stage: {topo}{len(design.parts)} parts. "
                f"Report by stagesynth {__version__}.")
    if verdict is None:
        status, ok = ("Analysed without a spec: the figures below are predictions, with no "
                      "requirement to judge them against."), None
    elif verdict.meets_spec:
        status, ok = "Meets the spec: every requirement passes at the conditions shown.", True
    else:
        failed = ", ".join(c.name for c in verdict.failed)
        status, ok = f"Does NOT meet the spec. Failing: {failed}.", False
    if not analysis.converged:
        status += " Warning: the DC operating point did not converge at some condition."
        ok = False

    sections: list[Section] = []
    sections.append(Section("Summary", (
        "Nominal conditions: hFE typical, 25 °C ambient, nominal supply and part values. "
        "Gain is v_load / v_source_emf with the source resistance and the load in place.",
        _summary(analysis),
    )))
    if verdict is not None:
        sections.append(Section("Requirements", (
            "Each margin is in the requirement's own unit: dB for gains, volts, ohms and "
            "amperes for the others, and a factor for the −3 dB corners (×2 means the "
            "corner lies twice as far out as asked). A failing row says how far short it "
            "is.",
            _requirements(verdict),
        )))
    sections.append(Section("Circuit", (
        Figure("schematic", "Schematic", f"Schematic of {title}, with the source and load "
               "the stage was designed for."),
        _circuit_text(design, analysis),
    )))
    sections.append(Section("Parts list", (
        "Worst stress: the highest DC voltage across a capacitor, or the highest dissipation "
        "of a resistor or transistor, over the nominal point and every corner. Suggested "
        "ratings are common practice: at least 2× the worst stress, rounded up to the next "
        "standard step. Series is the IEC 60063 series the value belongs to"
        + (" (the spec's series and tolerance)." if spec is not None
           else " (the coarsest that holds it; the tolerance the design was made with, "
                "when its file records it)."),
        _bom_table(bom),
        "To order (bom.csv): identical parts grouped, with what each must offer. A "
        "transistor is any part of that polarity whose hFE spread lies within the range "
        "shown, with at least the fT and ratings listed and at most the Ccb.",
        _order_table(bom),
    )))
    ops, volts = _operating_tables(design, analysis)
    sections.append(Section("Operating point at every corner", (
        "Corners combine hFE min and max, the ambient extremes and the supply tolerance. "
        "Currents and voltages are magnitudes in the transistor's own sense (positive when "
        "active); the swing is the largest symmetric output sine before cutoff or saturation.",
        ops,
        "DC node voltages (to ground):",
        volts,
    )))
    if pulse is not None:  # read before the Bode plot by sensor and ultrasonic users
        from stagesynth.report.pulseview import pulse_section

        sections.append(pulse_section(pulse))
    bode_caption = "Gain magnitude and phase of the nominal stage, from the AC analysis. "
    if spec is not None:
        bode_caption += ("Shaded areas are outside the spec: above the gain window across "
                         "the required band, and below midband − 3 dB inside it (a −3 dB point "
                         "there would break f_low or f_high); the bar at midband is the "
                         "gain window, judged at midband.")
    else:
        bode_caption += "Circles mark the −3 dB points."
    sections.append(Section("Frequency response", (
        Figure("bode", "Bode plot of the gain", bode_caption),
        Figure("ripple", "Supply ripple transfer",
               "Ripple on the supply rail reaching the load, |v_load / v_supply| of the "
               "nominal stage with the signal source at zero (the rail taken as an AC "
               "source); the circle marks the ripple frequency where supply rejection is "
               "judged." + (" Hatched: above the spec's limit there." if spec is not None
                            and spec.require.supply_rejection_db is not None else "")),
        Figure("impedance", "Input and output impedance",
               "Input impedance (load in place) and output impedance (source "
               "resistance in place, load removed) of the nominal stage."
               + (" Shaded: outside the spec's limits (judged at midband)." if spec is not None
                  else "")),
    )))
    if distortion is not None:  # (DistortionViews, rationale lines) from the engine
        from stagesynth.report.distortionview import distortion_section

        sections.append(distortion_section(*distortion))
    est_lo, est_hi = corner_estimates(pz)
    est = []
    if analysis.f_low > 0 and est_lo > 0:
        est.append(f"f_low ≈ {fmt(est_lo, 'Hz')} (exact {fmt(analysis.f_low, 'Hz')})")
    if math.isfinite(analysis.f_high) and math.isfinite(est_hi):
        est.append(f"f_high ≈ {fmt(est_hi, 'Hz')} (exact {fmt(analysis.f_high, 'Hz')})")
    pz_blocks: list = [
        "Poles and zeros of v_load / v_source_emf (nominal), as generalized eigenvalues of the "
        "nodal matrices; s/2π in hertz, negative real part = left half-plane.",
        _root_rows(pz),
    ]
    if est:
        pz_blocks.append("Root-sum-square estimates of the corners from these roots: "
                         + "; ".join(est) + ".")
    if not pz.stable:
        pz_blocks.append("Warning: a pole lies in the right half-plane: the stage is unstable.")
    sections.append(Section("Poles and zeros", tuple(pz_blocks)))
    noise = _noise_section(analysis, spec)
    if noise is not None:
        sections.append(noise)
    sections.append(_supply_stability_section(analysis, spec, pz))
    if robustness is not None:
        sections.append(_robustness_section(robustness, spec))
    if notes:
        sections.append(Section("Design rationale", (list(notes),)))
    else:
        sections.append(Section("Design rationale", (
            "The design was analysed as given; no synthesis notes were supplied.",
        )))
    sections.append(Section("Safety", (list(SAFETY),), css_class="safety"))
    return Document(title, subtitle, status, ok, tuple(sections))


def _noise_section(analysis: Analysis, spec: Spec | None) -> Section | None:
    """Noise: density and noise figure against frequency, each part's share at the spot
    frequency, band rms and SNR at the rated swing (all quoted from noise.noise_summary)."""
    from stagesynth.engine.noise import noise_summary

    rated = spec.require.swing_vpp if spec is not None and spec.require.swing_vpp else None
    ns = noise_summary(analysis, rated)
    if ns is None:
        return None
    at = fmt(ns.spot, "Hz")
    figures = [f"input-referred density {fmt(ns.density, 'V/√Hz')} at {at}"]
    if ns.figure_db is not None:
        figures.append(f"noise figure {ns.figure_db:.2f} dB at {at} (source resistance at "
                       f"290 K: {fmt(ns.source_density, 'V/√Hz')})")
    figures.append(f"input-referred rms {fmt(ns.rms, 'V')} over {fmt(ns.band[0], 'Hz')} … "
                   f"{fmt(ns.band[1], 'Hz')} (at the load: {fmt(ns.output_rms, 'V')})")
    if math.isfinite(ns.snr_db):
        figures.append(f"signal-to-noise ratio {ns.snr_db:.1f} dB at the "
                       f"{'rated' if rated else 'smallest corner'} swing of "
                       f"{fmt(ns.swing_vpp, 'Vpp')} (sine) against the stage's own output "
                       "noise over the band")
    rows = tuple((c.label, fmt(c.density2 ** 0.5, "V/√Hz"), f"{100 * c.share:.1f} %")
                 for c in ns.contributions if c.share >= 0.001)
    return Section("Noise", (
        "Every resistor at the ambient, each transistor's base shot noise (with its 1/f "
        "corner), collector shot noise and rx, the source resistance at 290 K; the load is "
        "noiseless. Densities are referred to the source EMF by the gain; the requirement "
        "rows judge them at nominal and at every corner (nominal shown here).",
        figures,
        Figure("noise", "Noise density and noise figure",
               "Input-referred noise density of the nominal stage (solid), the source "
               "resistance's own thermal noise for reference (dashed) and the requirement "
               "(triangle); below it the spot noise figure, when the source has a resistance."),
        f"Contributions at {at}, referred to the input (shares of the stage's own noise):",
        Table(("generator", "density", "share"), rows, numeric=(1, 2)),
    ))
def _supply_stability_section(analysis: Analysis, spec: Spec | None,
                              pz: PoleZeroMap) -> Section:
    """Supply rejection, peaking and stability at every condition, and resonant poles."""
    points = (analysis.nominal, *analysis.corners)
    rows = []
    for p in points:
        rows.append((p.condition.label, f"{p.supply_rejection:.1f} dB",
                     f"{p.peaking_db:.2f} dB",
                     fmt(p.peak_freq, "Hz") if p.peaking_db > 0.005 else "—",
                     "yes" if p.stable else "NO",
                     fmt(p.swing_mid_vpp, "Vpp") if math.isfinite(p.swing_mid_vpp) else "—",
                     fmt(p.swing_top_vpp, "Vpp") if math.isfinite(p.swing_top_vpp) else "—"))
    table = Table(("condition", f"supply rejection at {fmt(analysis.environment.ripple_at, 'Hz')}",
                   "peaking", "peak at", "stable", "swing at midband", "swing at f_high"),
                  tuple(rows), numeric=(1, 2, 3, 5, 6))
    blocks: list = [
        "Supply rejection is −20·log10|v_load / v_supply| with the rail taken as an AC "
        "source and the signal source at zero; peaking is the largest |gain| over all "
        "frequencies above its midband value; stable means every pole of the gain in the "
        "left half-plane. Each is computed at every condition; the swing is the smaller of "
        "its values at midband and at the required f_high, where a capacitive load draws "
        "the most current.",
        table,
    ]
    lo = analysis.f_low if analysis.f_low > 0 else analysis.midband / 1e3
    hi = analysis.f_high if math.isfinite(analysis.f_high) else analysis.midband * 1e3
    near = [r for r in pz.poles if r.freq.imag > 0 and r.q > 0.7
            and lo / 10.0 <= r.magnitude <= hi * 10.0]
    if near:
        blocks.append([f"Resonant pole pair at {fmt(r.magnitude, 'Hz')} with Q = {num(r.q, 2)} "
                       "(above 0.7, near the passband): expect peaking and ringing there; "
                       "damp it (an isolating resistor at the output, a base stopper, more "
                       "standing current) if it matters." for r in near])
    else:
        blocks.append("No complex pole pair with Q above 0.7 lies within a decade of the "
                      "passband.")
    if not all(p.stable for p in points):
        bad = ", ".join(p.condition.label for p in points if not p.stable)
        blocks.append(f"Warning: unstable (a right-half-plane pole) at: {bad}.")
    return Section("Supply rejection, peaking and stability", tuple(blocks))


def _robustness_section(rob, spec: Spec | None) -> Section:
    """Yield, spread, bias stability and thermal margins: building many units."""
    blocks: list = []
    est = rob.yield_estimate
    if est is not None and spec is not None:
        lo, hi = est.interval
        p = spec.parts
        blocks.append(
            f"Yield: {100 * est.estimate:.2f} % of {est.units} simulated units meet every "
            f"requirement at both ambient extremes (95 % Wilson interval {100 * lo:.2f} … "
            f"{100 * hi:.2f} %; seed {est.seed}, reproducible with `stagesynth analyze "
            f"DESIGN.json --spec SPEC.toml --yield {est.units} --seed {est.seed}`). Each "
            f"resistor is uniform within ±{100 * p.resistor_tolerance:g} %, each capacitor "
            f"within ±{100 * p.capacitor_tolerance:g} %, hFE log-uniform over its spread and "
            f"the supply within ±{100 * spec.supply.tolerance:g} %."
            + (f" Target: {100 * spec.require.yield_target:g} %."
               if spec.require.yield_target is not None else ""))
        if est.failures:
            blocks.append([f"{count} units fail {name}" for name, count in
                           sorted(est.failures.items(), key=lambda kv: -kv[1])])
        blocks.append(Figure("histograms", "Monte Carlo histograms",
                             "Spread of gain, f_low, f_high and swing over the simulated "
                             "units (each at its worse ambient), with the spec's limits."))
    if rob.spreads:
        rows = []
        for sp in rob.spreads:
            if sp.limit is None:
                continue
            top = ", ".join(f"{c.source} {100 * c.share:.0f} %" for c in sp.contributions[:3])
            limit = (f"{sp.limit[0]:.2f} … {sp.limit[1]:.2f} dB" if isinstance(sp.limit, tuple)
                     else fmt(float(sp.limit), sp.unit))
            unit = "dB" if sp.unit == "dB" else sp.unit
            rows.append((sp.figure, fmt(sp.nominal, unit), fmt(sp.worst_case, unit), limit,
                         "pass" if sp.worst_ok else "FAIL", top))
        blocks.append("Sensitivity: each source's share of a figure's variance (uniform over "
                      "its tolerance), and the linear worst case with every source at the "
                      "end of its range that hurts (judged at the worse ambient).")
        blocks.append(Table(("figure", "at worse ambient", "worst case", "limit", "worst case ok",
                             "largest contributors"), tuple(rows), numeric=(1, 2), status=4))
        if rob.advice:
            blocks.append(["Tighter tolerance: " + a for a in rob.advice])
    if rob.stability:
        rows = []
        for f in rob.stability:
            st = f.stiffness
            rows.append((
                f.ref, fmt(f.ic, "A"), f"{num(f.s_i, 3)}", f"{num(f.s_v * 1e3, 3)} mA/V",
                f"{eng(f.s_beta, 'A', 3)}",
                f"{num(st.ratio, 3)}" if st is not None else "n/a",
                f"{f.ic_spread_hfe_pct:+.1f} %", f"{f.ic_spread_ambient_pct:+.1f} %",
            ))
        blocks.append("Bias stability (textbook definitions, e.g. Sedra & Smith): S_I = "
                      "∂IC/∂ICBO, S_V = ∂IC/∂VBE, S_β = ∂IC/∂hFE, from the DC solver; divider "
                      "ratio RTH / ((hFE_min + 1)·RE) (common practice: 0.1 or less for a "
                      "stiff bias); "
                      "IC change across the hFE spread and across the ambient range.")
        blocks.append(Table(("transistor", "IC", "S_I", "S_V", "S_β", "RTH/(β+1)RE",
                             "IC over hFE", "IC over ambient"), tuple(rows),
                            numeric=(1, 2, 3, 4, 5, 6, 7)))
    if rob.thermal:
        rows = []
        for t in rob.thermal:
            rows.append((
                t.ref, fmt(t.p_hot, "W"), f"{t.ambient_hot:g} °C",
                fmt(t.p_allowed, "W") if t.p_allowed is not None else "no rating",
                (fmt(t.p_allowed - t.p_hot, "W") if t.p_allowed is not None else ""),
                format_number(t.loop_gain), "pass" if t.ok else "FAIL",
            ))
        blocks.append("Thermal safety: dissipation at the hottest corner against the rating "
                      "derated to that ambient, and the thermal loop gain θJA·∂P/∂Tj "
                      "(runaway when it reaches 1).")
        blocks.append(Table(("transistor", "dissipation", "at ambient", "derated allowance",
                             "headroom", "loop gain", "result"), tuple(rows),
                            numeric=(1, 3, 4, 5), status=6))
        if rob.violations:
            blocks.append(["Violation: " + v for v in rob.violations])
    return Section("Robustness: building many units", tuple(blocks))


# ---------------------------------------------------------------------------
# Markdown
# ---------------------------------------------------------------------------
def _md_cell(text: str) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def _md_table(t: Table) -> list[str]:
    out = ["| " + " | ".join(_md_cell(h) for h in t.header) + " |"]
    out.append("|" + "|".join("---:" if i in t.numeric else "---"
                              for i in range(len(t.header))) + "|")
    for row in t.rows:
        cells = [_md_cell(c) for c in row]
        if t.status is not None and cells[t.status] == "FAIL":
            cells[t.status] = "**FAIL**"
        out.append("| " + " | ".join(cells) + " |")
    return out


def render_markdown(doc: Document) -> str:
    """GitHub-flavoured Markdown; figures are links to the SVG files beside it."""
    out = [f"# {doc.title}", "", doc.subtitle, "", f"**{doc.status}**", ""]
    for sec in doc.sections:
        out += [f"## {sec.title}", ""]
        for block in sec.blocks:
            if isinstance(block, str):
                out += [block, ""]
            elif isinstance(block, list):
                out += [f"- {item}" for item in block] + [""]
            elif isinstance(block, Table):
                out += [*_md_table(block), ""]
            elif isinstance(block, Figure):
                out += [f"![{block.alt}]({FIGURE_FILES[block.name]})", "",
                        f"*{block.caption}*", ""]
    return "\n".join(out).rstrip() + "\n"


def report_markdown(
    design: Design,
    analysis: Analysis,
    verdict: Verdict | None = None,
    spec: Spec | None = None,
    notes: Sequence[str] | None = None,
    **kwargs,
) -> str:
    """report.md: the whole report in Markdown, figures linked as schematic/bode/impedance.svg."""
    return render_markdown(build_document(design, analysis, verdict, spec, notes, **kwargs))


# ---------------------------------------------------------------------------
# HTML
# ---------------------------------------------------------------------------
_CSS = """
:root { --ink:#1f1f1f; --muted:#5c5c5c; --rule:#d4d4d0; --head:#f3f3f0; --accent:#1d4e89;
        --ok:#1e5b2a; --bad:#9e1c1c; --warn:#7a5a00; }
* { box-sizing: border-box; }
html { background: #fafaf8; }
body { margin: 0 auto; max-width: 1120px; padding: 2.2rem 2rem 3rem; background: #fff;
       color: var(--ink); font: 15px/1.55 "DejaVu Sans", "Liberation Sans", "Helvetica Neue",
       Arial, sans-serif; }
h1 { font-size: 1.75rem; line-height: 1.25; margin: 0 0 .3rem; letter-spacing: -.01em; }
h2 { font-size: 1.2rem; margin: 2.3rem 0 .7rem; padding-bottom: .25rem;
     border-bottom: 1px solid var(--rule); color: var(--accent); }
p { margin: .5rem 0 .8rem; max-width: 78ch; }
.subtitle { color: var(--muted); margin: 0 0 1.1rem; }
.status { margin: 1rem 0 1.4rem; padding: .7rem 1rem; border-left: 5px solid var(--muted);
          background: var(--head); font-weight: 600; }
.status.ok { border-color: var(--ok); } .status.bad { border-color: var(--bad); }
.scroll { overflow-x: auto; margin: .4rem 0 1rem; }
table { border-collapse: collapse; width: 100%; font-size: .86rem; }
th, td { padding: .32rem .55rem; border-bottom: 1px solid var(--rule); text-align: left;
         vertical-align: top; }
th { background: var(--head); font-weight: 600; border-bottom: 1.5px solid #9b9b96;
     white-space: nowrap; }
th.num { text-align: right; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tbody tr:nth-child(even) td { background: #fbfbf9; }
td.pass { color: var(--ok); font-weight: 700; white-space: nowrap; }
td.pass::before { content: "✓ "; }
td.fail { color: var(--bad); font-weight: 700; white-space: nowrap; }
td.fail::before { content: "✗ "; }
figure { margin: 1rem 0 1.6rem; }
figure .art { border: 1px solid var(--rule); padding: .4rem; background: #fff; }
figure svg { display: block; width: 100%; height: auto; max-height: 900px; }
figcaption { color: var(--muted); font-size: .85rem; margin-top: .4rem; max-width: 95ch; }
ul { padding-left: 1.3rem; } li { margin: .25rem 0; max-width: 90ch; }
section.safety { margin-top: 2.3rem; padding: .2rem 1.1rem .6rem;
                 border: 1px solid #c9b46a; border-left: 5px solid var(--warn);
                 background: #fffcf0; }
section.safety h2 { color: var(--warn); border-bottom-color: #e3d7a6; margin-top: 1rem; }
footer { margin-top: 2.5rem; color: var(--muted); font-size: .8rem;
         border-top: 1px solid var(--rule); padding-top: .6rem; }
@media print {
  @page { size: A4; margin: 14mm 12mm; }
  html, body { background: #fff; }
  body { max-width: none; padding: 0; font-size: 9.5pt; }
  h2 { break-after: avoid; page-break-after: avoid; margin-top: 1.4rem; }
  figure, table, tr, .status, section.safety { break-inside: avoid; page-break-inside: avoid; }
  figure svg { max-height: 150mm; }
  .scroll { overflow: visible; }
  table { font-size: 8pt; }
  tbody tr:nth-child(even) td { background: none; }
}
"""

_XML_PROLOG = re.compile(r"<\?xml[^>]*\?>\s*|<!DOCTYPE[^>]*>\s*", re.S)
_METADATA = re.compile(r"<metadata>.*?</metadata>\s*", re.S)
_COMMENT = re.compile(r"<!--.*?-->", re.S)
_ID = re.compile(r'\bid="([^"]+)"')


def inline_svg(svg: str, prefix: str, label: str) -> str:
    """An SVG document made safe to inline in HTML next to others.

    Drops the XML prolog, DOCTYPE, metadata and namespace declarations (the HTML
    parser supplies the SVG namespace), prefixes every id and reference to it so two
    figures cannot clash, and lets CSS size the root element.
    """
    text = _COMMENT.sub("", _METADATA.sub("", _XML_PROLOG.sub("", svg))).strip()
    ids = sorted(set(_ID.findall(text)), key=len, reverse=True)
    if ids:
        alternation = "|".join(re.escape(i) for i in ids)
        text = re.sub(rf'\bid="({alternation})"', lambda m: f'id="{prefix}-{m.group(1)}"', text)
        text = re.sub(rf"#({alternation})(?=[\"')\s])", lambda m: f"#{prefix}-{m.group(1)}",
                      text)
    root = re.match(r"\s*<svg\b[^>]*>", text)
    if root is None:
        raise ValueError("not an SVG document")
    tag = root.group(0)
    new_tag = re.sub(r'\s(?:xmlns(?::\w+)?|width|height|version)="[^"]*"', "", tag)
    new_tag = new_tag.replace("<svg", f'<svg role="img" aria-label="{html.escape(label)}"', 1)
    return new_tag + text[root.end():]


def _html_table(t: Table) -> str:
    out = ['<div class="scroll"><table>', "<thead><tr>"]
    out += [f'<th class="num">{html.escape(h)}</th>' if i in t.numeric
            else f"<th>{html.escape(h)}</th>" for i, h in enumerate(t.header)]
    out.append("</tr></thead><tbody>")
    for row in t.rows:
        out.append("<tr>")
        for i, cell in enumerate(row):
            cls = ""
            if t.status is not None and i == t.status:
                cls = ' class="pass"' if cell == "pass" else ' class="fail"'
            elif i in t.numeric:
                cls = ' class="num"'
            out.append(f"<td{cls}>{html.escape(str(cell))}</td>")
        out.append("</tr>")
    out.append("</tbody></table></div>")
    return "".join(out)


def render_html(doc: Document, svgs: Mapping[str, str]) -> str:
    """One self-contained HTML file: inline CSS, inline SVG figures, no external resources."""
    e = html.escape
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{e(doc.title)}: stage report</title>",
        f"<style>{_CSS}</style></head><body>",
        f"<header><h1>{e(doc.title)}</h1><p class=\"subtitle\">{e(doc.subtitle)}</p></header>",
    ]
    cls = "" if doc.status_ok is None else (" ok" if doc.status_ok else " bad")
    parts.append(f'<p class="status{cls}">{e(doc.status)}</p>')
    for k, sec in enumerate(doc.sections):
        css = f' class="{sec.css_class}"' if sec.css_class else ""
        parts.append(f'<section{css} id="s{k + 1}"><h2>{e(sec.title)}</h2>')
        for block in sec.blocks:
            if isinstance(block, str):
                parts.append(f"<p>{e(block)}</p>")
            elif isinstance(block, list):
                parts.append("<ul>" + "".join(f"<li>{e(i)}</li>" for i in block) + "</ul>")
            elif isinstance(block, Table):
                parts.append(_html_table(block))
            elif isinstance(block, Figure):
                svg = svgs.get(block.name)
                art = (inline_svg(svg, f"fig-{block.name}", block.alt) if svg
                       else f"<p>({e(block.name)} figure not available)</p>")
                parts.append(f'<figure><div class="art">{art}</div>'
                             f"<figcaption>{e(block.caption)}</figcaption></figure>")
        parts.append("</section>")
    parts.append("<footer>Generated by stagesynth from the design's own analysis. All figures "
                 "are predictions of the reference device model at the stated conditions."
                 "</footer>")
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"


def figure_svgs(design: Design, analysis: Analysis, spec: Spec | None = None) -> dict[str, str]:
    """SVG text of the three report figures, keyed as in FIGURE_FILES."""
    from stagesynth.report.noiseplot import noise_plot
    from stagesynth.report.plots import bode_figure, figure_svg, impedance_figure, ripple_figure

    return {
        "schematic": schematic_svg(design, analysis),
        "bode": figure_svg(bode_figure(analysis, spec)).decode("utf-8"),
        "impedance": figure_svg(impedance_figure(analysis, spec)).decode("utf-8"),
        "noise": figure_svg(noise_plot(analysis, spec)).decode("utf-8"),
        "ripple": figure_svg(ripple_figure(analysis, spec)).decode("utf-8"),
    }


def report_html(
    design: Design,
    analysis: Analysis,
    verdict: Verdict | None = None,
    spec: Spec | None = None,
    notes: Sequence[str] | None = None,
    *,
    svgs: Mapping[str, str] | None = None,
    **kwargs,
) -> str:
    """report.html: self-contained, figures inline (computed here unless `svgs` gives them)."""
    svgs = svgs if svgs is not None else figure_svgs(design, analysis, spec)
    return render_html(build_document(design, analysis, verdict, spec, notes, **kwargs), svgs)


# ---------------------------------------------------------------------------
# Schematic (drawn by stagesynth.report.schematic)
# ---------------------------------------------------------------------------
def schematic_svg(design: Design, analysis: Analysis | None = None) -> str:
    """The schematic as SVG text, from the schematic module (imported here: it is heavy).

    With the analysis, each capacitor the parts list marks as an electrolytic is drawn
    polarized, + on the node the parts list names, so drawing and list cannot disagree.
    """
    from stagesynth.report.schematic import draw_schematic

    positive: dict[str, str] = {}
    if analysis is not None:
        from stagesynth.report.bom import capacitor_stress

        for part in design.parts:
            if part.kind == "capacitor":
                stress = capacitor_stress(design, analysis, part)
                if stress["polarized"]:
                    positive[part.ref] = stress["positive"]
    return draw_schematic(design, positive=positive or None)
