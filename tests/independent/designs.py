"""Hand-written design files (contract section 3) and matching specs (section 1) for checks.

Our own invented scenarios with generic invented transistors (no real part numbers). Each
spec is a plain dict in SI units (ambient in degC) that refmodel.analyze_spec reads, and
spec_toml() renders it as the TOML text the CLI reads.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Mapping
from typing import Any

# generic invented transistors ------------------------------------------------------------

SMALL_NPN: dict[str, Any] = {
    "polarity": "npn", "hfe": [100, 300], "hfe_typ": 175, "vbe": 0.65, "vbe_current": 1e-3,
    "early_voltage": 100.0, "ft": 2.5e8, "c_cb": 4e-12, "r_bb": 50.0, "vce_sat": 0.2,
    "vbe_tempco": -2e-3, "hfe_tempco": 5e-3, "theta_ja": 250.0,
}
QUIET_NPN: dict[str, Any] = {  # no r_bb, no theta_ja, default hfe_typ
    "polarity": "npn", "hfe": [150, 450], "vbe": 0.66, "vbe_current": 1e-3,
    "early_voltage": 80.0, "ft": 3.0e8, "c_cb": 2.5e-12, "vce_sat": 0.15,
    "vbe_tempco": -2.1e-3, "hfe_tempco": 4e-3,
}
SMALL_PNP: dict[str, Any] = {
    "polarity": "pnp", "hfe": [80, 250], "vbe": 0.62, "vbe_current": 1e-3,
    "early_voltage": 60.0, "ft": 1.5e8, "c_cb": 6e-12, "vce_sat": 0.25,
    "vbe_tempco": -2e-3, "hfe_tempco": 5e-3,
}
DRIVER_NPN: dict[str, Any] = {
    "polarity": "npn", "hfe": [120, 400], "vbe": 0.68, "vbe_current": 2e-3,
    "early_voltage": 120.0, "ft": 2.0e8, "c_cb": 3.5e-12, "r_bb": 30.0, "vce_sat": 0.2,
    "vbe_tempco": -1.9e-3, "hfe_tempco": 6e-3, "theta_ja": 200.0,
}
CHARGE_NPN: dict[str, Any] = {  # second release: fT stated at 10 mA, junction capacitance
    **SMALL_NPN, "ft_current": 10e-3, "c_je": 8e-12, "hfe_reverse": 2.0,
}
WIDE_NPN: dict[str, Any] = {  # a part type with a tenfold hFE spread
    "polarity": "npn", "hfe": [50, 500], "vbe": 0.65, "vbe_current": 1e-3,
    "early_voltage": 100.0, "ft": 2.5e8, "c_cb": 4e-12, "r_bb": 40.0, "vce_sat": 0.2,
}


def _r(ref: str, value: float, a: str, b: str) -> dict[str, Any]:
    """A resistor part."""
    return {"ref": ref, "kind": "resistor", "value": float(value), "nodes": [a, b]}


def _c(ref: str, value: float, a: str, b: str) -> dict[str, Any]:
    """A capacitor part."""
    return {"ref": ref, "kind": "capacitor", "value": float(value), "nodes": [a, b]}


def _q(ref: str, c: str, b: str, e: str, device: str = "Q") -> dict[str, Any]:
    """A BJT part."""
    return {"ref": ref, "kind": "bjt", "device": device, "nodes": {"c": c, "b": b, "e": e}}


def _design(title: str, topology: str, vcc: float, rs: float, rl: float, cl: float,
            parts: list[dict[str, Any]], device: Mapping[str, Any]) -> dict[str, Any]:
    """A section-3 design dict around one device type called Q."""
    return {
        "format": "stagesynth-design-1", "title": title, "topology": topology, "ground": "0",
        "supply": {"node": "vcc", "voltage": float(vcc)}, "input": "in", "output": "out",
        "source": {"resistance": float(rs)},
        "load": {"resistance": float(rl), "capacitance": float(cl)},
        "parts": parts, "devices": {"Q": copy.deepcopy(dict(device))},
    }


DESIGNS: dict[str, dict[str, Any]] = {
    # hydrophone front end: NPN CE, divider bias, RE split, bypass cap, r_bb, self-heating
    "ce_npn": _design("Hydrophone front end", "ce", 12.0, 600.0, 10e3, 100e-12, [
        _r("R1", 47e3, "vcc", "b1"), _r("R2", 12e3, "b1", "0"), _r("RC", 3.9e3, "vcc", "c1"),
        _r("RE1", 220.0, "e1", "e2"), _r("RE2", 1e3, "e2", "0"),
        _c("C1", 10e-6, "in", "b1"), _c("C2", 10e-6, "c1", "out"), _c("CE", 100e-6, "e2", "0"),
        _q("Q1", "c1", "b1", "e1"),
    ], SMALL_NPN),
    # tape-head preamp on a 9 V battery: the PNP mirror, emitter toward the supply
    "ce_pnp": _design("Tape-head preamp, PNP", "ce-pnp", 9.0, 0.0, 22e3, 0.0, [
        _r("R1", 22e3, "vcc", "b1"), _r("R2", 56e3, "b1", "0"), _r("RC", 3.3e3, "c1", "0"),
        _r("RE2", 1.5e3, "vcc", "e2"), _r("RE1", 330.0, "e2", "e1"),
        _c("C1", 4.7e-6, "in", "b1"), _c("C2", 10e-6, "c1", "out"), _c("CE", 220e-6, "vcc", "e2"),
        _q("Q1", "c1", "b1", "e1"),
    ], SMALL_PNP),
    # cable driver buffer: emitter follower
    "ef_npn": _design("Cable driver buffer", "ef", 12.0, 2.2e3, 1e3, 1e-9, [
        _r("R1", 47e3, "vcc", "b1"), _r("R2", 47e3, "b1", "0"), _r("RE", 2.2e3, "e1", "0"),
        _c("C1", 4.7e-6, "in", "b1"), _c("C2", 47e-6, "e1", "out"),
        _q("Q1", "vcc", "b1", "e1"),
    ], SMALL_NPN),
    # strain-gauge amplifier: CE direct-coupled into a follower
    "ce_ef_direct": _design("Strain-gauge amplifier", "ce-ef", 15.0, 50.0, 2e3, 470e-12, [
        _r("R1", 56e3, "vcc", "b1"), _r("R2", 10e3, "b1", "0"), _r("RC1", 6.8e3, "vcc", "c1"),
        _r("RE1", 150.0, "e1", "e2"), _r("RE2", 1.5e3, "e2", "0"),
        _r("RE3", 3.3e3, "e3", "0"),
        _c("C1", 10e-6, "in", "b1"), _c("CE", 220e-6, "e2", "0"), _c("C2", 47e-6, "e3", "out"),
        _q("Q1", "c1", "b1", "e1"), _q("Q2", "vcc", "c1", "e3"),
    ], DRIVER_NPN),
    # geophone amplifier: two CE stages, capacitor-coupled, ideal voltage source
    "ce_ce_cap": _design("Geophone amplifier", "ce-ce", 12.0, 0.0, 10e3, 0.0, [
        _r("R1", 47e3, "vcc", "b1"), _r("R2", 12e3, "b1", "0"), _r("RC1", 4.7e3, "vcc", "c1"),
        _r("RE1", 470.0, "e1", "e2"), _r("RE2", 1e3, "e2", "0"),
        _r("R3", 47e3, "vcc", "b2"), _r("R4", 12e3, "b2", "0"), _r("RC2", 4.7e3, "vcc", "c2"),
        _r("RE3", 220.0, "e3", "e4"), _r("RE4", 1e3, "e4", "0"),
        _c("C1", 4.7e-6, "in", "b1"), _c("CE1", 100e-6, "e2", "0"), _c("C2", 4.7e-6, "c1", "b2"),
        _c("CE2", 100e-6, "e4", "0"), _c("C3", 10e-6, "c2", "out"),
        _q("Q1", "c1", "b1", "e1"), _q("Q2", "c2", "b2", "e3"),
    ], QUIET_NPN),
    # doorbell intercom: fixed base bias (a poor design on purpose: bias follows hFE)
    "ce_fixed_bias": _design("Intercom stage, fixed bias", "ce-fixed", 12.0, 1e3, 10e3, 0.0, [
        _r("RB", 1.5e6, "vcc", "b1"), _r("RC", 3.3e3, "vcc", "c1"),
        _c("C1", 10e-6, "in", "b1"), _c("C2", 10e-6, "c1", "out"),
        _q("Q1", "c1", "b1", "0"),
    ], WIDE_NPN),
    # line driver into 150 ohm: ~19 mA follower whose self-heating (theta_ja) moves the bias
    "ef_hot": _design("Line driver, self-heating", "ef", 15.0, 600.0, 150.0, 2.2e-9, [
        _r("R1", 3.3e3, "vcc", "b1"), _r("R2", 3.9e3, "b1", "0"), _r("RE", 390.0, "e1", "0"),
        _r("RCL", 100.0, "vcc", "c1"),
        _c("C1", 22e-6, "in", "b1"), _c("C2", 470e-6, "e1", "out"),
        _q("Q1", "c1", "b1", "e1"),
    ], SMALL_NPN | {"theta_ja": 200.0}),
    # sensor buffer fed from an ideal voltage source, no r_bb, no load capacitance: the
    # response never falls 3 dB above midband (C_pi feeds the input through), f_high = inf
    "ef_ideal_source": _design("Sensor buffer", "ef", 12.0, 0.0, 1e3, 0.0, [
        _r("R1", 47e3, "vcc", "b1"), _r("R2", 47e3, "b1", "0"), _r("RE", 2.2e3, "e1", "0"),
        _c("C1", 4.7e-6, "in", "b1"), _c("C2", 47e-6, "e1", "out"),
        _q("Q1", "vcc", "b1", "e1"),
    ], QUIET_NPN),
    # thermocouple amplifier: DC-coupled all through (the source resistance is part of the
    # base bias at DC, the load hangs on the collector): f_low = 0
    "ce_dc_coupled": _design("Thermocouple amplifier, DC coupled", "ce-dc", 12.0, 10e3, 10e3,
                             0.0, [
        _r("R1", 100e3, "vcc", "in"), _r("RC", 3.3e3, "vcc", "out"), _r("RE", 220.0, "e1", "0"),
        _q("Q1", "out", "in", "e1"),
    ], QUIET_NPN),
    # photodiode post-amp: NPN CE direct-coupled into a PNP CE (two device types)
    "ce_npn_pnp": {**_design("Photodiode post-amp", "ce-ce-complementary", 12.0, 300.0, 10e3,
                             50e-12, [
        _r("R1", 47e3, "vcc", "b1"), _r("R2", 10e3, "b1", "0"), _r("RC1", 2.2e3, "vcc", "c1"),
        _r("RE1", 470.0, "e1", "e2"), _r("RE2", 1e3, "e2", "0"), _r("RE3", 1.5e3, "vcc", "e3"),
        _r("RC2", 4.7e3, "c3", "0"),
        _c("C1", 10e-6, "in", "b1"), _c("CE", 100e-6, "e2", "0"), _c("C2", 10e-6, "c3", "out"),
        _q("Q1", "c1", "b1", "e1", "QN"), _q("Q2", "c3", "c1", "e3", "QP"),
    ], SMALL_NPN), "devices": {"QN": copy.deepcopy(SMALL_NPN), "QP": copy.deepcopy(SMALL_PNP)}},
    # piezo accelerometer preamp (second release): the sensor's capacitance in series with
    # the EMF feeds the base directly (no coupling capacitor: it is the sensor's own), and
    # fT falls at the 0.3 mA bias (ft_current, c_je)
    "ce_piezo": {**_design("Piezo accelerometer preamp", "ce", 12.0, 1e3, 47e3, 220e-12, [
        _r("R1", 150e3, "vcc", "in"), _r("R2", 33e3, "in", "0"), _r("RC", 15e3, "vcc", "c1"),
        _r("RE1", 1.5e3, "e1", "e2"), _r("RE2", 3.3e3, "e2", "0"),
        _c("C2", 1e-6, "c1", "out"), _c("CE", 47e-6, "e2", "0"),
        _q("Q1", "c1", "in", "e1"),
    ], CHARGE_NPN), "source": {"resistance": 1e3, "capacitance": 100e-9}},
}


def _spec(design: str, title: str, tolerance: float, require: dict[str, Any]) -> dict[str, Any]:
    """A reference spec dict whose supply, source and load copy the design's own."""
    d = DESIGNS[design]
    return {
        "design": design, "title": title,
        "supply": {"voltage": d["supply"]["voltage"], "tolerance": tolerance},
        "source": dict(d["source"]),
        "load": dict(d["load"]),
        "require": require,
    }


SPECS: dict[str, dict[str, Any]] = {
    "ce_npn_ok": _spec("ce_npn", "Hydrophone front end", 0.05, {
        "gain_db": 20.5, "gain_tolerance_db": 1.0, "f_low": 20.0, "f_high": 1e5, "z_in": 5e3,
        "swing": 4.0, "supply_current": 2.5e-3, "ambient": [0.0, 50.0], "inverting": "yes"}),
    "ce_npn_zin": _spec("ce_npn", "Hydrophone front end, high-Z hydrophone", 0.05, {
        "gain_db": 20.5, "f_low": 20.0, "f_high": 1e5, "z_in": 10e3,
        "swing": 4.0, "ambient": [0.0, 50.0]}),
    "ce_pnp_ok": _spec("ce_pnp", "Tape-head preamp", 0.1, {
        "gain_db": 18.0, "gain_tolerance_db": 1.5, "f_low": 20.0, "f_high": 5e4, "z_in": 4e3,
        "swing": 3.0, "supply_current": 2e-3, "ambient": [-10.0, 45.0]}),
    "ce_pnp_gain": _spec("ce_pnp", "Tape-head preamp, more gain", 0.0, {
        "gain_db": 24.0, "gain_tolerance_db": 1.0, "f_low": 20.0, "f_high": 2e4, "swing": 2.0}),
    "ef_ok": _spec("ef_npn", "Cable driver buffer", 0.05, {
        "gain_db": -1.0, "gain_tolerance_db": 1.0, "f_low": 10.0, "f_high": 2e5, "z_in": 10e3,
        "z_out": 50.0, "swing": 1.8, "ambient": [-20.0, 60.0], "inverting": "no",
        "peaking": 5.0}),
    "ef_inverting": _spec("ef_npn", "Cable driver, wrong polarity asked", 0.05, {
        "gain_db": -1.0, "f_low": 10.0, "f_high": 2e5, "swing": 2.0, "inverting": "yes",
        "peaking": 5.0}),
    "ef_swing": _spec("ef_npn", "Cable driver, big swing", 0.0, {
        "gain_db": -1.0, "f_low": 10.0, "f_high": 1e6, "swing": 6.0, "peaking": 5.0}),
    "ce_ef_ok": _spec("ce_ef_direct", "Strain-gauge amplifier", 0.05, {
        "gain_db": 31.0, "gain_tolerance_db": 1.5, "f_low": 10.0, "f_high": 5e4, "z_in": 3e3,
        "z_out": 100.0, "swing": 4.0, "supply_current": 6e-3, "ambient": [0.0, 70.0],
        "inverting": "yes"}),
    "ce_ef_current": _spec("ce_ef_direct", "Strain-gauge amplifier, battery budget", 0.05, {
        "gain_db": 31.0, "gain_tolerance_db": 1.5, "f_low": 10.0, "f_high": 5e4,
        "swing": 4.0, "supply_current": 2.5e-3, "ambient": [0.0, 70.0]}),
    "ce_ce_ok": _spec("ce_ce_cap", "Geophone amplifier", 0.05, {
        "gain_db": 37.0, "gain_tolerance_db": 2.0, "f_low": 20.0, "f_high": 2e4, "z_in": 4e3,
        "swing": 3.0, "ambient": [-10.0, 50.0], "inverting": "no"}),
    "ce_ce_bandwidth": _spec("ce_ce_cap", "Geophone amplifier, wideband", 0.05, {
        "gain_db": 37.0, "gain_tolerance_db": 2.0, "f_low": 20.0, "f_high": 5e6,
        "swing": 3.0}),
    "ef_hot_ok": _spec("ef_hot", "Line driver", 0.1, {
        "gain_db": -2.5, "gain_tolerance_db": 1.5, "f_low": 20.0, "f_high": 1e5, "z_in": 1e3,
        "swing": 2.0, "supply_current": 30e-3, "ambient": [-20.0, 70.0],
        "peaking": 10.0}),
    "ef_hot_peaking": _spec("ef_hot", "Line driver, flat response asked", 0.1, {
        "gain_db": -2.5, "gain_tolerance_db": 1.5, "f_low": 20.0, "f_high": 1e5, "z_in": 1e3,
        "swing": 2.0, "ambient": [-20.0, 70.0]}),
    "ce_npn_ripple": _spec("ce_npn", "Preamp on an unregulated rail", 0.05, {
        "gain_db": 20.5, "f_low": 20.0, "f_high": 1e5, "swing": 3.0, "supply_rejection": 20.0,
        "ripple_at": 120.0}),
    "ef_ideal_ripple": _spec("ef_ideal_source", "Sensor buffer on a shared rail", 0.0, {
        "gain_db": 0.0, "f_low": 20.0, "f_high": 1e5, "swing": 2.0, "supply_rejection": 30.0}),
    "ef_ideal_ok": _spec("ef_ideal_source", "Sensor buffer", 0.0, {
        "gain_db": 0.0, "f_low": 20.0, "f_high": 1e5, "z_out": 30.0, "swing": 2.0}),
    "dc_coupled_ok": _spec("ce_dc_coupled", "Thermocouple amplifier", 0.05, {
        "gain_db": 18.0, "gain_tolerance_db": 1.5, "f_low": 0.1, "f_high": 1e5, "z_in": 20e3,
        "swing": 4.0, "ambient": [10.0, 40.0], "inverting": "yes"}),
    "npn_pnp_ok": _spec("ce_npn_pnp", "Photodiode post-amp", 0.05, {
        "gain_db": 19.0, "gain_tolerance_db": 1.5, "f_low": 20.0, "f_high": 1e5, "z_in": 5e3,
        "swing": 3.0, "supply_current": 3e-3, "ambient": [0.0, 50.0], "inverting": "no"}),
    "npn_pnp_swing": _spec("ce_npn_pnp", "Photodiode post-amp, big swing", 0.05, {
        "gain_db": 19.0, "gain_tolerance_db": 1.5, "f_low": 20.0, "f_high": 1e5,
        "swing": 6.0, "ambient": [0.0, 50.0]}),
    "piezo_ok": _spec("ce_piezo", "Piezo accelerometer preamp", 0.05, {
        "gain_db": 16.5, "gain_tolerance_db": 1.0, "f_low": 80.0, "f_high": 4e4, "z_in": 20e3,
        "swing": 4.0, "ambient": [-10.0, 50.0], "inverting": "yes"}),
    "piezo_low_corner": _spec("ce_piezo", "Piezo preamp, lower corner than the sensor allows",
                              0.05, {"gain_db": 16.5, "gain_tolerance_db": 1.0, "f_low": 50.0,
                                     "f_high": 4e4, "swing": 4.0, "ambient": [-10.0, 50.0]}),
    "fixed_bias": _spec("ce_fixed_bias", "Intercom stage", 0.05, {
        "gain_db": 40.0, "gain_tolerance_db": 3.0, "f_low": 50.0, "f_high": 1e4,
        "swing": 1.0, "ambient": [0.0, 40.0]}),
}


# TOML rendering ------------------------------------------------------------------------


def _q_str(value: float, unit: str) -> str:
    """A quantity as a TOML string with a unit, e.g. '"600.0 Ω"'."""
    return f'"{value!r} {unit}"'


def transistor_toml(dev: Mapping[str, Any]) -> str:
    """The [transistor] section for a design-file device dict."""
    lines = ["[transistor]", f'polarity = "{dev["polarity"]}"',
             f"hfe = [{dev['hfe'][0]}, {dev['hfe'][1]}]"]
    if "hfe_typ" in dev:
        lines.append(f"hfe_typ = {dev['hfe_typ']}")
    lines += [
        f"vbe = {_q_str(dev['vbe'], 'V')}",
        f"vbe_current = {_q_str(dev['vbe_current'], 'A')}",
        f"early_voltage = {_q_str(dev.get('early_voltage', 100.0), 'V')}",
        f"ft = {dev['ft']!r}",
        f"c_cb = {dev['c_cb']!r}",
        f"r_bb = {_q_str(dev.get('r_bb', 0.0), 'Ω')}",
        f"vce_sat = {_q_str(dev.get('vce_sat', 0.2), 'V')}",
        f"vbe_tempco = {_q_str(dev.get('vbe_tempco', -2e-3) * 1e3, 'mV/K')}",
        f"hfe_tempco = {_q_str(dev.get('hfe_tempco', 5e-3) * 100, '%/K')}",
    ]
    if dev.get("theta_ja") is not None:
        lines.append(f"theta_ja = {_q_str(dev['theta_ja'], 'K/W')}")
    if dev.get("ft_current") is not None:  # second-release keys
        lines.append(f"ft_current = {_q_str(dev['ft_current'], 'A')}")
    if "c_je" in dev:
        lines.append(f"c_je = {_q_str(dev['c_je'] * 1e12, 'pF')}")
    if "hfe_reverse" in dev:
        lines.append(f"hfe_reverse = {dev['hfe_reverse']!r}")
    return "\n".join(lines) + "\n"


def spec_toml(spec: Mapping[str, Any]) -> str:
    """TOML text of a reference spec dict, in the section-1 key layout."""
    d = DESIGNS[spec["design"]]
    req = spec["require"]
    out = [f'title = "{spec["title"]}"', "", "[supply]",
           f"voltage = {_q_str(spec['supply']['voltage'], 'V')}",
           f'tolerance = "{spec["supply"]["tolerance"] * 100:g}%"', "", "[source]",
           f"resistance = {_q_str(spec['source']['resistance'], 'Ω')}",
           *([f"capacitance = {spec['source']['capacitance']!r}"]
             if spec["source"].get("capacitance") else []), "", "[load]",
           f"resistance = {spec['load']['resistance']!r}",
           f"capacitance = {spec['load']['capacitance']!r}", "", "[require]",
           f'gain = "{req["gain_db"]:g} dB"']
    if "gain_tolerance_db" in req:
        out.append(f'gain_tolerance = "{req["gain_tolerance_db"]:g} dB"')
    out += [f"f_low = {_q_str(req['f_low'], 'Hz')}", f"f_high = {req['f_high']!r}"]
    if "z_in" in req:
        out.append(f"z_in = {_q_str(req['z_in'], 'Ω')}")
    if "z_out" in req:
        out.append(f"z_out = {req['z_out']!r}")
    out.append(f'swing = "{req["swing"]:g} Vpp"')
    if "supply_current" in req:
        out.append(f'supply_current = "{req["supply_current"] * 1e3:g} mA"')
    if "ambient" in req:
        lo, hi = req["ambient"]
        out.append(f'ambient = ["{lo:g} °C", "{hi:g} °C"]')
    if "inverting" in req:
        out.append(f'inverting = "{req["inverting"]}"')
    if "supply_rejection" in req:
        out.append(f'supply_rejection = "{req["supply_rejection"]:g} dB"')
    if "ripple_at" in req:
        out.append(f"ripple_at = {req['ripple_at']!r}")
    if "peaking" in req:
        out.append(f'peaking = "{req["peaking"]:g} dB"')
    first = next(p["device"] for p in d["parts"] if p["kind"] == "bjt")
    return "\n".join(out) + "\n\n" + transistor_toml(d["devices"][first])


def hfe_typ(dev: Mapping[str, Any]) -> float:
    """The nominal hFE of a device dict: hfe_typ, else sqrt(min*max)."""
    return float(dev.get("hfe_typ", math.sqrt(dev["hfe"][0] * dev["hfe"][1])))
