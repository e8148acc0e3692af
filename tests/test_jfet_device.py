"""The junction-FET device record, its laws, the spec keys and the design-file entries.

Outside sources: the square law, its slope gm = 2·IDSS/|VP|·(1 − VGS/VP) and the triode
law (Sedra & Smith, Microelectronic Circuits, the JFET section of the FET chapter;
Horowitz & Hill, The Art of Electronics, the FET chapter — both from memory); the
spread pairing and defaults of the contract (docs/spec-format.md, "Junction FET");
numerical slopes by scipy-free central differences checked against the closed forms.
"""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import pytest
from typer.testing import CliRunner

from stagesynth.cli import app
from stagesynth.contracts.jfet import (
    JFET_PRESETS,
    Jfet,
    drain_current,
    gate_leakage,
    gm_formula,
    idss_at,
    vp_at,
)
from stagesynth.contracts.netlist import design_from_dict
from stagesynth.contracts.spec import spec_from_mapping, spec_to_toml

RUNNER = CliRunner()
VA_INF = 1e15  # V: channel-length modulation off, as the textbook square law assumes

SPEC = """
title = "Contact microphone preamp"
[supply]
voltage = "12 V"
[load]
resistance = "100 kΩ"
[require]
gain = "20 dB"
f_low = "10 Hz"
f_high = "20 kHz"
[transistor]
kind = "jfet"
polarity = "n"
idss = ["2 mA", "12 mA"]
vp = ["-2.5 V", "-0.6 V"]
c_gs = "6 pF"
c_gd = "2 pF"
"""


def test_square_law_and_gm_textbook_example() -> None:
    # Sedra & Smith (from memory): IDSS = 10 mA, VP = -2.5 V, VGS = -1 V in saturation:
    # ID = IDSS (1 - VGS/VP)^2 = 10 mA * 0.36 = 3.6 mA, gm = 2 IDSS/|VP| (1 - VGS/VP) = 4.8 mS
    i_d, gm, gds = drain_current(10e-3, -2.5, -1.0, 10.0, VA_INF)
    assert float(i_d) == pytest.approx(3.6e-3, rel=1e-9)
    assert float(gm) == pytest.approx(4.8e-3, rel=1e-9)
    assert float(gm) == pytest.approx(gm_formula(10e-3, -2.5, -1.0), rel=1e-12)
    assert float(gds) == pytest.approx(0.0, abs=1e-15)
    # gm = 2 sqrt(IDSS ID)/|VP| (Horowitz & Hill, from memory): the same slope
    assert float(gm) == pytest.approx(2 * math.sqrt(10e-3 * 3.6e-3) / 2.5, rel=1e-9)
    # cut off at and beyond pinch-off
    assert float(drain_current(10e-3, -2.5, -2.6, 10.0, VA_INF)[0]) == 0.0


def test_slopes_are_the_laws_derivatives_everywhere() -> None:
    # central differences of the law in saturation, triode and reversed channel
    idss, vp, va = 8e-3, -1.8, 60.0
    for vgs, vds in ((-0.5, 6.0), (-0.5, 0.4), (-1.2, 0.2), (-0.3, -0.5)):
        _, gm, gds = drain_current(idss, vp, vgs, vds, va)
        h = 1e-6
        num_gm = (drain_current(idss, vp, vgs + h, vds, va)[0]
                  - drain_current(idss, vp, vgs - h, vds, va)[0]) / (2 * h)
        num_gds = (drain_current(idss, vp, vgs, vds + h, va)[0]
                   - drain_current(idss, vp, vgs, vds - h, va)[0]) / (2 * h)
        assert float(gm) == pytest.approx(float(num_gm), rel=1e-6)
        assert float(gds) == pytest.approx(float(num_gds), rel=1e-6)


def test_triode_law_and_continuity_at_the_saturation_edge() -> None:
    # Sedra & Smith (from memory): below VDS = VGS - VP,
    # ID = IDSS [2 (1 - VGS/VP)(VDS/-VP) - (VDS/VP)^2]; at the edge it meets the square law
    idss, vp, vgs = 10e-3, -2.0, -0.5
    vds = 0.3
    expect = idss * (2 * (1 - vgs / vp) * (vds / -vp) - (vds / vp) ** 2)
    assert float(drain_current(idss, vp, vgs, vds, VA_INF)[0]) == pytest.approx(expect, 1e-12)
    edge = vgs - vp
    lo = drain_current(idss, vp, vgs, edge - 1e-9, VA_INF)
    hi = drain_current(idss, vp, vgs, edge + 1e-9, VA_INF)
    assert float(lo[0]) == pytest.approx(float(hi[0]), rel=1e-7)
    assert float(lo[1]) == pytest.approx(float(hi[1]), rel=1e-6)  # gm continuous
    assert abs(float(lo[2])) < 1e-9 * idss  # output slope falls to zero at the edge


def test_temperature_laws_and_gate_leakage_doubling() -> None:
    # contract: linear tempcos about 25 °C; i_gss doubles every 10 K
    d = Jfet(polarity="n", idss_min=2e-3, idss_max=12e-3, vp=(-0.6, -3.0), c_gs=5e-12,
             c_gd=2e-12)
    assert d.i_gss == 10e-12 and d.vp_tempco == -2e-3 and d.idss_tempco == -6e-3
    assert float(idss_at(d, 5e-3, 75.0)) == pytest.approx(5e-3 * (1 - 0.006 * 50), 1e-12)
    assert float(vp_at(d, -1.0, 75.0)) == pytest.approx(-1.1, 1e-12)
    assert float(gate_leakage(d, 35.0)) == pytest.approx(20e-12, rel=1e-12)
    assert float(gate_leakage(d, 85.0)) == pytest.approx(10e-12 * 64, rel=1e-12)


def test_spread_pairs_low_idss_with_the_pinch_off_nearest_zero() -> None:
    # contract: corners pair (idss min, vp nearest zero) and (idss max, vp farthest);
    # nominal = the geometric mean of each spread
    d = Jfet(polarity="n", idss_min=2e-3, idss_max=12e-3, vp=(-2.5, -0.6), c_gs=0, c_gd=0)
    i0, v0 = d.unit(0.0)
    i1, v1 = d.unit(1.0)
    im, vm = d.unit(0.5)
    assert (float(i0), float(v0)) == pytest.approx((2e-3, -0.6))
    assert (float(i1), float(v1)) == pytest.approx((12e-3, -2.5))
    assert float(im) == pytest.approx(math.sqrt(2e-3 * 12e-3))
    assert float(vm) == pytest.approx(-math.sqrt(0.6 * 2.5))


def test_spec_reads_a_jfet_and_writes_it_back() -> None:
    spec = spec_from_mapping(tomllib.loads(SPEC), "mic.toml")
    d = spec.transistor
    assert isinstance(d, Jfet) and d.polarity == "n" and d.vp_near == 0.6
    assert (d.idss_min, d.idss_max, d.early_voltage) == (2e-3, 12e-3, 100.0)
    again = spec_from_mapping(tomllib.loads(spec_to_toml(spec)), "again.toml")
    assert again.transistor == d and again.companion is None
    with_companion = SPEC + '\n[companion]\npreset = "generic-npn"\n'
    spec2 = spec_from_mapping(tomllib.loads(with_companion), "mic.toml")
    back = spec_from_mapping(tomllib.loads(spec_to_toml(spec2)), "again.toml")
    assert back.companion == spec2.companion and spec2.companion.polarity == "npn"


def test_presets_are_valid_and_listed(tmp_path: Path) -> None:
    for name, dev in JFET_PRESETS.items():
        spec = spec_from_mapping(tomllib.loads(
            SPEC.split("[transistor]")[0] + f'[transistor]\npreset = "{name}"\n'), "p.toml")
        assert spec.transistor == dev
        assert (dev.vp[0] < 0) == (dev.polarity == "n")
    res = RUNNER.invoke(app, ["presets"])
    assert res.exit_code == 0
    for name in JFET_PRESETS:
        assert name in res.output


@pytest.mark.parametrize(("edit", "key", "fragment"), [
    (('vp = ["-2.5 V", "-0.6 V"]', 'vp = ["2.5 V", "0.6 V"]'), "transistor.vp", "negative"),
    (('idss = ["2 mA", "12 mA"]', 'idss = ["12 mA", "2 mA"]'), "transistor.idss",
     "min <= max"),
    (('kind = "jfet"', 'kind = "fet"'), "transistor.kind", "not a transistor kind"),
    (('c_gs = "6 pF"', 'hfe = [100, 300]'), "transistor.hfe", "bipolar-transistor key"),
    (('polarity = "n"', 'polarity = "npn"'), "transistor.polarity", '"n"'),
    (('c_gd = "2 pF"\n', ''), "transistor.c_gd", "missing"),
])
def test_bad_jfet_spec_exits_2(tmp_path: Path, edit, key, fragment) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(SPEC.replace(*edit), encoding="utf-8")
    res = RUNNER.invoke(app, ["design", str(path), "--out", str(tmp_path / "o")])
    assert res.exit_code == 2, res.output
    assert key in res.output and fragment in res.output and "Traceback" not in res.output


def test_companion_of_the_same_kind_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "c.toml"
    path.write_text(SPEC + '\n[companion]\npreset = "generic-pjfet"\n', encoding="utf-8")
    res = RUNNER.invoke(app, ["design", str(path), "--out", str(tmp_path / "o")])
    assert res.exit_code == 2 and "companion" in res.output and "other kind" in res.output


def _design() -> dict:
    return {
        "format": "stagesynth-design-1", "title": "follower", "ground": "0",
        "supply": {"node": "vdd", "voltage": 12.0}, "input": "in", "output": "out",
        "source": {"resistance": 0.0}, "load": {"resistance": 1e5},
        "parts": [
            {"ref": "C1", "kind": "capacitor", "value": 1e-6, "nodes": ["in", "g"]},
            {"ref": "RG", "kind": "resistor", "value": 1e7, "nodes": ["g", "0"]},
            {"ref": "RS", "kind": "resistor", "value": 2200.0, "nodes": ["s", "0"]},
            {"ref": "C2", "kind": "capacitor", "value": 1e-5, "nodes": ["s", "out"]},
            {"ref": "J1", "kind": "jfet", "device": "J",
             "nodes": {"d": "vdd", "g": "g", "s": "s"}},
        ],
        "devices": {"J": JFET_PRESETS["generic-njfet"].to_design_dict()},
    }


def test_design_file_round_trip_of_a_jfet() -> None:
    d = design_from_dict(_design(), "f.json")
    assert d.devices["J"] == JFET_PRESETS["generic-njfet"]
    assert [p.ref for p in d.jfets] == ["J1"] and d.transistors == d.jfets
    again = design_from_dict(json.loads(d.to_json()), "g.json")
    assert again.devices == d.devices and again.parts == d.parts


@pytest.mark.parametrize(("mutate", "fragment"), [
    (lambda x: x["devices"]["J"].update(vp=[0.6, 3.0]), "is negative"),
    (lambda x: x["devices"]["J"].update(idss=[0.01, 0.001]), "min <= max"),
    (lambda x: x["parts"][4].update(nodes={"c": "vdd", "b": "g", "e": "s"}), "d, g and s"),
    (lambda x: x["parts"][4].update(kind="bjt", nodes={"c": "vdd", "b": "g", "e": "s"}),
     "is a jfet, but the part is a bjt"),
    (lambda x: x["devices"]["J"].update(kind="mosfet"), "not a device kind"),
])
def test_bad_jfet_design_file_exits_2(tmp_path: Path, mutate, fragment) -> None:
    data = _design()
    mutate(data)
    path = tmp_path / "d.json"
    path.write_text(json.dumps(data), encoding="utf-8")
    res = RUNNER.invoke(app, ["analyze", str(path)])
    assert res.exit_code == 2, res.output
    assert fragment in res.output and "Traceback" not in res.output


def test_implausible_jfet_values_are_warned_about() -> None:
    # common practice: small-signal JFETs have IDSS of microamps to some hundred mA and
    # picofarad capacitances; a value a prefix away gets a warning naming the likely one
    text = SPEC.replace('idss = ["2 mA", "12 mA"]', 'idss = ["2 mA", "3 A"]').replace(
        'c_gd = "2 pF"', 'c_gd = "0.002 pF"')
    warnings = spec_from_mapping(tomllib.loads(text), "w.toml").warnings
    assert any("transistor.idss" in w and "3 mA" in w for w in warnings)
    assert any("transistor.c_gd" in w and "2 pF" in w for w in warnings)
    assert spec_from_mapping(tomllib.loads(SPEC), "ok.toml").warnings == ()
