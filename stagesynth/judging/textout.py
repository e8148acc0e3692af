"""Plain-text tables for the terminal: what an engineer reads after `analyze`."""

from __future__ import annotations

import math

from stagesynth.engine.analysis import Analysis
from stagesynth.judging.verdict import Check, Verdict
from stagesynth.quantities.units import format_number, format_quantity
from stagesynth.quantities.units import format_number as num
from stagesynth.quantities.units import format_quantity as eng

ACTIVE_IC_MIN = 100e-9  # A: a transistor counts as active only above this collector current
_UNIT_LABEL = {"A": "A", "V": "V", "W": "W", "Hz": "Hz", "Ω": "Ω", "dB": "dB", "Vpp": "Vpp"}


def fmt(value: float, unit: str) -> str:
    """Engineering notation; 'none' for an infinite corner (e.g. DC coupled)."""
    if isinstance(value, float) and math.isinf(value):
        return "none (∞)" if value > 0 else "-∞"
    if unit == "%":
        return f"{100 * value:.2f} %"
    if unit == "":
        return format_number(value)
    if unit == "dB":
        return f"{value:.2f} dB"
    if unit == "×":
        return f"×{format_number(value)}"
    if unit == "Vpp":
        return format_quantity(value, "V") + "pp"
    return format_quantity(value, unit)


def _table(header: list[str], rows: list[list[str]]) -> list[str]:
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
    line = lambda r: "  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip()  # noqa: E731
    return [line(header), line(["-" * w for w in widths]), *[line(r) for r in rows]]


def check_value(c: Check) -> str:
    if c.relation == "is":
        return str(c.value).lower()
    if math.isnan(float(c.value)):
        return "n/a (not active)"
    return fmt(float(c.value), c.unit)


def check_limit(c: Check) -> str:
    if c.relation == "within":
        lo, hi = c.limit
        return f"{lo:.2f} … {hi:.2f} dB"
    if c.relation == "is":
        return str(c.limit).lower()
    return f"{c.relation} {fmt(float(c.limit), c.unit)}"


def transistor_cells(s, vce_sat: float) -> tuple[str, str, str]:
    """IC, VCE and dissipation of one transistor state as table cells. Outside the active
    region the real voltages are shown, marked as such, and the dissipation is the
    device's whole terminal power VCE·IC + VBE·IB (never a negative VCE·IC)."""
    ic, vce = fmt(s.ic, "A"), fmt(s.vce, "V")
    if s.active:
        return ic, vce, fmt(s.vce * s.ic, "W")
    if s.region == "cut off" or (s.kind == "bjt" and s.ic <= ACTIVE_IC_MIN):
        ic += " (cut off)"
    if s.vce < vce_sat:
        vce += " (triode)" if s.kind == "jfet" else " (saturated)"
    return ic, vce, fmt(max(s.vce * s.ic + s.vbe * s.ib, 0.0), "W") + " (not active)"


def margin_text(c: Check) -> str:
    """The margin in the requirement's own unit ("+2.4 Vpp", "×5.5" for a corner), or what
    the row means where a distance would mean nothing (active region, booleans)."""
    h = c.headroom
    if c.name == "active":
        if not math.isfinite(h):
            return "no DC solution"
        edge = getattr(c, "edge", "bjt")
        if edge == "jfet":
            return f"VDS ≥ VGS − VP + {fmt(h, 'V')}" if h >= 0 else (
                f"VDS {fmt(-h, 'V')} below VGS − VP")
        if edge == "mixed":
            return (f"{fmt(h, 'V')} above the nearest edge (VCE(sat); VGS − VP for a FET)"
                    if h >= 0 else f"{fmt(-h, 'V')} past the edge (VCE(sat); VGS − VP for a FET)")
        return f"VCE ≥ VCE(sat) + {fmt(h, 'V')}" if h >= 0 else (
            f"VCE {fmt(-h, 'V')} below VCE(sat)")
    if c.name.endswith(".thermal_runaway"):
        return "loop gain < 1: no runaway" if c.ok else "loop gain ≥ 1: runs away"
    if c.relation == "is" or not math.isfinite(h):
        return "—"
    if c.headroom_unit == "×":
        return f"×{format_number(h)}"
    if c.headroom_unit == "%":
        return f"{100 * h:+.3g} % points".replace("-", "−")
    text = fmt(abs(h), c.headroom_unit)
    return ("+" if h >= 0 else "−") + text


def status_text(c: Check) -> str:
    """"ok", or how far the row misses in its own unit ("short by 1.2 Vpp")."""
    if c.ok:
        return "ok"
    h = c.headroom
    if c.name == "active":
        return "out of the active region"
    if c.name.endswith(".thermal_runaway"):
        return "thermal runaway"
    if c.relation == "is":
        return f"is {str(c.value).lower()}, wanted {str(c.limit).lower()}"
    if not math.isfinite(h):
        return "not met"
    if c.headroom_unit == "×":
        amount = f"a factor {format_number(1.0 / h)}" if h > 0 else "all of it"
    elif c.headroom_unit == "%":
        amount = f"{num(100 * abs(h), 3)} % points"
    else:
        amount = fmt(abs(h), c.headroom_unit)
    if c.relation == "within":
        return f"outside by {amount}"
    return f"{'over' if c.relation in ('<=', '<') else 'short'} by {amount}"


def _noise_rows(analysis: Analysis) -> list[list[str]]:
    """Nominal noise figures (input-referred), with where they are taken."""
    if analysis.noise is None:
        return []
    at = analysis.environment.noise_at or analysis.midband
    fig = analysis.figures
    rows = [["noise", f"{fmt(analysis.noise, 'V/√Hz')} input-referred at {fmt(at, 'Hz')}"]]
    if analysis.noise_figure is not None:
        rows.append(["noise figure", f"{analysis.noise_figure:.2f} dB at {fmt(at, 'Hz')} "
                                     "(source at 290 K)"])
    if analysis.noise_rms is not None and fig is not None and fig.noise_band is not None:
        lo, hi = float(fig.noise_band[0][0]), float(fig.noise_band[1][0])
        rows.append(["noise rms", f"{fmt(analysis.noise_rms, 'V')} input-referred, "
                                  f"{fmt(lo, 'Hz')} … {fmt(hi, 'Hz')}"])
    return rows


def supply_stability_rows(analysis: Analysis) -> list[list[str]]:
    """Supply rejection, peaking and stability: nominal, with the worst condition."""
    points = (analysis.nominal, *analysis.corners)
    if not all(math.isfinite(p.supply_rejection) for p in points):
        return []
    rows = []
    worst = min(points, key=lambda p: p.supply_rejection)
    at = analysis.environment.ripple_at
    rows.append(["supply rejection", f"{analysis.nominal.supply_rejection:.1f} dB at "
                 f"{fmt(at, 'Hz')} (worst {worst.supply_rejection:.1f} dB: "
                 f"{worst.condition.label})"])
    if all(math.isfinite(p.peaking_db) for p in points):
        worst = max(points, key=lambda p: p.peaking_db)
        rows.append(["peaking", f"{analysis.nominal.peaking_db:.2f} dB (worst "
                     f"{worst.peaking_db:.2f} dB at {fmt(worst.peak_freq, 'Hz')}: "
                     f"{worst.condition.label})"])
    bad = [p.condition.label for p in points if not p.stable]
    rows.append(["stable", "yes, every pole in the left half-plane at every condition"
                 if not bad else f"NO: right-half-plane pole at {', '.join(bad)}"])
    return rows


def analysis_table(analysis: Analysis, verdict: Verdict | None = None) -> str:
    d = analysis.design
    out = [f"{d.title or 'design'}" + (f"  [{d.topology}]" if d.topology else "")]
    spread = " and ".join(w for w, on in (("hFE typ", d.bjts), ("IDSS/VP typ", d.jfets)) if on)
    out.append(f"midband {fmt(analysis.midband, 'Hz')}; nominal: {spread or 'typ'}, 25 °C, "
               f"{fmt(d.supply_voltage, 'V')} supply")
    out.append("")
    worst = min(analysis.corners, key=lambda c: c.swing_vpp)
    rows = [
        ["gain", f"{analysis.gain_db:.2f} dB ({eng(abs(analysis.gain), 'V/V', 3)}, "
                 f"{'inverting' if analysis.inverting else 'non-inverting'})"],
        ["f_low", fmt(analysis.f_low, "Hz") if analysis.f_low > 0 else "none (DC coupled)"],
        ["f_high", fmt(analysis.f_high, "Hz")],
        ["z_in", fmt(analysis.z_in, "Ω")],
        ["z_out", fmt(analysis.z_out, "Ω")],
        ["supply current", fmt(analysis.supply_current, "A")],
        ["swing", f"{fmt(analysis.swing_vpp, 'Vpp')} (smallest over corners: "
                  f"{worst.condition.label}, {worst.swing_limit})"],
        *_noise_rows(analysis),
    ]
    rows += supply_stability_rows(analysis)
    if analysis.thd is not None:
        rows.append(["THD", f"{fmt(analysis.thd, '%')} at {fmt(analysis.thd_level, 'Vpp')}, "
                            f"{fmt(analysis.thd_at, 'Hz')} (HD2 {fmt(analysis.nominal.hd2, '%')}, "
                            f"HD3 {fmt(analysis.nominal.hd3, '%')}; harmonic balance)"])
    out += _table(["figure", "value"], rows)
    off = [f"{ref} {s.region}" for ref, s in analysis.nominal.transistors.items()
           if s.region != "active"]
    if off:
        out.append(f"warning: at nominal {', '.join(off)}; the small-signal figures above "
                   "assume the active region and do not describe this stage")
    out.append("")
    refs = [p.ref for p in d.transistors]
    sat = {r: analysis.nominal.transistors[r].vsat for r in refs}
    fets = {p.ref for p in d.jfets}
    header = ["condition"] + [f"{r} {x}" for r in refs
                              for x in (("ID", "VDS", "Tj") if r in fets else ("IC", "VCE", "Tj"))
                              ] + [
        "supply I", "swing", "limited by", "THD"]
    rows = []
    for p in (analysis.nominal, *analysis.corners):
        row = [p.condition.label]
        for r in refs:
            s = p.transistors[r]
            ic, vce, _ = transistor_cells(s, s.vsat if r in fets else sat[r])
            row += [ic, vce, f"{s.tj:.1f} °C"]
        row += [fmt(p.supply_current, "A"), fmt(p.swing_vpp, "Vpp"), p.swing_limit,
                fmt(p.thd, "%") if p.thd is not None else "n/a"]
        rows.append(row)
    out += _table(header, rows)
    if verdict is not None:
        out.append("")
        rows = [
            [c.name, check_value(c), check_limit(c), margin_text(c), status_text(c),
             c.condition or c.where, "pass" if c.ok else "FAIL"]
            for c in verdict.checks
        ]
        out += _table(["requirement", "value", "limit", "margin", "status", "worst at",
                       "result"], rows)
        out.append("")
        if verdict.meets_spec:
            out.append("verdict: meets the spec")
        else:
            failed = ", ".join(c.name for c in verdict.failed)
            out.append(f"verdict: does NOT meet the spec: {failed}")
    return "\n".join(out)
