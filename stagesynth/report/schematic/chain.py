"""Hand-style layout of a chain of stages: supply rail on top, ground at the bottom, signal
from left to right, every connection a wire (the stages as `recognize.find_chain` finds them)."""

from __future__ import annotations

from stagesynth.contracts.netlist import Part
from stagesynth.report.schematic.builder import Builder
from stagesynth.report.schematic.recognize import NotAChain, Stage, find_chain, is_pnp, other_end
from stagesynth.report.schematic.sheet import EPS, LANE, SIDE, L, Point, Sheet


class ChainBuilder(Builder):
    """Hand-style layout of a chain of stages, found from the netlist's structure."""

    def build(self) -> Sheet:
        stages, out_link = find_chain(self.d)
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
            raise NotAChain(f"no room for {part.ref}")
        self.extend_bus(tap, start)
        self.space.add_h(ty, start, start + L, tap, node)
        self.two(part, tap, (start, ty), (start + L, ty), ("above", "below"))
        return start + L

    def stage(self, st: Stage) -> None:
        """One stage; where its parts find no room, again with more width before the base."""
        draw = self.stage_emitter if st.entry == "e" else self.stage_base
        for extra in (0.0, LANE, 2 * LANE, 4 * LANE):
            saved = self.save()
            try:
                draw(st, extra)
                return
            except NotAChain:
                self.restore(saved)
        raise NotAChain(f"no room for the stage of {st.q.ref}")

    def through(self, a: str, z: str) -> tuple[Part, str, Part] | None:
        """Two unused parts in series from a to z through a node only passives touch (a split
        feedback resistor, a bootstrapped base resistor); None when there is none."""
        if z in self.rails:
            return None
        found = []
        for p in self.unused_at(a):
            m = other_end(p, a)
            if m == a or not self.private(m):
                continue
            found += [(p, m, p2) for p2 in self.unused_at(m) if p2 is not p
                      and set(p2.nodes) == {m, z}]
        if len(found) > 1:
            raise NotAChain(f"more than one path from {a} to {z}")
        return found[0] if found else None

    def stage_base(self, st: Stage, extra: float) -> None:
        """A stage fed at the base: bias network hanging from the base row, and where present
        a collector-to-base resistor over the transistor, a split one with its decoupled
        midpoint on a row beside the collector side, or a bootstrapped base resistor whose
        far end sits on a row beside the emitter side, joined to the emitter."""
        c, b, e = st.q.nodes
        s = -1 if is_pnp(st.q, self.d) else 1  # +1: collector up (NPN)
        dx = self.mark_of(st.q).symbol.dx  # base to the collector and emitter leads
        ty = self.home[st.tap][1]
        single = [p for p in self.unused_at(b) if c not in self.rails and set(p.nodes) == {b, c}]
        split = self.through(b, c)
        boot = self.through(b, e)
        if len(single) > 1 or (single and split) or ((single or split) and boot):
            raise NotAChain("base network not of a known shape")
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
            x_base = max(x_base, x_turn + 2 * L + width + 0.6 - dx)
            home_y[c] = ty + s * SIDE
        elif boot:
            x = boot[1]
            width = (self.lane_count(x, s) - 1) * LANE
            x_base = max(x_base, x_turn + width + L + 0.6 - dx)
            home_y[e] = ty - s * SIDE
        x_base += extra
        if not self.space.h_ok(ty, self.bus_end[b], x_base, b):
            raise NotAChain("no room for the base row")
        self.extend_bus(b, x_base)
        homed = self.place_transistor(st.q, x_base, ty, st.out_tap, shared_ok=False, home_y=home_y)
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
                raise NotAChain(f"no room for {p_b.ref}")
            self.space.add_v(x_turn, ty, y_x, b, x)
            self.two(p_b, b, (x_turn, ty), (x_turn, y_x), ("right", "left"))
            self.place_node(x, (x_turn, y_x))
            self.hang(x, -s)
            self.across(p_e, x, (self.bus_end[x], y_x), e, self.home[e])
        elif single or split or boot:
            raise NotAChain("base network not placed")
        if st.out_tap in homed:  # the node feeding the next stage keeps a free corridor
            xo, yo = self.home[st.out_tap]
            self.space.corridors[st.out_tap] = (yo, xo)
        for node, direction in homed.items():
            self.hang(node, direction)

    def stage_emitter(self, st: Stage, extra: float) -> None:
        """A stage fed at the emitter (common base): the signal row runs into the emitter lead;
        the base sits a row beside it, away from the emitter (above for NPN), with its bias
        and decoupling parts hanging from the base row to local ground or supply symbols."""
        _, b, e = st.q.nodes
        s = -1 if is_pnp(st.q, self.d) else 1
        sym = self.mark_of(st.q).symbol
        ty = self.home[st.tap][1]
        if b in self.home:
            raise NotAChain("base node placed elsewhere")
        if st.link is not None:
            end = self.link(st.link, st.tap, e)
            self.place_node(e, (end, ty))
        else:
            self.space.corridors.pop(st.tap, None)
            end = self.bus_end[e]
        ty_b = ty + s * SIDE
        width = (self.lane_count(b) - 1) * LANE
        x_base = max(end + 0.6 - sym.dx, 0.6 + 1.6 + width) + extra
        self.place_node(b, (x_base - 1.6 - width, ty_b))
        homed = self.place_transistor(st.q, x_base, ty_b, st.out_tap, shared_ok=False, join=(e,))
        self.hang(b, 0)
        if not self.space.h_ok(ty_b, self.bus_end[b], x_base + sym.box[0] - EPS, b):
            raise NotAChain("no room for the base row")
        self.extend_bus(b, x_base)
        self.lane_start[e] = x_base + sym.dx  # the emitter's own parts right under its lead
        self.hang(e, -s)
        if st.out_tap in homed:
            xo, yo = self.home[st.out_tap]
            self.space.corridors[st.out_tap] = (yo, xo)
        for node, direction in homed.items():
            self.hang(node, direction)

    def turn(self, node: str, at: Point, y: float) -> None:
        """A wire from a point on node's bus to height y."""
        if not self.space.v_ok(at[0], at[1], y, node):
            raise NotAChain(f"no room to turn {node}")
        self.wire(at, (at[0], y), node)

    def row_part(self, part: Part, a_node: str, a: Point, z_node: str, x_end: float) -> None:
        """Part along a row, from a (on a_node) to x_end (z_node)."""
        if not self.space.h_ok(a[1], a[0], x_end, a_node, z_node):
            raise NotAChain(f"no room for {part.ref}")
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
                raise NotAChain("no room for the output terminal")
            self.extend_bus(tap, x)
            at = (x, ty)
            if tap == d.output:  # the terminal on the same wire already names it
                self.sheet.node_tags = [t for t in self.sheet.node_tags if t[1] != tap]
        self.sheet.terminals.append((at, "out"))
        self.space.corridors[d.output] = (at[1], at[0])  # keep the way to the load free
        self.hang(d.output, 0)
        self.load(at, max(self.bus_end.get(d.output, at[0]), at[0]))
