"""Synthesis (issue 3) judged from the outside.

- Random feasible specs (hypothesis, derandomized): every design the tool says meets its
  spec is re-judged by `stagesynth analyze --json --spec` and by the independent reference
  model (tests/independent/refmodel.py, written from the contract alone), and its
  `predicted` block must agree with that model (0.05 dB, 1 % corners, impedances and
  current, 3 % swing). Refusals must come with named conflicts and exit code 1.
- The textbook hand procedure as a baseline: where the hand design meets a spec, ours must
  meet it too, with a smallest margin at least as large (within the tool's tie band).
- Physically impossible specs are refused with the right requirement named.
- `prefer="current"` never draws more supply current than the default objective.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
import tomllib
from collections.abc import Mapping
from functools import cache
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

sys.path.insert(0, str(Path(__file__).parent))
from independent import refmodel as rm

from stagesynth.contracts.device import PRESETS
from stagesynth.contracts.spec import Spec, load_spec, spec_from_mapping
from stagesynth.engine.analysis import analyze
from stagesynth.judging.verdict import Verdict, judge
from stagesynth.synthesis.synth import MARGIN_CAP, TIE, SynthesisResult, synthesize
from stagesynth.synthesis.topologies import common_emitter as ce

ROOT = Path(__file__).resolve().parents[1]
SPECS = ROOT / "specs"
GAIN_DB_TOL = 0.05  # dB: predicted vs independent model (brief)
REL_TOL = 0.01  # corners, impedances, supply current (brief)
SWING_REL_TOL = 0.03  # swing (brief)
MET_SHARE = 0.8  # a design tool refusing more than ~1 in 5 feasible specs is broken (brief)

# CODATA 2018 exact constants, for the hand procedure's thermal voltage.
K_BOLTZMANN = 1.380649e-23
Q_ELECTRON = 1.602176634e-19
# IEC 60063 E24 and E6 series (one decade).
E24 = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7,
       5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)
E6 = (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)


# --------------------------------------------------------------------------- helpers


def toml_text(data: Mapping[str, Any]) -> str:
    """A spec dict (section-1 layout: top-level scalars, then one level of tables) as TOML."""

    def value(v: Any) -> str:
        if isinstance(v, str):
            return json.dumps(v, ensure_ascii=False)  # a TOML basic string
        if isinstance(v, list | tuple):
            return "[" + ", ".join(value(x) for x in v) + "]"
        return repr(v)

    lines = [f"{k} = {value(v)}" for k, v in data.items() if not isinstance(v, Mapping)]
    for name, table in data.items():
        if isinstance(table, Mapping):
            lines += ["", f"[{name}]", *(f"{k} = {value(v)}" for k, v in table.items())]
    return "\n".join(lines) + "\n"


def reference_require(spec: Spec) -> dict[str, Any]:
    """The spec's requirements in the independent model's keys."""
    r = spec.require
    req: dict[str, Any] = {"gain_db": r.gain_db, "gain_tolerance_db": r.gain_tolerance_db,
                           "f_low": r.f_low, "f_high": r.f_high, "z_in": r.z_in,
                           "swing": r.swing_vpp, "inverting": r.inverting}
    if r.supply_current is not None:
        req["supply_current"] = r.supply_current
    if r.z_out is not None:
        req["z_out"] = r.z_out
    return req


def reference_analysis(spec: Spec, design: Mapping[str, Any]) -> rm.Analysis:
    """Independent analysis of a design file for a spec's band, ambient and supply range."""
    r = spec.require
    return rm.analyze(design, (r.f_low, r.f_high), ambient=r.ambient,
                      supply_tolerance=spec.supply.tolerance)


def assert_predicted_agrees(predicted: Mapping[str, Any], ref: rm.Analysis, label: str) -> None:
    """design.json `predicted` against the independent model, at the brief's tolerances."""
    assert abs(predicted["gain_db"] - ref.gain_db) <= GAIN_DB_TOL, (label, "gain_db")
    for key, ref_value in (("f_low", ref.f_low), ("f_high", ref.f_high), ("z_in", ref.z_in),
                           ("supply_current", ref.supply_current)):
        ours = predicted[key]
        if not math.isfinite(ref_value):  # JSON writes an infinite corner as null
            assert ours is None, (label, key, ours)
            continue
        assert ours == pytest.approx(ref_value, rel=REL_TOL), (label, key)
    assert predicted["swing_vpp"] == pytest.approx(ref.swing_vpp, rel=SWING_REL_TOL), (
        label, "swing_vpp")


# --------------------------------------------------------------------------- random specs


def _sig(x: float, digits: int = 2) -> float:
    return float(f"{x:.{digits}g}")


@st.composite
def feasible_specs(draw: st.DrawFn) -> dict[str, Any]:
    """A spec dict a single common-emitter stage with the chosen preset can plausibly meet.

    Bounds used to stay feasible (textbook relations, Sedra & Smith, from memory):
    gain x bandwidth well below fT; Rin ~ beta * (re + RE1) and |A| ~ Rac / (re + RE1), so
    z_in <~ beta * Rac / |A|; the output pole 1 / (2 pi Rac C_load) caps Rac for f_high;
    a class-A collector swings at most about a third of the supply each way into
    Rac = RC || RL with RC ~ RL (common practice), so swing <= 0.3 * VCC.
    """
    rf = draw(st.booleans()) and draw(st.booleans())  # about one spec in four
    if rf:  # IF / wideband spec with the fast preset
        preset = "rf-npn"
        vcc = draw(st.sampled_from([5.0, 6.0, 8.0, 9.0, 10.0]))  # vce_max 12 V
        tol = draw(st.sampled_from([0.0, 0.05, 0.1]))
        f_low = _sig(10 ** draw(st.floats(5.0, 5.7)))
        f_high = _sig(10 ** draw(st.floats(math.log10(5e6), math.log10(30e6))))
        rl = draw(st.sampled_from([470.0, 680.0, 1000.0]))
        cl = draw(st.sampled_from([0.0, 2e-12, 5e-12]))
        rs = 50.0
        gain_db = draw(st.sampled_from([14.0, 16.0, 18.0, 20.0]))
        zin = draw(st.sampled_from([0.0, 0.0, 300.0, 500.0]))
        swing = _sig(min(2.0, draw(st.floats(0.3, 0.2 * vcc * (1 - tol)))))
    else:  # audio / sensor band
        preset = draw(st.sampled_from(["generic-npn", "generic-pnp", "lownoise-npn"]))
        vcc = draw(st.sampled_from([5.0, 6.0, 9.0, 12.0, 15.0, 18.0, 24.0]))
        tol = draw(st.sampled_from([0.0, 0.05, 0.1]))
        # from 5 Hz: below it a bypassed emitter needs more than capacitor_max's default
        # 470 µF (a 1 mA stage's bypass sees about re + RE1 ~ 50 Ω: 1/(2π·470 µF·50 Ω) ~ 7 Hz)
        # or an electrolytic whose leakage (common practice) moves the bias
        f_low = _sig(10 ** draw(st.floats(math.log10(5.0), 2.0)))
        f_high = _sig(10 ** draw(st.floats(math.log10(5e3), math.log10(2e5))))
        rl = draw(st.sampled_from([4.7e3, 10e3, 22e3, 47e3, 100e3]))
        cl = draw(st.sampled_from([0.0, 100e-12, 470e-12]))
        rs = draw(st.sampled_from([0.0, 50.0, 600.0, 1e3, 2.2e3]))
        gain_db = draw(st.sampled_from([14.0, 17.0, 20.0, 23.0, 26.0, 30.0]))
        gain = 10 ** (gain_db / 20)
        beta = PRESETS[preset].hfe_nominal
        rac_hf = 0.5 / (2 * math.pi * f_high * (cl + 10e-12))
        zmax = min(100e3, 0.3 * beta * min(rl / 2, rac_hf) / gain)
        zin = draw(st.sampled_from([0.0, *(z for z in (2.2e3, 10e3, 22e3, 47e3, 100e3)
                                           if z <= zmax)]))
        swing = _sig(draw(st.floats(0.05, 0.3)) * vcc * (1 - tol))
    ambient = draw(st.sampled_from([None, (0, 50), (-20, 70), (10, 40)]))
    spec: dict[str, Any] = {
        "title": "Random feasible stage",
        "supply": {"voltage": vcc, "tolerance": tol},
        "source": {"resistance": rs},
        "load": {"resistance": rl, "capacitance": cl},
        "require": {"gain": f"{gain_db:g} dB", "f_low": f_low, "f_high": f_high,
                    "swing": f"{swing:g} Vpp"},
        "transistor": {"preset": preset},
        "parts": {"resistors": draw(st.sampled_from(["E12", "E24", "E48", "E96"])),
                  "resistor_tolerance": draw(st.sampled_from(["1 %", "5 %"])),
                  "capacitors": draw(st.sampled_from(["E6", "E12"]))},
    }
    if zin:
        spec["require"]["z_in"] = zin
    if ambient:
        spec["require"]["ambient"] = [f"{ambient[0]} °C", f"{ambient[1]} °C"]
    if draw(st.booleans()):  # a generous budget: several times what the swing needs
        spec["require"]["supply_current"] = "25 mA" if rf else "10 mA"
    return spec


def _check_random_spec(data: dict[str, Any], folder: Path, index: int) -> bool:
    """Synthesize one random spec and check it from outside; True when it was met."""
    label = json.dumps(data, ensure_ascii=False)
    spec_path = folder / f"spec{index}.toml"
    spec_path.write_text(toml_text(data), encoding="utf-8")
    spec = spec_from_mapping(data, file=str(spec_path))
    result = synthesize(spec)
    design_path = folder / f"design{index}.json"
    design_path.write_text(result.design.to_json(), encoding="utf-8")
    cli = subprocess.Popen(
        [sys.executable, "-m", "stagesynth", "analyze", str(design_path), "--spec",
         str(spec_path), "--json"], cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
        text=True)
    design = json.loads(design_path.read_text(encoding="utf-8"))
    ref = reference_analysis(spec, design)  # runs while the CLI works
    ref_ok, ref_checks = rm.judge(ref, reference_require(spec))
    out, err = cli.communicate(timeout=120)
    assert "Traceback" not in err, (label, err)
    report = json.loads(out)
    if result.meets_spec:
        assert design["meets_spec"] is True, label
        # (a) the CLI re-reads the written file and agrees (contract section 4: exit 0)
        assert cli.returncode == 0, (label, err)
        assert report["meets_spec"] is True, label
        assert all(c["ok"] for c in report["checks"]), (label, report["checks"])
        # (b) the independent reference model (contract section 2) says it meets too
        failed = [(c.name, c.value, c.limit) for c in ref_checks if not c.ok]
        assert ref_ok, (label, failed)
        assert_predicted_agrees(design["predicted"], ref, label)
    else:
        # refused: exit 1, the closest design marked, each conflict named with advice
        assert cli.returncode == 1, (label, err)
        assert report["meets_spec"] is False and design["meets_spec"] is False, label
        assert result.conflicts, label
        for c in result.conflicts:
            assert c.name and c.best and c.advice, (label, c)
    return result.meets_spec


def test_random_feasible_specs_are_met_and_verified_independently(
    tmp_path_factory: pytest.TempPathFactory,
) -> None:
    """Hypothesis over feasible specs; at least MET_SHARE of them must be met."""
    folder = tmp_path_factory.mktemp("random_specs")
    outcomes: list[tuple[bool, str]] = []

    @settings(max_examples=12, derandomize=True, deadline=None, database=None,
              suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
    @given(feasible_specs())
    def run(data: dict[str, Any]) -> None:
        met = _check_random_spec(data, folder, len(outcomes))
        outcomes.append((met, json.dumps(data, ensure_ascii=False)))

    run()
    refused = [label for met, label in outcomes if not met]
    assert len(outcomes) >= 10
    assert len(outcomes) - len(refused) >= MET_SHARE * len(outcomes), refused


# --------------------------------------------------------------------------- hand baseline


def _snap(x: float, table: tuple[float, ...]) -> float:
    """Nearest value of an IEC 60063 series (log distance)."""
    d = math.floor(math.log10(x))
    cands = [m * 10.0**e for e in (d - 1, d, d + 1) for m in table]
    return min(cands, key=lambda v: abs(math.log(v / x)))


def _snap_up(x: float, table: tuple[float, ...]) -> float:
    """Next value of the series at or above x (common practice for coupling capacitors)."""
    d = math.floor(math.log10(x))
    return min(m * 10.0**e for e in (d, d + 1) for m in table if m * 10.0**e >= x * (1 - 1e-9))


def _par(a: float, b: float) -> float:
    return a * b / (a + b)


def hand_design(spec: Spec) -> dict[str, float]:
    """The textbook hand procedure for a divider-biased CE with a split emitter resistor.

    Common practice and Horowitz & Hill (from memory): VE ~ VCC/10; a stiff divider
    RTH = (hFE_min + 1) * RE / 10. Sedra & Smith (from memory): Q point in the middle of
    the AC load line, IC = (VCC - VE - VCEsat) / (RC + Rac), here with RC = RL (common
    practice starting point); degenerated gain |A| = Kin * Rac / (re + RE1), re = VT/IC;
    capacitors from 1/(2 pi R C) on their short-circuit resistances, the bypass taking
    0.8 of f_low and each coupling capacitor 0.1 (the poles add). Resistors snapped to
    E24, capacitors rounded up to E6.
    """
    dev = spec.transistor
    vcc, rl, rs = spec.supply.voltage, spec.load.resistance, spec.source.resistance
    vt = K_BOLTZMANN * 298.15 / Q_ELECTRON
    beta = dev.hfe_nominal
    ve = vcc / 10.0
    rc = rl
    rac = _par(rc, rl)
    ic = (vcc - ve - dev.vce_sat) / (rc + rac)
    re = ve * beta / ((beta + 1) * ic)
    rth = (dev.hfe_min + 1) * re / 10.0
    vbe = dev.vbe + vt * math.log(ic / dev.vbe_current)  # Ebers-Moll, from memory
    vth = ve + vbe + ic / beta * rth
    r_top, r_bottom = rth * vcc / vth, rth * vcc / (vcc - vth)
    if dev.polarity == "pnp":  # mirror: the base sits VTH below the supply
        r_top, r_bottom = r_bottom, r_top
    r_e = vt / ic + dev.r_bb / (beta + 1)
    re1 = 0.0
    for _ in range(5):
        rin = _par(rth, (beta + 1) * (r_e + re1))
        re1 = min(max(rin / (rin + rs) * rac / spec.require.gain - r_e, 0.0), re)
    v = {"R1": _snap(r_top, E24), "R2": _snap(r_bottom, E24), "R3": _snap(rc, E24),
         "R4": _snap(re1, E24) if re1 > 1.0 else 0.1, "R5": _snap(re - re1, E24)}
    rths = _par(v["R1"], v["R2"])
    rpi = beta * vt / ic
    rin = _par(rths, dev.r_bb + rpi + (beta + 1) * v["R4"])
    f_low = spec.require.f_low
    r_c3 = _par(v["R5"], v["R4"] + (rpi + dev.r_bb + (_par(rths, rs) if rs else 0.0))
                / (beta + 1))
    v["C3"] = _snap_up(1 / (2 * math.pi * 0.8 * f_low * r_c3), E6)
    v["C1"] = _snap_up(1 / (2 * math.pi * 0.1 * f_low * (rs + rin)), E6)
    v["C2"] = _snap_up(1 / (2 * math.pi * 0.1 * f_low * (v["R3"] + rl)), E6)
    return v


# An IF strip whose required band spans only a factor of five (our own scenario): the
# hand procedure's common emitter meets it, so the tool's common-emitter family must too.
SONAR_IF_STRIP = """
title = "Sonar receiver IF strip, 1-5 MHz"
[supply]
voltage = "9 V"
[source]
resistance = "50 Ω"
[load]
resistance = "1 kΩ"
capacitance = "2 pF"
[require]
gain = "14 dB"
f_low = "1 MHz"
f_high = "5 MHz"
swing = "0.5 Vpp"
ambient = ["10 °C", "40 °C"]
[transistor]
preset = "rf-npn"
"""


@cache
def _spec(name: str) -> Spec:
    if name == "sonar-if-strip":
        return spec_from_mapping(tomllib.loads(SONAR_IF_STRIP), file=name)
    return load_spec(SPECS / f"{name}.toml")


@cache
def _ours(name: str, prefer: str = "margin", circuit: str | None = None) -> SynthesisResult:
    return synthesize(_spec(name), prefer=prefer, circuit=circuit)


def _margin_without_f_low(verdict: Verdict) -> float:
    """Smallest normalized margin over the resistive-design checks (f_low: see below)."""
    return min(c.margin for c in verdict.checks if c.name != "f_low")


# strain-gauge-line-stage is left out: its 0.5 Hz corner is out of reach within the part
# limits (470 µF, no leaky electrolytic at a bias node), so neither design meets and the
# search trades its noise margin for f_low, which this comparison leaves aside.
@pytest.mark.parametrize("name", ["hydrophone-front-end", "tape-head-preamp",
                                  "if-gain-block", "sonar-if-strip"])
def test_ours_is_at_least_as_good_as_the_textbook_hand_design(name: str) -> None:
    """Where the hand design meets the spec ours must; its smallest margin must not be worse.

    f_low is compared separately: the hand procedure rounds every capacitor up, while the
    tool picks the least total capacitance that holds f_low with every capacitor at minus
    its tolerance, so ours must hold f_low in that worst case (checked by the independent
    model). The other margins: ours >= hand - TIE (the tool's documented tie band, in
    which it prefers the lower supply current), both capped at MARGIN_CAP.
    """
    spec = _spec(name)
    hand = ce.build(spec, hand_design(spec))
    hand_verdict = judge(analyze(hand, spec), spec)
    ours = _ours(name)
    if hand_verdict.meets_spec:
        assert ours.meets_spec, (name, [(c.name, c.value) for c in ours.verdict.failed])
        # the hand design is a common emitter: the tool's own common-emitter family has no
        # excuse either (it is the first family tried; re-run only when it was passed over)
        if ours.design.topology.split("-")[0] != ce.NAME:
            ce_only = _ours(name, circuit=ce.NAME)
            assert ce_only.meets_spec, (name, [(c.name, c.value)
                                               for c in ce_only.verdict.failed])
    # margins beyond MARGIN_CAP buy nothing in the documented objective (the family
    # choice then weighs part sizes and count), so both are compared capped there
    hand_margin = min(_margin_without_f_low(hand_verdict), MARGIN_CAP)
    our_margin = min(_margin_without_f_low(ours.verdict), MARGIN_CAP)
    assert our_margin >= hand_margin - TIE, (name, our_margin, hand_margin)
    if ours.meets_spec:
        # every capacitor at -tolerance: still f_low <= the limit (reference model)
        tol = spec.parts.capacitor_tolerance
        low = ours.design.with_values({p.ref: p.value * (1 - tol) for p in ours.design.parts
                                       if p.kind == "capacitor"})
        cir = rm.circuit_from_design(json.loads(low.to_json()))
        op = rm.solve_dc(cir, rm.nominal_conditions(cir))
        f_low, _ = rm.band_edges(cir, op, spec.require.midband)
        assert f_low <= spec.require.f_low, (name, f_low)


# --------------------------------------------------------------------------- infeasible

_BASE: dict[str, Any] = {
    "title": "Line stage",
    "supply": {"voltage": "12 V"},
    "source": {"resistance": "600 Ω"},
    "load": {"resistance": "10 kΩ"},
    "require": {"gain": "20 dB", "f_low": "20 Hz", "f_high": "50 kHz", "swing": "2 Vpp"},
    "transistor": {"preset": "generic-npn"},
}

# name -> (overrides by section, requirement names any one of which must be in the
# conflicts, circuit family forced or None for the tool's own choice)
INFEASIBLE: dict[str, tuple[dict[str, dict[str, str]], set[str], str | None]] = {
    # a class-A output cannot swing beyond the rails: 14 Vpp > 12 V supply (physics)
    "swing_beyond_supply": ({"require": {"swing": "14 Vpp"}}, {"swing"}, None),
    # gain x bandwidth of one transistor stays below fT (Gray & Meyer / Sedra & Smith, from
    # memory): 31.6 V/V x 100 MHz = 3.2 GHz >> fT = 250 MHz
    "gain_bandwidth_beyond_ft": ({"require": {"gain": "30 dB", "f_low": "1 MHz",
                                              "f_high": "100 MHz"},
                                  "source": {"resistance": "50 Ω"},
                                  "load": {"resistance": "1 kΩ"}}, {"f_high", "gain"}, None),
    # a single common emitter inverts (Sedra & Smith, from memory)
    "non_inverting_ce": ({"require": {"inverting": "no"}}, {"inverting"}, "ce"),
    # class A: the quiescent current must exceed the peak load current, 2 V / 1 kohm = 2 mA
    # (Horowitz & Hill, from memory), but at most 1 mA may be drawn
    "current_too_small_for_swing": ({"require": {"swing": "4 Vpp", "supply_current": "1 mA"},
                                     "load": {"resistance": "1 kΩ"}},
                                    {"swing", "supply_current"}, None),
}


def _variant(overrides: Mapping[str, Mapping[str, str]]) -> dict[str, Any]:
    data = json.loads(json.dumps(_BASE))
    for section, values in overrides.items():
        data[section].update(values)
    return data


@pytest.mark.parametrize("case", sorted(INFEASIBLE))
def test_impossible_specs_are_refused_naming_the_requirement(case: str) -> None:
    overrides, expected, circuit = INFEASIBLE[case]
    spec = spec_from_mapping(_variant(overrides), file=case)
    result = synthesize(spec, circuit=circuit)
    assert not result.meets_spec
    assert result.design.extra["meets_spec"] is False  # written as such to design.json
    names = {c.name for c in result.conflicts}
    assert names & expected, (case, names)
    for c in result.conflicts:
        assert c.advice and c.best and c.limit, c
    # the closest design really fails that requirement by the independent model too
    ref = reference_analysis(spec, json.loads(result.design.to_json()))
    ok, checks = rm.judge(ref, reference_require(spec))
    assert not ok
    assert {c.name for c in checks if not c.ok} & expected, (case, checks)


def test_non_inverting_request_is_met_only_by_a_non_inverting_stage() -> None:
    """Left to choose its circuit, a design claimed to meet inverting = "no" must be
    non-inverting by the independent model (phase of v_load / v_emf within 90 degrees)."""
    spec = spec_from_mapping(_variant(INFEASIBLE["non_inverting_ce"][0]), file="non-inv")
    result = synthesize(spec)
    assert result.meets_spec, [c.name for c in result.conflicts]
    ref = reference_analysis(spec, json.loads(result.design.to_json()))
    ok, checks = rm.judge(ref, reference_require(spec))
    assert ok and not ref.inverting, [(c.name, c.value) for c in checks if not c.ok]


# --------------------------------------------------------------------------- objective


def test_prefer_current_draws_no_more_supply_current() -> None:
    """The objective: prefer="current" puts supply current first (synth docstring)."""
    default = _ours("hydrophone-front-end")
    frugal = _ours("hydrophone-front-end", "current")
    assert default.meets_spec and frugal.meets_spec
    assert frugal.analysis.supply_current <= default.analysis.supply_current
    assert frugal.design.extra["synthesis"]["prefer"] == "current"
