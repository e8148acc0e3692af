"""Faithfulness of a sheet: what a reader would take from the drawing, against the netlist.

The rails resolved to heights, every conductor and every point tied to a node; a layout is
used only when no two nodes' conductors join, no node is split into unnamed pieces, no wires
cross, and no open end sits so close to another node that it reads as joined to it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from stagesynth.contracts.netlist import Design
from stagesynth.report.schematic.sheet import (
    DOWN,
    EPS,
    NEAR,
    UP,
    L,
    Point,
    Sheet,
    Two,
)


def _finite_ys(sheet: Sheet) -> list[float]:
    ys = [y for t in sheet.twos for (_, y) in (t.a, t.b) if math.isfinite(y)]
    ys += [y for a, b, _ in sheet.wires for (_, y) in (a, b) if math.isfinite(y)]
    ys += [q.base[1] + d for q in sheet.transistors for d in q.symbol.span]
    ys += [p[1] for p, _ in sheet.terminals]
    ys += [y for (_, y) in sheet.flags]
    return ys


def rail_heights(sheet: Sheet) -> tuple[float, float]:
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
class Placed:
    """A two-terminal symbol resolved to finite coordinates: body from p to q, lead wires."""

    two: Two
    p: Point
    q: Point
    leads: tuple[tuple[Point, Point], ...]


def resolve(sheet: Sheet, y_top: float, y_bot: float):
    """Replace UP/DOWN by the rail heights; parts running to a rail sit against it."""
    fix = {UP: y_top, DOWN: y_bot}
    placed: list[Placed] = []
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
        placed.append(Placed(t, p, q, tuple(leads)))
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


def drawn_pins(sheet: Sheet, design: Design, placed, grounds,
               rail) -> list[tuple[Point, str, bool]]:
    """Every point the drawing ties to a node: part and transistor terminals, rail symbols,
    the in/out terminals and node names; True where the point names its node to a reader."""
    pins: list[tuple[Point, str, bool]] = []
    for pl in placed:
        pins += [(pl.p, pl.two.nodes[0], False), (pl.q, pl.two.nodes[1], False)]
    for q in sheet.transistors:
        (pc, pb, pe), (c, b, e) = q.pins(), q.nodes
        pins += [(pb, b, False), (pc, c, False), (pe, e, False)]
    pins += [(p, design.ground, True) for p, _ in grounds]
    pins += [(p, design.supply_node, True) for p in sheet.flags]
    if rail is not None:
        pins.append((rail[0], design.supply_node, True))
    term_node = {"in": design.input, "out": design.output}
    pins += [(p, term_node.get(name, name), True) for p, name in sheet.terminals]
    pins += [(p, node, True) for p, node in sheet.names]
    pins += [(p, node, True) for p, node, required in sheet.node_tags if required]
    return pins


def touches(p: Point, a: Point, b: Point) -> bool:
    """p on segment a-b, ends included."""
    return math.dist(p, a) < 1e-4 or math.dist(p, b) < 1e-4 or on_segment(p, a, b)


def seg_dist(p: Point, a: Point, b: Point) -> float:
    """Distance from p to segment a-b."""
    ax, ay = a
    dx, dy = b[0] - ax, b[1] - ay
    n2 = dx * dx + dy * dy
    t = 0.0 if n2 < EPS else max(0.0, min(1.0, ((p[0] - ax) * dx + (p[1] - ay) * dy) / n2))
    return math.dist(p, (ax + t * dx, ay + t * dy))


def crosses(s1: tuple[Point, Point], s2: tuple[Point, Point]) -> bool:
    """A horizontal and a vertical segment crossing inside both (no joint: a crossing)."""
    (a, b), (c, d) = s1, s2
    if abs(a[1] - b[1]) < EPS and abs(c[0] - d[0]) < EPS:
        (a, b), (c, d) = (c, d), (a, b)
    if not (abs(a[0] - b[0]) < EPS and abs(c[1] - d[1]) < EPS):
        return False
    x, y = a[0], c[1]
    return (min(a[1], b[1]) + EPS < y < max(a[1], b[1]) - EPS
            and min(c[0], d[0]) + EPS < x < max(c[0], d[0]) - EPS)


def find_faults(sheet: Sheet, design: Design) -> list[str]:
    """Where the drawing would tell a reader something the netlist does not say: conductors of
    two nodes joined, a node drawn in unnamed pieces, wires crossing, or a terminal or node
    name so close to another node's conductor that it reads as joined to it. Empty: faithful."""
    y_top, y_bot = rail_heights(sheet)
    placed, wires, grounds, rail_xs = resolve(sheet, y_top, y_bot)
    rail = rail_segment(rail_xs, y_top)
    segs = [(a, b) for a, b, _ in wires if math.dist(a, b) > EPS]
    segs += [lead for pl in placed for lead in pl.leads if math.dist(*lead) > EPS]
    if rail is not None:
        segs.append(rail)
    pins = drawn_pins(sheet, design, placed, grounds, rail)
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
            if touches(c, a, b) or touches(d, a, b) or touches(a, c, d) or touches(b, c, d):
                join(i, j)
            elif crosses((a, b), (c, d)):
                faults.append(f"wires cross at {a}-{b} and {c}-{d}")
    n = len(segs)
    for k, (p, _, _) in enumerate(pins):
        for i, (a, b) in enumerate(segs):
            if touches(p, a, b):
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
                and seg_dist(p, a, b) < NEAR]
        near += [n + m for m, (q, _, _) in enumerate(pins) if find(n + m) != root
                 and math.dist(p, q) < NEAR]
        if near:
            faults.append(f"{node} at {p} reads as joined to {nodes_of[find(near[0])]}")
    return faults


def rail_segment(rail_xs: list[float], y_top: float) -> tuple[Point, Point] | None:
    """The supply rail: from its open terminal at the left to the rightmost part on it."""
    if not rail_xs:
        return None
    return ((min(rail_xs) - 0.8, y_top), (max(rail_xs), y_top))


def on_segment(p: Point, a: Point, b: Point) -> bool:
    if abs(a[0] - b[0]) < EPS:
        return abs(p[0] - a[0]) < EPS and min(a[1], b[1]) + EPS < p[1] < max(a[1], b[1]) - EPS
    if abs(a[1] - b[1]) < EPS:
        return abs(p[1] - a[1]) < EPS and min(a[0], b[0]) + EPS < p[0] < max(a[0], b[0]) - EPS
    return False
