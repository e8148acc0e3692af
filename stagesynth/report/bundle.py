"""Write the documentation a user files with a design: report, plots, parts list, two-port.

Every target name is checked against the output folder's manifest before anything
is written, so a refused run leaves the folder untouched. design.json itself is
written by the caller.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # pragma: no cover - typing only
    from stagesynth.contracts.fileio import OutputDir
    from stagesynth.contracts.netlist import Design
    from stagesynth.contracts.spec import Spec
    from stagesynth.engine.analysis import Analysis
    from stagesynth.judging.verdict import Verdict

PLOT_FILES = ("bode.svg", "bode.png", "impedance.svg", "ripple.svg")
BUNDLE_FILES = ("report.md", "report.html", *PLOT_FILES, "schematic.svg", "bom.csv",
                "stage.s2p", "histograms.svg", "pulse.svg", "noise.svg",
                "distortion.svg")
JFET_FILES = ("jfetbias.svg",)  # written besides BUNDLE_FILES for a design holding a JFET


def _plots(analysis: Analysis, spec: Spec | None) -> dict[str, bytes]:
    """The plot files' contents (one figure each for Bode and impedance)."""
    from stagesynth.report.plots import (
        bode_figure,
        figure_png,
        figure_svg,
        impedance_figure,
        ripple_figure,
    )

    bode = bode_figure(analysis, spec)
    imp = impedance_figure(analysis, spec)
    return {
        "bode.svg": figure_svg(bode),
        "bode.png": figure_png(bode),
        "impedance.svg": figure_svg(imp),
        "ripple.svg": figure_svg(ripple_figure(analysis, spec)),
    }


def write_plots(out: OutputDir, design: Design, analysis: Analysis,
                spec: Spec | None = None) -> list[Path]:
    """Bode and impedance plots as SVG and PNG (for a `plot` command)."""
    out.check(list(PLOT_FILES))
    files = _plots(analysis, spec)
    return [out.write_bytes(name, files[name]) for name in PLOT_FILES]


def write_bundle(
    out: OutputDir,
    design: Design,
    analysis: Analysis,
    verdict: Verdict | None = None,
    spec: Spec | None = None,
    notes: Sequence[str] | None = None,
    pz=None,
    pulse=None,
) -> list[Path]:
    """Every report file of BUNDLE_FILES, written into `out`; returns their paths.

    `pz`: the pole/zero map when the caller has it already (it is not computed twice);
    `pulse`: the pulse response to show (default: the engine's, default pulse width).
    """
    from stagesynth.engine.polezero import pole_zero_map
    from stagesynth.report.bom import bom_csv, bom_rows
    from stagesynth.report.document import report_html, report_markdown, schematic_svg
    from stagesynth.report.touchstone import stage_touchstone

    out.check(list(BUNDLE_FILES) + (list(JFET_FILES) if design.jfets else []))
    contents: dict[str, bytes] = _plots(analysis, spec)
    svgs = {
        "schematic": schematic_svg(design, analysis),
        "bode": contents["bode.svg"].decode("utf-8"),
        "impedance": contents["impedance.svg"].decode("utf-8"),
        "ripple": contents["ripple.svg"].decode("utf-8"),
    }
    rows = bom_rows(design, analysis, spec)
    pz = pz if pz is not None else pole_zero_map(analysis)
    from stagesynth.judging.robustness import assess_robustness

    rob = assess_robustness(design, analysis, spec)
    names = list(BUNDLE_FILES)
    if rob.yield_estimate is not None and spec is not None:
        from stagesynth.report.histograms import histogram_figure
        from stagesynth.report.plotstyle import figure_svg

        contents["histograms.svg"] = figure_svg(histogram_figure(rob.yield_estimate, spec))
        svgs["histograms"] = contents["histograms.svg"].decode("utf-8")
    else:
        names.remove("histograms.svg")
    pulse = pulse if pulse is not None else _default_pulse(analysis)
    if pulse is not None:
        contents["pulse.svg"] = _pulse_svg(pulse)
        svgs["pulse"] = contents["pulse.svg"].decode("utf-8")
    else:
        names.remove("pulse.svg")
    from stagesynth.report.noiseplot import noise_plot
    from stagesynth.report.plots import figure_svg as _svg

    contents["noise.svg"] = _svg(noise_plot(analysis, spec))
    svgs["noise"] = contents["noise.svg"].decode("utf-8")
    distortion = _distortion(analysis, spec)
    if distortion is not None:
        from stagesynth.report.distortionview import distortion_figure
        from stagesynth.report.plotstyle import figure_svg

        contents["distortion.svg"] = figure_svg(distortion_figure(distortion[0]))
        svgs["distortion"] = contents["distortion.svg"].decode("utf-8")
    else:
        names.remove("distortion.svg")
    bias_views = _jfet_bias(analysis)
    if bias_views:  # a design holding a junction FET: the corner units' transfer curves
        from stagesynth.report.jfetbias import bias_figure
        from stagesynth.report.plotstyle import figure_svg

        contents["jfetbias.svg"] = figure_svg(bias_figure(bias_views))
        svgs["jfetbias"] = contents["jfetbias.svg"].decode("utf-8")
        names.append("jfetbias.svg")
    contents["schematic.svg"] = svgs["schematic"].encode("utf-8")
    contents["bom.csv"] = bom_csv(design, analysis, spec, rows=rows).encode("utf-8")
    contents["stage.s2p"] = stage_touchstone(design, analysis).encode("latin-1")
    contents["report.md"] = report_markdown(design, analysis, verdict, spec, notes, bom=rows,
                                            pz=pz, robustness=rob, pulse=pulse,
                                            distortion=distortion,
                                            jfet_bias=bias_views).encode("utf-8")
    contents["report.html"] = report_html(design, analysis, verdict, spec, notes, svgs=svgs,
                                          bom=rows, pz=pz, robustness=rob,
                                          pulse=pulse, distortion=distortion,
                                          jfet_bias=bias_views).encode("utf-8")
    return [out.write_bytes(name, contents[name]) for name in names]


def _jfet_bias(analysis: Analysis):
    """The engine's bias views of the design's junction FETs (empty for a bipolar design)."""
    if not analysis.design.jfets:
        return ()
    from stagesynth.report.jfetbias import views

    return views(analysis)


def _distortion(analysis: Analysis, spec: Spec | None):
    """(DistortionViews, rationale lines) from the engine, or None without distortion."""
    from stagesynth.engine.thdsweep import distortion_views
    from stagesynth.synthesis.linearity import linearity, notes

    views = distortion_views(analysis, spec.require.thd if spec is not None else None)
    if views is None:
        return None
    lin = linearity(analysis)
    return views, notes(lin) if lin is not None else []


def _default_pulse(analysis: Analysis):
    """The engine's pulse response at its default width; None where there is none to show
    (an unstable stage, or one with no midband gain)."""
    from stagesynth.engine.pulse import pulse_response

    try:
        return pulse_response(analysis)
    except (ValueError, np.linalg.LinAlgError):
        return None


def _pulse_svg(pulse) -> bytes:
    """pulse.svg: the step edge and the pulse, as the engine computed them."""
    from stagesynth.report.plots import figure_svg
    from stagesynth.report.pulseview import pulse_figure

    return figure_svg(pulse_figure(pulse))
