"""The design report: one document model rendered as Markdown and as self-contained HTML.

The report quotes the engine (analysis, verdict, parts stresses, poles and zeros) and
never computes physics of its own. The HTML file carries its figures as inline SVG
and its style inline, so it opens offline and prints cleanly; the Markdown file links
to the SVG files written beside it.

Here the document is assembled (which sections, in which order) and handed to a renderer;
the document model is in `docmodel`, the section writers in `sections`, the Markdown and
HTML renderers in `markup`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING

from stagesynth.judging.textout import fmt
from stagesynth.report.docmodel import FIGURE_FILES, Document, Figure, Section, Table
from stagesynth.report.markup import inline_svg, render_html, render_markdown
from stagesynth.report.sections import (
    SAFETY,
    bom_table,
    circuit_text,
    noise_section,
    operating_tables,
    order_table,
    requirements_table,
    robustness_section,
    root_table,
    summary_table,
    supply_stability_section,
)

if TYPE_CHECKING:  # pragma: no cover - typing only
    from stagesynth.contracts.netlist import Design
    from stagesynth.contracts.spec import Spec
    from stagesynth.engine.analysis import Analysis
    from stagesynth.engine.polezero import PoleZeroMap
    from stagesynth.judging.verdict import Verdict

# the document model and the renderers stay importable from here (views and tests use them)
__all__ = [
    "FIGURE_FILES",
    "Document",
    "Figure",
    "Section",
    "Table",
    "build_document",
    "figure_svgs",
    "inline_svg",
    "render_html",
    "render_markdown",
    "report_html",
    "report_markdown",
    "schematic_svg",
]


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
    jfet_bias=None,
) -> Document:
    """The report's content, independent of the output format. `jfet_bias`: the engine's
    bias views of the junction FETs (computed here for a design holding one when None)."""
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

    from stagesynth.report.jfetview import spread_words

    words = spread_words(design)
    sections: list[Section] = []
    sections.append(Section("Summary", (
        f"Nominal conditions: {words['nominal']}, 25 °C ambient, nominal supply and part "
        "values. "
        "Gain is v_load / v_source_emf with the source resistance and the load in place.",
        summary_table(analysis),
    )))
    if verdict is not None:
        sections.append(Section("Requirements", (
            "Each margin is in the requirement's own unit: dB for gains, volts, ohms and "
            "amperes for the others, and a factor for the −3 dB corners (×2 means the "
            "corner lies twice as far out as asked). A failing row says how far short it "
            "is.",
            requirements_table(verdict),
        )))
    sections.append(Section("Circuit", (
        Figure("schematic", "Schematic", f"Schematic of {title}, with the source and load "
               "the stage was designed for."),
        circuit_text(design, analysis),
    )))
    sections.append(Section("Parts list", (
        "Worst stress: the highest DC voltage across a capacitor, or the highest dissipation "
        "of a resistor or transistor, over the nominal point and every corner. Suggested "
        "ratings are common practice: at least 2× the worst stress, rounded up to the next "
        "standard step. Series is the IEC 60063 series the value belongs to"
        + (" (the spec's series and tolerance)." if spec is not None
           else " (the coarsest that holds it; the tolerance the design was made with, "
                "when its file records it)."),
        bom_table(bom),
        "To order (bom.csv): identical parts grouped, with what each must offer. A "
        "transistor is any part of that polarity whose hFE spread lies within the range "
        "shown, with at least the fT and ratings listed and at most the Ccb."
        + (" A junction FET is any part of that channel whose IDSS and pinch-off spreads "
           "lie within those shown, paired as stated (low IDSS with the pinch-off nearest "
           "zero), with at most the capacitances and gate leakage listed."
           if design.jfets else ""),
        order_table(bom),
    )))
    ops, volts = operating_tables(design, analysis)
    sections.append(Section("Operating point at every corner", (
        f"Corners combine {words['corners']}, the ambient extremes and the supply tolerance. "
        "Currents and voltages are magnitudes in the transistor's own sense (positive when "
        f"active); the swing is the largest symmetric output sine before {words['edge']}.",
        ops,
        "DC node voltages (to ground):",
        volts,
    )))
    if design.jfets:  # the corner units' transfer curves with the bias line
        from stagesynth.report.jfetbias import bias_section, views

        jfet_bias = jfet_bias if jfet_bias else views(analysis)
        if jfet_bias:
            sections.append(bias_section(jfet_bias))
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
        root_table(pz),
    ]
    if est:
        pz_blocks.append("Root-sum-square estimates of the corners from these roots: "
                         + "; ".join(est) + ".")
    if not pz.stable:
        pz_blocks.append("Warning: a pole lies in the right half-plane: the stage is unstable.")
    sections.append(Section("Poles and zeros", tuple(pz_blocks)))
    noise = noise_section(analysis, spec)
    if noise is not None:
        sections.append(noise)
    sections.append(supply_stability_section(analysis, spec, pz))
    if robustness is not None:
        sections.append(robustness_section(robustness, spec))
    if notes:
        sections.append(Section("Design rationale", (list(notes),)))
    else:
        sections.append(Section("Design rationale", (
            "The design was analysed as given; no synthesis notes were supplied.",
        )))
    sections.append(Section("Safety", (list(SAFETY),), css_class="safety"))
    return Document(title, subtitle, status, ok, tuple(sections))


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
        **_jfet_svg(analysis),
    }


def _jfet_svg(analysis: Analysis) -> dict[str, str]:
    """The bias-over-spread figure for a design holding a junction FET (else nothing)."""
    if not analysis.design.jfets:
        return {}
    from stagesynth.report.jfetbias import bias_figure, views
    from stagesynth.report.plots import figure_svg

    found = views(analysis)
    return {"jfetbias": figure_svg(bias_figure(found)).decode("utf-8")} if found else {}


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
