"""Spec loading: every key of the contract (spec-format.md section 1), defaults, and messages."""

from __future__ import annotations

import dataclasses
import math
import textwrap
import tomllib
from pathlib import Path

import pytest

from stagesynth.contracts.device import PRESETS
from stagesynth.contracts.spec import (
    device_from_mapping,
    load_device_file,
    load_spec,
    spec_from_mapping,
    spec_template,
    spec_to_toml,
)
from stagesynth.quantities.errors import StageError

# The example of spec-format.md section 1, verbatim in its values.
CONTRACT_EXAMPLE = """
title = "Hydrophone front end, channel A"

[supply]
voltage = "12 V"
tolerance = "5%"

[source]
resistance = "600 Ω"

[load]
resistance = "10 kΩ"
capacitance = "100 pF"

[require]
gain = "20 dB"
gain_tolerance = "1 dB"
f_low = "20 Hz"
f_high = "100 kHz"
z_in = "10 kΩ"
swing = "3 Vpp"
supply_current = "5 mA"
ambient = ["0 °C", "50 °C"]
inverting = "any"
z_out = "1 kΩ"
yield = "99%"

[transistor]
preset = "generic-npn"
polarity = "npn"
hfe = [100, 300]
hfe_typ = 175
vbe = "0.65 V"
vbe_current = "1 mA"
early_voltage = "100 V"
ft = "250 MHz"
c_cb = "4 pF"
r_bb = "50 Ω"
vce_sat = "0.2 V"
ic_max = "100 mA"
vce_max = "40 V"
p_max = "500 mW"
theta_ja = "250 K/W"
vbe_tempco = "-2 mV/K"
hfe_tempco = "0.5 %/K"

[parts]
resistors = "E24"
resistor_tolerance = "1%"
capacitors = "E6"
capacitor_tolerance = "10%"
"""

MINIMAL = """
[supply]
voltage = "9 V"
[load]
resistance = "4k7"
[require]
gain = 10
f_low = "30 Hz"
f_high = "20 kHz"
[transistor]
preset = "generic-npn"
"""


def _load(text: str, tmp_path: Path, name: str = "spec.toml"):
    path = tmp_path / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return load_spec(path)


def _error(text: str, tmp_path: Path) -> StageError:
    with pytest.raises(StageError) as err:
        _load(text, tmp_path)
    return err.value


def test_contract_example_reads_every_key(tmp_path: Path) -> None:
    # spec-format.md section 1: every key of the example, in SI base units (°C for ambient).
    s = _load(CONTRACT_EXAMPLE, tmp_path)
    assert s.title == "Hydrophone front end, channel A"
    assert (s.supply.voltage, s.supply.tolerance) == (12.0, 0.05)
    assert s.source.resistance == 600.0
    assert (s.load.resistance, s.load.capacitance) == (10e3, 100e-12)
    r = s.require
    assert r.gain == 10.0  # 20 dB = 10 V/V: G_dB = 20 log10(G) (IEC 60027-3, from memory)
    assert r.gain_db == pytest.approx(20.0, abs=1e-12)
    assert (r.gain_tolerance_db, r.f_low, r.f_high, r.z_in) == (1.0, 20.0, 100e3, 10e3)
    assert (r.swing_vpp, r.supply_current, r.ambient) == (3.0, 5e-3, (0.0, 50.0))
    assert (r.inverting, r.z_out, r.yield_target) == ("any", 1e3, 0.99)
    d = s.transistor
    assert (d.polarity, d.hfe_min, d.hfe_max, d.hfe_typ) == ("npn", 100.0, 300.0, 175.0)
    assert (d.vbe, d.vbe_current, d.early_voltage, d.ft, d.c_cb) == (
        0.65, 1e-3, 100.0, 250e6, 4e-12)
    assert (d.r_bb, d.vce_sat, d.ic_max, d.vce_max, d.p_max, d.theta_ja) == (
        50.0, 0.2, 0.1, 40.0, 0.5, 250.0)
    assert (d.vbe_tempco, d.hfe_tempco) == (-2e-3, 5e-3)
    assert (s.parts.resistors, s.parts.resistor_tolerance) == ("E24", 0.01)
    assert (s.parts.capacitors, s.parts.capacitor_tolerance) == ("E6", 0.10)
    assert s.path == str(tmp_path / "spec.toml")


def test_defaults_of_the_contract(tmp_path: Path) -> None:
    # spec-format.md section 1 defaults: tolerance 0, source 0 Ω, load C 0, gain_tolerance
    # 1 dB, z_in 0, swing 0, ambient 25 °C only, inverting any, parts E24 1 % / E6 10 %.
    s = _load(MINIMAL, tmp_path)
    assert s.supply.tolerance == 0.0
    assert s.source.resistance == 0.0
    assert s.load.resistance == 4700.0  # IEC 60062 code 4k7
    assert s.load.capacitance == 0.0
    r = s.require
    assert r.gain == 10.0  # bare number: V/V
    assert (r.gain_tolerance_db, r.z_in, r.swing_vpp, r.ambient) == (1.0, 0.0, 0.0, (25.0, 25.0))
    assert (r.inverting, r.supply_current, r.z_out, r.yield_target) == ("any", None, None, None)
    assert r.midband == pytest.approx(math.sqrt(30 * 20e3))  # geometric mean (section 2)
    assert s.transistor == PRESETS["generic-npn"]
    assert s.parts == dataclasses.replace(s.parts, resistors="E24", resistor_tolerance=0.01,
                                          capacitors="E6", capacitor_tolerance=0.10)


def test_template_loads_and_round_trips(tmp_path: Path) -> None:
    # The packaged template is valid TOML and a valid spec; writing it back and reading
    # again gives the identical spec (exact floats).
    text = spec_template()
    tomllib.loads(text)
    spec = _load(text, tmp_path, "template.toml")
    again = _load(spec_to_toml(spec), tmp_path, "again.toml")
    assert dataclasses.replace(again, path="") == dataclasses.replace(spec, path="")
    # 26 dB in the template = 10**(26/20) V/V (IEC 60027-3 decibel, from memory)
    assert spec.require.gain == pytest.approx(10 ** (26 / 20), rel=1e-15)


def test_template_documents_every_key() -> None:
    # Every key the loader accepts appears in the template, so `stagesynth new` shows them all.
    from stagesynth.contracts.spec import _SECTION_KEYS, DEVICE_KEYS

    text = spec_template()
    for section, keys in {**_SECTION_KEYS, "transistor": DEVICE_KEYS}.items():
        assert f"[{section}]" in text
        for key in keys:
            assert f"{key} =" in text, key


def test_contract_example_round_trips(tmp_path: Path) -> None:
    spec = _load(CONTRACT_EXAMPLE, tmp_path)
    again = _load(spec_to_toml(spec), tmp_path, "again.toml")
    assert dataclasses.replace(again, path="") == dataclasses.replace(spec, path="")


@pytest.mark.parametrize(
    ("drop", "key"),
    [("voltage", "supply.voltage"), ("resistance", "load.resistance"), ("gain", "require.gain"),
     ("f_low", "require.f_low"), ("f_high", "require.f_high")],
)
def test_required_keys(tmp_path: Path, drop: str, key: str) -> None:
    text = "\n".join(line for line in MINIMAL.splitlines() if not line.startswith(f"{drop} ="))
    err = _error(text, tmp_path)
    assert err.key == key
    assert "missing" in err.message and err.accepted


@pytest.mark.parametrize("field", ["polarity", "hfe", "vbe", "ft", "c_cb"])
def test_device_fields_required_without_preset(tmp_path: Path, field: str) -> None:
    values = {"polarity": '"npn"', "hfe": "[100, 300]", "vbe": '"0.65 V"', "ft": '"250 MHz"',
              "c_cb": '"4 pF"'}
    body = "\n".join(f"{k} = {v}" for k, v in values.items() if k != field)
    text = MINIMAL.replace('preset = "generic-npn"', body)
    err = _error(text, tmp_path)
    assert err.key == f"transistor.{field}"
    assert "generic-npn" in err.accepted


def test_device_without_preset(tmp_path: Path) -> None:
    text = MINIMAL.replace('preset = "generic-npn"', 'polarity = "PNP"\nhfe = [80, 240]\n'
                           'vbe = "0.7 V"\nft = "100 MHz"\nc_cb = "6 pF"')
    d = _load(text, tmp_path).transistor
    assert (d.polarity, d.hfe_min, d.hfe_max, d.vbe, d.ft, d.c_cb) == (
        "pnp", 80.0, 240.0, 0.7, 1e8, 6e-12)
    # default hfe_typ: the geometric mean of the spread (spec-format.md section 1)
    assert d.hfe_typ is None and d.hfe_nominal == pytest.approx(math.sqrt(80 * 240))
    # defaults of spec-format.md section 1
    assert (d.vbe_current, d.early_voltage, d.r_bb, d.vce_sat) == (1e-3, 100.0, 0.0, 0.2)
    assert (d.vbe_tempco, d.hfe_tempco) == (-2e-3, 5e-3)


def test_overriding_hfe_drops_preset_typ(tmp_path: Path) -> None:
    text = MINIMAL + "hfe = [400, 900]\n"
    d = _load(text, tmp_path).transistor
    assert (d.hfe_min, d.hfe_max, d.hfe_typ) == (400.0, 900.0, None)
    assert d.hfe_nominal == pytest.approx(600.0)  # sqrt(400 * 900)
    assert d.name == "generic-npn (modified)"
    assert d.ft == PRESETS["generic-npn"].ft


def test_device_file_relative_to_spec(tmp_path: Path) -> None:
    (tmp_path / "parts").mkdir()
    (tmp_path / "parts" / "my-device.toml").write_text(textwrap.dedent("""
        [transistor]
        polarity = "npn"
        hfe = [150, 450]
        vbe = "0.68 V"
        ft = "300 MHz"
        c_cb = "2p2"
    """), encoding="utf-8")
    text = MINIMAL.replace('preset = "generic-npn"', 'file = "parts/my-device.toml"\nr_bb = "20 Ω"')
    d = _load(text, tmp_path).transistor
    assert (d.hfe_min, d.vbe, d.ft, d.c_cb, d.r_bb) == (150.0, 0.68, 3e8, 2.2e-12, 20.0)
    assert d.name == "my-device (modified)"
    plain = load_device_file(tmp_path / "parts" / "my-device.toml")
    assert plain.name == "my-device" and plain.r_bb == 0.0


def test_device_file_top_level_keys_and_errors(tmp_path: Path) -> None:
    path = tmp_path / "dev.toml"
    path.write_text('preset = "generic-pnp"\nname = "bench pnp"\nvce_sat = "0.3 V"\n',
                    encoding="utf-8")
    d = load_device_file(path)
    assert (d.polarity, d.vce_sat, d.name) == ("pnp", 0.3, "bench pnp")
    path.write_text('polarity = "npn"\nhfe = [1, 2]\nvbe = 0.6\nft = 1e8\nc_cb = 1e-12\n'
                    'hfe_tpy = 1.5\n', encoding="utf-8")
    with pytest.raises(StageError) as err:
        load_device_file(path)
    assert err.value.file == str(path) and err.value.key == "hfe_tpy"
    assert "did you mean 'hfe_typ'" in err.value.message


def test_missing_device_file_names_spec_and_key(tmp_path: Path) -> None:
    err = _error(MINIMAL.replace('preset = "generic-npn"', 'file = "nowhere.toml"'), tmp_path)
    assert err.key == "transistor.file"
    assert err.file == str(tmp_path / "spec.toml")
    assert "nowhere.toml" in err.message and "not found" in err.message


def test_device_from_mapping_directly() -> None:
    d = device_from_mapping({"preset": "rf-npn", "ft": "6 GHz"}, "x.toml", "transistor")
    assert d.ft == 6e9 and d.polarity == "npn"
    with pytest.raises(StageError, match="not both"):
        device_from_mapping({"preset": "rf-npn", "file": "a.toml"}, "x.toml")


@pytest.mark.parametrize(
    ("edit", "key", "fragment"),
    [
        (("f_low = \"30 Hz\"", "f_low = \"30 kHz\""), "require.f_low", "must be below f_high"),
        (("f_low = \"30 Hz\"", "f_lwo = \"30 Hz\""), "require.f_lwo", "did you mean 'f_low'"),
        (("[supply]", "[suply]"), "suply", "did you mean 'supply'"),
        (("voltage = \"9 V\"", "voltage = \"9 V\"\ngain = 3"), "supply.gain",
         "belongs in [require]"),
        (("voltage = \"9 V\"", "voltage = \"-9 V\""), "supply.voltage", "greater than zero"),
        (("voltage = \"9 V\"", "voltage = \"9 Hz\""), "supply.voltage", "frequency"),
        (("voltage = \"9 V\"", "voltage = \"9 V\"\ntolerance = \"100 %\""), "supply.tolerance",
         "below 100 %"),
        (("voltage = \"9 V\"", "voltage = \"9 V\"\ntolerance = 5"), "supply.tolerance",
         "did you mean '5 %'"),
        (("f_high = \"20 kHz\"", "f_high = \"20 kHz\"\ngain_tolerance = \"0 dB\""),
         "require.gain_tolerance", "greater than 0 dB"),
        (("f_high = \"20 kHz\"", "f_high = \"20 kHz\"\ninverting = \"maybe\""),
         "require.inverting", "not a choice"),
        (("f_high = \"20 kHz\"", "f_high = \"20 kHz\"\nambient = [\"50 °C\", \"0 °C\"]"),
         "require.ambient", "above max"),
        (("f_high = \"20 kHz\"", "f_high = \"20 kHz\"\nambient = [0, 50]"),
         "require.ambient", "bare numbers are kelvin"),
        (("f_high = \"20 kHz\"", "f_high = \"20 kHz\"\nyield = \"0 %\""), "require.yield",
         "above 0"),
        (("f_high = \"20 kHz\"", "f_high = \"20 kHz\"\nswing = \"3 V\""), "require.swing",
         "peak-to-peak, peak or rms"),
        (("preset = \"generic-npn\"", "preset = \"genric-npn\""), "transistor.preset",
         "did you mean 'generic-npn'"),
        (("preset = \"generic-npn\"", "preset = \"generic-pnp\"\nvbe = \"-0.65 V\""),
         "transistor.vbe", "give the magnitude"),
        (("preset = \"generic-npn\"", "preset = \"generic-pnp\"\nvce_sat = \"-0.2 V\""),
         "transistor.vce_sat", "give the magnitude"),
        (("preset = \"generic-npn\"", "preset = \"generic-npn\"\nhfe = [300, 100]"),
         "transistor.hfe", "min <= max"),
        (("preset = \"generic-npn\"", "preset = \"generic-npn\"\nhfe = 200"),
         "transistor.hfe", "[200, 200]"),
        (("preset = \"generic-npn\"", "preset = \"generic-npn\"\nhfe_typ = 500"),
         "transistor.hfe_typ", "outside hfe"),
        (("preset = \"generic-npn\"", "preset = \"generic-npn\"\npolarity = \"nmos\""),
         "transistor.polarity", "not a polarity"),
        (("preset = \"generic-npn\"", "preset = \"generic-npn\"\nhFE = [1, 2]"),
         "transistor.hFE", "did you mean 'hfe'"),
        (("preset = \"generic-npn\"", "preset = \"generic-npn\"\n[parts]\nresistors = \"E25\""),
         "parts.resistors", "not an IEC 60063 series"),
    ],
)
def test_invalid_values(tmp_path: Path, edit: tuple[str, str], key: str, fragment: str) -> None:
    text = MINIMAL.replace(*edit)
    assert text != MINIMAL
    err = _error(text, tmp_path)
    assert err.file == str(tmp_path / "spec.toml")
    assert err.key == key
    assert fragment in str(err)
    assert err.accepted


def test_choices_and_spellings(tmp_path: Path) -> None:
    text = MINIMAL.replace('f_high = "20 kHz"', 'f_high = "20 kHz"\ninverting = true\n'
                           'ambient = "40 °C"\nyield = 0.9')
    text += '[parts]\nresistors = "e96"\ncapacitors = "E12"\ncapacitor_tolerance = "5 %"\n'
    s = _load(text, tmp_path)
    assert s.require.inverting == "yes"
    assert s.require.ambient == (40.0, 40.0)
    assert s.require.yield_target == 0.9
    assert (s.parts.resistors, s.parts.capacitors, s.parts.capacitor_tolerance) == (
        "E96", "E12", 0.05)
    assert s.parts.resistor_tolerance == 0.01


def test_toml_syntax_error_has_line_and_column(tmp_path: Path) -> None:
    err = _error("[supply]\nvoltage = 12 V\n", tmp_path)
    assert "not valid TOML" in err.message
    assert "line 2" in err.message and "column" in err.message
    assert err.__cause__ is None and err.__suppress_context__


def test_file_not_found_and_directory(tmp_path: Path) -> None:
    with pytest.raises(StageError, match="file not found") as err:
        load_spec(tmp_path / "absent.toml")
    assert err.value.file == str(tmp_path / "absent.toml")
    with pytest.raises(StageError, match="directory"):
        load_spec(tmp_path)


def test_not_a_table(tmp_path: Path) -> None:
    err = _error('supply = "12 V"\n[load]' + MINIMAL.split("[load]", 1)[1], tmp_path)
    assert err.key == "supply" and "table" in err.message


def test_spec_from_mapping_without_file() -> None:
    data = tomllib.loads(MINIMAL)
    s = spec_from_mapping(data, "<memory>")
    assert s.load.resistance == 4700.0 and s.path == "<memory>"
    data["transistor"] = {}
    with pytest.raises(StageError) as err:
        spec_from_mapping(data, "<memory>")
    assert err.value.key == "transistor.polarity"
