"""Design file (spec-format.md section 3): round trip, unknown keys, validation messages.

The reference here is the file contract itself (section 3 of spec-format.md, the
keys and meaning other programs rely on) and JSON as RFC 8259 and Python's json
module define it (floats written by repr read back bit for bit).
"""

from __future__ import annotations

import copy
import json
import math
from dataclasses import replace
from pathlib import Path

import pytest
from conftest import FIXTURE_BUILDERS, npn_ce
from hypothesis import given, settings
from hypothesis import strategies as st

from stagesynth.contracts.netlist import FORMAT, design_from_dict, load_design
from stagesynth.quantities.errors import StageError


def fixture_dict(name: str = "npn_ce") -> dict:
    """A fixture design as parsed design-file JSON."""
    return json.loads(FIXTURE_BUILDERS[name]().to_json())


def write(tmp_path: Path, data: dict | str, name: str = "design.json") -> Path:
    path = tmp_path / name
    path.write_text(data if isinstance(data, str) else json.dumps(data), encoding="utf-8")
    return path


# ----------------------------------------------------------------------------- round trip
@pytest.mark.parametrize("name", sorted(FIXTURE_BUILDERS))
def test_round_trip_through_json_is_exact(name, tmp_path):
    design = FIXTURE_BUILDERS[name]()
    text = design.to_json()
    data = json.loads(text)
    # spec-format.md section 3: the keys other programs read
    assert data["format"] == "stagesynth-design-1" == FORMAT
    keys = ("title", "topology", "ground", "supply", "input", "output", "source", "load")
    for key in (*keys, "parts", "devices"):
        assert key in data
    assert data["ground"] == "0"
    assert data["supply"] == {"node": "vcc", "voltage": design.supply_voltage}
    assert data["load"]["resistance"] == design.load_resistance
    for part in data["parts"]:
        assert part["kind"] in ("resistor", "capacitor", "bjt")
        if part["kind"] == "bjt":
            assert set(part["nodes"]) == {"c", "b", "e"} and part["device"] in data["devices"]
        else:
            assert len(part["nodes"]) == 2 and isinstance(part["value"], float)
    for dev in data["devices"].values():
        assert dev["polarity"] in ("npn", "pnp") and len(dev["hfe"]) == 2
    assert design_from_dict(data) == design
    assert load_design(write(tmp_path, text)) == design


_values = st.floats(1e-13, 1e8, allow_nan=False, allow_infinity=False)


@settings(max_examples=60, deadline=None)
@given(values=st.lists(_values, min_size=8, max_size=8), supply=st.floats(1.0, 60.0))
def test_round_trip_keeps_every_float_bit_for_bit(values, supply):
    """Python's json writes floats by repr (shortest round-tripping form, IEEE 754)."""
    base = npn_ce()
    refs = [p.ref for p in base.parts if not p.is_bjt]
    design = base.with_values(dict(zip(refs, values, strict=True)))
    design = replace(design, supply_voltage=supply)
    back = design_from_dict(json.loads(design.to_json()))
    assert back == design
    assert [p.value for p in back.parts] == [p.value for p in design.parts]


def test_unknown_keys_are_kept(tmp_path):
    data = fixture_dict()
    data["bench_notes"] = {"built": "2 units", "trimmed": ["R3"]}
    data["x_revision"] = 7
    data["predicted"] = {"gain_db": 26.1, "f_low": 7.2}
    design = load_design(write(tmp_path, data))
    assert design.extra["bench_notes"] == {"built": "2 units", "trimmed": ["R3"]}
    again = json.loads(design.to_json())
    assert again["bench_notes"] == data["bench_notes"]
    assert again["x_revision"] == 7
    assert again["predicted"] == data["predicted"]
    assert design_from_dict(again) == design


# ----------------------------------------------------------------------------- validation
def _part(data: dict, ref: str) -> tuple[int, dict]:
    for i, p in enumerate(data["parts"]):
        if p["ref"] == ref:
            return i, p
    raise KeyError(ref)


def _expect_error(tmp_path: Path, data: dict | str, key: str | None, *words: str) -> StageError:
    """Loading must raise StageError naming the file, the key path, and the given words."""
    path = write(tmp_path, data)
    with pytest.raises(StageError) as info:
        load_design(path)
    err = info.value
    text = str(err)
    assert err.exit_code == 2
    assert err.file == str(path) and str(path) in text
    if key is not None:
        assert err.key == key and key in text
    for word in words:
        assert word in text
    assert "\n" not in text  # one line
    return err


def test_unknown_device_is_refused(tmp_path):
    data = fixture_dict()
    i, q = _part(data, "Q1")
    q["device"] = "QX"
    _expect_error(tmp_path, data, f"parts[{i}] (Q1).device", "QX", "Q")


def test_unknown_polarity_is_refused(tmp_path):
    data = fixture_dict()
    data["devices"]["Q"]["polarity"] = "nnp"
    _expect_error(tmp_path, data, "devices.Q.polarity", "nnp", "npn", "pnp")


def test_missing_device_field_is_refused(tmp_path):
    data = fixture_dict()
    del data["devices"]["Q"]["ft"]
    _expect_error(tmp_path, data, "devices.Q.ft", "missing")


def test_floating_node_is_refused(tmp_path):
    data = fixture_dict()
    data["parts"].append(
        {"ref": "R9", "kind": "resistor", "value": 1e3, "nodes": ["c1", "nowhere"]}
    )
    _expect_error(tmp_path, data, "parts (R9)", "nowhere", "floating")


def test_duplicate_reference_is_refused(tmp_path):
    data = fixture_dict()
    dup = copy.deepcopy(_part(data, "R2")[1])
    dup["nodes"] = ["b1", "0"]
    dup["ref"] = "R1"
    data["parts"].append(dup)
    _expect_error(tmp_path, data, "parts", "R1", "more than once")


@pytest.mark.parametrize("value", [0.0, -4700.0])
def test_non_positive_value_is_refused(tmp_path, value):
    data = fixture_dict()
    i, r3 = _part(data, "R3")
    r3["value"] = value
    _expect_error(tmp_path, data, f"parts[{i}] (R3).value", "positive")


def _set(path: tuple, value: object):
    """A mutation of the parsed file: set the item at `path` (a part is named by its ref)
    and return the key path the error message must name."""

    def mutate(data: dict) -> str:
        if path[0] == "parts":
            i, target = _part(data, path[1])
            target[path[2]] = value
            return f"parts[{i}] ({path[1]}).{path[2]}"
        target = data
        for k in path[:-1]:
            target = target[k]
        target[path[-1]] = value
        return ".".join(path)

    return mutate


@pytest.mark.parametrize(
    "mutate",
    [
        _set(("supply", "voltage"), -12.0),
        _set(("load", "resistance"), 0),
        _set(("load", "resistance"), "10k"),
        _set(("source", "resistance"), -50.0),
        _set(("parts", "C1", "value"), True),
        _set(("parts", "R1", "nodes"), ["vcc"]),
        _set(("parts", "R1", "kind"), "inductor"),
        _set(("parts", "Q1", "nodes"), {"c": "c1", "b": "b1"}),
        _set(("devices", "Q", "hfe"), [300, 100]),
        _set(("devices", "Q", "hfe_typ"), 999.0),
        _set(("devices", "Q", "ft"), -1.0),
    ],
    ids=[
        "neg-supply",
        "zero-load",
        "text-load",
        "neg-source",
        "bool-value",
        "one-node",
        "unknown-kind",
        "bjt-two-nodes",
        "hfe-order",
        "hfe-typ",
        "neg-ft",
    ],
)
def test_bad_values_name_their_key(tmp_path, mutate):
    # spec-format.md section 3: all values are SI floats; parts are resistor, capacitor, bjt
    data = fixture_dict()
    key = mutate(data)
    _expect_error(tmp_path, data, key)


@pytest.mark.parametrize("fmt", ["stagesynth-design-0", "", None, 1])
def test_bad_format_string_is_refused(tmp_path, fmt):
    data = fixture_dict()
    data["format"] = fmt
    _expect_error(tmp_path, data, "format", "stagesynth-design-1")


def test_missing_format_is_refused(tmp_path):
    data = fixture_dict()
    del data["format"]
    _expect_error(tmp_path, data, "format")


@pytest.mark.parametrize(
    "text",
    ['{"format": "stagesynth-design-1",}', "{'format': 1}", "", '{"parts": [1, 2'],
    ids=["trailing-comma", "single-quotes", "empty", "truncated"],
)
def test_bad_json_is_refused_with_position(tmp_path, text):
    # RFC 8259: no trailing commas, strings in double quotes, one complete value
    err = _expect_error(tmp_path, text, None, "JSON", "line")
    assert err.file is not None


def test_not_an_object_is_refused(tmp_path):
    _expect_error(tmp_path, "[1, 2, 3]", None, "object")


def test_missing_file_is_refused(tmp_path):
    path = tmp_path / "absent.json"
    with pytest.raises(StageError) as info:
        load_design(path)
    assert str(path) in str(info.value) and "not found" in str(info.value)


def test_infinite_value_is_refused(tmp_path):
    # RFC 8259 has no Infinity; Python's json reads it, the design reader must not accept it
    data = fixture_dict()
    i, r1 = _part(data, "R1")
    r1["value"] = math.inf
    _expect_error(tmp_path, json.dumps(data), f"parts[{i}] (R1).value", "finite")
