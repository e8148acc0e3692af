"""Schematic of stages with junction FETs: a JFET is recognized like a bipolar transistor (drain
~ collector, gate ~ base, source ~ emitter) and drawn with schemdraw's JFET symbol, N or P
channel, in single-JFET stages and in a JFET stage driving a bipolar one.

The drawings are checked the way tests/test_schematic.py checks the bipolar ones: the wiring a
reader sees joins exactly the nodes the netlist joins (`unfaithful`, our own reading of the
drawing's geometry), and the lead ends the layout assumes are where schemdraw (an outside
library) puts the symbol's terminals.
"""

from __future__ import annotations

import math

import pytest
import schemdraw
import schemdraw.elements as elm
from test_schematic import refuse, texts, unfaithful

from stagesynth.contracts.device import PRESETS
from stagesynth.contracts.jfet import JFET_PRESETS
from stagesynth.contracts.netlist import Design, Part
from stagesynth.report import schematic
from stagesynth.report.schematic import draw_schematic
from stagesynth.report.schematic.sheet import TRANSISTOR_SCALE, Transistor


# ---------------------------------------------------------------------------
# Hand-written JFET stages (invented values, typical of high-impedance sensor front ends)
# ---------------------------------------------------------------------------
def r(ref: str, a: str, b: str, value: float) -> Part:
    return Part(ref=ref, kind="resistor", nodes=(a, b), value=value)


def c(ref: str, a: str, b: str, value: float) -> Part:
    return Part(ref=ref, kind="capacitor", nodes=(a, b), value=value)


def jfet(ref: str, d: str, g: str, s: str, device: str = "JN") -> Part:
    return Part(ref=ref, kind="jfet", nodes=(d, g, s), device=device)


def npn(ref: str, col: str, base: str, emit: str) -> Part:
    return Part(ref=ref, kind="bjt", nodes=(col, base, emit), device="N")


DEVICES = {"JN": JFET_PRESETS["generic-njfet"], "JP": JFET_PRESETS["generic-pjfet"],
           "N": PRESETS["generic-npn"]}


def design(parts, **kw) -> Design:
    args = dict(parts=tuple(parts), devices=DEVICES, supply_voltage=15.0,
                load_resistance=100e3, source_resistance=1e3, title="jfet stage")
    args.update(kw)
    return Design(**args)


def common_source() -> Design:
    """Common source, gate returned by 10 MΩ, source resistor split: R3 unbypassed, R4
    bypassed by C2."""
    return design([c("C1", "in", "g1", 100e-9), r("R1", "g1", "0", 10e6),
                   jfet("J1", "d1", "g1", "s1"), r("R2", "vcc", "d1", 4.7e3),
                   r("R3", "s1", "s2", 220.0), r("R4", "s2", "0", 1e3),
                   c("C2", "s2", "0", 100e-6), c("C3", "d1", "out", 1e-6)])


def source_follower() -> Design:
    return design([c("C1", "in", "g1", 100e-9), r("R1", "g1", "0", 10e6),
                   jfet("J1", "vcc", "g1", "s1"), r("R2", "s1", "0", 2.2e3),
                   c("C2", "s1", "out", 10e-6)])


def bootstrapped_follower() -> Design:
    """Source follower whose gate resistor returns to a tap of the source resistor."""
    return design([c("C1", "in", "g1", 100e-9), r("R1", "g1", "x1", 10e6),
                   jfet("J1", "vcc", "g1", "s1"), r("R2", "s1", "x1", 1e3),
                   r("R3", "x1", "0", 10e3), c("C2", "s1", "out", 10e-6)])


def common_gate() -> Design:
    """Signal into the source through C1; the gate held at AC ground by C3."""
    return design([c("C1", "in", "s1", 10e-6), r("R1", "s1", "0", 1e3),
                   jfet("J1", "d1", "g1", "s1"), r("R3", "g1", "0", 1e6),
                   c("C3", "g1", "0", 1e-6), r("R2", "vcc", "d1", 4.7e3),
                   c("C2", "d1", "out", 1e-6)])


def cs_into_follower() -> Design:
    """JFET common source, its drain direct to the base of an NPN emitter follower."""
    return design([c("C1", "in", "g1", 100e-9), r("R1", "g1", "0", 10e6),
                   jfet("J1", "d1", "g1", "s1"), r("R2", "vcc", "d1", 6.8e3),
                   r("R3", "s1", "0", 680.0), c("C2", "s1", "0", 220e-6),
                   npn("Q1", "vcc", "d1", "e2"), r("R4", "e2", "0", 3.3e3),
                   c("C3", "e2", "out", 10e-6)], load_resistance=10e3)


def cascode() -> Design:
    """JFET common source under an NPN common base (its emitter on the drain, its base held
    by a divider and decoupled): the JFET-bipolar cascode."""
    return design([c("C1", "in", "g1", 4.7e-9), r("R1", "g1", "0", 36e6),
                   jfet("J1", "d1", "g1", "s1"), r("R3", "s1", "x1", 470.0),
                   r("R4", "x1", "0", 1.1e3), c("C3", "x1", "0", 47e-6),
                   npn("Q1", "c2", "b2", "d1"), r("R5", "vcc", "b2", 51e3),
                   r("R6", "b2", "0", 20e3), c("C4", "b2", "0", 10e-6),
                   r("R2", "vcc", "c2", 8.2e3), c("C2", "c2", "out", 3.3e-6)],
                  load_resistance=47e3)


def p_common_source() -> Design:
    """P channel: source resistor and its bypass to the supply, drain resistor to ground."""
    return design([c("C1", "in", "g1", 100e-9), r("R1", "g1", "vcc", 10e6),
                   jfet("J1", "d1", "g1", "s1", "JP"), r("R2", "s1", "vcc", 1e3),
                   c("C2", "s1", "vcc", 100e-6), r("R3", "d1", "0", 4.7e3),
                   c("C3", "d1", "out", 1e-6)])


ALL = {"common_source": common_source, "source_follower": source_follower,
       "bootstrapped_follower": bootstrapped_follower, "cascode": cascode,
       "common_gate": common_gate,
       "cs_into_follower": cs_into_follower,
       "p_common_source": p_common_source}


# ---------------------------------------------------------------------------
# Tests
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("name", sorted(ALL))
def test_jfet_stage_drawn_as_a_wired_chain(name):
    """The hand-style layout takes JFET stages as it takes bipolar ones: faithful, every
    connection a wire (no net names standing in for wires), input left of the transistors,
    output right of them; each JFET labelled with its channel."""
    d = ALL[name]()
    sheet = schematic.chain.ChainBuilder(d, {}, True).build()  # raises if not a known chain
    assert unfaithful(sheet, d) == []
    chosen = schematic.choose_layout(d, {})
    assert unfaithful(chosen, d) == [] and chosen.names == []
    (in_at,) = [p for p, n in chosen.terminals if n == "in"]
    (out_at,) = [p for p, n in chosen.terminals if n == "out"]
    for t in chosen.transistors:
        assert in_at[0] < t.base[0] < out_at[0]
        assert t.fet == (d.part(t.ref).kind == "jfet")
    lines = texts(draw_schematic(d))
    for p in d.parts:
        assert lines.count(p.ref) == 1, p.ref
    channel = "P-JFET" if name == "p_common_source" else "N-JFET"
    assert lines.count(channel) == 1
    if name in ("cs_into_follower", "cascode"):
        assert lines.count("NPN") == 1


@pytest.mark.parametrize("name", sorted(ALL))
def test_fallback_layouts_draw_jfets_faithfully(monkeypatch, name):
    """Should the chain layout give up, the layout chosen next (net, or plain where the net
    layout would split a node) and the plain layout itself still draw each JFET with its
    drain, gate and source on the right nodes."""
    d = ALL[name]()
    monkeypatch.setattr(schematic.chain.ChainBuilder, "build", refuse)
    for sheet in (schematic.choose_layout(d, {}), schematic.fallback.generic_sheet(d, {})):
        assert unfaithful(sheet, d) == [], name
        assert sorted(t.ref for t in sheet.transistors if t.fet) == ["J1"]
    lines = texts(draw_schematic(d))
    for p in d.parts:
        assert lines.count(p.ref) == 1, p.ref


def test_drain_resistor_on_the_supply_side_for_n_and_ground_side_for_p():
    """N channel: drain toward the supply, source toward ground (the usual orientation, Sedra
    & Smith's FET chapter, from memory); the P channel is the mirror image."""
    for make, rd, up in ((common_source, "R2", True), (p_common_source, "R3", False)):
        d = make()
        sheet = schematic.choose_layout(d, {})
        (j1,) = sheet.transistors
        drain, _, source = j1.pins()
        assert (drain[1] > source[1]) == up
        (part,) = [t for t in sheet.twos if t.ref == rd]
        assert (max(part.a[1], part.b[1]) > j1.base[1]) == up  # a rail end is +inf or -inf


@pytest.mark.parametrize(("fet", "p_type"), [(True, False), (True, True), (False, False),
                                              (False, True)])
def test_lead_ends_are_where_schemdraw_puts_the_terminals(fet, p_type):
    """The layout wires every lead to `Transistor.pins()`; schemdraw's own symbols, placed as
    the drawing places them, must have their terminals there (otherwise the drawing would
    need extra joins)."""
    base = (3.7, -1.2)
    mark = Transistor("X1", p_type, base, "", fet=fet)
    drawing = schemdraw.Drawing(canvas="svg", show=False)
    if fet:
        el = (elm.JFetP if p_type else elm.JFetN)(circle=True)
        el = el.scale(TRANSISTOR_SCALE).theta(0).reverse()
        sym = drawing.add((el.flip() if p_type else el).anchor("gate").at(base))
        got = (sym.drain, sym.gate, sym.source)
    else:
        cls = elm.BjtPnp if p_type else elm.BjtNpn
        sym = drawing.add(cls(circle=True).scale(TRANSISTOR_SCALE).theta(0)
                          .anchor("base").at(base))
        got = (sym.collector, sym.base, sym.emitter)
    for want, have in zip(mark.pins(), got, strict=True):
        assert math.dist(want, (float(have[0]), float(have[1]))) < 1e-3
    # the gate faces left, toward the signal, like the base
    assert mark.pins()[0][0] > base[0] and mark.pins()[2][0] > base[0]


def test_report_draws_the_jfet_stage_driving_the_follower():
    """Through the report's own path (the design analysed, electrolytics polarized from its DC
    point): the schematic shows the JFET and the NPN, each labelled with its kind, every part
    once, and the layout it draws is faithful to the netlist."""
    from stagesynth.engine.analysis import analyze
    from stagesynth.report.document import schematic_svg

    d = cs_into_follower()
    lines = texts(schematic_svg(d, analyze(d)))
    assert lines.count("N-JFET") == 1 and lines.count("NPN") == 1
    for p in d.parts:
        assert lines.count(p.ref) == 1, p.ref
    assert unfaithful(schematic.choose_layout(d, {}), d) == []
