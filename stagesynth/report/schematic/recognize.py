"""Layout recognition: what the netlist is, before anything is drawn.

Which transistor feeds which, where the signal enters each stage (base or emitter), which part
couples one stage to the next, the order of the transistors along the signal, and which
electrolytic keeps + on which node. A junction FET is recognized like a bipolar transistor:
drain, gate and source take the places of collector, base and emitter. No drawing library
here: only the design's netlist.
"""

from __future__ import annotations

import re
from collections import deque
from collections.abc import Iterable, Mapping
from dataclasses import dataclass

from stagesynth.contracts.netlist import Design, Part


def is_pnp(part: Part, design: Design) -> bool:
    """A P-type transistor (PNP, P channel): drawn upside down, emitter or source up."""
    dev = design.devices.get(part.device or "")
    return dev is not None and getattr(dev, "polarity", "") in ("pnp", "p")


def polarity_of(design: Design, part: Part) -> str | None:
    """Node at the positive end of an electrolytic, from design.extra["capacitors"], else None."""
    caps = design.extra.get("capacitors") if isinstance(design.extra, Mapping) else None
    info = caps.get(part.ref) if isinstance(caps, Mapping) else None
    if not isinstance(info, Mapping) or not info.get("polarized"):
        return None
    positive = info.get("positive")
    return positive if positive in part.nodes else None


def natural_key(ref: str) -> tuple:
    """R2 before R10: letters, then the number."""
    m = re.match(r"([A-Za-z_]*)(\d*)(.*)", ref)
    prefix, num, rest = m.groups() if m else (ref, "", "")
    return (prefix.upper(), int(num) if num else -1, rest)


class NotAChain(Exception):
    """The netlist is not a chain the structured layout knows: use the generic layout."""


@dataclass(frozen=True)
class Stage:
    q: Part
    tap: str  # node the stage's input comes from (the input, or c/e of the stage before)
    link: Part | None  # part from tap to the entry node (None: the entry is the tap node)
    out_tap: str  # c or e node that feeds the next stage or the output
    entry: str = "b"  # where the signal enters: "b" (common emitter, follower), "e" (common base)


def find_chain(design: Design) -> tuple[list[Stage], Part | None]:
    """Stages from input to output, and the part from the last tap to the output terminal.

    A stage's signal enters at the base (common emitter, follower) or, where no base is fed
    from the chain, at the emitter (common base: the base then only has its bias network);
    the entry is the tap node itself or one part away from it.
    """
    rails = {design.supply_node, design.ground}
    passives = [p for p in design.parts if not p.is_transistor]
    pending = sorted(design.transistors, key=lambda q: natural_key(q.ref))
    if not pending:
        raise NotAChain("no transistor")
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
            raise NotAChain("no transistor is fed from the chain")
        q, tap, link, entry = found
        if link is not None:
            used.add(link.ref)
        raw.append(found)
        pending.remove(q)
        taps = [n for n in stage_outputs(q, entry) if n not in rails]
    # the output: at c or e of the last stage, directly or through one part
    last, _, _, last_entry = raw[-1]
    ends = [n for n in stage_outputs(last, last_entry) if n not in rails]
    out_link = None
    if design.output in ends:
        out_tap = design.output
    else:
        cands = [
            (p, n) for n in ends for p in passives
            if set(p.nodes) == {n, design.output} and p.ref not in used
        ]
        if len(cands) != 1:
            raise NotAChain("the output is not fed from the last stage")
        out_link, out_tap = cands[0]
    stages = []
    for i, (q, tap, link, entry) in enumerate(raw):
        if i + 1 < len(raw):
            nxt = raw[i + 1][1]
            if nxt not in stage_outputs(q, entry):
                raise NotAChain("stages are not in a chain")
            stages.append(Stage(q, tap, link, nxt, entry))
        else:
            stages.append(Stage(q, tap, link, out_tap, entry))
    # each stage's own nodes belong to it alone (apart from the tap that feeds the next stage)
    owner: dict[str, int] = {}
    for i, st in enumerate(stages):
        for n in st.q.nodes:
            if n in rails:
                continue
            if n in owner and not (owner[n] == i - 1 and n == stages[i - 1].out_tap):
                raise NotAChain("node shared between stages")
            owner.setdefault(n, i)
    return stages, out_link


def stage_outputs(q: Part, entry: str) -> tuple[str, ...]:
    """Nodes of q that can feed what follows: collector and emitter, or the collector alone
    when the signal enters at the emitter."""
    return (q.nodes[0], q.nodes[2]) if entry == "b" else (q.nodes[0],)


def other_end(part: Part, node: str) -> str:
    a, b = part.nodes[0], part.nodes[1]
    return b if a == node else a


def node_graph(design: Design) -> dict[str, set[str]]:
    """Node adjacency through any part; rails are kept out so distances follow the signal."""
    rails = {design.supply_node, design.ground}
    adj: dict[str, set[str]] = {}
    for p in design.parts:
        nodes = [n for n in p.nodes if n not in rails]
        for n in nodes:
            adj.setdefault(n, set()).update(m for m in nodes if m != n)
    return adj


def hop_distances(adj: Mapping[str, set[str]], sources: Iterable[str]) -> dict[str, int]:
    dist = {s: 0 for s in sources}
    queue = deque(dist)
    while queue:
        n = queue.popleft()
        for m in adj.get(n, ()):
            if m not in dist:
                dist[m] = dist[n] + 1
                queue.append(m)
    return dist


def signal_order(design: Design) -> list[Part]:
    """Transistors from input to output: by graph distance of their nodes from the input."""
    adj = node_graph(design)
    dist = hop_distances(adj, [design.input])
    return sorted(
        design.transistors,
        key=lambda q: (min((dist.get(n, 10**6) for n in q.nodes), default=10**6),
                       natural_key(q.ref)),
    )

