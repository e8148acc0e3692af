"""The circuit as data: parts, nodes and devices; design-file (JSON) read, validate, write.

The design file (format "stagesynth-design-1") is the one hand-off between
synthesis and analysis: `analyze` reads exactly what `design` writes, so a user
can edit a value and re-check it. Unknown top-level keys are kept on a round trip.
"""

from __future__ import annotations

import json
import math
from collections import Counter
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from stagesynth.contracts.connectivity import check_connectivity
from stagesynth.contracts.device import Device
from stagesynth.contracts.devicefile import _Reader, any_device_from_design_dict
from stagesynth.contracts.jfet import Jfet
from stagesynth.quantities.errors import StageError
from stagesynth.quantities.limits import (
    AMBIENT_LIMIT,
    MAX_DEPTH,
    MAX_PARTS,
    SUPPLY_LIMIT,
    nesting_depth,
    out_of_range,
)
from stagesynth.quantities.units import format_quantity as fq

FORMAT = "stagesynth-design-1"
PART_KINDS = ("resistor", "capacitor", "bjt", "jfet")
BJT_TERMINALS = ("c", "b", "e")
JFET_TERMINALS = ("d", "g", "s")  # junction FET (second release)

@dataclass(frozen=True)
class Part:
    """One part. Resistors and capacitors have two nodes; a BJT has (c, b, e) and a device,
    a junction FET (d, g, s) and a device."""

    ref: str
    kind: str
    nodes: tuple[str, ...]
    value: float | None = None
    device: str | None = None

    @property
    def is_bjt(self) -> bool:
        return self.kind == "bjt"

    @property
    def is_jfet(self) -> bool:
        return self.kind == "jfet"

    @property
    def is_transistor(self) -> bool:
        """A BJT or a junction FET: a part with a device and three terminals."""
        return self.kind in ("bjt", "jfet")

    def to_dict(self) -> dict[str, Any]:
        if self.is_jfet:
            return {"ref": self.ref, "kind": "jfet", "device": self.device,
                    "nodes": dict(zip(JFET_TERMINALS, self.nodes, strict=True))}
        if self.is_bjt:
            return {
                "ref": self.ref,
                "kind": "bjt",
                "device": self.device,
                "nodes": dict(zip(BJT_TERMINALS, self.nodes, strict=True)),
            }
        return {"ref": self.ref, "kind": self.kind, "value": self.value, "nodes": list(self.nodes)}


@dataclass(frozen=True)
class Design:
    """A complete stage: netlist plus the source, load and supply it was designed for."""

    parts: tuple[Part, ...]
    devices: Mapping[str, Device | Jfet]
    supply_voltage: float
    load_resistance: float
    source_resistance: float = 0.0
    load_capacitance: float = 0.0
    supply_node: str = "vcc"
    input: str = "in"
    output: str = "out"
    ground: str = "0"
    title: str = ""
    topology: str = ""
    band: tuple[float, float] | None = None  # requirement band; midband is its geometric mean
    predicted: Mapping[str, Any] = field(default_factory=dict)
    extra: Mapping[str, Any] = field(default_factory=dict)
    source_capacitance: float = 0.0  # F in series with the source EMF; 0: none

    # -- queries -------------------------------------------------------------
    @property
    def bjts(self) -> tuple[Part, ...]:
        return tuple(p for p in self.parts if p.is_bjt)

    @property
    def jfets(self) -> tuple[Part, ...]:
        return tuple(p for p in self.parts if p.is_jfet)

    @property
    def transistors(self) -> tuple[Part, ...]:
        """Bipolar transistors first, then junction FETs: the order of the engine's
        per-transistor arrays."""
        return self.bjts + self.jfets

    def part(self, ref: str) -> Part:
        for p in self.parts:
            if p.ref == ref:
                return p
        raise KeyError(ref)

    def nodes(self) -> list[str]:
        """Every node name, ground first, in a stable order."""
        seen: dict[str, None] = {self.ground: None}
        for name in (self.supply_node, self.input, self.output):
            seen.setdefault(name, None)
        for p in self.parts:
            for n in p.nodes:
                seen.setdefault(n, None)
        return list(seen)

    # -- edits ---------------------------------------------------------------
    def with_values(self, values: Mapping[str, float]) -> Design:
        """A copy with some passive parts' values replaced (by reference designator)."""
        unknown = set(values) - {p.ref for p in self.parts if not p.is_transistor}
        if unknown:
            raise KeyError(f"no passive part named {sorted(unknown)}")
        parts = tuple(
            replace(p, value=float(values[p.ref])) if p.ref in values else p for p in self.parts
        )
        return replace(self, parts=parts)

    def with_value(self, ref: str, value: float | str) -> Design:
        """A what-if copy with one resistor or capacitor changed ("4k7", "4.7 kΩ" or SI).

        Figures computed for the old values (predicted, pole/zero map, capacitor stress,
        robustness) are dropped from the copy: re-analyse it for new ones.
        """
        from stagesynth.quantities.units import parse_quantity

        try:
            part = self.part(ref)
        except KeyError:
            raise StageError(f"no part named {ref!r}", key="ref", accepted=", ".join(
                p.ref for p in self.parts if not p.is_transistor)) from None
        if part.is_transistor or part.kind not in ("resistor", "capacitor"):
            raise StageError(f"{ref} is a {part.kind}; only resistors and capacitors take a "
                             "value", key=ref, accepted="a resistor or capacitor reference")
        unit = "Ω" if part.kind == "resistor" else "F"
        v = parse_quantity(value, unit, key=ref)
        if not (v > 0 and math.isfinite(v)):
            raise StageError(f"{value!r} is not a positive {part.kind} value", key=ref,
                             accepted="e.g. '4k7', '4.7 kΩ', '100 nF' or a positive number")
        extra = {k: x for k, x in self.extra.items()
                 if k not in ("poles_zeros", "capacitors", "robustness")}
        return replace(self.with_values({ref: v}), predicted={}, extra=extra)

    def shorted(self, ref: str) -> Design:
        """A copy with two-terminal part `ref` replaced by a wire (its nodes merged).

        The node kept is a terminal (ground, supply, input, output) where one end is;
        otherwise the first node. Roles naming the part are dropped with it.
        """
        part = self.part(ref)
        if part.is_transistor:
            raise ValueError(f"{ref} is a transistor; only two-terminal parts can be shorted")
        a, b = part.nodes
        fixed = {self.ground, self.supply_node, self.input, self.output}
        keep, gone = (b, a) if a not in fixed and b in fixed else (a, b)
        parts = tuple(
            replace(p, nodes=tuple(keep if n == gone else n for n in p.nodes))
            for p in self.parts
            if p.ref != ref
        )
        extra = dict(self.extra)
        if isinstance(extra.get("roles"), Mapping):
            extra["roles"] = {k: v for k, v in extra["roles"].items() if k != ref}
        return replace(self, parts=parts, extra=extra)

    def values(self) -> dict[str, float]:
        """Values of the passive parts by reference designator."""
        return {p.ref: float(p.value) for p in self.parts
                if not p.is_transistor and p.value is not None}

    # -- serialization ---------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        data: dict[str, Any] = {
            "format": FORMAT,
            "title": self.title,
            "topology": self.topology,
            "ground": self.ground,
            "supply": {"node": self.supply_node, "voltage": self.supply_voltage},
            "input": self.input,
            "output": self.output,
            "source": {"resistance": self.source_resistance,
                       **({"capacitance": self.source_capacitance}
                          if self.source_capacitance > 0 else {})},
            "load": {"resistance": self.load_resistance, "capacitance": self.load_capacitance},
            "parts": [p.to_dict() for p in self.parts],
            "devices": {name: dev.to_design_dict() for name, dev in self.devices.items()},
        }
        if self.band is not None:
            data["band"] = {"f_low": self.band[0], "f_high": self.band[1]}
        if self.predicted:
            data["predicted"] = dict(self.predicted)
        for key, value in self.extra.items():
            data.setdefault(key, value)
        return data

    def to_json(self) -> str:
        return json.dumps(_clean_floats(self.to_dict()), indent=2) + "\n"


def _clean_floats(obj: Any) -> Any:
    """JSON has no inf/nan: write them as null so the file stays valid JSON."""
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    if isinstance(obj, dict):
        return {k: _clean_floats(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_clean_floats(v) for v in obj]
    return obj


# ---------------------------------------------------------------------------
# Reading and validation
# ---------------------------------------------------------------------------
_KNOWN_TOP = {
    "format",
    "title",
    "topology",
    "ground",
    "supply",
    "input",
    "output",
    "source",
    "load",
    "parts",
    "devices",
    "band",
    "predicted",
}


def design_from_dict(data: Any, file: str = "<design>") -> Design:
    """Build and validate a Design from parsed JSON."""
    r = _Reader(file)
    if not isinstance(data, Mapping):
        raise r.fail("", "the design file must hold one JSON object", "see the design-file format")
    fmt = data.get("format")
    if fmt != FORMAT:
        raise r.fail("format", f"{fmt!r} is not a known design format", f'"{FORMAT}"')
    ground = r.text(data, "ground", "", default="0")
    supply = r.mapping(data, "supply")
    supply_node = r.text(supply, "node", "supply")
    supply_voltage = r.number(supply, "voltage", "supply")
    if out_of_range(supply_voltage, SUPPLY_LIMIT):
        raise r.fail("supply.voltage", f"{supply_voltage:g} V is outside the supported range",
                     SUPPLY_LIMIT.accepted())
    source = r.mapping(data, "source", required=False)
    source_r = r.number(source, "resistance", "source", zero_ok=True, default=0.0)
    source_c = 0.0
    if source is not None and source.get("capacitance") is not None:
        source_c = r.number(source, "capacitance", "source")
    load = r.mapping(data, "load")
    load_r = r.number(load, "resistance", "load")
    load_c = r.number(load, "capacitance", "load", zero_ok=True, default=0.0)
    inp = r.text(data, "input", "")
    out = r.text(data, "output", "")

    devices_raw = r.mapping(data, "devices")
    devices = {name: any_device_from_design_dict(d, name, file)
               for name, d in devices_raw.items()}

    parts_raw = data.get("parts")
    if not isinstance(parts_raw, list) or not parts_raw:
        raise r.fail("parts", "must be a non-empty list of parts", "a list of part objects")
    if len(parts_raw) > MAX_PARTS:
        raise r.fail("parts", f"has {len(parts_raw)} parts; stagesynth analyses gain stages of "
                     f"up to {MAX_PARTS} parts", f"at most {MAX_PARTS} parts")
    parts: list[Part] = []
    for i, raw in enumerate(parts_raw):
        parts.append(_part_from_dict(raw, i, devices, r))

    refs = Counter(p.ref for p in parts)
    dupes = sorted(ref for ref, n in refs.items() if n > 1)
    if dupes:
        raise r.fail("parts", f"reference designator(s) used more than once: {', '.join(dupes)}",
                     "unique references such as R1, R2, C1, Q1")

    band = None
    if "band" in data and data["band"] is not None:
        b = r.mapping(data, "band")
        band = (r.number(b, "f_low", "band"), r.number(b, "f_high", "band"))
        if band[0] >= band[1]:
            raise r.fail("band",
                         f"f_low {fq(band[0], 'Hz')} is not below f_high {fq(band[1], 'Hz')}",
                         "f_low < f_high")
    predicted = data.get("predicted") or {}
    if not isinstance(predicted, Mapping):
        raise r.fail("predicted", f"is a {type(predicted).__name__}, not an object",
                     "an object of figures, or leave it out")
    _check_conditions(data.get("conditions"), r)

    design = Design(
        parts=tuple(parts),
        devices=devices,
        supply_voltage=supply_voltage,
        load_resistance=load_r,
        source_resistance=source_r,
        load_capacitance=load_c,
        source_capacitance=source_c,
        supply_node=supply_node,
        input=inp,
        output=out,
        ground=ground,
        title=str(data.get("title", "")),
        topology=str(data.get("topology", "")),
        band=band,
        predicted=dict(predicted),
        extra={k: v for k, v in data.items() if k not in _KNOWN_TOP},
    )
    check_connectivity(design, file)
    return design


def _check_conditions(cond: Any, r: _Reader) -> None:
    """The optional "conditions" block: ambient [min, max] in degC, supply_tolerance."""
    if cond is None:
        return
    if not isinstance(cond, Mapping):
        raise r.fail("conditions", f"is a {type(cond).__name__}, not an object",
                     '{"ambient": [min, max], "supply_tolerance": 0.05}')
    amb = cond.get("ambient")
    if amb is not None:
        ok = (isinstance(amb, list | tuple) and 1 <= len(amb) <= 2
              and all(isinstance(x, int | float) and not isinstance(x, bool)
                      and math.isfinite(x) for x in amb))
        if not ok or amb[0] > amb[-1]:
            raise r.fail("conditions.ambient", f"{amb!r} is not [min, max] in °C",
                         "a list of one or two numbers in °C, min first")
        if any(out_of_range(float(t), AMBIENT_LIMIT) for t in amb):
            raise r.fail("conditions.ambient", f"{amb!r} lies outside the supported range",
                         AMBIENT_LIMIT.accepted())
    tol = cond.get("supply_tolerance")
    if tol is not None and (isinstance(tol, bool) or not isinstance(tol, int | float)
                            or not 0 <= tol < 1):
        raise r.fail("conditions.supply_tolerance", f"{tol!r} is not a fraction",
                     "a number from 0 to below 1, e.g. 0.05")


def _part_from_dict(raw: Any, i: int, devices: Mapping[str, Device | Jfet],
                    r: _Reader) -> Part:
    path = f"parts[{i}]"
    if not isinstance(raw, Mapping):
        raise r.fail(
            path, "is not an object", '{"ref": ..., "kind": ..., "value": ..., "nodes": [...]}'
        )
    ref = r.text(raw, "ref", path)
    path = f"parts[{i}] ({ref})"
    kind = raw.get("kind")
    if kind not in PART_KINDS:
        raise r.fail(f"{path}.kind", f"{kind!r} is not a part kind", ", ".join(PART_KINDS))
    nodes = raw.get("nodes")
    if kind in ("bjt", "jfet"):
        terms = BJT_TERMINALS if kind == "bjt" else JFET_TERMINALS
        if not isinstance(nodes, Mapping) or set(nodes) != set(terms):
            raise r.fail(f"{path}.nodes", f"{nodes!r} must name the {', '.join(terms[:2])} "
                         f"and {terms[2]} nodes", "{" + ", ".join(f'"{t}": ...' for t in terms)
                         + "}")
        names = tuple(nodes[t] for t in terms)
        dev = raw.get("device")
        if not isinstance(dev, str) or dev not in devices:
            known = ", ".join(sorted(devices)) or "none defined"
            raise r.fail(f"{path}.device", f"device {dev!r} is not in \"devices\"", known)
        dev_kind = getattr(devices[dev], "kind", "bjt")
        if dev_kind != kind:
            raise r.fail(f"{path}.device", f"device {dev!r} is a {dev_kind}, but the part is "
                         f"a {kind}", f"a device entry of kind {kind!r}")
    else:
        if not isinstance(nodes, list | tuple) or len(nodes) != 2:
            raise r.fail(f"{path}.nodes", f"{nodes!r} must be a list of two nodes",
                         '["node_a", "node_b"]')
        names = tuple(nodes)
    for n in names:
        if not isinstance(n, str) or not n:
            raise r.fail(f"{path}.nodes", f"{n!r} is not a node name", "non-empty strings")
    if len(set(names)) < len(names) and kind not in ("bjt", "jfet"):
        raise r.fail(f"{path}.nodes", "both ends are on the same node", "two different nodes")
    if kind in ("bjt", "jfet"):
        return Part(ref=ref, kind=kind, nodes=names, device=raw["device"])
    if isinstance(raw.get("value"), str):  # written as in a spec: "4k7", "100 nF"
        value = _text_value(raw["value"], kind, f"{path}.value", r)
    else:
        value = r.number(raw, "value", path)
    return Part(ref=ref, kind=kind, nodes=names, value=value)


def _text_value(text: str, kind: str, where: str, r) -> float:
    """A part value written as text: SI prefix and unit or an IEC 60062 code, read by the
    same parser as the spec; it must be a positive finite quantity of the part's kind."""
    from stagesynth.quantities.units import parse_quantity

    unit = "Ω" if kind == "resistor" else "F"
    value = parse_quantity(text, unit, key=where, file=r.file)
    if not value > 0:
        raise r.fail(where, f"{text!r} must be positive", "a positive value such as '4k7' "
                     "or '100 nF'")
    return value


def load_design(path: str | Path) -> Design:
    """Read and validate a design file; errors name the file and key (exit code 2)."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise StageError("file not found", file=str(path)) from None
    except IsADirectoryError:
        raise StageError("is a folder, not a design file", file=str(path),
                         accepted="the design.json inside it") from None
    except OSError as exc:
        raise StageError(f"cannot be read: {exc.strerror}", file=str(path)) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise StageError(f"is not UTF-8 text (byte {exc.start})", file=str(path),
                         accepted="a UTF-8 JSON design file written by stagesynth") from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        hint = _spec_hint(text)
        raise StageError(
            f"is not valid JSON: {exc.msg} at line {exc.lineno}, column {exc.colno}{hint}",
            file=str(path),
            accepted="a design file (JSON) written by stagesynth design" if hint else None,
        ) from None
    except RecursionError:
        raise StageError(f"is nested more than {MAX_DEPTH} levels deep", file=str(path),
                         accepted="a design file written by stagesynth") from None
    if nesting_depth(data) > MAX_DEPTH:
        raise StageError(f"is nested more than {MAX_DEPTH} levels deep", file=str(path),
                         accepted="a design file written by stagesynth")
    return design_from_dict(data, str(path))


def _spec_hint(text: str) -> str:
    """When a TOML spec was given where a design file belongs: say which command makes one."""
    import tomllib

    try:
        data = tomllib.loads(text)
    except (tomllib.TOMLDecodeError, RecursionError):
        return ""
    if isinstance(data, dict) and ("require" in data or "supply" in data):
        return ("; this is a spec file (TOML): analyze, caps, report and plot need the "
                "design file that 'stagesynth design SPEC.toml --out DIR' writes as "
                "DIR/design.json")
    return ""
