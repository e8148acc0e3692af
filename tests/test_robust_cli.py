"""What a new user trips over, each checked once: bad files, extreme values, folders, Ctrl-C.

Contract section 4 is the reference: bad input is exit 2 with one message naming the
file, key or part and what is accepted, never a traceback; exit 1 names the
requirement no design can meet. The class-A bound of reach.py is checked against
the textbook statement (Sedra & Smith, class-A output stage, from memory).
"""

from __future__ import annotations

import json
import re
import threading
from pathlib import Path

import pytest
from typer.testing import CliRunner

from stagesynth import api
from stagesynth.cli import app
from stagesynth.contracts.fileio import OutputDir
from stagesynth.quantities.errors import StageError
from stagesynth.quantities.units import parse_gain, parse_quantity, parse_temperature

ROOT = Path(__file__).resolve().parents[1]
SPEC_FILE = ROOT / "specs" / "hydrophone-front-end.toml"
SPEC_TEXT = SPEC_FILE.read_text(encoding="utf-8")
RUNNER = CliRunner()


@pytest.fixture(scope="module")
def made(hydrophone_made: Path) -> Path:
    """One full design of the hydrophone spec with its report (the session's, read-only)."""
    return hydrophone_made


def _bad(res, *words: str) -> None:
    assert res.exit_code == 2, res.output
    assert "Traceback" not in res.output
    for w in words:
        assert w in res.output, (w, res.output)


def test_readme_shows_the_bundled_spec_verbatim() -> None:
    """README's spec block is byte for byte the file it says it is."""
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    m = re.search(r"`specs/hydrophone-front-end\.toml`, as it is:\n\n```toml\n(.*?)```",
                  readme, re.S)
    assert m is not None
    assert m.group(1) == SPEC_TEXT


@pytest.mark.parametrize("text", ["1e999 V", "4e400k", "1e99999999 V", "-1e99999999 V"])
def test_huge_exponents_are_refused_not_overflowed(text: str) -> None:
    with pytest.raises(StageError, match="not a finite number"):
        parse_quantity(text, "V", key="supply.voltage")


@pytest.mark.parametrize("text", ["1e400 dB", "1e300 dB", "-1e400 dB"])
def test_gain_beyond_a_float_is_refused(text: str) -> None:
    with pytest.raises(StageError):
        parse_gain(text, key="require.gain")


def test_temperature_overflow_is_refused() -> None:
    with pytest.raises(StageError):
        parse_temperature("1e400 K", key="require.ambient")


@pytest.mark.parametrize(("line", "key"), [
    ('vbe = "1 µV"', "transistor.vbe"),
    ('vbe_tempco = "1 V/K"', "transistor.vbe_tempco"),
    ('ic_max = "1 nA"', "transistor.ic_max"),
    ('hfe = [0.5, 3]', "transistor.hfe"),
])
def test_device_values_outside_the_model_are_refused(tmp_path, line, key) -> None:
    spec = tmp_path / "s.toml"
    spec.write_text(SPEC_TEXT.replace('preset = "lownoise-npn"',
                                      f'preset = "lownoise-npn"\n{line}'), encoding="utf-8")
    _bad(RUNNER.invoke(app, ["design", str(spec), "--out", str(tmp_path / "o")]), key,
         "accepted")
    assert not (tmp_path / "o").exists()


def test_spec_and_design_reader_share_one_validation(made, tmp_path) -> None:
    """The reader refuses what the loader refuses: a vbe of 1 µV in a design file too."""
    d = json.loads((made / "design.json").read_text(encoding="utf-8"))
    next(iter(d["devices"].values()))["vbe"] = 1e-6
    path = tmp_path / "d.json"
    path.write_text(json.dumps(d), encoding="utf-8")
    _bad(RUNNER.invoke(app, ["analyze", str(path)]), ".vbe", "1 µV")


@pytest.mark.parametrize(("ambient", "word"), [('["0 K", "40 °C"]', "require.ambient"),
                                                ('["0 °C", "1000 °C"]', "require.ambient")])
def test_ambient_outside_silicon_range(tmp_path, ambient, word) -> None:
    spec = tmp_path / "s.toml"
    spec.write_text(SPEC_TEXT.replace('["0 °C", "40 °C"]', ambient), encoding="utf-8")
    _bad(RUNNER.invoke(app, ["design", str(spec), "--out", str(tmp_path / "o")]), word)


def test_supply_current_below_the_class_a_bound_fails_fast(tmp_path) -> None:
    """3 Vpp into 10 kΩ needs at least 1.5 V / 10 kΩ = 150 µA of bias (class A)."""
    spec = tmp_path / "s.toml"
    spec.write_text(SPEC_TEXT.replace('supply_current = "4 mA"', 'supply_current = "100 µA"'),
                    encoding="utf-8")
    res = RUNNER.invoke(app, ["design", str(spec), "--out", str(tmp_path / "o")])
    assert res.exit_code == 1
    assert "supply_current" in res.output and "150 µA" in res.output
    assert not (tmp_path / "o").exists()


def test_supply_current_of_a_nanoamp_is_refused(tmp_path) -> None:
    spec = tmp_path / "s.toml"
    spec.write_text(SPEC_TEXT.replace('supply_current = "4 mA"', 'supply_current = "1 nA"'),
                    encoding="utf-8")
    _bad(RUNNER.invoke(app, ["design", str(spec), "--out", str(tmp_path / "o")]),
         "require.supply_current")


def _edited(made: Path, tmp_path: Path, edit) -> Path:
    d = json.loads((made / "design.json").read_text(encoding="utf-8"))
    edit(d)
    path = tmp_path / "d.json"
    path.write_text(json.dumps(d), encoding="utf-8")
    return path


def test_isolated_loop_is_named(made, tmp_path) -> None:
    path = _edited(made, tmp_path, lambda d: d["parts"].extend([
        {"ref": "RX1", "kind": "resistor", "value": 1e3, "nodes": ["i1", "i2"]},
        {"ref": "RX2", "kind": "resistor", "value": 1e3, "nodes": ["i2", "i1"]}]))
    _bad(RUNNER.invoke(app, ["analyze", str(path)]), "RX1", "floats")


def test_dangling_transistor_is_named(made, tmp_path) -> None:
    path = _edited(made, tmp_path, lambda d: d["parts"].append(
        {"ref": "QX", "kind": "bjt", "device": next(iter(d["devices"])),
         "nodes": {"c": "x1", "b": "x2", "e": "x3"}}))
    _bad(RUNNER.invoke(app, ["analyze", str(path)]), "QX")


def test_oversized_netlist_is_refused_with_the_limit(made, tmp_path) -> None:
    def ladder(d):
        d["parts"] += [{"ref": f"RL{i}", "kind": "resistor", "value": 1e3,
                        "nodes": [f"l{i}", f"l{i + 1}"]} for i in range(500)]
    _bad(RUNNER.invoke(app, ["analyze", str(_edited(made, tmp_path, ladder))]), "up to 400")


def test_not_utf8_and_deep_nesting(tmp_path) -> None:
    bad = tmp_path / "d.json"
    bad.write_bytes(b'{"format": "\xe9\xff"}')
    _bad(RUNNER.invoke(app, ["analyze", str(bad)]), "not UTF-8")
    bad.write_bytes(b"[" * 100_000 + b"]" * 100_000)
    _bad(RUNNER.invoke(app, ["analyze", str(bad)]), "nested")
    spec = tmp_path / "s.toml"
    spec.write_text("a = " + "[" * 5000 + "]" * 5000 + "\n", encoding="utf-8")
    _bad(RUNNER.invoke(app, ["design", str(spec)]), "nested")


def test_analyze_given_a_spec_says_which_file_it_needs(tmp_path) -> None:
    _bad(RUNNER.invoke(app, ["analyze", str(SPEC_FILE)]), "spec file", "stagesynth design")


def test_prefer_message_names_the_option_once(tmp_path) -> None:
    res = RUNNER.invoke(app, ["design", str(SPEC_FILE), "--prefer", "cheap"])
    _bad(res, "'cheap' is not a choice")
    assert res.output.count("--prefer") == 1


def test_version_and_presets() -> None:
    import tomllib

    version = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["version"]
    assert RUNNER.invoke(app, ["--version"]).output.strip() == f"stagesynth {version}"
    res = RUNNER.invoke(app, ["presets"])
    assert res.exit_code == 0
    for name in ("generic-npn", "generic-pnp", "lownoise-npn", "rf-npn", "250 MHz"):
        assert name in res.output


def test_second_run_into_a_locked_folder_says_another_run_writes(tmp_path) -> None:
    out = tmp_path / "o"
    with OutputDir(out) as held:  # a run in progress holds the folder
        held.write_text("design.json", "{}")
        res = RUNNER.invoke(app, ["design", str(SPEC_FILE), "--out", str(out)])
        _bad(res, "another stagesynth run is writing")
        assert "did not write" not in res.output


def test_interrupted_run_changes_nothing(made, tmp_path, monkeypatch) -> None:
    """Ctrl-C during synthesis: exit 130, 'nothing changed', the old set intact."""
    import shutil

    out = tmp_path / "o"
    shutil.copytree(made, out)
    before = {p.name: p.read_bytes() for p in out.iterdir()}

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(api, "synthesize", interrupted)
    res = RUNNER.invoke(app, ["design", str(SPEC_FILE), "--out", str(out)])
    assert res.exit_code == 130
    assert "interrupted, nothing changed" in res.output and "Traceback" not in res.output
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".o.")]  # no staging left


def test_interrupted_while_writing_leaves_the_old_set(made, tmp_path, monkeypatch) -> None:
    """Ctrl-C after design.json is staged but before the report: nothing moves in."""
    import shutil

    from stagesynth.report import bundle

    out = tmp_path / "o"
    shutil.copytree(made, out)
    before = {p.name: p.read_bytes() for p in out.iterdir()}

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(bundle, "write_bundle", interrupted)
    res = RUNNER.invoke(app, ["design", str(SPEC_FILE), "--out", str(out), "--force"])
    assert res.exit_code == 130 and "nothing changed" in res.output
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before


def test_caps_remakes_the_report_of_the_old_design(made, tmp_path) -> None:
    import shutil

    out = tmp_path / "o"
    shutil.copytree(made, out)
    old_bom = (out / "bom.csv").read_bytes()
    # 5 Hz: below the design's own corner yet within the default capacitor_max (470 µF)
    res = RUNNER.invoke(app, ["caps", str(out / "design.json"), "--f-low", "5 Hz"])
    assert res.exit_code == 0, res.output
    assert "made again from the new design" in res.output
    assert (out / "bom.csv").read_bytes() != old_bom  # new capacitor values listed
    manifest = json.loads((out / ".stagesynth-manifest.json").read_text())
    assert len(set(manifest["sources"].values())) == 1  # every file from one design
    res = RUNNER.invoke(app, ["caps", str(out / "design.json"), "--f-low", "8 Hz",
                              "--no-report"])
    assert res.exit_code == 0
    assert "now out of date" in res.output and "bom.csv" in res.output


def test_lock_is_exclusive_between_threads_of_work(tmp_path) -> None:
    """Two OutputDir transactions on one folder: the second is refused while the first runs."""
    out = tmp_path / "o"
    errors: list[str] = []
    first = OutputDir(out).__enter__()
    try:
        def second() -> None:
            try:
                with OutputDir(out):
                    pass
            except StageError as exc:
                errors.append(str(exc))
        t = threading.Thread(target=second)
        t.start()
        t.join()
    finally:
        first.__exit__(None, None, None)
    assert errors and "another stagesynth run" in errors[0]
    with OutputDir(out) as again:  # free once the first has finished
        again.write_text("x.txt", "ok")
    assert (out / "x.txt").read_text() == "ok"


def test_required_device_field_set_to_null_is_named(made, tmp_path) -> None:
    """Found by benchmarks/fuzz_inputs.py: "c_cb": null was a TypeError, not exit 2."""
    def null(d):
        next(iter(d["devices"].values()))["c_cb"] = None
    _bad(RUNNER.invoke(app, ["analyze", str(_edited(made, tmp_path, null))]), ".c_cb",
         "missing")
