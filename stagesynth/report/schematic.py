"""Schematic of a designed stage as SVG text, drawn with schemdraw from the design's netlist.

Three layouts, tried in turn:
- chain: stages fed one from the next, recognized from the netlist's structure and drawn the
  way an engineer would: supply rail on top, ground at the bottom, signal from left to right,
  every connection a wire. A stage is fed at its base (common emitter with divider bias, a
  collector-to-base resistor or a split, decoupled one, and a split, bypassed emitter
  resistor; emitter follower, also with a bootstrapped base resistor) or at its emitter
  (common base: the base row sits beside the signal row with its bias and decoupling parts);
  NPN or the PNP mirror; cascades;
- net: any netlist; transistors left to right in signal order with the parts that run from
  their nodes to the rails wired in, the remaining parts drawn apart with each end named by
  its node (the same name is the same node);
- plain: the last resort, every part drawn on its own with named ends.
A layout's drawing is only used when it is faithful (`_faults`): no two nodes' conductors
joined, no node split into unnamed pieces, no crossing, and no terminal or name so close to
another node's conductor that a reader would take it as wired there.
"""

from __future__ import annotations

import contextlib
import copy
import itertools
import math
import re
from collections import deque
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from xml.sax.saxutils import escape

from stagesynth.contracts.netlist import Design, Part

Point = tuple[float, float]
Box = tuple[float, float, float, float]  # x0, y0, x1, y1

UP = math.inf  # a y coordinate meaning "the supply rail", fixed when the sheet is drawn
DOWN = -math.inf  # a y coordinate meaning "the ground level"

L = 3.0  # length of a two-terminal part, in drawing units (schemdraw's default unit)
LANE = 2.5  # pitch of parallel vertical parts: room for a two-line label between them
EPS = 1e-6
FONT = 12.0  # part labels, points
SMALL = 10.0  # node names, points
PT_PER_UNIT = 36.0  # schemdraw's default scale: 0.5 inch per unit, 72 points per inch
GREY = "#606060"  # source and load: outside the designed circuit
NODE_GREY = "#7a7a7a"
NET_BLUE = "#1f4e99"  # node names that stand for a wire
_EMF = "(source emf)"  # the node between the source's EMF and Rs: not in the netlist
SIDE = 4.6  # signal row to a row beside it: a part plus a local ground or supply symbol
NEAR = 1.2  # an open end this close to another node's conductor reads as joined to it

# Geometry of schemdraw's Bjt symbol drawn at 1.5 times its size (to match the resistors):
# collector and emitter offsets from the base terminal, and the body's extent.
_BJT_SCALE = 1.5
_BJT_DX = 1.1275
_BJT_DY = 1.045
_BJT_BOX = (-0.05, -0.9, 1.7, 0.9)


# ---------------------------------------------------------------------------
# Public API
# ---------------------------------------------------------------------------
def draw_schematic(
    design: Design,
    values: Mapping[str, str] | None = None,
    *,
    node_names: bool = True,
    positive: Mapping[str, str] | None = None,
) -> str:
    """The circuit of `design` as SVG text; every part labelled with its reference and value.

    `values` optionally replaces the printed value of some parts, by reference designator
    ("R1", or "Rs", "RL", "CL" for source and load), e.g. {"R1": "47 kΩ 1 %"}.
    `node_names` prints the netlist's node names beside the nodes of the wired layouts.
    Electrolytics are drawn polarized, + on the node given by `positive` ({"C1": "b1"}) or
    by design.extra["capacitors"][ref] = {"polarized": true, "positive": node}.
    """
    if positive:
        caps = design.extra.get("capacitors") if isinstance(design.extra, Mapping) else None
        merged = dict(caps) if isinstance(caps, Mapping) else {}
        merged.update({ref: {"polarized": True, "positive": node}
                       for ref, node in positive.items()})
        design = replace(design, extra={**design.extra, "capacitors": merged})
    sheet = _layout(design, dict(values or {}), node_names)
    return _render(sheet, design.title or design.topology or "stage schematic")


def save_schematic(
    design: Design, path: str | Path, values: Mapping[str, str] | None = None
) -> Path:
    """Write the schematic of `design` to `path` (SVG) and return the path."""
    path = Path(path)
    path.write_text(draw_schematic(design, values), encoding="utf-8")
    return path


def _layout(design: Design, texts: Mapping[str, str], node_names: bool = True) -> _Sheet:
    """The first layout that places the netlist and draws it faithfully (see `_faults`)."""
    for builder in (_ChainBuilder, _NetBuilder):
        # a layout that cannot place this netlist, or would draw a connection the netlist
        # does not have, must not stop the report: the plain layout at the end draws any
        # netlist, every part on its own with its ends named
        try:
            sheet = builder(design, texts, node_names).build()
        except Exception:
            continue
        if not _faults(sheet, design):
            return sheet
    return _generic_sheet(design, texts)


# ---------------------------------------------------------------------------
# Label text
# ---------------------------------------------------------------------------
_PREFIXES = {-15: "f", -12: "p", -9: "n", -6: "µ", -3: "m", 0: "", 3: "k", 6: "M", 9: "G"}
_UNITS = {"resistor": "Ω", "capacitor": "F"}


def _local_format(value: float, unit: str) -> str:
    """Engineering notation with an SI prefix, three significant digits: 47000 -> "47 kΩ"."""
    if value == 0:
        return f"0 {unit}"
    exp3 = min(max(3 * math.floor(math.log10(abs(value)) / 3), -15), 9)
    mantissa = float(f"{value / 10**exp3:.3g}")
    if abs(mantissa) >= 1000 and exp3 < 9:
        exp3, mantissa = exp3 + 3, mantissa / 1000
    return f"{mantissa:g} {_PREFIXES[exp3]}{unit}"


def _fmt(value: object, unit: str) -> str:
    """Value text with an SI prefix; uses the project's formatter when it is available."""
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        return "?"
    try:
        from stagesynth.quantities.units import format_quantity
    except ImportError:  # pragma: no cover - the project's formatter is optional here
        return _local_format(float(value), unit)
    try:
        return format_quantity(float(value), unit, 3)
    except (TypeError, ValueError):  # pragma: no cover
        return _local_format(float(value), unit)


def _part_text(part: Part, design: Design, texts: Mapping[str, str]) -> str:
    """Two-line label: reference designator, then the value (or the transistor type)."""
    if part.ref in texts:
        return f"{part.ref}\n{texts[part.ref]}"
    if part.is_bjt:
        dev = design.devices.get(part.device or "")
        kind = dev.polarity.upper() if dev is not None else "BJT"
        return f"{part.ref}\n{kind}"
    return f"{part.ref}\n{_fmt(part.value, _UNITS.get(part.kind, ''))}"


def _is_pnp(part: Part, design: Design) -> bool:
    dev = design.devices.get(part.device or "")
    return dev is not None and dev.polarity == "pnp"


def _polarity_of(design: Design, part: Part) -> str | None:
    """Node at the positive end of an electrolytic, from design.extra["capacitors"], else None."""
    caps = design.extra.get("capacitors") if isinstance(design.extra, Mapping) else None
    info = caps.get(part.ref) if isinstance(caps, Mapping) else None
    if not isinstance(info, Mapping) or not info.get("polarized"):
        return None
    positive = info.get("positive")
    return positive if positive in part.nodes else None


def _natural_key(ref: str) -> tuple:
    """R2 before R10: letters, then the number."""
    m = re.match(r"([A-Za-z_]*)(\d*)(.*)", ref)
    prefix, num, rest = m.groups() if m else (ref, "", "")
    return (prefix.upper(), int(num) if num else -1, rest)


def _text_box(text: str, size: float) -> tuple[float, float]:
    """Approximate width and height of a (multi-line) label, in drawing units."""
    lines = text.split("\n")
    width = max(len(line) for line in lines) * size * 0.6 / PT_PER_UNIT + 0.1
    height = len(lines) * size * 1.2 / PT_PER_UNIT
    return width, height


# ---------------------------------------------------------------------------
# The sheet: what to draw, in drawing units; y = UP/DOWN run to the supply rail/ground
# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class _Two:
    """A two-terminal symbol between a and b. `polarized`: an electrolytic with + at a."""

    ref: str
    kind: str  # "resistor", "capacitor" or "source"
    a: Point
    b: Point
    text: str
    external: bool = False
    polarized: bool = False
    sides: tuple[str, ...] = ()  # preferred label sides, first that is free wins
    nodes: tuple[str, str] = ("", "")  # netlist nodes at a and at b (checked by _faults)


@dataclass(frozen=True)
class _Bjt:
    ref: str
    pnp: bool
    base: Point
    text: str
    nodes: tuple[str, ...] = ("", "", "")  # collector, base, emitter


@dataclass
class _Sheet:
    """Everything to draw; built by a layout, turned into SVG by `_render`."""

    supply_text: str
    twos: list[_Two] = field(default_factory=list)
    bjts: list[_Bjt] = field(default_factory=list)
    wires: list[tuple[Point, Point, bool]] = field(default_factory=list)  # a, b, external
    grounds: list[tuple[Point, bool]] = field(default_factory=list)  # symbol hangs below
    flags: list[Point] = field(default_factory=list)  # local supply symbol above the point
    terminals: list[tuple[Point, str]] = field(default_factory=list)  # open circle + name
    notes: list[tuple[Point, str, str, str, float, str]] = field(default_factory=list)
    node_tags: list[tuple[Point, str, bool]] = field(default_factory=list)  # name, must show
    marks: list[Point] = field(default_factory=list)  # lead ends joined to a node by its name
    names: list[tuple[Point, str]] = field(default_factory=list)  # each mark and its node
    frames: list[tuple[Box, str]] = field(default_factory=list)  # dashed box and caption


# ---------------------------------------------------------------------------
# Structured layout: a chain of single-transistor stages
# ---------------------------------------------------------------------------
class _NotAChain(Exception):
    """The netlist is not a chain the structured layout knows: use the generic layout."""


@dataclass(frozen=True)
class _Stage:
    q: Part
    tap: str  # node the stage's input comes from (the input, or c/e of the stage before)
    link: Part | None  # part from tap to the entry node (None: the entry is the tap node)
    out_tap: str  # c or e node that feeds the next stage or the output
    entry: str = "b"  # where the signal enters: "b" (common emitter, follower), "e" (common base)


def _find_chain(design: Design) -> tuple[list[_Stage], Part | None]:
    """Stages from input to output, and the part from the last tap to the output terminal.

    A stage's signal enters at the base (common emitter, follower) or, where no base is fed
    from the chain, at the emitter (common base: the base then only has its bias network);
    the entry is the tap node itself or one part away from it.
    """
    rails = {design.supply_node, design.ground}
    passives = [p for p in design.parts if not p.is_bjt]
    pending = sorted(design.bjts, key=lambda q: _natural_key(q.ref))
    if not pending:
        raise _NotAChain("no transistor")
    taps = [design.input]
    used: set[str] = set()
    raw: list[tuple[Part, str, Part | None, str]] = []

    def fed(tap: str, q: Part, entry: str) -> tuple[Part, str, Part | None, str] | None:
        """q's stage when its base ("b") or emitter ("e") is fed from tap, else None."""
        node = q.nodes[1] if entry == "b" else q.nodes[2]
        if entry == "e" and q.nodes[1] in rails | {design.input, design.output}:
            return None
        if node in rails or node == design.output or len(set(q.nodes)) < 3:
            return None
        if node == tap:
            return (q, tap, None, entry)
        links = [p for p in passives if set(p.nodes) == {tap, node} and p.ref not in used]
        if len(links) == 1 and node != design.input:
            return (q, tap, links[0], entry)
        return None

    while pending:
        found = None
        for entry in ("b", "e"):  # a base fed from the chain first: the common case
            for tap in taps:
                for q in pending:
                    found = fed(tap, q, entry)
                    if found:
                        break
                if found:
                    break
            if found:
                break
        if found is None:
            raise _NotAChain("no transistor is fed from the chain")
        q, tap, link, entry = found
        if link is not None:
            used.add(link.ref)
        raw.append(found)
        pending.remove(q)
        taps = [n for n in _outputs(q, entry) if n not in rails]
    # the output: at c or e of the last stage, directly or through one part
    last, _, _, last_entry = raw[-1]
    ends = [n for n in _outputs(last, last_entry) if n not in rails]
    out_link = None
    if design.output in ends:
        out_tap = design.output
    else:
        cands = [
            (p, n) for n in ends for p in passives
            if set(p.nodes) == {n, design.output} and p.ref not in used
        ]
        if len(cands) != 1:
            raise _NotAChain("the output is not fed from the last stage")
        out_link, out_tap = cands[0]
    stages = []
    for i, (q, tap, link, entry) in enumerate(raw):
        if i + 1 < len(raw):
            nxt = raw[i + 1][1]
            if nxt not in _outputs(q, entry):
                raise _NotAChain("stages are not in a chain")
            stages.append(_Stage(q, tap, link, nxt, entry))
        else:
            stages.append(_Stage(q, tap, link, out_tap, entry))
    # each stage's own nodes belong to it alone (apart from the tap that feeds the next stage)
    owner: dict[str, int] = {}
    for i, st in enumerate(stages):
        for n in st.q.nodes:
            if n in rails:
                continue
            if n in owner and not (owner[n] == i - 1 and n == stages[i - 1].out_tap):
                raise _NotAChain("node shared between stages")
            owner.setdefault(n, i)
    return stages, out_link


def _outputs(q: Part, entry: str) -> tuple[str, ...]:
    """Nodes of q that can feed what follows: collector and emitter, or the collector alone
    when the signal enters at the emitter."""
    return (q.nodes[0], q.nodes[2]) if entry == "b" else (q.nodes[0],)


class _Space:
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
        return all(not _overlap((x - 0.3, y0, x + 0.3, y1), b) for b in self.boxes)

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
        return all(not _overlap((x0, y - 0.2, x1, y + 0.2), b) for b in self.boxes)

    def box_ok(self, box: Box, net: str) -> bool:
        """A symbol's room: clear of other boxes and of other nets' corridors."""
        for cn, (cy, cx) in self.corridors.items():
            if cn != net and box[1] - EPS <= cy <= box[3] + EPS and box[2] > cx - EPS:
                return False
        return all(not _overlap(box, b) for b in self.boxes)

    def right_edge(self) -> float:
        """Right end of everything so far, with room for labels right of vertical parts."""
        xs = [v[0] + 1.9 for v in self.v] + [h[2] + 0.3 for h in self.h]
        xs += [b[2] + 0.3 for b in self.boxes]
        return max(xs, default=0.0)


def _overlap(a: Box, b: Box) -> bool:
    return min(a[2], b[2]) - max(a[0], b[0]) > EPS and min(a[3], b[3]) - max(a[1], b[1]) > EPS


class _Builder:
    """Shared layout machinery: nodes have a home point and a horizontal bus; parts to a rail
    or to a node only passives touch hang from it as vertical lanes."""

    def __init__(self, design: Design, texts: Mapping[str, str], node_names: bool) -> None:
        self.d = design
        self.texts = texts
        self.node_names = node_names
        self.sheet = _Sheet(supply_text=_supply_text(design))
        self.space = _Space()
        self.home: dict[str, Point] = {}
        self.bus_end: dict[str, float] = {}
        self.used: set[str] = set()
        self.rails = {design.supply_node, design.ground}
        self.bjt_nodes = {n for q in design.bjts for n in q.nodes}
        self.passives = [p for p in design.parts if not p.is_bjt]
        self.strict = True  # a part that finds no room fails the layout (else: drawn apart)
        self.deferred: set[str] = set()
        self.reserved: set[str] = set()  # parts a stage draws itself, not hung from a node
        self.lane_start: dict[str, float] = {}

    _STATE = ("sheet", "space", "home", "bus_end", "used", "deferred", "reserved", "lane_start")

    def save(self) -> dict[str, object]:
        """The layout so far, to go back to when a stage finds no room."""
        return copy.deepcopy({name: getattr(self, name) for name in self._STATE})

    def restore(self, saved: Mapping[str, object]) -> None:
        for name, value in saved.items():
            setattr(self, name, value)

    # -- helpers -----------------------------------------------------------
    def rail_dir(self, node: str) -> int:
        return 1 if node == self.d.supply_node else -1

    def private(self, node: str) -> bool:
        """A node only passives touch, not yet placed: it can hang below its parent."""
        return (
            node not in self.rails
            and node not in (self.d.input, self.d.output)
            and node not in self.bjt_nodes
            and node not in self.home
        )

    def unused_at(self, node: str) -> list[Part]:
        return [p for p in self.passives if p.ref not in self.used and node in p.nodes]

    def wire(self, a: Point, b: Point, net: str, external: bool = False) -> None:
        if math.dist(a, b) < EPS:
            return
        self.sheet.wires.append((a, b, external))
        if abs(a[0] - b[0]) < EPS:
            self.space.add_v(a[0], a[1], b[1], net)
        else:
            self.space.add_h(a[1], a[0], b[0], net)

    def place_node(self, node: str, at: Point, required: bool = False,
                   terminal: str | None = None) -> None:
        """Give a node its home point; at a terminal, its lanes start a little to the right."""
        self.home[node] = at
        self.bus_end[node] = at[0]
        if terminal is not None:
            self.lane_start[node] = at[0] + 1.0
        shown_by_terminal = node == terminal
        if (self.node_names or required) and node not in self.rails and not shown_by_terminal:
            self.sheet.node_tags.append((at, node, required))

    def two(self, part: Part, a_node: str, a: Point, b: Point, sides: tuple[str, ...]) -> None:
        """Record part with its a_node end at a; an electrolytic keeps + on its positive node."""
        positive = _polarity_of(self.d, part) if part.kind == "capacitor" else None
        nodes = (a_node, _other(part, a_node))
        if positive is not None and positive != a_node:
            a, b, nodes = b, a, (nodes[1], nodes[0])
        self.sheet.twos.append(
            _Two(part.ref, part.kind, a, b, _part_text(part, self.d, self.texts),
                 polarized=positive is not None, sides=sides, nodes=nodes)
        )
        self.used.add(part.ref)

    def extend_bus(self, node: str, x: float) -> None:
        y0 = self.home[node][1]
        end = self.bus_end[node]
        if x > end + EPS:
            self.wire((end, y0), (x, y0), node)
            self.bus_end[node] = x

    # -- hanging trees: parts from a node to a rail or to a private node ----
    def hang(self, node: str, natural: int) -> None:
        """Draw, as vertical lanes right of the node, every part to a rail or private node."""
        while True:
            parts = [
                p for p in self.unused_at(node)
                if p.ref not in self.deferred and p.ref not in self.reserved
                and (_other(p, node) in self.rails or self.private(_other(p, node)))
            ]
            if not parts:
                return
            parts.sort(key=lambda p: (
                _other(p, node) in self.rails, p.kind != "resistor", _natural_key(p.ref)))
            part = parts[0]
            other = _other(part, node)
            if other in self.rails:
                self.hang_to_rail(node, part, other, natural)
            else:
                self.hang_chain(node, part, other, natural)

    def lane_count(self, node: str, parent: int = 0) -> int:
        """Lanes the parts hanging from `node` will take: up and down share a lane; `parent`
        (+1 up, -1 down) is the side a part already takes at the node's home."""
        up = down = 0
        for p in self.unused_at(node):
            other = _other(p, node)
            if p.ref in self.reserved or not (other in self.rails or self.private(other)):
                continue
            going = self.rail_dir(other) if other in self.rails else self.child_dir(other)
            up, down = (up + 1, down) if going > 0 else (up, down + 1)
        if parent:
            up, down = (up + 1, down) if parent > 0 else (up, down + 1)
        return max(up, down, 1)

    def lanes(self, node: str) -> Iterable[float]:
        x0 = self.lane_start.get(node, self.home[node][0])
        return (x0 + k * LANE for k in range(12))

    def hang_to_rail(self, node: str, part: Part, rail: str, natural: int) -> None:
        y0 = self.home[node][1]
        direction = self.rail_dir(rail)
        sides = ("left", "right") if natural == 0 else ("right", "left")
        for local in (False, True):
            for x in self.lanes(node):
                y_end = y0 + direction * L
                span_end = (UP if direction > 0 else DOWN) if not local else y_end
                symbol = _symbol_box(x, y_end, direction) if local else None
                if not self.space.h_ok(y0, self.bus_end[node], x, node):
                    continue
                if not self.space.v_ok(x, y0, span_end, node, rail):
                    continue
                if symbol and not self.space.box_ok(symbol, rail):
                    continue
                self.extend_bus(node, x)
                self.space.add_v(x, y0, span_end, node, rail)
                if local:
                    self.space.boxes.append(symbol)
                    if direction > 0:
                        self.sheet.flags.append((x, y_end))
                    else:
                        self.sheet.grounds.append(((x, y_end), False))
                    self.two(part, node, (x, y0), (x, y_end), sides)
                else:
                    self.two(part, node, (x, y0), (x, span_end), sides)
                return
        self.no_room(part)

    def hang_chain(self, node: str, part: Part, child: str, natural: int) -> None:
        y0 = self.home[node][1]
        direction = natural or self.child_dir(child)
        for x in self.lanes(node):
            y1 = y0 + direction * L
            if not self.space.h_ok(y0, self.bus_end[node], x, node):
                continue
            if not self.space.v_ok(x, y0, y1, node, child):
                continue
            self.extend_bus(node, x)
            self.space.add_v(x, y0, y1, node, child)
            self.two(part, node, (x, y0), (x, y1), ("right", "left"))
            self.place_node(child, (x, y1))
            self.hang(child, direction)
            return
        self.no_room(part)

    def no_room(self, part: Part) -> None:
        if self.strict:
            raise _NotAChain(f"no room for {part.ref}")
        self.deferred.add(part.ref)

    def child_dir(self, node: str) -> int:
        """Hang a private node toward the rail its other parts reach (ground if unclear)."""
        reach = {_other(p, node) for p in self.unused_at(node)}
        return 1 if self.d.supply_node in reach and self.d.ground not in reach else -1

    # -- blocks shared by the layouts -----------------------------------------
    def source(self, required: bool = False) -> None:
        """Signal source (EMF and Rs) left of the input terminal, which sits at (0, 0)."""
        d = self.d
        rs = d.source_resistance
        xs = -(L + 1.0) if rs > 0 else -1.75
        src = _Two("vs", "source", (xs, DOWN), (xs, 0.0), "vs", external=True, sides=("left",),
                   nodes=(d.ground, _EMF if rs > 0 else d.input))
        self.sheet.twos.append(src)
        self.space.add_v(xs, DOWN, 0.0, d.ground, d.input)
        if rs > 0:
            text = f"Rs\n{self.texts.get('Rs', _fmt(rs, 'Ω'))}"
            self.sheet.twos.append(_Two("Rs", "resistor", (xs, 0.0), (xs + L, 0.0), text,
                                        external=True, sides=("above",),
                                        nodes=(_EMF, d.input)))
            self.sheet.wires.append(((xs + L, 0.0), (0.0, 0.0), True))
        else:
            self.sheet.wires.append(((xs, 0.0), (0.0, 0.0), True))
        self.space.add_h(0.0, xs, 0.0, d.input)
        self.space.boxes.append((xs - 1.4, -L - 0.5, -0.3, 1.3))
        self.sheet.frames.append(((xs - 1.3, DOWN, -0.45, 1.35), "source"))
        self.sheet.terminals.append(((0.0, 0.0), "in"))
        self.place_node(d.input, (0.0, 0.0), required, terminal="in")

    def place_bjt(self, q: Part, x_base: float, ty: float, last: str | None,
                  shared_ok: bool, home_y: Mapping[str, float] | None = None,
                  join: Iterable[str] = ()) -> dict[str, int]:
        """Transistor with its base at (x_base, ty); collector and emitter nodes get homes.

        `last`: the node to home last (kept free to the right). `shared_ok`: a terminal on a
        node placed elsewhere gets a stub with the node's name instead of failing.
        `home_y`: a height for a node's home other than just beyond its terminal; `join`:
        placed nodes whose bus is run on to the terminal's lead.
        Returns the hanging direction of each newly homed node.
        """
        c, _, e = q.nodes
        pnp = _is_pnp(q, self.d)
        s = -1 if pnp else 1  # +1: collector up (NPN), -1: emitter up (PNP)
        text = _part_text(q, self.d, self.texts)
        self.sheet.bjts.append(_Bjt(q.ref, pnp, (x_base, ty), text, q.nodes))
        bx0, by0, bx1, by1 = _BJT_BOX
        self.space.boxes.append((x_base + bx0, ty + by0, x_base + bx1, ty + by1))
        w, h = _text_box(text, FONT)
        self.space.boxes.append((x_base + 1.8, ty - h / 2, x_base + 1.9 + w, ty + h / 2))
        xt = x_base + _BJT_DX
        ends = [(e, (xt, ty - s * _BJT_DY, -s)), (c, (xt, ty + s * _BJT_DY, s))]
        ends.sort(key=lambda item: item[0] == last)  # the node to keep free goes last
        homed: dict[str, int] = {}
        for node, (x, y, direction) in ends:
            if node in join:
                hy = self.home[node][1]
                if not (self.space.h_ok(hy, self.bus_end[node], x, node)
                        and self.space.v_ok(x, y, hy, node)):
                    raise _NotAChain(f"no room to join {node}")
                self.extend_bus(node, x)
                self.wire((x, y), (x, hy), node)
                continue
            if node in self.rails and self.rail_dir(node) == direction:
                self.wire((x, y), (x, UP if direction > 0 else DOWN), node)
            elif node in self.home or node in self.rails:
                if not shared_ok:
                    raise _NotAChain("terminal on a node placed elsewhere")
                stub = (x, y + direction * 0.8)
                self.wire((x, y), stub, node)
                self.net_end(stub, node, "up" if direction > 0 else "down")
            else:
                home = (x, (home_y or {}).get(node, y + direction * 0.95))
                if node in (home_y or {}) and not self.space.v_ok(x, y, home[1], node):
                    raise _NotAChain(f"no room for the lead to {node}")
                self.wire((x, y), home, node)
                self.place_node(node, home, required=shared_ok)
                homed[node] = direction
        return homed

    def net_end(self, at: Point, node: str, toward: str) -> None:
        """End of a lead joined to its node by name (or by the supply/ground symbol)."""
        _net_end(self.sheet, self.d, at, node, toward)
        x, y = at
        self.space.boxes.append((x - 0.5, y - 0.5, x + 0.5, y + 0.5))

    def load(self, at: Point, start: float) -> None:
        """Load RL and CL to ground, right of the output terminal at `at`, in a dashed frame."""
        d = self.d
        ty = at[1]
        x_load = max(start + 1.25, self.space.right_edge() - 1.0)
        if not self.space.h_ok(ty, start, x_load + LANE, d.output):
            raise _NotAChain("no room for the load")
        self.sheet.wires.append(((start, ty), (x_load, ty), True))
        load_text = f"RL\n{self.texts.get('RL', _fmt(d.load_resistance, 'Ω'))}"
        self.sheet.twos.append(_Two("RL", "resistor", (x_load, ty), (x_load, DOWN), load_text,
                                    external=True, sides=("right", "left"),
                                    nodes=(d.output, d.ground)))
        x_right = x_load
        if d.load_capacitance > 0:
            x_right = x_load + LANE
            self.sheet.wires.append(((x_load, ty), (x_right, ty), True))
            cl_text = f"CL\n{self.texts.get('CL', _fmt(d.load_capacitance, 'F'))}"
            self.sheet.twos.append(_Two("CL", "capacitor", (x_right, ty), (x_right, DOWN),
                                        cl_text, external=True, sides=("right",),
                                        nodes=(d.output, d.ground)))
        self.sheet.frames.append(((x_load - 0.7, DOWN, x_right + 1.9, ty + 1.5), "load"))

    def check_all_drawn(self) -> None:
        left = [p.ref for p in self.d.parts if not p.is_bjt and p.ref not in self.used]
        if left:
            raise _NotAChain(f"parts not drawn: {left}")


class _ChainBuilder(_Builder):
    """Hand-style layout of a chain of stages, found from the netlist's structure."""

    def build(self) -> _Sheet:
        stages, out_link = _find_chain(self.d)
        self.source()
        self.space.corridors[self.d.input] = (0.0, 0.0)
        self.hang(self.d.input, 0)
        for st in stages:
            self.stage(st)
        self.output(stages[-1].out_tap, out_link)
        self.check_all_drawn()
        return self.sheet

    def link(self, part: Part, tap: str, node: str) -> float:
        """Part from tap's bus rightwards at the tap's height; returns its right end."""
        ty = self.home[tap][1]
        self.space.corridors.pop(tap, None)
        start = max(self.bus_end[tap], self.space.right_edge() - L + 0.6)
        if not (self.space.h_ok(ty, self.bus_end[tap], start, tap)
                and self.space.h_ok(ty, start, start + L, tap, node)):
            raise _NotAChain(f"no room for {part.ref}")
        self.extend_bus(tap, start)
        self.space.add_h(ty, start, start + L, tap, node)
        self.two(part, tap, (start, ty), (start + L, ty), ("above", "below"))
        return start + L

    def stage(self, st: _Stage) -> None:
        """One stage; where its parts find no room, again with more width before the base."""
        draw = self.stage_emitter if st.entry == "e" else self.stage_base
        for extra in (0.0, LANE, 2 * LANE, 4 * LANE):
            saved = self.save()
            try:
                draw(st, extra)
                return
            except _NotAChain:
                self.restore(saved)
        raise _NotAChain(f"no room for the stage of {st.q.ref}")

    def through(self, a: str, z: str) -> tuple[Part, str, Part] | None:
        """Two unused parts in series from a to z through a node only passives touch (a split
        feedback resistor, a bootstrapped base resistor); None when there is none."""
        if z in self.rails:
            return None
        found = []
        for p in self.unused_at(a):
            m = _other(p, a)
            if m == a or not self.private(m):
                continue
            found += [(p, m, p2) for p2 in self.unused_at(m) if p2 is not p
                      and set(p2.nodes) == {m, z}]
        if len(found) > 1:
            raise _NotAChain(f"more than one path from {a} to {z}")
        return found[0] if found else None

    def stage_base(self, st: _Stage, extra: float) -> None:
        """A stage fed at the base: bias network hanging from the base row, and where present
        a collector-to-base resistor over the transistor, a split one with its decoupled
        midpoint on a row beside the collector side, or a bootstrapped base resistor whose
        far end sits on a row beside the emitter side, joined to the emitter."""
        c, b, e = st.q.nodes
        s = -1 if _is_pnp(st.q, self.d) else 1  # +1: collector up (NPN)
        ty = self.home[st.tap][1]
        single = [p for p in self.unused_at(b) if c not in self.rails and set(p.nodes) == {b, c}]
        split = self.through(b, c)
        boot = self.through(b, e)
        if len(single) > 1 or (single and split) or ((single or split) and boot):
            raise _NotAChain("base network not of a known shape")
        for part in [*single, *(t[0] for t in (split, boot) if t)]:
            self.reserved.add(part.ref)
        if st.link is not None:
            end = self.link(st.link, st.tap, b)
            self.place_node(b, (end, ty))
            self.hang(b, 0)
            start = self.bus_end[b]
        else:  # direct coupling: the base sits on the tap node
            self.space.corridors.pop(st.tap, None)
            start = max(self.bus_end[st.tap], self.space.right_edge() - 1.6)
        # where a special network leaves the base row, and where the base goes
        x_turn = self.bus_end[b] + (LANE if start > self.home[b][0] + EPS else 0.0)
        x_base = start + 1.6
        home_y: dict[str, float] = {}
        if single:
            x_turn = start + 1.0
            x_base = x_turn + 2.4
        elif split:
            m = split[1]
            width = (self.lane_count(m) - 1) * LANE
            x_base = max(x_base, x_turn + 2 * L + width + 0.6 - _BJT_DX)
            home_y[c] = ty + s * SIDE
        elif boot:
            x = boot[1]
            width = (self.lane_count(x, s) - 1) * LANE
            x_base = max(x_base, x_turn + width + L + 0.6 - _BJT_DX)
            home_y[e] = ty - s * SIDE
        x_base += extra
        if not self.space.h_ok(ty, self.bus_end[b], x_base, b):
            raise _NotAChain("no room for the base row")
        self.extend_bus(b, x_base)
        homed = self.place_bjt(st.q, x_base, ty, st.out_tap, shared_ok=False, home_y=home_y)
        if single and c in homed:  # collector-to-base resistor over (NPN) the transistor
            self.across(single[0], b, (x_turn, ty), c, self.home[c])
        elif split and c in homed:
            p_b, m, p_c = split
            y_f = self.home[c][1]
            self.turn(b, (x_turn, ty), y_f)
            x_m = x_turn + L
            self.row_part(p_b, b, (x_turn, y_f), m, x_m)
            self.place_node(m, (x_m, y_f))
            self.hang(m, -s)
            self.across(p_c, m, (self.bus_end[m], y_f), c, self.home[c])
        elif boot and e in homed:
            p_b, x, p_e = boot
            y_x = self.home[e][1]
            if not self.space.v_ok(x_turn, ty, y_x, b, x):
                raise _NotAChain(f"no room for {p_b.ref}")
            self.space.add_v(x_turn, ty, y_x, b, x)
            self.two(p_b, b, (x_turn, ty), (x_turn, y_x), ("right", "left"))
            self.place_node(x, (x_turn, y_x))
            self.hang(x, -s)
            self.across(p_e, x, (self.bus_end[x], y_x), e, self.home[e])
        elif single or split or boot:
            raise _NotAChain("base network not placed")
        if st.out_tap in homed:  # the node feeding the next stage keeps a free corridor
            xo, yo = self.home[st.out_tap]
            self.space.corridors[st.out_tap] = (yo, xo)
        for node, direction in homed.items():
            self.hang(node, direction)

    def stage_emitter(self, st: _Stage, extra: float) -> None:
        """A stage fed at the emitter (common base): the signal row runs into the emitter lead;
        the base sits a row beside it, away from the emitter (above for NPN), with its bias
        and decoupling parts hanging from the base row to local ground or supply symbols."""
        _, b, e = st.q.nodes
        s = -1 if _is_pnp(st.q, self.d) else 1
        ty = self.home[st.tap][1]
        if b in self.home:
            raise _NotAChain("base node placed elsewhere")
        if st.link is not None:
            end = self.link(st.link, st.tap, e)
            self.place_node(e, (end, ty))
        else:
            self.space.corridors.pop(st.tap, None)
            end = self.bus_end[e]
        ty_b = ty + s * SIDE
        width = (self.lane_count(b) - 1) * LANE
        x_base = max(end + 0.6 - _BJT_DX, 0.6 + 1.6 + width) + extra
        self.place_node(b, (x_base - 1.6 - width, ty_b))
        homed = self.place_bjt(st.q, x_base, ty_b, st.out_tap, shared_ok=False, join=(e,))
        self.hang(b, 0)
        if not self.space.h_ok(ty_b, self.bus_end[b], x_base + _BJT_BOX[0] - EPS, b):
            raise _NotAChain("no room for the base row")
        self.extend_bus(b, x_base)
        self.lane_start[e] = x_base + _BJT_DX  # the emitter's own parts right under its lead
        self.hang(e, -s)
        if st.out_tap in homed:
            xo, yo = self.home[st.out_tap]
            self.space.corridors[st.out_tap] = (yo, xo)
        for node, direction in homed.items():
            self.hang(node, direction)

    def turn(self, node: str, at: Point, y: float) -> None:
        """A wire from a point on node's bus to height y."""
        if not self.space.v_ok(at[0], at[1], y, node):
            raise _NotAChain(f"no room to turn {node}")
        self.wire(at, (at[0], y), node)

    def row_part(self, part: Part, a_node: str, a: Point, z_node: str, x_end: float) -> None:
        """Part along a row, from a (on a_node) to x_end (z_node)."""
        if not self.space.h_ok(a[1], a[0], x_end, a_node, z_node):
            raise _NotAChain(f"no room for {part.ref}")
        self.space.add_h(a[1], a[0], x_end, a_node, z_node)
        self.two(part, a_node, a, (x_end, a[1]), ("above", "below"))

    def across(self, part: Part, a_node: str, a: Point, z_node: str, z: Point) -> None:
        """Part from a point on a_node to the home of z_node (a row or a turn, then a row);
        z_node's own parts then leave its bus a little further on, so that the home is a T
        joint and not a four-way one."""
        if abs(a[1] - z[1]) > EPS:
            self.turn(a_node, a, z[1])
            a = (a[0], z[1])
        self.row_part(part, a_node, a, z_node, z[0])
        self.lane_start[z_node] = z[0] + 1.0

    def output(self, tap: str, out_link: Part | None) -> None:
        """Output terminal, the design's own parts there, then the load (dashed frame)."""
        d = self.d
        ty = self.home[tap][1]
        if out_link is not None:
            end = self.link(out_link, tap, d.output)
            self.place_node(d.output, (end, ty), terminal="out")
            at = (end, ty)
        else:
            self.space.corridors.pop(tap, None)
            x = max(self.bus_end[tap] + 1.0, self.space.right_edge())
            if not self.space.h_ok(ty, self.bus_end[tap], x, tap):
                raise _NotAChain("no room for the output terminal")
            self.extend_bus(tap, x)
            at = (x, ty)
            if tap == d.output:  # the terminal on the same wire already names it
                self.sheet.node_tags = [t for t in self.sheet.node_tags if t[1] != tap]
        self.sheet.terminals.append((at, "out"))
        self.space.corridors[d.output] = (at[1], at[0])  # keep the way to the load free
        self.hang(d.output, 0)
        self.load(at, max(self.bus_end.get(d.output, at[0]), at[0]))


class _NetBuilder(_Builder):
    """Generic layout for any netlist: transistors left to right in signal order, each with the
    parts that hang from its nodes to the rails wired in; parts between two such nodes are
    drawn apart with both ends named by node.

    Nothing here assumes where the signal enters a transistor: the input terminal is wired
    only to the parts that touch the input node (their far ends named), and each transistor's
    base row starts, named, a clear gap after whatever lies to its left, so that no node's
    wiring reads as the continuation of another's.
    """

    def build(self) -> _Sheet:
        d = self.d
        self.strict = False
        self.source(required=True)
        self.hang(d.input, 0)
        self.input_links()
        for q in _signal_order(d):
            b = q.nodes[1]
            x0 = self.space.right_edge() + 1.5
            if b in self.home or b in self.rails:
                x_base = x0 + 1.6
                self.wire((x_base - 1.0, 0.0), (x_base, 0.0), b)
                self.net_end((x_base - 1.0, 0.0), b, "left")
            else:
                self.place_node(b, (x0, 0.0), required=True)
                self.hang(b, 0)
                x_base = self.bus_end[b] + 1.6
                self.extend_bus(b, x_base)
            for node, direction in self.place_bjt(q, x_base, 0.0, None, shared_ok=True).items():
                self.hang(node, direction)
        # room for the parts between placed nodes, drawn apart with named ends (below)
        x_links = self.space.right_edge() + 1.0
        width = max((sum(self.name_width(n) for n in p.nodes) + L + 0.6
                     for p in self.passives if p.ref not in self.used), default=-1.0)
        # output terminal, the parts hanging from it, and the load
        x_out = max(self.space.right_edge() + 0.5, x_links + width + 1.0)
        at = (x_out, 0.0)
        self.sheet.terminals.append((at, "out"))
        if d.output in self.home:
            self.wire(at, (x_out - 0.8, 0.0), d.output)
            self.net_end((x_out - 0.8, 0.0), d.output, "left")
            self.load(at, x_out)
        else:
            self.place_node(d.output, at, required=True, terminal="out")
            self.space.corridors[d.output] = (0.0, x_out)  # keep the way to the load free
            self.hang(d.output, 0)
            self.load(at, max(self.bus_end[d.output], x_out))
        links = sorted((p for p in self.passives if p.ref not in self.used),
                       key=lambda p: _natural_key(p.ref))
        for i, p in enumerate(links):  # below the signal row: no row continues into a terminal
            n1, n2 = p.nodes[0], p.nodes[1]
            y = -2.2 * (i + 1)
            a = (x_links + self.name_width(n1) + 0.3, y)
            b = (a[0] + L, y)
            self.two(p, n1, a, b, ("above", "below"))
            self.net_end(a, n1, "left")
            self.net_end(b, n2, "right")
        self.check_all_drawn()
        return self.sheet

    def input_links(self) -> None:
        """Parts from the input node to other placed or transistor nodes, wired from the input
        terminal (the last along the signal row, any others hanging below it), far ends named."""
        d = self.d
        links = sorted((p for p in self.unused_at(d.input)
                        if _other(p, d.input) not in self.rails),
                       key=lambda p: _natural_key(p.ref))
        if not links:
            return
        *drops, last = links
        for part in drops:
            other = _other(part, d.input)
            for x in self.lanes(d.input):
                end = (x, -L)
                if (self.space.h_ok(0.0, self.bus_end[d.input], x, d.input)
                        and self.space.v_ok(x, 0.0, -L - 0.6, d.input, other)):
                    self.extend_bus(d.input, x)
                    self.space.add_v(x, 0.0, -L, d.input, other)
                    self.two(part, d.input, (x, 0.0), end, ("right", "left"))
                    self.net_end(end, other, "down")
                    break
            else:
                self.no_room(part)
        other = _other(last, d.input)
        start = self.bus_end[d.input] + (1.0 if drops else 0.0)
        if not self.space.h_ok(0.0, self.bus_end[d.input], start + L, d.input, other):
            self.no_room(last)
            return
        self.extend_bus(d.input, start)
        self.space.add_h(0.0, start, start + L, d.input, other)
        self.two(last, d.input, (start, 0.0), (start + L, 0.0), ("above", "below"))
        self.net_end((start + L, 0.0), other, "right")

    def name_width(self, node: str) -> float:
        return _text_box(_node_text(self.d, self.sheet, node), SMALL)[0]


def _other(part: Part, node: str) -> str:
    a, b = part.nodes[0], part.nodes[1]
    return b if a == node else a


def _symbol_box(x: float, y: float, direction: int) -> Box:
    """Room taken by a local ground symbol (below y) or supply flag and its text (above y)."""
    if direction > 0:
        return (x - 0.8, y, x + 0.8, y + 1.2)
    return (x - 0.45, y - 0.8, x + 0.45, y)


def _node_text(design: Design, sheet: _Sheet, node: str) -> str:
    """How a node is named at a lead end: its netlist name, the supply voltage, or GND."""
    if node == design.supply_node:
        return sheet.supply_text
    return "GND" if node == design.ground else node


def _net_end(sheet: _Sheet, design: Design, at: Point, node: str, toward: str) -> None:
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
    sheet.notes.append((pos, _node_text(design, sheet, node), ha, va, SMALL, NET_BLUE))


def _supply_text(design: Design) -> str:
    v = design.supply_voltage
    sign = "+" if v > 0 else ""
    return f"{sign}{_fmt(v, 'V')}"


# ---------------------------------------------------------------------------
# Generic layout: any netlist; every part drawn on its own, ends named by node
# ---------------------------------------------------------------------------
_CELL = 3.2  # width of one part's cell in the generic layout
_ROW = L + 2.4  # height of one row of parts


def _graph(design: Design) -> dict[str, set[str]]:
    """Node adjacency through any part; rails are kept out so distances follow the signal."""
    rails = {design.supply_node, design.ground}
    adj: dict[str, set[str]] = {}
    for p in design.parts:
        nodes = [n for n in p.nodes if n not in rails]
        for n in nodes:
            adj.setdefault(n, set()).update(m for m in nodes if m != n)
    return adj


def _distances(adj: Mapping[str, set[str]], sources: Iterable[str]) -> dict[str, int]:
    dist = {s: 0 for s in sources}
    queue = deque(dist)
    while queue:
        n = queue.popleft()
        for m in adj.get(n, ()):
            if m not in dist:
                dist[m] = dist[n] + 1
                queue.append(m)
    return dist


def _signal_order(design: Design) -> list[Part]:
    """Transistors from input to output: by graph distance of their nodes from the input."""
    adj = _graph(design)
    dist = _distances(adj, [design.input])
    return sorted(
        design.bjts,
        key=lambda q: (min((dist.get(n, 10**6) for n in q.nodes), default=10**6),
                       _natural_key(q.ref)),
    )


def _generic_sheet(design: Design, texts: Mapping[str, str]) -> _Sheet:
    """One column block per transistor in signal order; each passive near its transistor."""
    sheet = _Sheet(supply_text=_supply_text(design))
    rails = {design.supply_node, design.ground}
    adj = _graph(design)
    order = _signal_order(design)
    near = [_distances(adj, [n for n in q.nodes if n not in rails]) for q in order]
    blocks: list[list[Part]] = [[] for _ in range(max(len(order), 1))]
    for p in sorted((p for p in design.parts if not p.is_bjt), key=lambda p: _natural_key(p.ref)):
        nodes = [n for n in p.nodes if n not in rails]
        if not near or not nodes:
            blocks[-1].append(p)
            continue
        score = [min(dist.get(n, 10**6) for n in nodes) for dist in near]
        blocks[score.index(min(score))].append(p)

    def end(at: Point, node: str, toward: str) -> None:
        _net_end(sheet, design, at, node, toward)

    # source block: EMF, Rs, input terminal
    rs = design.source_resistance
    sheet.twos.append(_Two("vs", "source", (0.0, -L), (0.0, 0.0), "vs", external=True,
                           sides=("left",),
                           nodes=(design.ground, _EMF if rs > 0 else design.input)))
    sheet.grounds.append(((0.0, -L), True))
    x_in = L + 0.75 if rs > 0 else 1.5
    if rs > 0:
        sheet.twos.append(_Two("Rs", "resistor", (0.0, 0.0), (L, 0.0),
                               f"Rs\n{texts.get('Rs', _fmt(rs, 'Ω'))}", external=True,
                               sides=("above",), nodes=(_EMF, design.input)))
        sheet.wires.append(((L, 0.0), (x_in, 0.0), True))
    else:
        sheet.wires.append(((0.0, 0.0), (x_in, 0.0), True))
    sheet.frames.append(((-1.4, -L - 1.0, x_in - 0.45, 1.35), "source"))
    sheet.terminals.append(((x_in, 0.0), "in"))
    if design.input != "in":  # the terminal's own label names it otherwise
        sheet.notes.append(((x_in, -0.3), design.input, "center", "top", SMALL, NET_BLUE))

    x = x_in + 2.5
    for i, parts in enumerate(blocks):
        ncols = max(1, min(3, len(parts)))
        width = max(6.0, ncols * _CELL)
        y_parts = -2.5
        if i < len(order):
            q = order[i]
            pnp = _is_pnp(q, design)
            base = (x + 1.6, 0.0)
            sheet.bjts.append(_Bjt(q.ref, pnp, base, _part_text(q, design, texts), q.nodes))
            c, b, e = q.nodes
            xt = base[0] + _BJT_DX
            top, bottom = (e, c) if pnp else (c, e)
            sheet.wires.append((base, (x + 0.6, 0.0), False))
            end((x + 0.6, 0.0), b, "left")
            sheet.wires.append(((xt, _BJT_DY), (xt, _BJT_DY + 0.8), False))
            end((xt, _BJT_DY + 0.8), top, "up")
            sheet.wires.append(((xt, -_BJT_DY), (xt, -_BJT_DY - 0.8), False))
            end((xt, -_BJT_DY - 0.8), bottom, "down")
            y_parts = -_BJT_DY - 3.0
        for j, p in enumerate(parts):
            col, row = j % ncols, j // ncols
            px = x + 0.8 + col * _CELL
            y_top = y_parts - row * _ROW
            n1, n2 = p.nodes[0], p.nodes[1]
            if n2 == design.supply_node or n1 == design.ground:
                n1, n2 = n2, n1
            a, bpt = (px, y_top), (px, y_top - L)
            positive = _polarity_of(design, p) if p.kind == "capacitor" else None
            flip = positive is not None and positive == n2
            pa, pb = (bpt, a) if flip else (a, bpt)
            sheet.twos.append(_Two(p.ref, p.kind, pa, pb, _part_text(p, design, texts),
                                   polarized=positive is not None, sides=("right", "left"),
                                   nodes=(n2, n1) if flip else (n1, n2)))
            end(a, n1, "up")
            end(bpt, n2, "down")
        x += width + 1.0

    # load block: output terminal, RL and CL to ground
    sheet.terminals.append(((x, 0.0), "out"))
    if design.output != "out":
        sheet.notes.append(((x, -0.3), design.output, "center", "top", SMALL, NET_BLUE))
    x_load = x + 1.25
    sheet.wires.append(((x, 0.0), (x_load, 0.0), True))
    sheet.twos.append(_Two("RL", "resistor", (x_load, 0.0), (x_load, -L),
                           f"RL\n{texts.get('RL', _fmt(design.load_resistance, 'Ω'))}",
                           external=True, sides=("right",),
                           nodes=(design.output, design.ground)))
    sheet.grounds.append(((x_load, -L), True))
    x_right = x_load
    if design.load_capacitance > 0:
        x_right = x_load + LANE
        sheet.wires.append(((x_load, 0.0), (x_right, 0.0), True))
        sheet.twos.append(_Two("CL", "capacitor", (x_right, 0.0), (x_right, -L),
                               f"CL\n{texts.get('CL', _fmt(design.load_capacitance, 'F'))}",
                               external=True, sides=("right",),
                               nodes=(design.output, design.ground)))
        sheet.grounds.append(((x_right, -L), True))
    sheet.frames.append(((x_load - 0.7, -L - 1.0, x_right + 1.9, 1.5), "load"))
    return sheet


# ---------------------------------------------------------------------------
# Rendering: rails, junction dots, label placement, schemdraw
# ---------------------------------------------------------------------------
def _finite_ys(sheet: _Sheet) -> list[float]:
    ys = [y for t in sheet.twos for (_, y) in (t.a, t.b) if math.isfinite(y)]
    ys += [y for a, b, _ in sheet.wires for (_, y) in (a, b) if math.isfinite(y)]
    ys += [q.base[1] + d for q in sheet.bjts for d in (-1.1, 1.1)]
    ys += [p[1] for p, _ in sheet.terminals]
    ys += [y for (_, y) in sheet.flags]
    return ys


def _rails(sheet: _Sheet) -> tuple[float, float]:
    """Heights of the supply rail and of the ground level, from what runs to them."""
    ys = _finite_ys(sheet) or [0.0]
    top, bottom = [max(ys) + 1.0], [min(ys) - 1.0]
    for t in sheet.twos:
        for far, near in ((t.a, t.b), (t.b, t.a)):
            if far[1] == UP:
                top.append(near[1] + L + 0.5)
            elif far[1] == DOWN:
                bottom.append(near[1] - L - 0.5)
    for a, b, _ in sheet.wires:
        for far, near in ((a, b), (b, a)):
            if far[1] == UP:
                top.append(near[1] + 1.0)
            elif far[1] == DOWN:
                bottom.append(near[1] - 1.0)
    return max(top), min(bottom)


@dataclass(frozen=True)
class _Placed:
    """A two-terminal symbol resolved to finite coordinates: body from p to q, lead wires."""

    two: _Two
    p: Point
    q: Point
    leads: tuple[tuple[Point, Point], ...]


def _resolve(sheet: _Sheet, y_top: float, y_bot: float):
    """Replace UP/DOWN by the rail heights; parts running to a rail sit against it."""
    fix = {UP: y_top, DOWN: y_bot}
    placed: list[_Placed] = []
    rail_xs: list[float] = []
    grounds = [(p, ext) for p, ext in sheet.grounds]
    for t in sheet.twos:
        a, b = t.a, t.b
        leads: list[tuple[Point, Point]] = []
        if b[1] in fix or a[1] in fix:
            rail_at_b = b[1] in fix
            far, near = (b, a) if rail_at_b else (a, b)
            y_rail = fix[far[1]]
            direction = 1.0 if far[1] == UP else -1.0
            body_near = (far[0], y_rail - direction * L)
            if abs(body_near[1] - near[1]) > EPS:
                leads.append((near, body_near))
            body = (body_near, (far[0], y_rail))
            p, q = body if rail_at_b else (body[1], body[0])
            if far[1] == UP:
                rail_xs.append(far[0])
            else:
                grounds.append(((far[0], y_rail), t.external))
        else:
            p, q = a, b
        placed.append(_Placed(t, p, q, tuple(leads)))
    wires: list[tuple[Point, Point, bool]] = []
    for a, b, ext in sheet.wires:
        pts = []
        for pt in (a, b):
            if pt[1] in fix:
                if pt[1] == UP:
                    rail_xs.append(pt[0])
                else:
                    grounds.append(((pt[0], y_bot), ext))
                pt = (pt[0], fix[pt[1]])
            pts.append(pt)
        wires.append((pts[0], pts[1], ext))
    return placed, wires, grounds, rail_xs


# ---------------------------------------------------------------------------
# Faithfulness: what a reader would take from the drawing against the netlist
# ---------------------------------------------------------------------------
def _pins(sheet: _Sheet, design: Design, placed, grounds, rail) -> list[tuple[Point, str, bool]]:
    """Every point the drawing ties to a node: part and transistor terminals, rail symbols,
    the in/out terminals and node names; True where the point names its node to a reader."""
    pins: list[tuple[Point, str, bool]] = []
    for pl in placed:
        pins += [(pl.p, pl.two.nodes[0], False), (pl.q, pl.two.nodes[1], False)]
    for q in sheet.bjts:
        bx, by = q.base
        s = -1 if q.pnp else 1
        c, b, e = q.nodes
        pins += [((bx, by), b, False), ((bx + _BJT_DX, by + s * _BJT_DY), c, False),
                 ((bx + _BJT_DX, by - s * _BJT_DY), e, False)]
    pins += [(p, design.ground, True) for p, _ in grounds]
    pins += [(p, design.supply_node, True) for p in sheet.flags]
    if rail is not None:
        pins.append((rail[0], design.supply_node, True))
    term_node = {"in": design.input, "out": design.output}
    pins += [(p, term_node.get(name, name), True) for p, name in sheet.terminals]
    pins += [(p, node, True) for p, node in sheet.names]
    pins += [(p, node, True) for p, node, required in sheet.node_tags if required]
    return pins


def _touches(p: Point, a: Point, b: Point) -> bool:
    """p on segment a-b, ends included."""
    return math.dist(p, a) < 1e-4 or math.dist(p, b) < 1e-4 or _on_segment(p, a, b)


def _seg_dist(p: Point, a: Point, b: Point) -> float:
    """Distance from p to segment a-b."""
    ax, ay = a
    dx, dy = b[0] - ax, b[1] - ay
    n2 = dx * dx + dy * dy
    t = 0.0 if n2 < EPS else max(0.0, min(1.0, ((p[0] - ax) * dx + (p[1] - ay) * dy) / n2))
    return math.dist(p, (ax + t * dx, ay + t * dy))


def _crosses(s1: tuple[Point, Point], s2: tuple[Point, Point]) -> bool:
    """A horizontal and a vertical segment crossing inside both (no joint: a crossing)."""
    (a, b), (c, d) = s1, s2
    if abs(a[1] - b[1]) < EPS and abs(c[0] - d[0]) < EPS:
        (a, b), (c, d) = (c, d), (a, b)
    if not (abs(a[0] - b[0]) < EPS and abs(c[1] - d[1]) < EPS):
        return False
    x, y = a[0], c[1]
    return (min(a[1], b[1]) + EPS < y < max(a[1], b[1]) - EPS
            and min(c[0], d[0]) + EPS < x < max(c[0], d[0]) - EPS)


def _faults(sheet: _Sheet, design: Design) -> list[str]:
    """Where the drawing would tell a reader something the netlist does not say: conductors of
    two nodes joined, a node drawn in unnamed pieces, wires crossing, or a terminal or node
    name so close to another node's conductor that it reads as joined to it. Empty: faithful."""
    y_top, y_bot = _rails(sheet)
    placed, wires, grounds, rail_xs = _resolve(sheet, y_top, y_bot)
    rail = _rail_segment(rail_xs, y_top)
    segs = [(a, b) for a, b, _ in wires if math.dist(a, b) > EPS]
    segs += [lead for pl in placed for lead in pl.leads if math.dist(*lead) > EPS]
    if rail is not None:
        segs.append(rail)
    pins = _pins(sheet, design, placed, grounds, rail)
    parent = list(range(len(segs) + len(pins)))

    def find(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    def join(i: int, j: int) -> None:
        parent[find(i)] = find(j)

    faults = []
    for i, (a, b) in enumerate(segs):
        for j in range(i + 1, len(segs)):
            c, d = segs[j]
            if _touches(c, a, b) or _touches(d, a, b) or _touches(a, c, d) or _touches(b, c, d):
                join(i, j)
            elif _crosses((a, b), (c, d)):
                faults.append(f"wires cross at {a}-{b} and {c}-{d}")
    n = len(segs)
    for k, (p, _, _) in enumerate(pins):
        for i, (a, b) in enumerate(segs):
            if _touches(p, a, b):
                join(n + k, i)
        for m in range(k + 1, len(pins)):
            if math.dist(p, pins[m][0]) < 1e-4:
                join(n + k, n + m)
    nodes_of: dict[int, set[str]] = {}
    named: dict[int, bool] = {}
    for k, (_, node, names) in enumerate(pins):
        root = find(n + k)
        nodes_of.setdefault(root, set()).add(node)
        named[root] = named.get(root, False) or names
    for nodes in nodes_of.values():
        if len(nodes) > 1:
            faults.append(f"nodes {sorted(nodes)} drawn joined")
    pieces: dict[str, list[int]] = {}
    for root, nodes in nodes_of.items():
        for node in nodes:
            pieces.setdefault(node, []).append(root)
    for node, roots in pieces.items():
        if len(roots) > 1 and not all(named[r] for r in roots):
            faults.append(f"node {node} drawn in pieces, not every piece named")
    # open ends a reader would join by eye: terminals and node names near another node
    open_ends = {t for t, _ in sheet.terminals} | {t for t, _ in sheet.names}
    for k, (p, node, _) in enumerate(pins):
        if p not in open_ends:
            continue
        root = find(n + k)
        near = [i for i, (a, b) in enumerate(segs) if find(i) != root
                and _seg_dist(p, a, b) < NEAR]
        near += [n + m for m, (q, _, _) in enumerate(pins) if find(n + m) != root
                 and math.dist(p, q) < NEAR]
        if near:
            faults.append(f"{node} at {p} reads as joined to {nodes_of[find(near[0])]}")
    return faults


def _rail_segment(rail_xs: list[float], y_top: float) -> tuple[Point, Point] | None:
    """The supply rail: from its open terminal at the left to the rightmost part on it."""
    if not rail_xs:
        return None
    return ((min(rail_xs) - 0.8, y_top), (max(rail_xs), y_top))


def _junctions(segments: list[tuple[Point, Point]], ends: list[Point],
               open_points: list[Point]) -> list[Point]:
    """Points where three or more conductors meet (T joints included): the junction dots."""
    def key(p: Point) -> tuple[int, int]:
        return (round(p[0] * 1000), round(p[1] * 1000))

    count: dict[tuple[int, int], int] = {}
    where: dict[tuple[int, int], Point] = {}
    for a, b in segments:
        for p in (a, b):
            count[key(p)] = count.get(key(p), 0) + 1
            where[key(p)] = p
    for p in ends:
        count[key(p)] = count.get(key(p), 0) + 1
        where[key(p)] = p
    for k, p in list(where.items()):
        for a, b in segments:
            if key(a) == k or key(b) == k:
                continue
            if _on_segment(p, a, b):
                count[k] += 2
    skip = {key(p) for p in open_points}
    return [where[k] for k, n in count.items() if n >= 3 and k not in skip]


def _on_segment(p: Point, a: Point, b: Point) -> bool:
    if abs(a[0] - b[0]) < EPS:
        return abs(p[0] - a[0]) < EPS and min(a[1], b[1]) + EPS < p[1] < max(a[1], b[1]) - EPS
    if abs(a[1] - b[1]) < EPS:
        return abs(p[1] - a[1]) < EPS and min(a[0], b[0]) + EPS < p[0] < max(a[0], b[0]) - EPS
    return False


def _seg_box(a: Point, b: Point, pad: float = 0.06) -> Box:
    return (min(a[0], b[0]) - pad, min(a[1], b[1]) - pad, max(a[0], b[0]) + pad,
            max(a[1], b[1]) + pad)


def _label_spot(center: Point, vertical: bool, text: str, size: float,
                sides: Iterable[str], taken: list[Box]) -> tuple[Point, str, str, Box]:
    """Free position for a part label beside its body; least overlap when none is free."""
    w, h = _text_box(text, size)
    cx, cy = center
    g = 0.45  # gap between body and text
    spots = {
        "right": ((cx + g, cy), "left", "center", (cx + g, cy - h / 2, cx + g + w, cy + h / 2)),
        "left": ((cx - g, cy), "right", "center", (cx - g - w, cy - h / 2, cx - g, cy + h / 2)),
        "above": ((cx, cy + g), "center", "bottom", (cx - w / 2, cy + g, cx + w / 2, cy + g + h)),
        "below": ((cx, cy - g), "center", "top", (cx - w / 2, cy - g - h, cx + w / 2, cy - g)),
    }
    default = ("right", "left") if vertical else ("above", "below")
    names = [s for s in sides if s in spots] + [s for s in default if s not in sides]
    best, best_cost = None, math.inf
    for shift in (0.0, 0.5, -0.5, 1.0, -1.0):
        for name in names:
            (x, y), ha, va, box = spots[name]
            dx, dy = (0.0, shift) if vertical else (shift, 0.0)
            box = (box[0] + dx, box[1] + dy, box[2] + dx, box[3] + dy)
            cost = sum(_area(box, t) for t in taken)
            if cost < EPS:
                return (x + dx, y + dy), ha, va, box
            if cost < best_cost:
                best, best_cost = ((x + dx, y + dy), ha, va, box), cost
    assert best is not None
    return best


def _area(a: Box, b: Box) -> float:
    return max(0.0, min(a[2], b[2]) - max(a[0], b[0])) * max(0.0, min(a[3], b[3]) - max(a[1], b[1]))


def _body_box(p: Point, q: Point, kind: str) -> Box:
    mid = ((p[0] + q[0]) / 2, (p[1] + q[1]) / 2)
    half_len = 0.55 if kind != "capacitor" else 0.3
    half_w = 0.55 if kind == "source" else 0.32
    if abs(p[0] - q[0]) < EPS:
        return (mid[0] - half_w, mid[1] - half_len, mid[0] + half_w, mid[1] + half_len)
    return (mid[0] - half_len, mid[1] - half_w, mid[0] + half_len, mid[1] + half_w)


def _plus_box(p: Point, q: Point) -> Box:
    """Room of the + that schemdraw writes beside a polarized capacitor's first plate (its
    SegmentText sits 0.216 before that plate and 0.18 to the left of the direction p -> q)."""
    length = math.dist(p, q) or 1.0
    ux, uy = (q[0] - p[0]) / length, (q[1] - p[1]) / length
    mx, my = (p[0] + q[0]) / 2 - 0.09 * ux, (p[1] + q[1]) / 2 - 0.09 * uy
    cx, cy = mx - 0.216 * ux - 0.18 * uy, my - 0.216 * uy + 0.18 * ux
    return (cx - 0.3, cy - 0.3, cx + 0.3, cy + 0.4)


def _render(sheet: _Sheet, title: str) -> str:
    """Turn the sheet into SVG with schemdraw's own SVG backend (no matplotlib needed)."""
    import schemdraw
    import schemdraw.elements as elm

    y_top, y_bot = _rails(sheet)
    placed, wires, grounds, rail_xs = _resolve(sheet, y_top, y_bot)

    segments: list[tuple[Point, Point]] = [(a, b) for a, b, _ in wires]
    for pl in placed:
        segments.extend(pl.leads)
    rail = _rail_segment(rail_xs, y_top)
    if rail is not None:
        segments.append(rail)
    # frames are drawn around finite contents; DOWN in a frame means "below the ground symbols"
    frames = []
    for (x0, y0, x1, y1), caption in sheet.frames:
        frames.append(((x0, y_bot - 1.0 if y0 == DOWN else y0, x1, y1), caption))

    taken: list[Box] = [_seg_box(a, b) for a, b in segments]
    for pl in placed:
        taken.append(_seg_box(pl.p, pl.q))
        taken.append(_body_box(pl.p, pl.q, pl.two.kind))
        if pl.two.polarized:
            taken.append(_plus_box(pl.p, pl.q))
    for q in sheet.bjts:
        bx, by = q.base
        taken.append((bx + _BJT_BOX[0], by + _BJT_BOX[1], bx + _BJT_BOX[2], by + _BJT_BOX[3]))
    for (gx, gy), _ in grounds:
        taken.append((gx - 0.4, gy - 0.7, gx + 0.4, gy))
    for fx, fy in sheet.flags:
        taken.append((fx - 0.8, fy, fx + 0.8, fy + 1.15))
    for (tx, ty), _ in sheet.terminals:
        taken.append((tx - 0.4, ty + 0.1, tx + 0.4, ty + 0.6))
        taken.append((tx - 0.15, ty - 0.15, tx + 0.15, ty + 0.15))
    for (nx, ny), text, ha, va, size, _ in sheet.notes:
        w, h = _text_box(text, size)
        x0 = {"left": nx, "right": nx - w, "center": nx - w / 2}[ha]
        y0 = {"bottom": ny, "top": ny - h, "center": ny - h / 2}[va]
        taken.append((x0, y0, x0 + w, y0 + h))
    if rail is not None:
        w, _ = _text_box(sheet.supply_text, FONT)
        taken.append((rail[0][0] - 0.3 - w, y_top - 0.3, rail[0][0], y_top + 0.3))
    for (x0, _, _, y1), caption in frames:
        w, h = _text_box(caption, SMALL)
        taken.append((x0 + 0.1, y1 - 0.1 - h, x0 + 0.2 + w, y1 - 0.05))

    labels: list[tuple[Point, str, str, str, float, str]] = []
    for q in sheet.bjts:
        bx, by = q.base
        at, ha, va, box = _label_spot((bx + 1.35, by), True, q.text, FONT, ("right",), taken)
        taken.append(box)
        labels.append((at, q.text, ha, va, FONT, "black"))
    for pl in placed:
        vertical = abs(pl.p[0] - pl.q[0]) < EPS
        center = ((pl.p[0] + pl.q[0]) / 2, (pl.p[1] + pl.q[1]) / 2)
        at, ha, va, box = _label_spot(center, vertical, pl.two.text, FONT, pl.two.sides, taken)
        taken.append(box)
        labels.append((at, pl.two.text, ha, va, FONT, GREY if pl.two.external else "black"))
    for (nx, ny), node, required in sheet.node_tags:
        w, h = _text_box(node, SMALL)
        best = None
        for dx, dy, ha, va in ((0.16, 0.12, "left", "bottom"), (-0.16, 0.12, "right", "bottom"),
                               (0.16, -0.12, "left", "top"), (-0.16, -0.12, "right", "top")):
            x0 = nx + dx if ha == "left" else nx + dx - w
            y0 = ny + dy if va == "bottom" else ny + dy - h
            box = (x0, y0, x0 + w, y0 + h)
            cost = sum(_area(box, t) for t in taken)
            if best is None or cost < best[0]:
                best = (cost, box, (nx + dx, ny + dy), ha, va)
            if cost < EPS:
                break
        if best is not None and (best[0] < EPS or required):
            taken.append(best[1])
            color = NET_BLUE if required else NODE_GREY
            labels.append((best[2], node, best[3], best[4], SMALL, color))

    bjt_ends = []
    for q in sheet.bjts:
        bx, by = q.base
        s = -1 if q.pnp else 1
        bjt_ends += [(bx, by), (bx + _BJT_DX, by + _BJT_DY * s), (bx + _BJT_DX, by - _BJT_DY * s)]
    part_ends = [pt for pl in placed for pt in (pl.p, pl.q)]
    symbol_ends = [p for p, _ in grounds] + list(sheet.flags) + list(sheet.marks)
    term_points = [p for p, _ in sheet.terminals]
    dots = _junctions(segments, bjt_ends + part_ends + symbol_ends + term_points, term_points)

    previous_mode = getattr(schemdraw.svgconfig, "text", "text")
    with contextlib.suppress(ValueError):
        schemdraw.svgconfig.text = "text"  # real <text> elements: searchable, selectable
    try:
        d = schemdraw.Drawing(canvas="svg", show=False)
        d.config(unit=L, fontsize=FONT, font="sans-serif", lw=1.5, color="black",
                 bgcolor="white", margin=0.6)
        for a, b, ext in wires:
            d.add(elm.Line(color=GREY if ext else "black").endpoints(a, b))
        for pl in placed:
            color = GREY if pl.two.external else "black"
            for a, b in pl.leads:
                d.add(elm.Line(color=color).endpoints(a, b))
            kind = pl.two.kind
            if kind == "resistor":
                el = elm.Resistor(color=color)
            elif kind == "capacitor":
                el = elm.Capacitor(polar=pl.two.polarized, color=color)
            elif kind == "source":
                el = elm.SourceSin(color=color)
            else:  # a part kind this drawing does not know: a plain box, still labelled
                el = elm.ResistorIEC(color=color)
            d.add(el.endpoints(pl.p, pl.q))
        for q in sheet.bjts:
            cls = elm.BjtPnp if q.pnp else elm.BjtNpn
            sym = d.add(cls(circle=True).scale(_BJT_SCALE).theta(0).anchor("base").at(q.base))
            # should another schemdraw version move the terminals, join them to our wires
            s = -1 if q.pnp else 1
            bx, by = q.base
            for got, want in ((sym.collector, (bx + _BJT_DX, by + s * _BJT_DY)),
                              (sym.emitter, (bx + _BJT_DX, by - s * _BJT_DY))):
                if math.dist((got[0], got[1]), want) > 1e-3:
                    d.add(elm.Line().endpoints((got[0], got[1]), want))
        for p, ext in grounds:
            d.add(elm.Ground(color=GREY if ext else "black").theta(0).at(p))
        for fx, fy in sheet.flags:
            d.add(elm.Vdd().theta(0).at((fx, fy)))
            d.add(elm.Label().at((fx, fy + 0.62)).label(
                sheet.supply_text, halign="center", valign="bottom", fontsize=FONT))
        if rail is not None:
            d.add(elm.Line().endpoints(*rail))
            d.add(elm.Dot(open=True).at(rail[0]))
            d.add(elm.Label().at((rail[0][0] - 0.3, y_top)).label(
                sheet.supply_text, halign="right", valign="center", fontsize=FONT))
        for p in dots:
            d.add(elm.Dot(radius=0.1).at(p))
        for p in sheet.marks:
            d.add(elm.Dot(radius=0.07).at(p))
        for p, name in sheet.terminals:
            d.add(elm.Dot(open=True, radius=0.14).at(p))
            d.add(elm.Label().at((p[0], p[1] + 0.3)).label(
                name, halign="center", valign="bottom", fontsize=FONT))
        for (x0, y0, x1, y1), caption in frames:
            corners = [(x0, y0), (x1, y0), (x1, y1), (x0, y1), (x0, y0)]
            for a, b in itertools.pairwise(corners):
                d.add(elm.Line(ls="--", lw=0.8, color=GREY).endpoints(a, b))
            d.add(elm.Label().at((x0 + 0.15, y1 - 0.1)).label(
                caption, halign="left", valign="top", fontsize=SMALL, color=GREY))
        for at, text, ha, va, size, color in sheet.notes + labels:
            d.add(elm.Label().at(at).label(text, halign=ha, valign=va, fontsize=size,
                                            color=color))
        svg = d.get_imagedata("svg").decode("utf-8")
    finally:
        with contextlib.suppress(ValueError):
            schemdraw.svgconfig.text = previous_mode
    head_end = svg.find(">") + 1
    return svg[:head_end] + f"<title>{escape(title)}</title>" + svg[head_end:]
