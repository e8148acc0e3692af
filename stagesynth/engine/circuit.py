"""A design compiled to index form: node numbers, conductance incidence, BJT terminals.

Both the DC and the AC solvers work on this form. It is built once per design
topology; part values and conditions arrive as batched arrays so that corners
and Monte Carlo units are solved together.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stagesynth.contracts.device import Device
from stagesynth.contracts.jfet import Jfet
from stagesynth.contracts.netlist import Design


@dataclass(frozen=True)
class CompiledBjt:
    ref: str
    device_name: str
    device: Device
    c: int
    b: int  # external base terminal
    bi: int  # internal base node b' (== b when r_bb is 0)
    e: int


@dataclass(frozen=True)
class CompiledJfet:
    """A junction FET in index form; `c`, `bi`, `e` name drain, gate and source too, so
    code that walks the three terminals of any transistor reads both kinds alike."""

    ref: str
    device_name: str
    device: Jfet
    d: int
    g: int
    s: int

    @property
    def c(self) -> int:
        return self.d

    @property
    def b(self) -> int:
        return self.g

    @property
    def bi(self) -> int:
        return self.g

    @property
    def e(self) -> int:
        return self.s


@dataclass(frozen=True)
class Circuit:
    """Index form of a design.

    Unknown node voltages are 0..n-1; index n is ground and n+1 the supply.
    Resistors and capacitors are (ref, a, b) index pairs into that extended vector.
    """

    node_names: tuple[str, ...]  # names of the n unknown nodes (internal bases as "Q1.b'")
    index: dict[str, int]  # node name -> index in the extended vector
    resistors: tuple[tuple[str, int, int], ...]
    capacitors: tuple[tuple[str, int, int], ...]
    bjts: tuple[CompiledBjt, ...]
    input: int
    output: int
    jfets: tuple[CompiledJfet, ...] = ()  # junction FETs (second release)

    @property
    def transistors(self) -> tuple[CompiledBjt | CompiledJfet, ...]:
        """Bipolar transistors first, then junction FETs: the column order of every
        per-transistor array (DC points, swing ratios, conditions' spread values)."""
        return self.bjts + self.jfets

    @property
    def nq(self) -> int:
        """Number of transistors of either kind."""
        return len(self.bjts) + len(self.jfets)

    @property
    def n(self) -> int:
        return len(self.node_names)

    @property
    def ground(self) -> int:
        return self.n

    @property
    def supply(self) -> int:
        return self.n + 1

    def incidence(self, pairs: tuple[tuple[str, int, int], ...]) -> np.ndarray:
        """(n+2, k) incidence of two-terminal branches: +1 at one end, -1 at the other."""
        a = np.zeros((self.n + 2, len(pairs)))
        for k, (_, i, j) in enumerate(pairs):
            a[i, k] += 1.0
            a[j, k] -= 1.0
        return a


def compile_design(design: Design) -> Circuit:
    """Number the nodes of `design`; ground and supply go last as fixed nodes."""
    names: list[str] = []
    fixed = {design.ground, design.supply_node}
    for node in design.nodes():
        if node not in fixed:
            names.append(node)
    bjt_internal: dict[str, str] = {}
    for p in design.bjts:
        if design.devices[p.device].r_bb > 0:
            bjt_internal[p.ref] = f"{p.ref}.b'"
            names.append(bjt_internal[p.ref])
    n = len(names)
    index = {name: i for i, name in enumerate(names)}
    index[design.ground] = n
    index[design.supply_node] = n + 1

    resistors = tuple(
        (p.ref, index[p.nodes[0]], index[p.nodes[1]]) for p in design.parts if p.kind == "resistor"
    )
    capacitors = tuple(
        (p.ref, index[p.nodes[0]], index[p.nodes[1]])
        for p in design.parts
        if p.kind == "capacitor"
    )
    bjts = []
    for p in design.bjts:
        c, b, e = (index[x] for x in p.nodes)
        bi = index[bjt_internal[p.ref]] if p.ref in bjt_internal else b
        bjts.append(CompiledBjt(p.ref, p.device, design.devices[p.device], c, b, bi, e))
    jfets = tuple(
        CompiledJfet(p.ref, p.device, design.devices[p.device], *(index[x] for x in p.nodes))
        for p in design.jfets
    )
    return Circuit(
        jfets=jfets,
        node_names=tuple(names),
        index=index,
        resistors=resistors,
        capacitors=capacitors,
        bjts=tuple(bjts),
        input=index[design.input],
        output=index[design.output],
    )
