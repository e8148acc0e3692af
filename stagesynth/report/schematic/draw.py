"""Drawing a sheet as SVG with schemdraw (imported inside `render`: it is heavy): rail
heights resolved, junction dots, label spots clear of everything drawn, the symbols."""

from __future__ import annotations

import contextlib
import itertools
import math
from collections.abc import Iterable
from xml.sax.saxutils import escape

from stagesynth.report.schematic.faithful import on_segment, rail_heights, rail_segment, resolve
from stagesynth.report.schematic.labels import FONT, SMALL, text_box
from stagesynth.report.schematic.sheet import (
    DOWN,
    EPS,
    GREY,
    NET_BLUE,
    NODE_GREY,
    TRANSISTOR_SCALE,
    Box,
    L,
    Point,
    Sheet,
)


def junctions(segments: list[tuple[Point, Point]], ends: list[Point],
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
            if on_segment(p, a, b):
                count[k] += 2
    skip = {key(p) for p in open_points}
    return [where[k] for k, n in count.items() if n >= 3 and k not in skip]


def seg_box(a: Point, b: Point, pad: float = 0.06) -> Box:
    return (min(a[0], b[0]) - pad, min(a[1], b[1]) - pad, max(a[0], b[0]) + pad,
            max(a[1], b[1]) + pad)


def label_spot(center: Point, vertical: bool, text: str, size: float,
                sides: Iterable[str], taken: list[Box]) -> tuple[Point, str, str, Box]:
    """Free position for a part label beside its body; least overlap when none is free."""
    w, h = text_box(text, size)
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
            cost = sum(overlap_area(box, t) for t in taken)
            if cost < EPS:
                return (x + dx, y + dy), ha, va, box
            if cost < best_cost:
                best, best_cost = ((x + dx, y + dy), ha, va, box), cost
    assert best is not None
    return best


def overlap_area(a: Box, b: Box) -> float:
    return max(0.0, min(a[2], b[2]) - max(a[0], b[0])) * max(0.0, min(a[3], b[3]) - max(a[1], b[1]))


def body_box(p: Point, q: Point, kind: str) -> Box:
    mid = ((p[0] + q[0]) / 2, (p[1] + q[1]) / 2)
    half_len = 0.55 if kind != "capacitor" else 0.3
    half_w = 0.55 if kind == "source" else 0.32
    if abs(p[0] - q[0]) < EPS:
        return (mid[0] - half_w, mid[1] - half_len, mid[0] + half_w, mid[1] + half_len)
    return (mid[0] - half_len, mid[1] - half_w, mid[0] + half_len, mid[1] + half_w)


def plus_box(p: Point, q: Point) -> Box:
    """Room of the + that schemdraw writes beside a polarized capacitor's first plate (its
    SegmentText sits 0.216 before that plate and 0.18 to the left of the direction p -> q)."""
    length = math.dist(p, q) or 1.0
    ux, uy = (q[0] - p[0]) / length, (q[1] - p[1]) / length
    mx, my = (p[0] + q[0]) / 2 - 0.09 * ux, (p[1] + q[1]) / 2 - 0.09 * uy
    cx, cy = mx - 0.216 * ux - 0.18 * uy, my - 0.216 * uy + 0.18 * ux
    return (cx - 0.3, cy - 0.3, cx + 0.3, cy + 0.4)


def render(sheet: Sheet, title: str) -> str:
    """Turn the sheet into SVG with schemdraw's own SVG backend (no matplotlib needed)."""
    import schemdraw
    import schemdraw.elements as elm

    y_top, y_bot = rail_heights(sheet)
    placed, wires, grounds, rail_xs = resolve(sheet, y_top, y_bot)

    segments: list[tuple[Point, Point]] = [(a, b) for a, b, _ in wires]
    for pl in placed:
        segments.extend(pl.leads)
    rail = rail_segment(rail_xs, y_top)
    if rail is not None:
        segments.append(rail)
    # frames are drawn around finite contents; DOWN in a frame means "below the ground symbols"
    frames = []
    for (x0, y0, x1, y1), caption in sheet.frames:
        frames.append(((x0, y_bot - 1.0 if y0 == DOWN else y0, x1, y1), caption))

    taken: list[Box] = [seg_box(a, b) for a, b in segments]
    for pl in placed:
        taken.append(seg_box(pl.p, pl.q))
        taken.append(body_box(pl.p, pl.q, pl.two.kind))
        if pl.two.polarized:
            taken.append(plus_box(pl.p, pl.q))
    taken += [q.body() for q in sheet.transistors]
    for (gx, gy), _ in grounds:
        taken.append((gx - 0.4, gy - 0.7, gx + 0.4, gy))
    for fx, fy in sheet.flags:
        taken.append((fx - 0.8, fy, fx + 0.8, fy + 1.15))
    for (tx, ty), _ in sheet.terminals:
        taken.append((tx - 0.4, ty + 0.1, tx + 0.4, ty + 0.6))
        taken.append((tx - 0.15, ty - 0.15, tx + 0.15, ty + 0.15))
    for (nx, ny), text, ha, va, size, _ in sheet.notes:
        w, h = text_box(text, size)
        x0 = {"left": nx, "right": nx - w, "center": nx - w / 2}[ha]
        y0 = {"bottom": ny, "top": ny - h, "center": ny - h / 2}[va]
        taken.append((x0, y0, x0 + w, y0 + h))
    if rail is not None:
        w, _ = text_box(sheet.supply_text, FONT)
        taken.append((rail[0][0] - 0.3 - w, y_top - 0.3, rail[0][0], y_top + 0.3))
    for (x0, _, _, y1), caption in frames:
        w, h = text_box(caption, SMALL)
        taken.append((x0 + 0.1, y1 - 0.1 - h, x0 + 0.2 + w, y1 - 0.05))

    labels: list[tuple[Point, str, str, str, float, str]] = []
    for q in sheet.transistors:
        bx, by = q.base
        at, ha, va, box = label_spot((bx + q.symbol.label_x, by), True, q.text, FONT,
                                     ("right",), taken)
        taken.append(box)
        labels.append((at, q.text, ha, va, FONT, "black"))
    for pl in placed:
        vertical = abs(pl.p[0] - pl.q[0]) < EPS
        center = ((pl.p[0] + pl.q[0]) / 2, (pl.p[1] + pl.q[1]) / 2)
        at, ha, va, box = label_spot(center, vertical, pl.two.text, FONT, pl.two.sides, taken)
        taken.append(box)
        labels.append((at, pl.two.text, ha, va, FONT, GREY if pl.two.external else "black"))
    for (nx, ny), node, required in sheet.node_tags:
        w, h = text_box(node, SMALL)
        best = None
        for dx, dy, ha, va in ((0.16, 0.12, "left", "bottom"), (-0.16, 0.12, "right", "bottom"),
                               (0.16, -0.12, "left", "top"), (-0.16, -0.12, "right", "top")):
            x0 = nx + dx if ha == "left" else nx + dx - w
            y0 = ny + dy if va == "bottom" else ny + dy - h
            box = (x0, y0, x0 + w, y0 + h)
            cost = sum(overlap_area(box, t) for t in taken)
            if best is None or cost < best[0]:
                best = (cost, box, (nx + dx, ny + dy), ha, va)
            if cost < EPS:
                break
        if best is not None and (best[0] < EPS or required):
            taken.append(best[1])
            color = NET_BLUE if required else NODE_GREY
            labels.append((best[2], node, best[3], best[4], SMALL, color))

    lead_ends = []
    for q in sheet.transistors:
        pc, pb, pe = q.pins()
        lead_ends += [pb, pc, pe]
    part_ends = [pt for pl in placed for pt in (pl.p, pl.q)]
    symbol_ends = [p for p, _ in grounds] + list(sheet.flags) + list(sheet.marks)
    term_points = [p for p, _ in sheet.terminals]
    dots = junctions(segments, lead_ends + part_ends + symbol_ends + term_points, term_points)

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
        for q in sheet.transistors:
            pc, _, pe = q.pins()
            if q.fet:  # gate facing left (reversed); a P channel upside down, source up
                el = (elm.JFetP if q.pnp else elm.JFetN)(circle=True)
                el = el.scale(TRANSISTOR_SCALE).theta(0).reverse()
                sym = d.add((el.flip() if q.pnp else el).anchor("gate").at(q.base))
                got_c, got_e = sym.drain, sym.source
            else:
                cls = elm.BjtPnp if q.pnp else elm.BjtNpn
                sym = d.add(cls(circle=True).scale(TRANSISTOR_SCALE).theta(0)
                            .anchor("base").at(q.base))
                got_c, got_e = sym.collector, sym.emitter
            # should another schemdraw version move the terminals, join them to our wires
            for got, want in ((got_c, pc), (got_e, pe)):
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
