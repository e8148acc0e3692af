"""Hand-written JFET design files (contract §3) and specs (§1) for the reference checks.

Our own sensor scenarios with generic invented junction FETs (no real part numbers): IDSS
spreads of 5:1, gate resistors of 10 MOhm to 1 GOhm, capacitive sources, ambient to 85 degC.
Specs are plain dicts in SI units (ambient in degC) that refjfetac.analyze reads;
spec_toml() renders them as the TOML the CLI reads.
"""

from __future__ import annotations

import copy
from collections.abc import Mapping
from typing import Any

from .designs import SMALL_NPN, transistor_toml

# generic invented junction FETs -------------------------------------------------------------

GENERAL_NJFET: dict[str, Any] = {  # IDSS 5:1, self-heating
    "kind": "jfet", "polarity": "n", "idss": [2e-3, 10e-3], "vp": [-0.8, -3.0],
    "early_voltage": 100.0, "c_gs": 6e-12, "c_gd": 2e-12, "i_gss": 10e-12,
    "vp_tempco": -2e-3, "idss_tempco": -6e-3, "flicker_corner": 200.0, "theta_ja": 250.0,
}
QUIET_NJFET: dict[str, Any] = {  # low noise, no theta_ja, other spread (still 5:1)
    "kind": "jfet", "polarity": "n", "idss": [1.2e-3, 6e-3], "vp": [-0.5, -1.6],
    "early_voltage": 80.0, "c_gs": 10e-12, "c_gd": 3e-12, "i_gss": 5e-12,
    "vp_tempco": -2.2e-3, "idss_tempco": -5e-3, "flicker_corner": 100.0,
}
GENERAL_PJFET: dict[str, Any] = {  # the mirror image, VP written positive
    "kind": "jfet", "polarity": "p", "idss": [2e-3, 10e-3], "vp": [0.8, 3.0],
    "early_voltage": 60.0, "c_gs": 8e-12, "c_gd": 3e-12, "i_gss": 20e-12,
    "vp_tempco": -2e-3, "idss_tempco": -6e-3, "flicker_corner": 300.0, "theta_ja": 300.0,
}


def _r(ref: str, value: float, a: str, b: str) -> dict[str, Any]:
    return {"ref": ref, "kind": "resistor", "value": float(value), "nodes": [a, b]}


def _c(ref: str, value: float, a: str, b: str) -> dict[str, Any]:
    return {"ref": ref, "kind": "capacitor", "value": float(value), "nodes": [a, b]}


def _j(ref: str, d: str, g: str, s: str, device: str = "J") -> dict[str, Any]:
    return {"ref": ref, "kind": "jfet", "device": device, "nodes": {"d": d, "g": g, "s": s}}


def _q(ref: str, c: str, b: str, e: str, device: str = "Q") -> dict[str, Any]:
    return {"ref": ref, "kind": "bjt", "device": device, "nodes": {"c": c, "b": b, "e": e}}


def _design(title: str, vdd: float, source: dict[str, float], rl: float, cl: float,
            parts: list[dict[str, Any]], devices: Mapping[str, Any]) -> dict[str, Any]:
    """A section-3 design dict."""
    return {
        "format": "stagesynth-design-1", "title": title, "topology": "jfet-test",
        "ground": "0", "supply": {"node": "vdd", "voltage": float(vdd)}, "input": "in",
        "output": "out", "source": dict(source),
        "load": {"resistance": float(rl), "capacitance": float(cl)},
        "parts": parts, "devices": copy.deepcopy(dict(devices)),
    }


DESIGNS: dict[str, dict[str, Any]] = {
    # piezo accelerometer preamp: common source, self-bias split into unbypassed RS1 and
    # bypassed RS2, gate returned by 10 MOhm; the sensor (1 nF behind 100 Ohm) feeds the
    # gate through a coupling capacitor
    "cs_piezo": _design("Piezo accelerometer preamp", 15.0,
                        {"resistance": 100.0, "capacitance": 1e-9}, 100e3, 100e-12, [
        _c("C1", 100e-9, "in", "g1"), _r("RG", 10e6, "g1", "0"),
        _r("RD", 4.7e3, "vdd", "d1"), _r("RS1", 220.0, "s1", "s2"),
        _r("RS2", 820.0, "s2", "0"), _c("CS", 100e-6, "s2", "0"),
        _c("C2", 1e-6, "d1", "out"), _j("J1", "d1", "g1", "s1"),
    ], {"J": GENERAL_NJFET}),
    # capacitive-sensor follower: the gate resistor returns to the tap of the source
    # resistor (bootstrapped); the 1 nF sensor is an ideal EMF behind its capacitance
    "sf_boot": _design("Capacitive-sensor follower", 12.0,
                       {"resistance": 0.0, "capacitance": 1e-9}, 100e3, 47e-12, [
        _r("RG", 10e6, "in", "b1"), _r("RS1", 1e3, "s1", "b1"), _r("RS2", 3.3e3, "b1", "0"),
        _c("C2", 4.7e-6, "s1", "out"), _j("J1", "vdd", "in", "s1"),
    ], {"J": QUIET_NJFET}),
    # hydrophone front end: common source with a 1 GOhm gate return, direct-coupled into a
    # bipolar emitter follower for the low output impedance
    "cs_ef": _design("Hydrophone front end, JFET into follower", 15.0,
                     {"resistance": 10e3}, 2e3, 470e-12, [
        _c("C1", 10e-9, "in", "g1"), _r("RG", 1e9, "g1", "0"),
        _r("RD", 3.3e3, "vdd", "d1"), _r("RS1", 100.0, "s1", "s2"),
        _r("RS2", 1e3, "s2", "0"), _c("CS", 220e-6, "s2", "0"),
        _j("J1", "d1", "g1", "s1"), _q("Q1", "vdd", "d1", "e1"), _r("RE", 2.2e3, "e1", "0"),
        _c("C2", 47e-6, "e1", "out"),
    ], {"J": GENERAL_NJFET, "Q": SMALL_NPN}),
    # contact-microphone preamp on a P channel (the mirror image): source toward the supply
    "cs_pjfet": _design("Contact-microphone preamp, P channel", 12.0,
                        {"resistance": 1e3}, 47e3, 0.0, [
        _c("C1", 47e-9, "in", "g1"), _r("RG", 22e6, "g1", "vdd"),
        _r("RS2", 680.0, "vdd", "s2"), _c("CS", 100e-6, "vdd", "s2"),
        _r("RS1", 330.0, "s2", "s1"), _r("RD", 2.7e3, "d1", "0"),
        _c("C2", 2.2e-6, "d1", "out"), _j("J1", "d1", "g1", "s1"),
    ], {"J": GENERAL_PJFET}),
    # geophone buffer with a divider-biased gate (the spread needs more than self-bias): the
    # high-IDSS unit runs into the triode region at the low supply, a corner out of the active
    # region on purpose
    "cs_divider": _design("Geophone preamp, divider bias", 12.0, {"resistance": 10e3}, 47e3,
                          0.0, [
        _c("C1", 10e-9, "in", "g1"), _r("R1", 220e6, "vdd", "g1"), _r("R2", 47e6, "g1", "0"),
        _r("RD", 5.6e3, "vdd", "d1"), _r("RS1", 330.0, "s1", "s2"),
        _r("RS2", 3e3, "s2", "0"), _c("CS", 47e-6, "s2", "0"),
        _c("C2", 1e-6, "d1", "out"), _j("J1", "d1", "g1", "s1"),
    ], {"J": GENERAL_NJFET}),
    # piezo preamp for bandwidth: the JFET's drain into a bipolar common base (cascode), the
    # 2.2 nF element behind 100 Ohm, gate returned by 100 MOhm
    "cascode": _design("Piezo preamp, JFET-bipolar cascode", 12.0,
                       {"resistance": 100.0, "capacitance": 2.2e-9}, 47e3, 220e-12, [
        _c("C1", 100e-9, "in", "g1"), _r("RG", 100e6, "g1", "0"),
        _r("RS1", 100.0, "s1", "s2"), _r("RS2", 1.5e3, "s2", "0"), _c("CS", 47e-6, "s2", "0"),
        _j("J1", "d1", "g1", "s1"), _q("Q1", "c2", "b2", "d1"),
        _r("R1", 39e3, "vdd", "b2"), _r("R2", 33e3, "b2", "0"), _c("CB", 10e-6, "b2", "0"),
        _r("RC", 3.3e3, "vdd", "c2"), _c("C2", 1e-6, "c2", "out"),
    ], {"J": GENERAL_NJFET, "Q": SMALL_NPN}),
}


def _spec(design: str, title: str, tolerance: float, require: dict[str, Any]) -> dict[str, Any]:
    """A spec dict whose supply, source and load copy the design's own."""
    d = DESIGNS[design]
    return {"design": design, "title": title,
            "supply": {"voltage": d["supply"]["voltage"], "tolerance": tolerance},
            "source": dict(d["source"]), "load": dict(d["load"]), "require": require}


HOT = [0.0, 85.0]
SPECS: dict[str, dict[str, Any]] = {
    "cs_piezo": _spec("cs_piezo", "Piezo accelerometer preamp", 0.05, {
        "gain_db": 16.0, "gain_tolerance_db": 6.0, "f_low": 20.0, "f_high": 2e4,
        "z_in": 1e6, "swing": 2.0, "supply_current": 5e-3, "ambient": HOT,
        "inverting": "yes", "noise": 20e-9, "noise_at": 1e3, "noise_figure": 10.0,
        "noise_rms": 5e-6, "supply_rejection": 10.0, "ripple_at": 100.0}),
    "sf_boot": _spec("sf_boot", "Capacitive-sensor follower", 0.05, {
        "gain_db": -0.5, "gain_tolerance_db": 1.0, "f_low": 30.0, "f_high": 2e4,
        "z_in": 20e6, "swing": 1.0, "ambient": HOT, "inverting": "no",
        "noise": 50e-9, "noise_at": 1e3, "supply_rejection": 20.0, "thd": 0.03,
        "thd_level": 2.0, "thd_at": 1e3}),
    "cs_ef": _spec("cs_ef", "Hydrophone front end", 0.05, {
        "gain_db": 12.0, "gain_tolerance_db": 6.0, "f_low": 10.0, "f_high": 5e4,
        "z_in": 1e6, "z_out": 100.0, "swing": 2.0, "ambient": HOT, "noise": 20e-9,
        "noise_at": 1e3, "noise_figure": 6.0, "supply_rejection": 10.0}),
    "cs_pjfet": _spec("cs_pjfet", "Contact-microphone preamp", 0.05, {
        "gain_db": 9.0, "gain_tolerance_db": 6.0, "f_low": 20.0, "f_high": 2e4,
        "z_in": 1e6, "swing": 2.0, "ambient": [0.0, 60.0], "noise": 20e-9, "noise_at": 1e3}),
    "cascode": _spec("cascode", "Piezo preamp, cascode", 0.05, {
        "gain_db": 16.0, "gain_tolerance_db": 6.0, "f_low": 20.0, "f_high": 5e4,
        "z_in": 1e6, "swing": 2.0, "ambient": HOT, "noise": 20e-9, "noise_at": 1e3,
        "noise_figure": 20.0, "supply_current": 3e-3}),
    "cs_divider": _spec("cs_divider", "Geophone preamp", 0.05, {
        "gain_db": 20.0, "gain_tolerance_db": 6.0, "f_low": 20.0, "f_high": 2e4,
        "z_in": 1e6, "swing": 2.0, "ambient": HOT, "noise": 20e-9, "noise_at": 1e3}),
}


# TOML rendering ------------------------------------------------------------------------------


def _qs(value: float, unit: str) -> str:
    """A quantity string with a unit, e.g. '"4.7 pF"' (nine significant digits)."""
    return f'"{value:.9g} {unit}"'


def jfet_toml(dev: Mapping[str, Any], section: str = "transistor") -> str:
    """A [transistor] (or [companion]) section for a JFET device dict."""
    lines = [f"[{section}]", 'kind = "jfet"', f'polarity = "{dev["polarity"]}"',
             f"idss = [{_qs(dev['idss'][0], 'A')}, {_qs(dev['idss'][1], 'A')}]",
             f"vp = [{_qs(dev['vp'][0], 'V')}, {_qs(dev['vp'][1], 'V')}]",
             f"early_voltage = {_qs(dev['early_voltage'], 'V')}",
             f"c_gs = {_qs(dev['c_gs'] * 1e12, 'pF')}", f"c_gd = {_qs(dev['c_gd'] * 1e12, 'pF')}",
             f"i_gss = {_qs(dev['i_gss'] * 1e12, 'pA')}",
             f"vp_tempco = {_qs(dev['vp_tempco'] * 1e3, 'mV/K')}",
             f"idss_tempco = {_qs(dev['idss_tempco'] * 100, '%/K')}",
             f"flicker_corner = {_qs(dev['flicker_corner'], 'Hz')}"]
    if dev.get("theta_ja") is not None:
        lines.append(f"theta_ja = {_qs(dev['theta_ja'], 'K/W')}")
    return "\n".join(lines) + "\n"


def spec_toml(spec: Mapping[str, Any]) -> str:
    """TOML text of a spec dict (contract §1 layout), the bipolar device as [companion]."""
    d = DESIGNS[spec["design"]]
    req, src = spec["require"], spec["source"]
    out = [f'title = "{spec["title"]}"', "", "[supply]",
           f"voltage = {_qs(spec['supply']['voltage'], 'V')}",
           f'tolerance = "{spec["supply"]["tolerance"] * 100:g}%"', "", "[source]",
           f"resistance = {_qs(src['resistance'], 'Ω')}"]
    if src.get("capacitance"):
        out.append(f"capacitance = {_qs(src['capacitance'] * 1e12, 'pF')}")
    out += ["", "[load]", f"resistance = {_qs(spec['load']['resistance'], 'Ω')}",
            f"capacitance = {_qs(spec['load']['capacitance'] * 1e12, 'pF')}", "", "[require]",
            f'gain = "{req["gain_db"]:g} dB"',
            f'gain_tolerance = "{req.get("gain_tolerance_db", 1.0):g} dB"',
            f"f_low = {_qs(req['f_low'], 'Hz')}", f"f_high = {_qs(req['f_high'], 'Hz')}",
            f'swing = "{req["swing"]:g} Vpp"']
    if "z_in" in req:
        out.append(f"z_in = {_qs(req['z_in'], 'Ω')}")
    if "z_out" in req:
        out.append(f"z_out = {_qs(req['z_out'], 'Ω')}")
    if "supply_current" in req:
        out.append(f'supply_current = "{req["supply_current"] * 1e3:g} mA"')
    lo, hi = req.get("ambient", (25.0, 25.0))
    out.append(f'ambient = ["{lo:g} °C", "{hi:g} °C"]')
    if "inverting" in req:
        out.append(f'inverting = "{req["inverting"]}"')
    if "noise" in req:
        out.append(f'noise = "{req["noise"] * 1e9:g} nV/√Hz"')
    if "noise_figure" in req:
        out.append(f'noise_figure = "{req["noise_figure"]:g} dB"')
    if "noise_rms" in req:
        out.append(f'noise_rms = "{req["noise_rms"] * 1e6:g} µV"')
    if "noise_at" in req:
        out.append(f"noise_at = {_qs(req['noise_at'], 'Hz')}")
    if "supply_rejection" in req:
        out.append(f'supply_rejection = "{req["supply_rejection"]:g} dB"')
    if "ripple_at" in req:
        out.append(f"ripple_at = {_qs(req['ripple_at'], 'Hz')}")
    if "thd" in req:
        out.append(f'thd = "{req["thd"] * 100:g} %"')
    if "thd_level" in req:
        out.append(f'thd_level = "{req["thd_level"]:g} Vpp"')
    if "thd_at" in req:
        out.append(f"thd_at = {_qs(req['thd_at'], 'Hz')}")
    jf = [v for v in d["devices"].values() if v.get("kind") == "jfet"]
    bj = [v for v in d["devices"].values() if v.get("kind") != "jfet"]
    text = "\n".join(out) + "\n\n" + jfet_toml(jf[0])
    if bj:
        text += "\n" + transistor_toml(bj[0]).replace("[transistor]", "[companion]", 1)
    return text
