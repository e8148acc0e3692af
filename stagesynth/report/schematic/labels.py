"""Label text of the schematic: part values with SI prefixes, transistor types, the supply
voltage, and the room a label takes on the sheet."""

from __future__ import annotations

import math
from collections.abc import Mapping

from stagesynth.contracts.netlist import Design, Part

FONT = 12.0  # part labels, points
SMALL = 10.0  # node names, points
PT_PER_UNIT = 36.0  # schemdraw's default scale: 0.5 inch per unit, 72 points per inch

_PREFIXES = {-15: "f", -12: "p", -9: "n", -6: "µ", -3: "m", 0: "", 3: "k", 6: "M", 9: "G"}
_UNITS = {"resistor": "Ω", "capacitor": "F"}


def _local_format(value: float, unit: str) -> str:
    """Engineering notation with an SI prefix, three significant digits: 47000 -> "47 kΩ"."""
    if value == 0:
        return f"0 {unit}"
    exp3 = min(max(3 * math.floor(math.log10(abs(value)) / 3), -15), 9)
    mantissa = float(f"{value / 10**exp3:.3g}")
    if abs(mantissa) >= 1000 and exp3 < 9:
        exp3, mantissa = exp3 + 3, mantissa / 1000
    return f"{mantissa:g} {_PREFIXES[exp3]}{unit}"


def fmt(value: object, unit: str) -> str:
    """Value text with an SI prefix; uses the project's formatter when it is available."""
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        return "?"
    try:
        from stagesynth.quantities.units import format_quantity
    except ImportError:  # pragma: no cover - the project's formatter is optional here
        return _local_format(float(value), unit)
    try:
        return format_quantity(float(value), unit, 3)
    except (TypeError, ValueError):  # pragma: no cover
        return _local_format(float(value), unit)


def part_text(part: Part, design: Design, texts: Mapping[str, str]) -> str:
    """Two-line label: reference designator, then the value (or the transistor type)."""
    if part.ref in texts:
        return f"{part.ref}\n{texts[part.ref]}"
    dev = design.devices.get(part.device or "")
    if part.kind == "bjt":
        kind = dev.polarity.upper() if dev is not None else "BJT"
        return f"{part.ref}\n{kind}"
    if part.kind == "jfet":  # "N-JFET", "P-JFET": the channel, as the trade writes it
        channel = getattr(dev, "polarity", "")
        return f"{part.ref}\n{channel.upper() + '-' if channel in ('n', 'p') else ''}JFET"
    return f"{part.ref}\n{fmt(part.value, _UNITS.get(part.kind, ''))}"


def text_box(text: str, size: float) -> tuple[float, float]:
    """Approximate width and height of a (multi-line) label, in drawing units."""
    lines = text.split("\n")
    width = max(len(line) for line in lines) * size * 0.6 / PT_PER_UNIT + 0.1
    height = len(lines) * size * 1.2 / PT_PER_UNIT
    return width, height


def supply_text(design: Design) -> str:
    """The supply voltage as the rail is labelled: "+12 V"."""
    v = design.supply_voltage
    sign = "+" if v > 0 else ""
    return f"{sign}{fmt(v, 'V')}"

