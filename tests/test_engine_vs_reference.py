"""The engine's `analyze --json` output against the independent reference model.

The reference (tests/independent/refmodel.py) is written from the contract text alone and is
itself checked against textbooks, python-control and scikit-rf in test_refmodel.py. Agreement
asked (brief): 0.05 dB on gain, 1 % on -3 dB corners, impedances, supply current and per-corner
IC/VCE, 3 % on swing, same verdict and exit code.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from collections.abc import Mapping
from functools import cache
from pathlib import Path
from typing import Any

import pytest

sys.path.insert(0, str(Path(__file__).parent))
from independent import designs as ds
from independent import refmodel as rm
from independent import supplyref as sr

ROOT = Path(__file__).resolve().parents[1]
GAIN_DB_TOL = 0.05
REL_TOL = 0.01
SWING_REL_TOL = 0.03


@cache
def reference(spec_name: str) -> tuple[rm.Analysis, bool, tuple[rm.Check, ...]]:
    """Reference analysis and verdict of one spec's design."""
    spec = ds.SPECS[spec_name]
    return rm.analyze_spec(ds.DESIGNS[spec["design"]], spec)


BAD_INPUTS: dict[str, str] = {
    "malformed_json": '{"format": "stagesynth-design-1", "parts": [ {"ref": "R1",',
    "unknown_node": "",  # filled below: output terminal names a node no part touches
    "missing_device": "",  # filled below: Q1 refers to a device that is not defined
}


def _bad_design_texts() -> dict[str, str]:
    """Texts of the bad design files."""
    out = dict(BAD_INPUTS)
    d = json.loads(json.dumps(ds.DESIGNS["ce_npn"]))
    d["output"] = "nowhere"
    out["unknown_node"] = json.dumps(d)
    d = json.loads(json.dumps(ds.DESIGNS["ce_npn"]))
    d["devices"] = {"QX": d["devices"]["Q"]}
    out["missing_device"] = json.dumps(d)
    return out


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, subprocess.CompletedProcess]:
    """Run the CLI once per spec and per bad input, all processes in parallel."""
    tmp = tmp_path_factory.mktemp("engine_vs_reference")
    procs: dict[str, tuple[subprocess.Popen, list[str]]] = {}

    def start(key: str, design_text: str, spec_text: str) -> None:
        dpath, spath = tmp / f"{key}.json", tmp / f"{key}.toml"
        dpath.write_text(design_text, encoding="utf-8")
        spath.write_text(spec_text, encoding="utf-8")
        cmd = [sys.executable, "-m", "stagesynth", "analyze", str(dpath), "--spec", str(spath),
               "--json"]
        procs[key] = (subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.PIPE,
                                       stderr=subprocess.PIPE, text=True), cmd)

    for name in ds.SPECS:
        design = ds.DESIGNS[ds.SPECS[name]["design"]]
        start(name, json.dumps(design, indent=1), ds.spec_toml(ds.SPECS[name]))
    for name, text in _bad_design_texts().items():
        start("bad_" + name, text, ds.spec_toml(ds.SPECS["ce_npn_ok"]))
    for name in ds.SPECS:  # the reference works while the engine runs
        reference(name)
    out = {}
    for key, (p, cmd) in procs.items():
        stdout, stderr = p.communicate(timeout=300)
        out[key] = subprocess.CompletedProcess(cmd, p.returncode, stdout, stderr)
    return out


def _engine(runs: Mapping[str, subprocess.CompletedProcess], name: str) -> dict[str, Any]:
    """The engine's JSON object for one spec (fails with its stderr if it is not JSON)."""
    r = runs[name]
    try:
        return json.loads(r.stdout)
    except json.JSONDecodeError:
        pytest.fail(f"{name}: stdout is not one JSON object (exit {r.returncode}); "
                    f"stderr: {r.stderr.strip()[-800:]}")


def _num(x: Any) -> float:
    """A JSON number (None and strings like 'inf' read as floats where possible)."""
    if x is None:
        return math.nan
    return float(x)


def _close(a: float, b: float, rel: float) -> bool:
    """Relative agreement, with 0 and inf compared exactly."""
    if math.isinf(a) or math.isinf(b) or a == 0 or b == 0:
        return a == b or (abs(a) < 1e-12 and abs(b) < 1e-12)
    return abs(a - b) <= rel * abs(b)


# ----------------------------------------------------------------------------- scenarios


def test_scenarios_have_clear_verdicts() -> None:
    # Sanity of our own scenarios: every spec's checks lie well clear of their limits
    # (more than the comparison tolerances), and both verdicts occur.
    verdicts = set()
    for name in ds.SPECS:
        _, ok, checks = reference(name)
        verdicts.add(ok)
        for c in checks:
            if isinstance(c.limit, str) or c.name in ("active", "stable") or c.limit == 0:
                continue
            if c.name == "gain":
                tol = ds.SPECS[name]["require"].get("gain_tolerance_db", 1.0)
                assert abs(abs(c.value - c.limit) - tol) > 0.2, (name, c)
            elif not math.isinf(c.value):
                assert abs(c.value - c.limit) > 0.05 * c.limit, (name, c)
    assert verdicts == {True, False}


# ----------------------------------------------------------------------------- comparisons


@pytest.mark.parametrize("name", sorted(ds.SPECS))
def test_exit_code_and_verdict_agree(runs: Mapping[str, subprocess.CompletedProcess],
                                     name: str) -> None:
    # Contract section 4: exit 0 when the design meets the spec, 1 when not.
    _, ok, checks = reference(name)
    out = _engine(runs, name)
    failed = [c.name for c in checks if not c.ok]
    assert out.get("meets_spec") is ok, f"{name}: engine meets_spec={out.get('meets_spec')}, " \
        f"reference {ok} (reference fails: {failed})"
    assert runs[name].returncode == (0 if ok else 1)


@pytest.mark.parametrize("name", sorted(ds.SPECS))
def test_nominal_figures_agree(runs: Mapping[str, subprocess.CompletedProcess],
                               name: str) -> None:
    # Contract section 2 figures at nominal; tolerances of the brief.
    an, _, _ = reference(name)
    out = _engine(runs, name)
    bad = []
    if not abs(_num(out.get("gain_db")) - an.gain_db) <= GAIN_DB_TOL:
        bad.append(f"gain_db engine {out.get('gain_db')} reference {an.gain_db:.4f}")
    if out.get("inverting") is not an.inverting:
        bad.append(f"inverting engine {out.get('inverting')} reference {an.inverting}")
    never = {"f_low": 0.0, "f_high": math.inf}  # JSON has no infinity: null reads "never"
    for key, ref, tol in [("f_low", an.f_low, REL_TOL), ("f_high", an.f_high, REL_TOL),
                          ("z_in", an.z_in, REL_TOL), ("z_out", an.z_out, REL_TOL),
                          ("supply_current", an.supply_current, REL_TOL),
                          ("swing_vpp", an.swing_vpp, SWING_REL_TOL)]:
        val = never[key] if key in never and out.get(key) is None else _num(out.get(key))
        if not _close(val, ref, tol):
            bad.append(f"{key} engine {out.get(key)} reference {ref:.6g}")
    assert not bad, f"{name}: " + "; ".join(bad)


def _find(d: Mapping[str, Any], *words: str) -> Any:
    """First value whose key contains one of the words (searching a 'conditions' sub-dict
    first)."""
    for src in (d.get("conditions") if isinstance(d.get("conditions"), Mapping) else {}, d):
        for k, v in src.items():
            if any(w in k.lower() for w in words):
                return v
    return None


def _corner_key(c: Mapping[str, Any], devices: list[str], hfe_limits: dict[str, tuple]
                ) -> tuple[tuple[float, ...], float, float]:
    """(hFE per device, ambient degC, supply V) of an engine corner."""
    h = _find(c, "hfe_values")
    h = _find(c, "hfe") if h is None else h
    if isinstance(h, Mapping):
        hs = tuple(float(h[k]) if not isinstance(h[k], str) else
                   hfe_limits[k][0 if h[k] == "min" else 1] for k in devices)
    elif isinstance(h, str):
        hs = tuple(hfe_limits[k][0 if h == "min" else 1] for k in devices)
    else:
        hs = tuple(float(h) for _ in devices)
    ta = float(_find(c, "ambient", "temp"))
    if ta > 150.0:  # kelvin
        ta -= rm.ZERO_CELSIUS
    vs = float(_find(c, "supply", "vcc"))
    return hs, ta, vs


@pytest.mark.parametrize("name", sorted(ds.SPECS))
def test_corners_agree(runs: Mapping[str, subprocess.CompletedProcess], name: str) -> None:
    # Corners (contract section 2): same set of conditions; at each, active flag, swing,
    # and each transistor's IC and VCE.
    an, _, _ = reference(name)
    out = _engine(runs, name)
    design = ds.DESIGNS[ds.SPECS[name]["design"]]
    devices = sorted(design["devices"])
    limits = {k: tuple(v["hfe"]) for k, v in design["devices"].items()}
    ref_by_key = {(tuple(h for _, h in c.conditions.hfe), c.conditions.ambient,
                   c.conditions.supply): c for c in an.corners}
    eng = out.get("corners") or []
    bad = []
    if len(eng) != len(an.corners):
        bad.append(f"{len(eng)} corners, reference {len(an.corners)}")
    for ec in eng:
        hs, ta, vs = _corner_key(ec, devices, limits)
        match = [c for k, c in ref_by_key.items() if all(
            math.isclose(a, b, rel_tol=1e-6) for a, b in zip(k[0], hs, strict=True))
            and abs(k[1] - ta) < 1e-6 and math.isclose(k[2], vs, rel_tol=1e-6)]
        if len(match) != 1:
            bad.append(f"corner hfe={hs} Ta={ta} Vs={vs}: no reference corner")
            continue
        rc = match[0]
        tag = f"[hfe={hs} Ta={ta:g} Vs={vs:.4g}]"
        if bool(ec.get("active")) is not rc.active:
            bad.append(f"{tag} active engine {ec.get('active')} reference {rc.active}")
        sw = _num(ec.get("swing_vpp"))
        if not (_close(sw, rc.swing_vpp, SWING_REL_TOL)
                or (rc.swing_vpp == 0 and abs(sw) < 1e-9)):
            bad.append(f"{tag} swing_vpp engine {sw:.5g} reference {rc.swing_vpp:.5g}")
        # second release: each corner carries its own gain, -3 dB corners and impedances
        if not abs(_num(ec.get("gain_db")) - rc.gain_db) <= GAIN_DB_TOL:
            bad.append(f"{tag} gain_db engine {ec.get('gain_db')} reference {rc.gain_db:.4f}")
        for key, ref_val in (("f_low", rc.f_low), ("f_high", rc.f_high), ("z_in", rc.z_in),
                             ("z_out", rc.z_out)):
            ev = ec.get(key)
            ev = math.inf if ev is None and key == "f_high" else _num(ev)
            if not (_close(ev, ref_val, REL_TOL) or ev == ref_val):
                bad.append(f"{tag} {key} engine {ev} reference {ref_val:.6g}")
        trs = ec.get("transistors") or {}
        for ref, t in rc.op.transistors.items():
            et = trs.get(ref) or {}
            for key, val in (("ic", t.ic), ("vce", t.vce)):
                ev = abs(_num(et.get(key)))
                if not abs(ev - abs(val)) <= REL_TOL * abs(val) + (1e-9 if key == "ic" else 1e-4):
                    bad.append(f"{tag} {ref}.{key} engine {et.get(key)} reference {val:.6g}")
    assert not bad, f"{name}: " + "; ".join(bad)


_CHECK_WORDS = {"gain": ("gain",), "f_low": ("f_low", "low"), "f_high": ("f_high", "high"),
                "z_in": ("z_in",), "z_out": ("z_out",), "swing": ("swing",),
                "supply_current": ("supply_current", "current"), "active": ("active",),
                "inverting": ("invert",), "supply_rejection": ("supply_rejection",),
                "peaking": ("peaking",), "stable": ("stable",)}


@pytest.mark.parametrize("name", sorted(ds.SPECS))
def test_individual_checks_agree(runs: Mapping[str, subprocess.CompletedProcess],
                                 name: str) -> None:
    # Each requirement's pass/fail as the reference judges it (contract section 2).
    _, _, checks = reference(name)
    out = _engine(runs, name)
    eng = out.get("checks") or []
    assert eng, f"{name}: no checks list"
    bad = []
    for c in checks:
        words = _CHECK_WORDS[c.name]
        hits = [e for e in eng if any(w in str(e.get("name", "")).lower() for w in words)]
        if c.name == "gain":
            hits = [e for e in hits if "tol" not in str(e.get("name")).lower()]
        if len(hits) > 1:
            exact = [e for e in hits if str(e.get("name")).lower() == c.name]
            hits = exact or hits[:1]
        if not hits:
            if not c.ok:
                bad.append(f"failing check {c.name} missing in engine checks")
            continue
        if bool(hits[0].get("ok")) is not c.ok:
            bad.append(f"{c.name}: engine ok={hits[0].get('ok')} value={hits[0].get('value')}"
                       f" limit={hits[0].get('limit')}; reference ok={c.ok} value={c.value:.5g}"
                       f" limit={c.limit}")
    assert not bad, f"{name}: " + "; ".join(bad)


@pytest.mark.parametrize("name", sorted(BAD_INPUTS))
def test_bad_design_file_exit_2_one_line(runs: Mapping[str, subprocess.CompletedProcess],
                                         name: str) -> None:
    # Contract section 4: bad input -> exit 2, one clear message, no traceback.
    r = runs["bad_" + name]
    assert r.returncode == 2, (r.returncode, r.stderr[-500:])
    msg = r.stderr.strip()
    assert msg and "\n" not in msg, msg
    assert "Traceback" not in r.stderr
    assert f"bad_{name}.json" in msg or "design" in msg.lower(), msg


# ----------------------------------------------------------------------------- supply, stability

PSRR_DB_TOL = 0.05  # dB, supply rejection: a single linear solve on both sides
PEAK_DB_TOL = 0.05  # dB, peaking: both refine the maximum of a smooth curve


@cache
def reference_conditions(spec_name: str) -> list[sr.ConditionFigures]:
    """supplyref's figures at nominal and every corner (contract §2, second release)."""
    spec = ds.SPECS[spec_name]
    return sr.every_condition(ds.DESIGNS[spec["design"]], spec)


@pytest.mark.parametrize("name", sorted(ds.SPECS))
def test_supply_rejection_peaking_stability_agree(
        runs: Mapping[str, subprocess.CompletedProcess], name: str) -> None:
    # Contract §2 "Supply and stability" and §4 keys: the engine's supply_rejection,
    # peaking_db and stable, nominal and in every corner entry, against the independent
    # implementation (tests/independent/supplyref.py).
    figs = reference_conditions(name)
    out = _engine(runs, name)
    design = ds.DESIGNS[ds.SPECS[name]["design"]]
    devices = sorted(design["devices"])
    limits = {k: tuple(v["hfe"]) for k, v in design["devices"].items()}
    an, _, _ = reference(name)
    keys = [(tuple(h for _, h in c.conditions.hfe), c.conditions.ambient, c.conditions.supply)
            for c in an.corners]
    bad = []
    pairs = [("nominal", out, figs[0])]
    for ec in out.get("corners") or []:
        hs, ta, vs = _corner_key(ec, devices, limits)
        j = [i for i, k in enumerate(keys) if all(
            math.isclose(a, b, rel_tol=1e-6) for a, b in zip(k[0], hs, strict=True))
            and abs(k[1] - ta) < 1e-6 and math.isclose(k[2], vs, rel_tol=1e-6)]
        assert len(j) == 1, f"{name}: corner {hs, ta, vs} not in the reference"
        pairs.append((f"[hfe={hs} Ta={ta:g} Vs={vs:.4g}]", ec, figs[1 + j[0]]))
    for tag, eng, ref in pairs:
        psrr = _num(eng.get("supply_rejection"))
        if not abs(psrr - ref.supply_rejection) <= PSRR_DB_TOL:
            bad.append(f"{tag} supply_rejection {psrr:.4f} reference {ref.supply_rejection:.4f}")
        pk = _num(eng.get("peaking_db"))
        if not abs(pk - ref.peaking_db) <= PEAK_DB_TOL:
            bad.append(f"{tag} peaking_db {pk:.4f} reference {ref.peaking_db:.4f}")
        if eng.get("stable") is not ref.stable:
            bad.append(f"{tag} stable {eng.get('stable')} reference {ref.stable}")
    assert not bad, f"{name}: " + "; ".join(bad)
