"""Plain-text tables for the terminal: what an engineer reads after `analyze`."""

from __future__ import annotations

import math

from .analysis import Analysis
from .units import format_quantity
from .verdict import Check, Verdict

_UNIT_LABEL = {"A": "A", "V": "V", "W": "W", "Hz": "Hz", "Ω": "Ω", "dB": "dB", "Vpp": "Vpp"}


def fmt(value: float, unit: str) -> str:
    """Engineering notation; 'none' for an infinite corner (e.g. DC coupled)."""
    if isinstance(value, float) and math.isinf(value):
        return "none (∞)" if value > 0 else "-∞"
    if unit == "%":
        return f"{100 * value:.2f} %"
    if unit == "":
        return f"{value:.3g}"
    if unit == "dB":
        return f"{value:.2f} dB"
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
    return fmt(float(c.value), c.unit)


def check_limit(c: Check) -> str:
    if c.relation == "within":
        lo, hi = c.limit
        return f"{lo:.2f} … {hi:.2f} dB"
    if c.relation == "is":
        return str(c.limit).lower()
    return f"{c.relation} {fmt(float(c.limit), c.unit)}"


def analysis_table(analysis: Analysis, verdict: Verdict | None = None) -> str:
    d = analysis.design
    out = [f"{d.title or 'design'}" + (f"  [{d.topology}]" if d.topology else "")]
    out.append(f"midband {fmt(analysis.midband, 'Hz')}; nominal: hFE typ, 25 °C, "
               f"{fmt(d.supply_voltage, 'V')} supply")
    out.append("")
    worst = min(analysis.corners, key=lambda c: c.swing_vpp)
    rows = [
        ["gain", f"{analysis.gain_db:.2f} dB ({abs(analysis.gain):.3g} V/V, "
                 f"{'inverting' if analysis.inverting else 'non-inverting'})"],
        ["f_low", fmt(analysis.f_low, "Hz") if analysis.f_low > 0 else "none (DC coupled)"],
        ["f_high", fmt(analysis.f_high, "Hz")],
        ["z_in", fmt(analysis.z_in, "Ω")],
        ["z_out", fmt(analysis.z_out, "Ω")],
        ["supply current", fmt(analysis.supply_current, "A")],
        ["swing", f"{fmt(analysis.swing_vpp, 'Vpp')} (smallest over corners: "
                  f"{worst.condition.label}, {worst.swing_limit})"],
    ]
    out += _table(["figure", "value"], rows)
    out.append("")
    refs = [p.ref for p in d.bjts]
    header = ["condition"] + [f"{r} {x}" for r in refs for x in ("IC", "VCE", "Tj")] + [
        "supply I", "swing", "limited by"]
    rows = []
    for p in (analysis.nominal, *analysis.corners):
        row = [p.condition.label]
        for r in refs:
            s = p.transistors[r]
            row += [fmt(s.ic, "A"), fmt(s.vce, "V"), f"{s.tj:.1f} °C"]
        row += [fmt(p.supply_current, "A"), fmt(p.swing_vpp, "Vpp"), p.swing_limit]
        rows.append(row)
    out += _table(header, rows)
    if verdict is not None:
        out.append("")
        rows = [
            [c.name, check_value(c), check_limit(c),
             f"{100 * c.margin:+.0f} %" if math.isfinite(c.margin) else "",
             c.condition or c.where, "pass" if c.ok else "FAIL"]
            for c in verdict.checks
        ]
        out += _table(["requirement", "value", "limit", "margin", "worst at", "result"], rows)
        out.append("")
        if verdict.meets_spec:
            out.append("verdict: meets the spec")
        else:
            failed = ", ".join(c.name for c in verdict.failed)
            out.append(f"verdict: does NOT meet the spec: {failed}")
    return "\n".join(out)
