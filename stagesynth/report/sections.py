"""The report's section writers: summary, requirements, circuit, parts, operating points,
poles and zeros, noise, supply and stability, robustness, safety (quoted from the engine and
the verdict, never computed here)."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
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
from stagesynth.report.docmodel import Figure, Section, Table

if TYPE_CHECKING:  # pragma: no cover - typing only
    from stagesynth.contracts.netlist import Design
    from stagesynth.contracts.spec import Spec
    from stagesynth.engine.analysis import Analysis
    from stagesynth.engine.polezero import PoleZeroMap
    from stagesynth.judging.verdict import Verdict

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


def _phase_deg(analysis: Analysis) -> float:
    return math.degrees(math.atan2(analysis.gain.imag, analysis.gain.real))


def summary_table(analysis: Analysis) -> Table:
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


def requirements_table(verdict: Verdict) -> Table:
    rows = []
    for c in verdict.checks:
        limit = check_limit(c).replace(">=", "≥").replace("<=", "≤")
        rows.append((c.name, check_value(c), limit, margin_text(c), status_text(c),
                     c.condition or c.where, "pass" if c.ok else "FAIL", c.detail))
    return Table(("requirement", "value", "limit", "margin", "status", "worst at", "result",
                  "detail"), tuple(rows), numeric=(1, 2, 3), status=6)


def circuit_text(design: Design, analysis: Analysis) -> list[str]:
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
    if design.source_capacitance > 0:  # a piezo or capacitive sensor: C in series with the EMF
        cs = fmt(design.source_capacitance, "F")
        src = (f"{src} and {cs} in series (the sensor's capacitance Cs; it and the input "
               "resistance set a low corner)")
    return [
        f"Supply: {fmt(design.supply_voltage, 'V')}{tol} at node {design.supply_node}, "
        f"ground is node {design.ground}.",
        f"Source: an EMF behind {src} drives node {design.input}.",
        f"Load: {load} from node {design.output} to ground.",
    ]


def bom_table(rows: Sequence[Mapping[str, str]]) -> Table:
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


def order_table(rows: Sequence[Mapping[str, str]]) -> Table:
    from stagesynth.report.bom import order_rows

    body = tuple((r["qty"], r["refs"], r["part"], r["value"], r["tolerance"], r["rating"],
                  r["type"]) for r in order_rows(list(rows)))
    return Table(("qty", "refs", "part", "value", "tolerance", "rating", "type"), body,
                 numeric=(0,))


def operating_tables(design: Design, analysis: Analysis) -> tuple[Table, Table]:
    refs = [p.ref for p in design.transistors]  # a junction FET: ID, VDS (edge VGS − VP)
    fets = {p.ref for p in design.jfets}
    header = ["condition"]
    for r in refs:
        i, v = ("ID", "VDS") if r in fets else ("IC", "VCE")
        header += [f"{r} {i}", f"{r} {v}", f"{r} Tj", f"{r} dissipation"]
    sat = {p.ref: design.devices[p.device].vce_sat for p in design.bjts}
    header += ["supply I", "swing", "limited by", "active"]
    rows = []
    points = (analysis.nominal, *analysis.corners)
    for p in points:
        row = [p.condition.label]
        for r in refs:
            s = p.transistors[r]
            ic, vce, power = transistor_cells(s, s.vsat if r in fets else sat[r])
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


def root_table(pz: PoleZeroMap) -> Table:
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


def noise_section(analysis: Analysis, spec: Spec | None) -> Section | None:
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
def supply_stability_section(analysis: Analysis, spec: Spec | None,
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


def rob_draws(rob) -> str:
    """How the Monte Carlo draws the transistors' spreads (hFE, or a FET's pairing)."""
    fets = bool(getattr(rob, "jfet", ()))
    return ("hFE log-uniform over its spread, each FET's place along its IDSS/VP pairing "
            "uniform" if fets and getattr(rob, "stability", ()) else
            "each FET's place along its IDSS/VP pairing uniform" if fets else
            "hFE log-uniform over its spread")


def robustness_section(rob, spec: Spec | None) -> Section:
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
            f"within ±{100 * p.capacitor_tolerance:g} %, {rob_draws(rob)} and "
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
    from stagesynth.report.jfetview import jfet_stability_blocks

    blocks += jfet_stability_blocks(rob)
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
