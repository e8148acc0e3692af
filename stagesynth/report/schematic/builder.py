"""Shared layout machinery of the wired layouts: homes and buses of nodes, parts hung as lanes
from a node to a rail, the transistor placed with its leads, the source and load blocks."""

from __future__ import annotations

import copy
import math
from collections.abc import Iterable, Mapping
from dataclasses import replace

from stagesynth.contracts.netlist import Design, Part
from stagesynth.report.schematic.labels import FONT, fmt, part_text, supply_text, text_box
from stagesynth.report.schematic.recognize import (
    NotAChain,
    is_pnp,
    natural_key,
    other_end,
    polarity_of,
)
from stagesynth.report.schematic.sheet import (
    DOWN,
    EMF,
    EPS,
    LANE,
    UP,
    L,
    Point,
    Sheet,
    Space,
    Transistor,
    Two,
    named_end,
    symbol_box,
)


class Builder:
    """Shared layout machinery: nodes have a home point and a horizontal bus; parts to a rail
    or to a node only passives touch hang from it as vertical lanes."""

    def __init__(self, design: Design, texts: Mapping[str, str], node_names: bool) -> None:
        self.d = design
        self.texts = texts
        self.node_names = node_names
        self.sheet = Sheet(supply_text=supply_text(design))
        self.space = Space()
        self.home: dict[str, Point] = {}
        self.bus_end: dict[str, float] = {}
        self.used: set[str] = set()
        self.rails = {design.supply_node, design.ground}
        self.transistor_nodes = {n for q in design.transistors for n in q.nodes}
        self.passives = [p for p in design.parts if not p.is_transistor]
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
            and node not in self.transistor_nodes
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
        positive = polarity_of(self.d, part) if part.kind == "capacitor" else None
        nodes = (a_node, other_end(part, a_node))
        if positive is not None and positive != a_node:
            a, b, nodes = b, a, (nodes[1], nodes[0])
        self.sheet.twos.append(
            Two(part.ref, part.kind, a, b, part_text(part, self.d, self.texts),
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
                and (other_end(p, node) in self.rails or self.private(other_end(p, node)))
            ]
            if not parts:
                return
            parts.sort(key=lambda p: (
                other_end(p, node) in self.rails, p.kind != "resistor", natural_key(p.ref)))
            part = parts[0]
            other = other_end(part, node)
            if other in self.rails:
                self.hang_to_rail(node, part, other, natural)
            else:
                self.hang_chain(node, part, other, natural)

    def lane_count(self, node: str, parent: int = 0) -> int:
        """Lanes the parts hanging from `node` will take: up and down share a lane; `parent`
        (+1 up, -1 down) is the side a part already takes at the node's home."""
        up = down = 0
        for p in self.unused_at(node):
            other = other_end(p, node)
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
                symbol = symbol_box(x, y_end, direction) if local else None
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
            raise NotAChain(f"no room for {part.ref}")
        self.deferred.add(part.ref)

    def child_dir(self, node: str) -> int:
        """Hang a private node toward the rail its other parts reach (ground if unclear)."""
        reach = {other_end(p, node) for p in self.unused_at(node)}
        return 1 if self.d.supply_node in reach and self.d.ground not in reach else -1

    # -- blocks shared by the layouts -----------------------------------------
    def source(self, required: bool = False) -> None:
        """Signal source (EMF, then Cs and Rs in series where given) left of the input
        terminal, which sits at (0, 0)."""
        d = self.d
        series = source_series(d, self.texts)
        xs = -(len(series) * L + 1.0) if series else -1.75
        first = series[0][3][0] if series else d.input
        src = Two("vs", "source", (xs, DOWN), (xs, 0.0), "vs", external=True, sides=("left",),
                  nodes=(d.ground, first))
        self.sheet.twos.append(src)
        self.space.add_v(xs, DOWN, 0.0, d.ground, d.input)
        x = xs
        for ref, kind, text, nodes in series:
            self.sheet.twos.append(Two(ref, kind, (x, 0.0), (x + L, 0.0), text,
                                       external=True, sides=("above",), nodes=nodes))
            x += L
        self.sheet.wires.append(((x, 0.0), (0.0, 0.0), True))
        self.space.add_h(0.0, xs, 0.0, d.input)
        self.space.boxes.append((xs - 1.4, -L - 0.5, -0.3, 1.3))
        self.sheet.frames.append(((xs - 1.3, DOWN, -0.45, 1.35), "source"))
        self.sheet.terminals.append(((0.0, 0.0), "in"))
        self.place_node(d.input, (0.0, 0.0), required, terminal="in")

    def mark_of(self, q: Part) -> Transistor:
        """The symbol of transistor q with its base (gate) at the origin."""
        return Transistor(q.ref, is_pnp(q, self.d), (0.0, 0.0), "", q.nodes,
                          fet=q.kind == "jfet")

    def place_transistor(self, q: Part, x_base: float, ty: float, last: str | None,
                         shared_ok: bool, home_y: Mapping[str, float] | None = None,
                         join: Iterable[str] = ()) -> dict[str, int]:
        """Transistor with its base at (x_base, ty); collector and emitter nodes get homes
        (drain and source: a junction FET is placed the same way, gate at (x_base, ty)).

        `last`: the node to home last (kept free to the right). `shared_ok`: a terminal on a
        node placed elsewhere gets a stub with the node's name instead of failing.
        `home_y`: a height for a node's home other than just beyond its terminal; `join`:
        placed nodes whose bus is run on to the terminal's lead.
        Returns the hanging direction of each newly homed node.
        """
        c, _, e = q.nodes
        text = part_text(q, self.d, self.texts)
        mark = replace(self.mark_of(q), base=(x_base, ty), text=text)
        self.sheet.transistors.append(mark)
        self.space.boxes.append(mark.body())
        w, h = text_box(text, FONT)
        x_label = x_base + mark.symbol.label_x + 0.45  # where the label's text starts
        self.space.boxes.append((x_label, ty - h / 2, x_label + 0.1 + w, ty + h / 2))
        # +1: collector (drain) up for N types, -1: emitter (source) up for P types
        (xt, yc), _, (_, ye) = mark.pins()
        ends = [(e, (xt, ye, 1 if ye > ty else -1)), (c, (xt, yc, 1 if yc > ty else -1))]
        ends.sort(key=lambda item: item[0] == last)  # the node to keep free goes last
        homed: dict[str, int] = {}
        for node, (x, y, direction) in ends:
            if node in join:
                hy = self.home[node][1]
                if not (self.space.h_ok(hy, self.bus_end[node], x, node)
                        and self.space.v_ok(x, y, hy, node)):
                    raise NotAChain(f"no room to join {node}")
                self.extend_bus(node, x)
                self.wire((x, y), (x, hy), node)
                continue
            if node in self.rails and self.rail_dir(node) == direction:
                self.wire((x, y), (x, UP if direction > 0 else DOWN), node)
            elif node in self.home or node in self.rails:
                if not shared_ok:
                    raise NotAChain("terminal on a node placed elsewhere")
                stub = (x, y + direction * 0.8)
                self.wire((x, y), stub, node)
                self.net_end(stub, node, "up" if direction > 0 else "down")
            else:
                home = (x, (home_y or {}).get(node, y + direction * 0.95))
                if node in (home_y or {}) and not self.space.v_ok(x, y, home[1], node):
                    raise NotAChain(f"no room for the lead to {node}")
                self.wire((x, y), home, node)
                self.place_node(node, home, required=shared_ok)
                homed[node] = direction
        return homed

    def net_end(self, at: Point, node: str, toward: str) -> None:
        """End of a lead joined to its node by name (or by the supply/ground symbol)."""
        named_end(self.sheet, self.d, at, node, toward)
        x, y = at
        self.space.boxes.append((x - 0.5, y - 0.5, x + 0.5, y + 0.5))

    def load(self, at: Point, start: float) -> None:
        """Load RL and CL to ground, right of the output terminal at `at`, in a dashed frame."""
        d = self.d
        ty = at[1]
        x_load = max(start + 1.25, self.space.right_edge() - 1.0)
        if not self.space.h_ok(ty, start, x_load + LANE, d.output):
            raise NotAChain("no room for the load")
        self.sheet.wires.append(((start, ty), (x_load, ty), True))
        load_text = f"RL\n{self.texts.get('RL', fmt(d.load_resistance, 'Ω'))}"
        self.sheet.twos.append(Two("RL", "resistor", (x_load, ty), (x_load, DOWN), load_text,
                                    external=True, sides=("right", "left"),
                                    nodes=(d.output, d.ground)))
        x_right = x_load
        if d.load_capacitance > 0:
            x_right = x_load + LANE
            self.sheet.wires.append(((x_load, ty), (x_right, ty), True))
            cl_text = f"CL\n{self.texts.get('CL', fmt(d.load_capacitance, 'F'))}"
            self.sheet.twos.append(Two("CL", "capacitor", (x_right, ty), (x_right, DOWN),
                                        cl_text, external=True, sides=("right",),
                                        nodes=(d.output, d.ground)))
        self.sheet.frames.append(((x_load - 0.7, DOWN, x_right + 1.9, ty + 1.5), "load"))

    def check_all_drawn(self) -> None:
        left = [p.ref for p in self.passives if p.ref not in self.used]
        if left:
            raise NotAChain(f"parts not drawn: {left}")


def source_series(d: Design, texts: Mapping[str, str]) -> list[tuple[str, str, str, tuple]]:
    """The source's series parts left to right (ref, kind, label, nodes): the sensor's
    capacitance Cs, then Rs; the nodes between them are drawing-only (not in the netlist)."""
    parts = []
    if d.source_capacitance > 0:
        parts.append(("Cs", "capacitor",
                      f"Cs\n{texts.get('Cs', fmt(d.source_capacitance, 'F'))}"))
    if d.source_resistance > 0:
        parts.append(("Rs", "resistor", f"Rs\n{texts.get('Rs', fmt(d.source_resistance, 'Ω'))}"))
    inner = [EMF, *(f"(source {i})" for i in range(1, len(parts)))]
    ends = [*inner, d.input]
    return [(ref, kind, text, (ends[i], ends[i + 1])) for i, (ref, kind, text) in enumerate(parts)]
