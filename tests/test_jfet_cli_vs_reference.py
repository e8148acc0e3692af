"""The CLI's `analyze --json` on JFET designs against the independent JFET reference.

The reference (tests/independent/refjfet.py, refjfetac.py) is written from the contract alone
and checked against textbooks in test_jfet_reference_textbook.py. Hand-written designs
(tests/independent/jfetdesigns.py): a self-biased common source with a split source resistor
and a capacitive source, a bootstrapped follower fed by an ideal 1 nF sensor, a common source
with a 1 GOhm gate return into a bipolar emitter follower, a JFET-bipolar cascode behind a
2.2 nF element, a divider-biased common source with triode corners, and a P-channel common
source; IDSS spreads of 5:1, ambient to 85 degC. Every contract §4 key at nominal and in
every corner entry is compared, through the CLI as an acceptance check would run it.
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
from independent import jfetdesigns as jd
from independent import refjfetac as ra

ROOT = Path(__file__).resolve().parents[1]
REL = 1e-4  # gain (linear), -3 dB corners, impedances, supply current, swing, ID, VDS
NOISE_DB = 0.1  # dB on noise, noise_rms (as 20 log10 of the ratio) and noise_figure
SUPPLY_DB = 0.01  # dB on supply rejection and peaking (single linear solves)


@cache
def reference(name: str) -> ra.Analysis:
    """Reference analysis of one spec's design."""
    spec = jd.SPECS[name]
    return ra.analyze(jd.DESIGNS[spec["design"]], spec)


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, subprocess.CompletedProcess]:
    """`stagesynth analyze DESIGN --spec SPEC --json` for every spec, all in parallel."""
    tmp = tmp_path_factory.mktemp("jfet_vs_reference")
    procs = {}
    for name, spec in jd.SPECS.items():
        dpath, spath = tmp / f"{name}.json", tmp / f"{name}.toml"
        dpath.write_text(json.dumps(jd.DESIGNS[spec["design"]], indent=1), encoding="utf-8")
        spath.write_text(jd.spec_toml(spec), encoding="utf-8")
        cmd = [sys.executable, "-m", "stagesynth", "analyze", str(dpath), "--spec", str(spath),
               "--json"]
        procs[name] = (subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.PIPE,
                                        stderr=subprocess.PIPE, text=True), cmd)
    for name in jd.SPECS:  # the reference works while the engine runs
        reference(name)
    out = {}
    for name, (p, cmd) in procs.items():
        so, se = p.communicate(timeout=300)
        out[name] = subprocess.CompletedProcess(cmd, p.returncode, so, se)
    return out


def engine(runs: Mapping[str, subprocess.CompletedProcess], name: str) -> dict[str, Any]:
    """The engine's JSON object (the test fails with its stderr when there is none)."""
    r = runs[name]
    try:
        return json.loads(r.stdout)
    except json.JSONDecodeError:
        pytest.fail(f"{name}: no JSON on stdout (exit {r.returncode}): {r.stderr[-800:]}")


def num(x: Any, none: float = math.nan) -> float:
    """A JSON number; null reads as `none` (JSON has no infinity)."""
    return none if x is None else float(x)


def rel_ok(a: float, b: float, rel: float = REL) -> bool:
    """Relative agreement; zeros and infinities must match exactly."""
    if math.isinf(a) or math.isinf(b) or a == 0 or b == 0:
        return a == b or (abs(a) < 1e-12 and abs(b) < 1e-12)
    return abs(a - b) <= rel * abs(b)


def compare(tag: str, eng: Mapping[str, Any], ref: ra.Figures, swing: float) -> list[str]:
    """Every contract §4 figure of one condition; the list of disagreements."""
    bad = []
    g = num(eng.get("gain_db"))
    if not abs(g - ref.gain_db) <= 20 * math.log10(1 + REL):
        bad.append(f"{tag} gain_db engine {g:.6f} reference {ref.gain_db:.6f}")
    if eng.get("inverting") is not ref.inverting:
        bad.append(f"{tag} inverting engine {eng.get('inverting')} reference {ref.inverting}")
    for key, val, none in (("f_low", ref.f_low, 0.0), ("f_high", ref.f_high, math.inf),
                           ("z_in", ref.z_in, math.nan), ("z_out", ref.z_out, math.nan),
                           ("supply_current", ref.supply_current, math.nan),
                           ("swing_vpp", swing, math.nan)):
        e = num(eng.get(key), none)
        if not rel_ok(e, val):
            bad.append(f"{tag} {key} engine {e:.7g} reference {val:.7g}")
    for key, val in (("noise", ref.noise), ("noise_rms", ref.noise_rms)):
        e = num(eng.get(key))
        if not abs(20 * math.log10(e / val)) <= NOISE_DB:
            bad.append(f"{tag} {key} engine {e:.5g} reference {val:.5g}")
    nf = eng.get("noise_figure")
    if (nf is None) != (ref.noise_figure is None) or (
            nf is not None and not abs(nf - ref.noise_figure) <= NOISE_DB):
        bad.append(f"{tag} noise_figure engine {nf} reference {ref.noise_figure}")
    for key, val in (("supply_rejection", ref.supply_rejection), ("peaking_db", ref.peaking_db)):
        e = num(eng.get(key))
        if not abs(e - val) <= SUPPLY_DB:
            bad.append(f"{tag} {key} engine {e:.5f} reference {val:.5f}")
    if eng.get("stable") is not ref.stable:
        bad.append(f"{tag} stable engine {eng.get('stable')} reference {ref.stable}")
    return bad


def _conditions(c: Mapping[str, Any]) -> tuple[float, float, dict[str, float]]:
    """(ambient degC, supply V, hFE per bipolar device) of an engine corner entry."""
    cond = c.get("conditions") or {}
    hfe = cond.get("hfe_values") or {}
    return float(cond["ambient_c"]), float(cond["supply_v"]), {k: float(v) for k, v in
                                                               hfe.items()}


def match_corners(eng: list[Mapping[str, Any]], an: ra.Analysis, jfet: str
                  ) -> tuple[list[tuple[Mapping[str, Any], ra.Figures]], list[str]]:
    """Pair engine and reference corners on ambient, supply, hFE and the spread position u
    (the engine lists u under hfe_values by the JFET's device name); without a stated u, the
    two spread ends of a group pair by drain current (they differ several-fold)."""
    pairs, bad = [], []
    groups: dict[tuple, list[ra.Figures]] = {}
    for f in an.corners:
        key = (f.conditions.ambient, round(f.conditions.supply, 9), f.conditions.hfe)
        groups.setdefault(key, []).append(f)
    egroups: dict[tuple, list[Mapping[str, Any]]] = {}
    for c in eng:
        ta, vs, hfe = _conditions(c)
        key = next((k for k in groups if abs(k[0] - ta) < 1e-6 and abs(k[1] - vs) < 1e-6
                    and all(abs(hfe.get(n, math.nan) - h) < 1e-6 for n, h in k[2])), None)
        if key is None:
            bad.append(f"engine corner Ta={ta} Vs={vs} hfe={hfe}: not a reference corner")
            continue
        egroups.setdefault(key, []).append(c)
    for key, refs in groups.items():
        es = egroups.get(key, [])
        if len(es) != len(refs):
            bad.append(f"corner group {key}: engine {len(es)} entries, reference {len(refs)}")
            continue
        names = [n for n, _ in refs[0].conditions.spread]
        stated = all(n in _conditions(c)[2] for c in es for n in names)
        if stated:
            for c in es:
                u = _conditions(c)[2]
                hit = [f for f in refs if all(abs(u[n] - x) < 1e-9 for n, x in f.conditions.spread)]
                if len(hit) != 1:
                    bad.append(f"engine corner {c['conditions']}: no reference spread position")
                    continue
                pairs.append((c, hit[0]))
        else:
            es = sorted(es, key=lambda c: abs(num(c["transistors"][jfet]["ic"])))
            pairs += list(zip(es, sorted(refs, key=lambda f: f.op.jfets[jfet].id), strict=True))
    return pairs, bad


def transistors(tag: str, eng: Mapping[str, Any], ref: ra.Figures) -> list[str]:
    """Per-transistor ic (JFET: ID) and vce (JFET: VDS) magnitudes, kind, active flag."""
    bad = []
    trs = eng.get("transistors") or {}
    recs = [(r, "jfet", t.id, t.vds) for r, t in ref.op.jfets.items()]
    recs += [(r, "bjt", t.ic, t.vce) for r, t in ref.op.bjts.items()]
    for r, kind, i, v in recs:
        e = trs.get(r) or {}
        if str(e.get("kind", "")).lower() != kind:
            bad.append(f"{tag} {r}.kind engine {e.get('kind')} reference {kind}")
        for key, val in (("ic", i), ("vce", v)):
            ev = abs(num(e.get(key)))
            if not abs(ev - abs(val)) <= REL * abs(val) + (1e-12 if key == "ic" else 1e-6):
                bad.append(f"{tag} {r}.{key} engine {ev:.7g} reference {abs(val):.7g}")
    if bool(eng.get("active")) is not ref.active:
        bad.append(f"{tag} active engine {eng.get('active')} reference {ref.active}")
    return bad


def _tag(f: ra.Figures) -> str:
    c = f.conditions
    return f"[u={dict(c.spread)} hfe={dict(c.hfe)} Ta={c.ambient:g} Vs={c.supply:.4g}]"


# ----------------------------------------------------------------------------- tests


def test_scenarios_lie_clear_of_their_limits() -> None:
    # Our own scenarios: each check's value is far from its limit compared with the
    # tolerances below, and both verdicts occur.
    verdicts = set()
    for name in jd.SPECS:
        an = reference(name)
        verdicts.add(an.meets)
        for c in an.checks:
            if isinstance(c.limit, str) or c.name in ("active", "stable") or c.limit == 0:
                continue
            if c.name == "gain":
                tol = jd.SPECS[name]["require"]["gain_tolerance_db"]
                assert abs(abs(c.value - c.limit) - tol) > 0.2, (name, c)
            elif c.name == "noise_figure":
                assert abs(c.value - c.limit) > 0.5, (name, c)
            else:
                assert abs(c.value - c.limit) > 0.05 * abs(c.limit), (name, c)
    assert verdicts == {True, False}


@pytest.mark.parametrize("name", sorted(jd.SPECS))
def test_verdict_exit_code_and_checks_agree(runs: Mapping[str, subprocess.CompletedProcess],
                                            name: str) -> None:
    # Contract §4: meets_spec, exit 0/1, and each requirement's row as the reference judges.
    an = reference(name)
    out = engine(runs, name)
    bad = []
    if out.get("meets_spec") is not an.meets or runs[name].returncode != (0 if an.meets else 1):
        bad.append(f"meets_spec engine {out.get('meets_spec')} (exit {runs[name].returncode}),"
                   f" reference {an.meets} ({[c.name for c in an.checks if not c.ok]})")
    rows = {str(c.get("name")): c for c in out.get("checks") or []}
    for c in an.checks:
        e = rows.get(c.name)
        if e is None:
            if not c.ok:
                bad.append(f"failing check {c.name} missing in the engine's checks")
        elif bool(e.get("ok")) is not c.ok:
            bad.append(f"{c.name}: engine ok={e.get('ok')} value={e.get('value')}; reference "
                       f"ok={c.ok} value={c.value:.6g} limit={c.limit}")
    assert not bad, f"{name}: " + "; ".join(bad)


@pytest.mark.parametrize("name", sorted(jd.SPECS))
def test_nominal_figures_agree(runs: Mapping[str, subprocess.CompletedProcess],
                               name: str) -> None:
    # Contract §2 at nominal (u = 0.5: the geometric means, hfe_typ, 25 degC, nominal supply);
    # swing_vpp is the smallest over the corners (§4).
    an = reference(name)
    out = engine(runs, name)
    bad = compare("nominal", out, an.nominal, an.swing_vpp)
    if isinstance(out.get("nominal"), Mapping):
        bad += transistors("nominal", out["nominal"], an.nominal)
    assert not bad, f"{name}: " + "; ".join(bad)


@pytest.mark.parametrize("name", sorted(jd.SPECS))
def test_corners_agree(runs: Mapping[str, subprocess.CompletedProcess], name: str) -> None:
    # Contract §2: corners pair (idss min, vp nearest zero) and (idss max, vp farthest) with
    # ambient min/max, supply +-tolerance and (mixed design) hFE min/max; at each, the same
    # §4 keys as at nominal plus every transistor's operating point.
    an = reference(name)
    out = engine(runs, name)
    eng = out.get("corners") or []
    bad = [] if len(eng) == len(an.corners) else [
        f"{len(eng)} corners, reference {len(an.corners)}"]
    pairs, unmatched = match_corners(eng, an, "J1")
    bad += unmatched
    for e, f in pairs:
        bad += transistors(_tag(f), e, f)
        bad += compare(_tag(f), e, f, f.swing_vpp)
    assert not bad, f"{name}: " + "; ".join(bad)


THD_DB = 0.1  # dB on thd, hd2, hd3 (both solve the same periodic steady state)


@pytest.mark.parametrize("name", sorted(jd.SPECS))
def test_distortion_agrees_at_nominal_and_worst_corner(
        runs: Mapping[str, subprocess.CompletedProcess], name: str) -> None:
    # Contract §2 "Distortion": thd, hd2, hd3 at thd_level (default the required swing) and
    # thd_at (default midband), at nominal and at the engine's worst corner.
    from independent import refjfet as rj
    from independent import refjfetthd as rt

    spec = jd.SPECS[name]
    req = spec["require"]
    an = reference(name)
    out = engine(runs, name)
    cir = rj.circuit_from_design(jd.DESIGNS[spec["design"]])
    level = float(req.get("thd_level", req["swing"]))
    at = float(req.get("thd_at", math.sqrt(req["f_low"] * req["f_high"])))
    bad = []
    if not (rel_ok(num(out.get("thd_level_vpp")), level, 1e-9)
            and rel_ok(num(out.get("thd_at")), at, 1e-9)):
        bad.append(f"level/frequency engine {out.get('thd_level_vpp')} Vpp at "
                   f"{out.get('thd_at')} Hz, reference {level} Vpp at {at} Hz")
    pairs, unmatched = match_corners(out.get("corners") or [], an, "J1")
    worst = max(pairs, key=lambda p: num(p[0].get("thd"))) if pairs else None
    todo = [("nominal", out, an.nominal)]
    if worst is not None:
        todo.append((_tag(worst[1]), worst[0], worst[1]))
    for tag, e, f in todo:
        res = rt.distortion(cir, f.op, level, at)
        for key in ("thd", "hd2", "hd3"):
            ev, rv = num(e.get(key)), getattr(res, key)
            if not (abs(20 * math.log10(ev / rv)) <= THD_DB if ev > 0 and rv > 0 else False):
                bad.append(f"{tag} {key} engine {ev:.5g} reference {rv:.5g}")
    assert not bad + unmatched, f"{name}: " + "; ".join(bad + unmatched)
