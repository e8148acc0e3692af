"""Schematic drawing: valid SVG (checked with the standard library's XML parser), every part
labelled with reference and value, supply, ground, input and output marked, for the known
stage families and for arbitrary netlists (generic layout)."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from stagesynth.device import PRESETS
from stagesynth.netlist import Design, Part
from stagesynth.report.schematic import draw_schematic, save_schematic

SVG_NS = "{http://www.w3.org/2000/svg}"


# ---------------------------------------------------------------------------
# Test circuits (invented values, typical of small-signal stages)
# ---------------------------------------------------------------------------
def r(ref: str, a: str, b: str, value: float) -> Part:
    return Part(ref=ref, kind="resistor", nodes=(a, b), value=value)


def c(ref: str, a: str, b: str, value: float) -> Part:
    return Part(ref=ref, kind="capacitor", nodes=(a, b), value=value)


def q(ref: str, col: str, base: str, emit: str, device: str = "N") -> Part:
    return Part(ref=ref, kind="bjt", nodes=(col, base, emit), device=device)


DEVICES = {"N": PRESETS["generic-npn"], "P": PRESETS["generic-pnp"]}


def design(parts, **kw) -> Design:
    args = dict(parts=tuple(parts), devices=DEVICES, supply_voltage=12.0,
                load_resistance=10e3, source_resistance=600.0, load_capacitance=100e-12,
                title="test stage")
    args.update(kw)
    return Design(**args)


def npn_ce(**kw) -> Design:
    """Divider-biased common emitter, split emitter resistor, R5 bypassed by C3."""
    return design([
        r("R1", "vcc", "b1", 68e3), r("R2", "b1", "0", 15e3), r("R3", "vcc", "c1", 4.7e3),
        r("R4", "e1", "x1", 220.0), r("R5", "x1", "0", 1e3),
        c("C1", "in", "b1", 1e-6), c("C2", "c1", "out", 1e-6), c("C3", "x1", "0", 100e-6),
        q("Q1", "c1", "b1", "e1"),
    ], topology="ce-npn", **kw)


def pnp_ce(bypass_to: str = "vcc", **kw) -> Design:
    """Mirror image: emitter resistors up to the supply, collector resistor down to ground."""
    return design([
        r("R1", "vcc", "b1", 15e3), r("R2", "b1", "0", 68e3), r("R3", "c1", "0", 4.7e3),
        r("R4", "e1", "x1", 220.0), r("R5", "x1", "vcc", 1e3),
        c("C1", "in", "b1", 1e-6), c("C2", "c1", "out", 1e-6), c("C3", "x1", bypass_to, 100e-6),
        q("Q1", "c1", "b1", "e1", "P"),
    ], topology="ce-pnp", **kw)


def follower(**kw) -> Design:
    return design([
        r("R1", "vcc", "b1", 47e3), r("R2", "b1", "0", 56e3), r("R3", "e1", "0", 2.2e3),
        c("C1", "in", "b1", 2.2e-6), c("C2", "e1", "out", 22e-6),
        q("Q1", "vcc", "b1", "e1"),
    ], topology="cc-npn", **kw)


def ce_follower(**kw) -> Design:
    """Two stages: common emitter, then an emitter follower direct-coupled to its collector."""
    return design([
        r("R1", "vcc", "b1", 82e3), r("R2", "b1", "0", 18e3), r("R3", "vcc", "c1", 10e3),
        r("R4", "e1", "x1", 330.0), r("R5", "x1", "0", 1.5e3), c("C3", "x1", "0", 220e-6),
        c("C1", "in", "b1", 1e-6), q("Q1", "c1", "b1", "e1"),
        q("Q2", "vcc", "c1", "e2"), r("R6", "e2", "0", 3.3e3), c("C2", "e2", "out", 10e-6),
    ], topology="ce-cc", **kw)


def common_base(**kw) -> Design:
    """Base bypassed to ground, signal into the emitter: not a chain, so the generic layout."""
    return design([
        r("R1", "vcc", "b1", 68e3), r("R2", "b1", "0", 15e3), c("C3", "b1", "0", 10e-6),
        r("R3", "vcc", "c1", 4.7e3), r("R4", "e1", "0", 1e3),
        c("C1", "in", "e1", 10e-6), c("C2", "c1", "out", 1e-6),
        q("Q1", "c1", "b1", "e1"),
    ], topology="cb-npn", **kw)


def feedback_pair(**kw) -> Design:
    """Two transistors with overall feedback from the second emitter to the first emitter."""
    return design([
        r("R1", "vcc", "b1", 100e3), r("R2", "b1", "0", 22e3), r("R3", "vcc", "c1", 12e3),
        r("R4", "e1", "0", 470.0), r("RF", "e2", "e1", 4.7e3), c("C1", "in", "b1", 1e-6),
        q("Q1", "c1", "b1", "e1"), q("Q2", "c2", "c1", "e2"),
        r("R5", "vcc", "c2", 3.3e3), r("R6", "e2", "0", 1e3), c("C2", "c2", "out", 4.7e-6),
    ], topology="pair", **kw)


def collector_feedback(**kw) -> Design:
    """Collector-to-base feedback bias (R1 from c1 to b1), no divider top resistor."""
    return design([
        r("R1", "c1", "b1", 100e3), r("R2", "b1", "0", 22e3), r("R3", "vcc", "c1", 4.7e3),
        r("R4", "e1", "0", 470.0), c("C1", "in", "b1", 1e-6), c("C2", "c1", "out", 1e-6),
        q("Q1", "c1", "b1", "e1"),
    ], topology="ce-fb", **kw)



ALL = {
    "npn_ce": npn_ce, "pnp_ce": pnp_ce, "follower": follower, "ce_follower": ce_follower,
    "common_base": common_base, "feedback_pair": feedback_pair,
    "collector_feedback": collector_feedback,
}


# ---------------------------------------------------------------------------
# Helpers
# ---------------------------------------------------------------------------
def texts(svg: str) -> list[str]:
    """Every text line in the SVG, as a reader sees it (tspans are lines)."""
    root = ET.fromstring(svg)  # raises on malformed XML
    out = []
    for t in root.iter(f"{SVG_NS}text"):
        spans = list(t.iter(f"{SVG_NS}tspan"))
        out.extend("".join(s.itertext()).strip() for s in spans) if spans else out.append(
            "".join(t.itertext()).strip())
    return out


def text_positions(svg: str) -> dict[str, list[tuple[float, float]]]:
    """Text line -> (x, y) positions in SVG coordinates (y grows downwards)."""
    root = ET.fromstring(svg)
    pos: dict[str, list[tuple[float, float]]] = {}
    for t in root.iter(f"{SVG_NS}text"):
        y = float(t.get("y"))
        for i, s in enumerate(t.iter(f"{SVG_NS}tspan")):
            pos.setdefault("".join(s.itertext()).strip(), []).append(
                (float(s.get("x", t.get("x"))), y + i))
    return pos


def expected_labels(d: Design) -> dict[str, str]:
    """Reference -> value text in engineering notation (SI prefixes, SI Brochure 9th ed.,
    written out by hand here, not by the formatter under test)."""
    known = {
        68e3: "68 kΩ", 15e3: "15 kΩ", 4.7e3: "4.7 kΩ", 220.0: "220 Ω", 1e3: "1 kΩ",
        1e-6: "1 µF", 100e-6: "100 µF", 47e3: "47 kΩ", 56e3: "56 kΩ", 2.2e3: "2.2 kΩ",
        2.2e-6: "2.2 µF", 22e-6: "22 µF", 82e3: "82 kΩ", 18e3: "18 kΩ", 10e3: "10 kΩ",
        330.0: "330 Ω", 1.5e3: "1.5 kΩ", 220e-6: "220 µF", 3.3e3: "3.3 kΩ", 10e-6: "10 µF",
        100e3: "100 kΩ", 22e3: "22 kΩ", 12e3: "12 kΩ", 470.0: "470 Ω", 4.7e-6: "4.7 µF",
    }
    out = {}
    for p in d.parts:
        if p.is_bjt:
            out[p.ref] = d.devices[p.device].polarity.upper()
        else:
            out[p.ref] = known[p.value]
    return out


# ---------------------------------------------------------------------------
# Tests
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("name", sorted(ALL))
def test_every_part_labelled_with_reference_and_value(name):
    d = ALL[name]()
    svg = draw_schematic(d)
    lines = texts(svg)
    assert len(svg) > 5000  # a real drawing, not an empty canvas
    for ref, value in expected_labels(d).items():
        assert ref in lines, (name, ref)
        assert value in lines, (name, ref, value)
        # reference and value are the two lines of one label: value follows its reference
        i = lines.index(ref)
        assert value in lines[i + 1:i + 2], (name, ref, lines[i:i + 2])
    # supply voltage, terminals, source and load (values written by hand, SI notation)
    for text in ("+12 V", "in", "out", "source", "load", "Rs", "600 Ω", "RL", "10 kΩ",
                 "CL", "100 pF"):
        assert text in lines, (name, text)


@pytest.mark.parametrize("name", sorted(ALL))
def test_ground_symbols_and_supply_present(name):
    svg = draw_schematic(ALL[name]())
    root = ET.fromstring(svg)
    # the ground symbol is three horizontal bars of shrinking width (IEC 60617-2 / IEEE 315
    # "ground"); schemdraw draws it as one path with three "M ... L ..." strokes
    paths = [p.get("d", "") for p in root.iter(f"{SVG_NS}path")]
    grounds = [p for p in paths if p.count("M") == 3]
    assert len(grounds) >= 2, name
    assert svg.startswith("<svg")
    assert root.find(f"{SVG_NS}title") is not None


@pytest.mark.parametrize(
    "name", ["npn_ce", "pnp_ce", "follower", "ce_follower", "collector_feedback"])
def test_chain_layouts_are_conventional(name):
    """Supply rail above everything, signal flowing left to right (common practice)."""
    svg = draw_schematic(ALL[name]())
    pos = text_positions(svg)
    ((_, rail_y),) = pos["+12 V"]  # one rail label: the structured layout has one rail
    ((in_x, _),) = pos["in"]
    ((out_x, _),) = pos["out"]
    assert in_x < out_x
    refs = [k for k in pos if re.fullmatch(r"[RCQ]\d+", k)]
    for ref in refs:
        for _, y in pos[ref]:
            assert rail_y < y, (name, ref)  # SVG y grows downwards
    # every transistor label lies between input and output
    for ref in refs:
        if ref.startswith("Q"):
            assert all(in_x < x < out_x for x, _ in pos[ref])


@pytest.mark.parametrize("name", ["npn_ce", "pnp_ce", "ce_follower"])
def test_node_names_shown(name):
    d = ALL[name]()
    lines = texts(draw_schematic(d))
    for node in ("b1", "c1", "e1"):
        assert node in lines
    assert "b1" not in texts(draw_schematic(d, node_names=False))


def test_pnp_bypass_to_ground_also_drawn():
    d = pnp_ce(bypass_to="0")
    lines = texts(draw_schematic(d))
    assert "C3" in lines and "100 µF" in lines


def test_zero_source_resistance_and_no_load_capacitance():
    d = npn_ce(source_resistance=0.0, load_capacitance=0.0)
    lines = texts(draw_schematic(d))
    assert "Rs" not in lines and "CL" not in lines
    assert "source" in lines and "RL" in lines and "in" in lines and "out" in lines


def test_value_override_and_polarized_capacitor():
    d = npn_ce(extra={"capacitors": {"C3": {"polarized": True, "positive": "x1"},
                                     "C1": {"polarized": True, "positive": "b1"}}})
    svg = draw_schematic(d, values={"R1": "68 kΩ 1 %"})
    lines = texts(svg)
    assert "68 kΩ 1 %" in lines
    assert lines.count("+") == 2  # schemdraw marks a polarized capacitor's positive plate


def test_polarity_given_by_argument():
    lines = texts(draw_schematic(pnp_ce(), positive={"C3": "vcc", "C2": "out"}))
    assert lines.count("+") == 2


def test_save_schematic(tmp_path):
    path = save_schematic(npn_ce(), tmp_path / "s.svg")
    ET.parse(path)
    assert path.stat().st_size > 5000


def test_no_matplotlib_needed(monkeypatch):
    """The SVG backend alone draws it: a failing matplotlib import must not matter."""
    import builtins
    import sys

    real_import = builtins.__import__

    def guarded(name, *args, **kwargs):
        if name.startswith("matplotlib"):
            raise ImportError("matplotlib blocked for this test")
        return real_import(name, *args, **kwargs)

    for mod in [m for m in sys.modules if m.startswith("matplotlib")]:
        monkeypatch.delitem(sys.modules, mod)
    monkeypatch.setattr(builtins, "__import__", guarded)
    svg = draw_schematic(follower())
    assert "R3" in texts(svg)


# random netlists: whatever the topology, the drawing is valid and names every part and node
NODES = ["vcc", "0", "in", "out", "n1", "n2", "n3", "n4"]


@st.composite
def random_design(draw):
    nq = draw(st.integers(0, 3))
    npass = draw(st.integers(1, 8))
    parts = []
    for i in range(nq):
        nodes = draw(st.lists(st.sampled_from(NODES), min_size=3, max_size=3))
        parts.append(q(f"Q{i + 1}", *nodes, device=draw(st.sampled_from("NP"))))
    for i in range(npass):
        a, b = draw(st.lists(st.sampled_from(NODES), min_size=2, max_size=2, unique=True))
        value = draw(st.floats(1e-12, 1e7, allow_nan=False))
        kind = draw(st.sampled_from(["resistor", "capacitor"]))
        parts.append(Part(ref=f"{'R' if kind == 'resistor' else 'C'}{i + 1}", kind=kind,
                          nodes=(a, b), value=value))
    return design(parts, source_resistance=draw(st.sampled_from([0.0, 50.0])),
                  load_capacitance=draw(st.sampled_from([0.0, 1e-9])))


@settings(max_examples=60, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow])
@given(random_design())
def test_any_netlist_is_drawn(d):
    svg = draw_schematic(d)
    lines = texts(svg)
    for p in d.parts:
        assert lines.count(p.ref) == 1, p.ref  # each part drawn exactly once
    assert "in" in lines and "out" in lines and "vs" in lines and "RL" in lines
    if any("vcc" in p.nodes for p in d.parts):
        assert "+12 V" in lines


@pytest.mark.parametrize("name", ["common_base", "feedback_pair"])
def test_generic_layout_names_the_nodes_it_does_not_wire(name):
    """Parts between two transistor nodes are drawn apart; both their ends carry the node's
    name, and the same name marks the node where it is wired (net labels, IEEE 315 practice:
    the same name means the same node), so every connection can be traced."""
    d = ALL[name]()
    lines = texts(draw_schematic(d, node_names=False))
    for ref in {"common_base": ("C1", "C2"), "feedback_pair": ("RF", "C1", "C2")}[name]:
        for node in d.part(ref).nodes:
            assert lines.count(node) >= 2, (ref, node)  # at the part's end and at the node



@pytest.mark.parametrize("name", ["npn_ce", "feedback_pair"])
def test_last_resort_layout(monkeypatch, name):
    """Should both wired layouts give up, the plain layout still names every part and node."""
    from stagesynth.report import schematic

    def refuse(self):
        raise schematic._NotAChain("forced for this test")

    monkeypatch.setattr(schematic._ChainBuilder, "build", refuse)
    monkeypatch.setattr(schematic._NetBuilder, "build", refuse)
    d = ALL[name]()
    lines = texts(draw_schematic(d))
    for ref, value in expected_labels(d).items():
        assert ref in lines and value in lines
    for p in d.parts:
        for node in p.nodes:
            if node not in ("vcc", "0"):
                assert node in lines, (p.ref, node)
    assert "+12 V" in lines and "in" in lines and "out" in lines
