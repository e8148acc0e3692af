"""The sheet: what a layout decided to draw, in drawing units, before any drawing library.

Two-terminal symbols, transistors, wires, rail symbols, terminals and node names; the rails
stand as y = UP/DOWN until the sheet is drawn. `Space` keeps the occupied lanes so that a
layout's new wires neither cross nor overlap old ones.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from stagesynth.contracts.netlist import Design
from stagesynth.report.schematic.labels import SMALL

Point = tuple[float, float]
Box = tuple[float, float, float, float]  # x0, y0, x1, y1

UP = math.inf  # a y coordinate meaning "the supply rail", fixed when the sheet is drawn
DOWN = -math.inf  # a y coordinate meaning "the ground level"

L = 3.0  # length of a two-terminal part, in drawing units (schemdraw's default unit)
LANE = 2.5  # pitch of parallel vertical parts: room for a two-line label between them
EPS = 1e-6

GREY = "#606060"  # source and load: outside the designed circuit
NODE_GREY = "#7a7a7a"
NET_BLUE = "#1f4e99"  # node names that stand for a wire
EMF = "(source emf)"  # the node between the source's EMF and Rs: not in the netlist
SIDE = 4.6  # signal row to a row beside it: a part plus a local ground or supply symbol
NEAR = 1.2  # an open end this close to another node's conductor reads as joined to it

TRANSISTOR_SCALE = 1.5  # schemdraw's transistor symbols at 1.5 times their size (to match
# the resistors)


@dataclass(frozen=True)
class Symbol:
    """Geometry of a transistor symbol, N type (collector or drain up), relative to its control
    terminal (base or gate): x of the other two terminals, their heights, the body's extent."""

    dx: float
    top: float  # collector / drain
    bottom: float  # emitter / source
    box: Box  # x0, y0, x1, y1
    span: tuple[float, float]  # heights the rails must clear
    label_x: float  # the label's anchor: its text starts 0.45 right of this, clear of the body

    def mirrored(self) -> Symbol:
        """The P type: drawn upside down (emitter or source up)."""
        x0, y0, x1, y1 = self.box
        return Symbol(self.dx, -self.top, -self.bottom, (x0, -y1, x1, -y0),
                      (-self.span[1], -self.span[0]), self.label_x)


# schemdraw's Bjt at that scale: collector and emitter symmetric about the base row
BJT = Symbol(1.1275, 1.045, -1.045, (-0.05, -0.9, 1.7, 0.9), (-1.1, 1.1), 1.35)
# schemdraw's JFet at that scale, mirrored left-right so that the gate faces left: the gate
# sits nearer the source than the drain, as the symbol draws it. Its circle reaches 0.1 past
# the drain and source lead ends; the box stops short of them so that the leads can leave it.
JFET = Symbol(1.375, 1.375, -0.625, (-0.1, -0.6, 2.15, 1.35), (-0.8, 1.5), 1.8)

# The sheet: what to draw, in drawing units; y = UP/DOWN run to the supply rail/ground
@dataclass(frozen=True)
class Two:
    """A two-terminal symbol between a and b. `polarized`: an electrolytic with + at a."""

    ref: str
    kind: str  # "resistor", "capacitor" or "source"
    a: Point
    b: Point
    text: str
    external: bool = False
    polarized: bool = False
    sides: tuple[str, ...] = ()  # preferred label sides, first that is free wins
    nodes: tuple[str, str] = ("", "")  # netlist nodes at a and at b (checked by find_faults)


@dataclass(frozen=True)
class Transistor:
    """A transistor symbol with its control terminal (base or gate) at `base`."""

    ref: str
    pnp: bool  # P type (PNP or P channel): drawn upside down
    base: Point
    text: str
    nodes: tuple[str, ...] = ("", "", "")  # collector, base, emitter (drain, gate, source)
    fet: bool = False  # a junction FET (drain, gate, source)

    @property
    def symbol(self) -> Symbol:
        sym = JFET if self.fet else BJT
        return sym.mirrored() if self.pnp else sym

    def pins(self) -> tuple[Point, Point, Point]:
        """Where the collector (drain), base (gate) and emitter (source) leads end."""
        sym, (bx, by) = self.symbol, self.base
        return (bx + sym.dx, by + sym.top), (bx, by), (bx + sym.dx, by + sym.bottom)

    def body(self) -> Box:
        """The room the symbol takes."""
        (x0, y0, x1, y1), (bx, by) = self.symbol.box, self.base
        return (bx + x0, by + y0, bx + x1, by + y1)


@dataclass
class Sheet:
    """Everything to draw; built by a layout, turned into SVG by `render`."""

    supply_text: str
    twos: list[Two] = field(default_factory=list)
    transistors: list[Transistor] = field(default_factory=list)
    wires: list[tuple[Point, Point, bool]] = field(default_factory=list)  # a, b, external
    grounds: list[tuple[Point, bool]] = field(default_factory=list)  # symbol hangs below
    flags: list[Point] = field(default_factory=list)  # local supply symbol above the point
    terminals: list[tuple[Point, str]] = field(default_factory=list)  # open circle + name
    notes: list[tuple[Point, str, str, str, float, str]] = field(default_factory=list)
    node_tags: list[tuple[Point, str, bool]] = field(default_factory=list)  # name, must show
    marks: list[Point] = field(default_factory=list)  # lead ends joined to a node by its name
    names: list[tuple[Point, str]] = field(default_factory=list)  # each mark and its node
    frames: list[tuple[Box, str]] = field(default_factory=list)  # dashed box and caption


class Space:
    """Occupied wires, parts and boxes, so that new lanes neither cross nor overlap old ones.

    A segment has a net at each end: equal for a wire, different for a part. Two segments
    may only meet where one ends on the other and both carry the same net there.
    """

    def __init__(self) -> None:
        self.v: list[tuple[float, float, float, str, str]] = []  # x, y0 < y1, nets at y0, y1
        self.h: list[tuple[float, float, float, str, str]] = []  # y, x0 < x1, nets at x0, x1
        self.boxes: list[Box] = []
        self.corridors: dict[str, tuple[float, float]] = {}  # net -> (y, x0): kept free

    @staticmethod
    def _seg(lo_hi_a: float, b: float, net_a: str, net_b: str | None):
        net_b = net_a if net_b is None else net_b
        return (lo_hi_a, b, net_a, net_b) if lo_hi_a <= b else (b, lo_hi_a, net_b, net_a)

    def add_v(self, x: float, ya: float, yb: float, net_a: str, net_b: str | None = None) -> None:
        self.v.append((x, *self._seg(ya, yb, net_a, net_b)))

    def add_h(self, y: float, xa: float, xb: float, net_a: str, net_b: str | None = None) -> None:
        self.h.append((y, *self._seg(xa, xb, net_a, net_b)))

    @staticmethod
    def _net_at(t: float, lo: float, hi: float, n_lo: str, n_hi: str) -> str | None:
        """Net of a segment at parameter t: its end's net, or the wire's net inside; None inside
        a part, where nothing may join."""
        if abs(t - lo) < EPS:
            return n_lo
        if abs(t - hi) < EPS:
            return n_hi
        return n_lo if n_lo == n_hi else None

    def _cross_ok(self, t_new: float, seg_new, t_old: float, seg_old) -> bool:
        lo, hi, n_lo, n_hi = seg_new
        o_lo, o_hi, m_lo, m_hi = seg_old
        at_new_end = abs(t_new - lo) < EPS or abs(t_new - hi) < EPS
        at_old_end = abs(t_old - o_lo) < EPS or abs(t_old - o_hi) < EPS
        if not (at_new_end or at_old_end):
            return False  # a crossing, not a joint
        a = self._net_at(t_new, lo, hi, n_lo, n_hi)
        b = self._net_at(t_old, o_lo, o_hi, m_lo, m_hi)
        return a is not None and a == b

    def v_ok(self, x: float, ya: float, yb: float, net_a: str, net_b: str | None = None) -> bool:
        seg = self._seg(ya, yb, net_a, net_b)
        y0, y1 = seg[0], seg[1]
        for vx, v0, v1, *_ in self.v:
            if abs(vx - x) < EPS and min(y1, v1) - max(y0, v0) > EPS:
                return False
        for hy, h0, h1, m0, m1 in self.h:
            meets = y0 - EPS <= hy <= y1 + EPS and h0 - EPS <= x <= h1 + EPS
            if meets and not self._cross_ok(hy, seg, x, (h0, h1, m0, m1)):
                return False
        for cn, (cy, cx) in self.corridors.items():
            if cn not in (seg[2], seg[3]) and y0 - EPS <= cy <= y1 + EPS and x > cx - EPS:
                return False
        return all(not overlaps((x - 0.3, y0, x + 0.3, y1), b) for b in self.boxes)

    def h_ok(self, y: float, xa: float, xb: float, net_a: str, net_b: str | None = None) -> bool:
        seg = self._seg(xa, xb, net_a, net_b)
        x0, x1 = seg[0], seg[1]
        if x1 - x0 < EPS:
            return True
        for hy, h0, h1, *_ in self.h:
            if abs(hy - y) < EPS and min(x1, h1) - max(x0, h0) > EPS:
                return False
        for vx, v0, v1, m0, m1 in self.v:
            meets = x0 - EPS <= vx <= x1 + EPS and v0 - EPS <= y <= v1 + EPS
            if meets and not self._cross_ok(vx, seg, y, (v0, v1, m0, m1)):
                return False
        return all(not overlaps((x0, y - 0.2, x1, y + 0.2), b) for b in self.boxes)

    def box_ok(self, box: Box, net: str) -> bool:
        """A symbol's room: clear of other boxes and of other nets' corridors."""
        for cn, (cy, cx) in self.corridors.items():
            if cn != net and box[1] - EPS <= cy <= box[3] + EPS and box[2] > cx - EPS:
                return False
        return all(not overlaps(box, b) for b in self.boxes)

    def right_edge(self) -> float:
        """Right end of everything so far, with room for labels right of vertical parts."""
        xs = [v[0] + 1.9 for v in self.v] + [h[2] + 0.3 for h in self.h]
        xs += [b[2] + 0.3 for b in self.boxes]
        return max(xs, default=0.0)


def overlaps(a: Box, b: Box) -> bool:
    return min(a[2], b[2]) - max(a[0], b[0]) > EPS and min(a[3], b[3]) - max(a[1], b[1]) > EPS


def symbol_box(x: float, y: float, direction: int) -> Box:
    """Room taken by a local ground symbol (below y) or supply flag and its text (above y)."""
    if direction > 0:
        return (x - 0.8, y, x + 0.8, y + 1.2)
    return (x - 0.45, y - 0.8, x + 0.45, y)


def node_text(design: Design, sheet: Sheet, node: str) -> str:
    """How a node is named at a lead end: its netlist name, the supply voltage, or GND."""
    if node == design.supply_node:
        return sheet.supply_text
    return "GND" if node == design.ground else node


def named_end(sheet: Sheet, design: Design, at: Point, node: str, toward: str) -> None:
    """End of a lead joined to its node by name: a small dot and the node's name beyond it;
    the supply flag or ground symbol instead where the lead points to that rail."""
    x, y = at
    if node == design.ground and toward == "down":
        sheet.grounds.append((at, False))
        return
    if node == design.supply_node and toward == "up":
        sheet.flags.append(at)
        return
    sheet.marks.append(at)
    sheet.names.append((at, node))
    pos, ha, va = {"up": ((x, y + 0.15), "center", "bottom"),
                   "down": ((x, y - 0.15), "center", "top"),
                   "left": ((x - 0.18, y), "right", "center"),
                   "right": ((x + 0.18, y), "left", "center")}[toward]
    sheet.notes.append((pos, node_text(design, sheet, node), ha, va, SMALL, NET_BLUE))

