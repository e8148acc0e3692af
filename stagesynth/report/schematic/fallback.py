"""The layouts for any netlist: the net layout (transistors in signal order, rail parts wired
in, the rest drawn apart with named ends) and the plain last resort (every part on its own)."""

from __future__ import annotations

from collections.abc import Mapping

from stagesynth.contracts.netlist import Design, Part
from stagesynth.report.schematic.builder import Builder, source_series
from stagesynth.report.schematic.labels import SMALL, fmt, part_text, supply_text, text_box
from stagesynth.report.schematic.recognize import (
    hop_distances,
    is_pnp,
    natural_key,
    node_graph,
    other_end,
    polarity_of,
    signal_order,
)
from stagesynth.report.schematic.sheet import (
    LANE,
    NET_BLUE,
    L,
    Point,
    Sheet,
    Transistor,
    Two,
    named_end,
    node_text,
)


class NetBuilder(Builder):
    """Generic layout for any netlist: transistors left to right in signal order, each with the
    parts that hang from its nodes to the rails wired in; parts between two such nodes are
    drawn apart with both ends named by node.

    Nothing here assumes where the signal enters a transistor: the input terminal is wired
    only to the parts that touch the input node (their far ends named), and each transistor's
    base row starts, named, a clear gap after whatever lies to its left, so that no node's
    wiring reads as the continuation of another's.
    """

    def build(self) -> Sheet:
        d = self.d
        self.strict = False
        self.source(required=True)
        self.hang(d.input, 0)
        self.input_links()
        for q in signal_order(d):
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
            homed = self.place_transistor(q, x_base, 0.0, None, shared_ok=True)
            for node, direction in homed.items():
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
                       key=lambda p: natural_key(p.ref))
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
                        if other_end(p, d.input) not in self.rails),
                       key=lambda p: natural_key(p.ref))
        if not links:
            return
        *drops, last = links
        for part in drops:
            other = other_end(part, d.input)
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
        other = other_end(last, d.input)
        start = self.bus_end[d.input] + (1.0 if drops else 0.0)
        if not self.space.h_ok(0.0, self.bus_end[d.input], start + L, d.input, other):
            self.no_room(last)
            return
        self.extend_bus(d.input, start)
        self.space.add_h(0.0, start, start + L, d.input, other)
        self.two(last, d.input, (start, 0.0), (start + L, 0.0), ("above", "below"))
        self.net_end((start + L, 0.0), other, "right")

    def name_width(self, node: str) -> float:
        return text_box(node_text(self.d, self.sheet, node), SMALL)[0]


# The plain layout: any netlist; every part drawn on its own, ends named by node
_CELL = 3.2  # width of one part's cell in the generic layout
_ROW = L + 2.4  # height of one row of parts


def generic_sheet(design: Design, texts: Mapping[str, str]) -> Sheet:
    """One column block per transistor in signal order; each passive near its transistor."""
    sheet = Sheet(supply_text=supply_text(design))
    rails = {design.supply_node, design.ground}
    adj = node_graph(design)
    order = signal_order(design)
    near = [hop_distances(adj, [n for n in q.nodes if n not in rails]) for q in order]
    blocks: list[list[Part]] = [[] for _ in range(max(len(order), 1))]
    passives = (p for p in design.parts if not p.is_transistor)
    for p in sorted(passives, key=lambda p: natural_key(p.ref)):
        nodes = [n for n in p.nodes if n not in rails]
        if not near or not nodes:
            blocks[-1].append(p)
            continue
        score = [min(dist.get(n, 10**6) for n in nodes) for dist in near]
        blocks[score.index(min(score))].append(p)

    def end(at: Point, node: str, toward: str) -> None:
        named_end(sheet, design, at, node, toward)

    # source block: EMF, Rs, input terminal
    series = source_series(design, texts)
    sheet.twos.append(Two("vs", "source", (0.0, -L), (0.0, 0.0), "vs", external=True,
                           sides=("left",),
                           nodes=(design.ground, series[0][3][0] if series else design.input)))
    sheet.grounds.append(((0.0, -L), True))
    x_in = len(series) * L + 0.75 if series else 1.5
    x = 0.0
    for ref, kind, text, nodes in series:
        sheet.twos.append(Two(ref, kind, (x, 0.0), (x + L, 0.0), text, external=True,
                               sides=("above",), nodes=nodes))
        x += L
    sheet.wires.append(((x, 0.0), (x_in, 0.0), True))
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
            base = (x + 1.6, 0.0)
            mark = Transistor(q.ref, is_pnp(q, design), base, part_text(q, design, texts),
                              q.nodes, fet=q.kind == "jfet")
            sheet.transistors.append(mark)
            c, b, e = q.nodes
            (xt, yc), _, (_, ye) = mark.pins()
            (top, y_hi), (bottom, y_lo) = sorted(((c, yc), (e, ye)), key=lambda t: -t[1])
            sheet.wires.append((base, (x + 0.6, 0.0), False))
            end((x + 0.6, 0.0), b, "left")
            sheet.wires.append(((xt, y_hi), (xt, y_hi + 0.8), False))
            end((xt, y_hi + 0.8), top, "up")
            sheet.wires.append(((xt, y_lo), (xt, y_lo - 0.8), False))
            end((xt, y_lo - 0.8), bottom, "down")
            y_parts = y_lo - 3.0
        for j, p in enumerate(parts):
            col, row = j % ncols, j // ncols
            px = x + 0.8 + col * _CELL
            y_top = y_parts - row * _ROW
            n1, n2 = p.nodes[0], p.nodes[1]
            if n2 == design.supply_node or n1 == design.ground:
                n1, n2 = n2, n1
            a, bpt = (px, y_top), (px, y_top - L)
            positive = polarity_of(design, p) if p.kind == "capacitor" else None
            flip = positive is not None and positive == n2
            pa, pb = (bpt, a) if flip else (a, bpt)
            sheet.twos.append(Two(p.ref, p.kind, pa, pb, part_text(p, design, texts),
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
    sheet.twos.append(Two("RL", "resistor", (x_load, 0.0), (x_load, -L),
                           f"RL\n{texts.get('RL', fmt(design.load_resistance, 'Ω'))}",
                           external=True, sides=("right",),
                           nodes=(design.output, design.ground)))
    sheet.grounds.append(((x_load, -L), True))
    x_right = x_load
    if design.load_capacitance > 0:
        x_right = x_load + LANE
        sheet.wires.append(((x_load, 0.0), (x_right, 0.0), True))
        sheet.twos.append(Two("CL", "capacitor", (x_right, 0.0), (x_right, -L),
                               f"CL\n{texts.get('CL', fmt(design.load_capacitance, 'F'))}",
                               external=True, sides=("right",),
                               nodes=(design.output, design.ground)))
        sheet.grounds.append(((x_right, -L), True))
    sheet.frames.append(((x_load - 0.7, -L - 1.0, x_right + 1.9, 1.5), "load"))
    return sheet
