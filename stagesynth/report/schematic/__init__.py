"""Schematic of a designed stage as SVG text, drawn with schemdraw from the design's netlist.

Three layouts, tried in turn:
- chain: stages fed one from the next, recognized from the netlist's structure and drawn the
  way an engineer would: supply rail on top, ground at the bottom, signal from left to right,
  every connection a wire. A stage is fed at its base (common emitter with divider bias, a
  collector-to-base resistor or a split, decoupled one, and a split, bypassed emitter
  resistor; emitter follower, also with a bootstrapped base resistor) or at its emitter
  (common base: the base row sits beside the signal row with its bias and decoupling parts);
  NPN or the PNP mirror; cascades. A junction FET (N or P channel) takes a bipolar
  transistor's place: drain, gate and source where collector, base and emitter would be;
- net: any netlist; transistors left to right in signal order with the parts that run from
  their nodes to the rails wired in, the remaining parts drawn apart with each end named by
  its node (the same name is the same node);
- plain: the last resort, every part drawn on its own with named ends.
A layout's drawing is only used when it is faithful (`find_faults`): no two nodes' conductors
joined, no node split into unnamed pieces, no crossing, and no terminal or name so close to
another node's conductor that a reader would take it as wired there.

Modules, by job: `recognize` (what the netlist is: stages, entries, signal order; no drawing),
`labels` (value and type texts), `sheet` (what to draw, in drawing units, and the occupied
lanes), `builder` (shared layout machinery), `chain` (the chain layout), `fallback` (the net and
plain layouts), `faithful` (the drawing read back against the netlist), `draw` (schemdraw).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace
from pathlib import Path

from stagesynth.contracts.netlist import Design
from stagesynth.report.schematic.chain import ChainBuilder
from stagesynth.report.schematic.draw import render
from stagesynth.report.schematic.faithful import find_faults
from stagesynth.report.schematic.fallback import NetBuilder, generic_sheet
from stagesynth.report.schematic.sheet import Sheet

__all__ = ["choose_layout", "draw_schematic", "save_schematic"]


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
    sheet = choose_layout(design, dict(values or {}), node_names)
    return render(sheet, design.title or design.topology or "stage schematic")


def save_schematic(
    design: Design, path: str | Path, values: Mapping[str, str] | None = None
) -> Path:
    """Write the schematic of `design` to `path` (SVG) and return the path."""
    path = Path(path)
    path.write_text(draw_schematic(design, values), encoding="utf-8")
    return path


def choose_layout(design: Design, texts: Mapping[str, str], node_names: bool = True) -> Sheet:
    """The first layout that places the netlist and draws it faithfully (see `find_faults`)."""
    for builder in (ChainBuilder, NetBuilder):
        # a layout that cannot place this netlist, or would draw a connection the netlist
        # does not have, must not stop the report: the plain layout at the end draws any
        # netlist, every part on its own with its ends named
        try:
            sheet = builder(design, texts, node_names).build()
        except Exception:
            continue
        if not find_faults(sheet, design):
            return sheet
    return generic_sheet(design, texts)

