"""Connectivity checks of a design's netlist: unknown terminals, dangling nodes, islands.

A net the solvers could not make sense of is refused with one message naming the part.
"""

from __future__ import annotations

from collections import Counter
from typing import TYPE_CHECKING

from stagesynth.contracts.devicefile import _Reader

if TYPE_CHECKING:
    from stagesynth.contracts.netlist import Design


def check_connectivity(design: Design, file: str = "<design>") -> None:
    """Refuse nets a solver could not make sense of: unknown terminals, dangling nodes."""
    r = _Reader(file)
    touches: Counter[str] = Counter()
    for p in design.parts:
        for n in set(p.nodes):
            touches[n] += 1
    for key, node in (("supply.node", design.supply_node), ("input", design.input),
                      ("output", design.output)):
        if touches[node] == 0:
            raise r.fail(key, f"node {node!r} is not connected to any part",
                         "a node that appears in some part's nodes")
    if touches[design.ground] == 0:
        raise r.fail("ground", f"ground node {design.ground!r} is not connected to any part",
                     "the name of the node parts use for ground")
    if len({design.supply_node, design.input, design.output, design.ground}) < 4:
        raise r.fail("input", "ground, supply, input and output must be four different nodes",
                     "distinct node names")
    external = {design.ground, design.supply_node, design.input, design.output}
    for p in design.parts:
        for n in p.nodes:
            if n not in external and touches[n] < 2:
                raise r.fail(f"parts ({p.ref})", f"node {n!r} is left floating: only {p.ref} "
                             "connects to it", "a node shared by at least two parts")
    _check_islands(design, r)


def _check_islands(design: Design, r: _Reader) -> None:
    """Refuse parts with no path to ground at signal frequencies (a singular circuit).

    Supply and ground are one node for the signal; a transistor joins its three
    terminals (r_pi, r_o, C_mu). A group of parts that touches neither is a floating
    island: its node voltages are undefined, so the solvers' matrices are singular.
    """
    parent: dict[str, str] = {}

    def find(x: str) -> str:
        root = x
        while parent.setdefault(root, root) != root:
            root = parent[root]
        while parent[x] != root:  # path compression, iterative (no recursion limit)
            parent[x], x = root, parent[x]
        return root

    def join(a: str, b: str) -> None:
        parent[find(a)] = find(b)

    join(design.supply_node, design.ground)
    for p in design.parts:
        for n in p.nodes[1:]:
            join(p.nodes[0], n)
    ground = find(design.ground)
    for p in design.parts:
        for n in p.nodes:
            if find(n) != ground:
                island = sorted(q.ref for q in design.parts if find(q.nodes[0]) == find(n))
                raise r.fail(f"parts ({p.ref})",
                             f"node {n!r} floats: {', '.join(island)} connect(s) to neither "
                             "ground nor the supply, so its voltage is undefined",
                             "every part connected, through other parts, to ground or supply")
