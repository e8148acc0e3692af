"""Warnings for spec values that are valid but unlikely for their key ("z_in = 2 mΩ").

A value outside the span a discrete small-signal stage plausibly uses for its key is
accepted (the user may mean it) with a warning; when the value with "m" read as "M"
(or the reverse), or with a prefix one step of 10³ away, lands inside the span, the
warning says which was probably meant. The spans are common practice, wide on
purpose: a warning should be rare and right.
"""

from __future__ import annotations

from collections.abc import Iterator

from stagesynth.quantities.units import format_quantity

# key -> (unit, lowest plausible, highest plausible); zero (= none) is never warned about
SPANS: dict[str, tuple[str, float, float]] = {
    "supply.voltage": ("V", 1.0, 400.0),
    "source.resistance": ("Ω", 0.1, 100e6),
    "load.resistance": ("Ω", 1.0, 1e9),
    "load.capacitance": ("F", 1e-15, 100e-6),
    "require.f_low": ("Hz", 1e-3, 100e6),
    "require.f_high": ("Hz", 1.0, 20e9),
    "require.z_in": ("Ω", 1.0, 10e9),
    "require.z_out": ("Ω", 0.01, 100e6),
    "require.supply_current": ("A", 100e-9, 10.0),
    "transistor.ft": ("Hz", 100e3, 500e9),
    "transistor.c_cb": ("F", 10e-15, 10e-9),
    "transistor.vbe_current": ("A", 100e-9, 10.0),
    "transistor.ic_max": ("A", 100e-6, 100.0),
    "transistor.early_voltage": ("V", 1.0, 10e3),
    # junction FET (common practice: small-signal JFETs)
    "transistor.idss": ("A", 10e-6, 1.0),
    "transistor.c_gs": ("F", 10e-15, 10e-9),
    "transistor.c_gd": ("F", 10e-15, 10e-9),
    "transistor.i_gss": ("A", 10e-15, 100e-9),
}


def _suggestion(value: float, unit: str, lo: float, hi: float) -> str:
    """ "did you mean ...?" for the likeliest slip, or ""."""
    candidates = (1e9, 1e-9, 1e3, 1e-3, 1e6, 1e-6)  # m<->M first, then one prefix step
    for factor in candidates:
        guess = value * factor
        if lo <= guess <= hi:
            return f": did you mean {format_quantity(guess, unit)}?"
    return ""


def check_value(key: str, value: float | None) -> str | None:
    """The warning for `key` = `value`, or None when it is plausible (or not checked)."""
    if key not in SPANS or value is None or value == 0:
        return None
    unit, lo, hi = SPANS[key]
    if lo <= abs(value) <= hi:
        return None
    hint = _suggestion(abs(value), unit, lo, hi)
    side = "small" if abs(value) < lo else "large"
    return (f"{key} = {format_quantity(value, unit)} is unusually {side} for this key"
            f"{hint or ' (accepted as written)'}")


def spec_warnings(spec) -> Iterator[str]:
    """Every implausible value of a spec, one line each, in file order."""
    r, d = spec.require, spec.transistor
    values = {
        "supply.voltage": spec.supply.voltage,
        "source.resistance": spec.source.resistance,
        "load.resistance": spec.load.resistance,
        "load.capacitance": spec.load.capacitance,
        "require.f_low": r.f_low,
        "require.f_high": r.f_high,
        "require.z_in": r.z_in,
        "require.z_out": r.z_out,
        "require.supply_current": r.supply_current,
        "transistor.ft": getattr(d, "ft", None),
        "transistor.c_cb": getattr(d, "c_cb", None),
        "transistor.vbe_current": getattr(d, "vbe_current", None),
        "transistor.ic_max": getattr(d, "ic_max", None),
        "transistor.early_voltage": getattr(d, "early_voltage", None),
    }
    for key in ("c_gs", "c_gd", "i_gss"):
        values[f"transistor.{key}"] = getattr(d, key, None)
    for key, value in values.items():
        message = check_value(key, value)
        if message is not None:
            yield message
    for end in (getattr(d, "idss_min", None), getattr(d, "idss_max", None)):
        message = check_value("transistor.idss", end)
        if message is not None:
            yield message
