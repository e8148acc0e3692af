"""How a given design behaves: nominal figures and every corner of the reference model.

Nominal = hfe_typ, 25 degC, nominal supply and parts. Corners = every combination
of hFE min/max (per device type), ambient min/max and supply +- tolerance. The
DC points of nominal and corners are one batched solve; so are their AC systems.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from .ac import AcSystem, linearize
from .circuit import Circuit, compile_design
from .dc import DcBatch, solve_dc
from .device import T_REF_C
from .netlist import Design


@dataclass(frozen=True)
class Environment:
    """What the design must survive: ambient range, supply tolerance, requirement band."""

    ambient: tuple[float, float] = (T_REF_C, T_REF_C)
    supply_tolerance: float = 0.0
    band: tuple[float, float] | None = None  # (f_low, f_high) required; midband between

    @classmethod
    def for_design(cls, design: Design, spec=None) -> Environment:
        """From the spec when given, else from what the design file recorded."""
        if spec is not None:
            r = spec.require
            return cls(tuple(r.ambient), spec.supply.tolerance, (r.f_low, r.f_high))
        cond = design.extra.get("conditions") or {}
        amb = cond.get("ambient") or (T_REF_C, T_REF_C)
        return cls(
            (float(amb[0]), float(amb[-1])),
            float(cond.get("supply_tolerance") or 0.0),
            design.band,
        )


@dataclass(frozen=True)
class Condition:
    """One operating condition: hFE at 25 degC per device type, ambient, supply."""

    label: str
    hfe_case: str  # "typ", "min", "max" or "min/max" per device for several types
    hfe: Mapping[str, float]
    ambient: float
    supply: float

    def to_dict(self) -> dict:
        return {
            "label": self.label,
            "hfe": self.hfe_case,
            "hfe_values": dict(self.hfe),
            "ambient_c": self.ambient,
            "supply_v": self.supply,
        }


@dataclass(frozen=True)
class TransistorState:
    """Operating point of one transistor, polarity-normalized (positive when active)."""

    ic: float
    vce: float
    vbe: float
    ib: float
    tj: float
    hfe: float
    power: float
    active: bool
    swing_cut: float  # peak load amplitude that drives it to cutoff
    swing_sat: float  # peak load amplitude that drives it to VCE = vce_sat


@dataclass(frozen=True)
class PointResult:
    """A design at one condition: DC state and the output swing it allows."""

    condition: Condition
    converged: bool
    active: bool
    swing_vpp: float
    swing_limit: str  # which transistor and which edge limits the swing
    supply_current: float
    transistors: Mapping[str, TransistorState]
    node_voltages: Mapping[str, float]


@dataclass(frozen=True)
class Analysis:
    design: Design
    environment: Environment
    midband: float
    gain: complex  # v_load / v_emf at midband
    f_low: float
    f_high: float
    z_in: float
    z_out: float
    nominal: PointResult
    corners: tuple[PointResult, ...]
    system: AcSystem = field(repr=False)  # nominal linearized stage, for sweeps and plots

    @property
    def gain_db(self) -> float:
        return 20.0 * math.log10(max(abs(self.gain), 1e-300))

    @property
    def inverting(self) -> bool:
        return math.cos(np.angle(self.gain)) < 0.0

    @property
    def supply_current(self) -> float:
        return self.nominal.supply_current

    @property
    def swing_vpp(self) -> float:
        """Smallest swing over the corners (0 where a transistor leaves the active region)."""
        return min(c.swing_vpp for c in self.corners)

    @property
    def converged(self) -> bool:
        return self.nominal.converged and all(c.converged for c in self.corners)

    @property
    def all_active(self) -> bool:
        return all(c.active for c in self.corners)

    def max_corner(self, attr: str) -> float:
        return max(getattr(c, attr) for c in self.corners)


def corner_conditions(design: Design, env: Environment) -> list[Condition]:
    """Nominal first, then every distinct corner of the reference model."""
    names = sorted(design.devices)
    v0 = design.supply_voltage
    nominal = Condition(
        "nominal",
        "typ",
        {n: design.devices[n].hfe_nominal for n in names},
        T_REF_C,
        v0,
    )
    ambients = sorted(set(env.ambient))
    supplies = sorted({v0 * (1 - env.supply_tolerance), v0 * (1 + env.supply_tolerance)})
    out = [nominal]
    for cases in itertools.product(("min", "max"), repeat=len(names)):
        hfe = {
            n: design.devices[n].hfe_min if c == "min" else design.devices[n].hfe_max
            for n, c in zip(names, cases, strict=True)
        }
        case = "/".join(cases) if len(set(cases)) > 1 else cases[0]
        for amb in ambients:
            for vs in supplies:
                label = f"hFE {case}, {amb:g} °C, {vs:.4g} V"
                out.append(Condition(label, case, hfe, amb, vs))
    return out


def batch_values(design: Design, circuit: Circuit, count: int) -> tuple[np.ndarray, np.ndarray]:
    """Resistor and capacitor values (count, nR) and (count, nC) in circuit order."""
    vals = design.values()
    r = np.array([vals[ref] for ref, _, _ in circuit.resistors], dtype=float)
    c = np.array([vals[ref] for ref, _, _ in circuit.capacitors], dtype=float)
    return np.tile(r, (count, 1)), np.tile(c, (count, 1))


def solve_conditions(
    design: Design, circuit: Circuit, conditions: list[Condition]
) -> tuple[DcBatch, AcSystem]:
    """Batched DC points and linearized stages for a list of conditions."""
    b = len(conditions)
    r, c = batch_values(design, circuit, b)
    hfe25 = np.array([[cond.hfe[q.device_name] for q in circuit.bjts] for cond in conditions])
    dc = solve_dc(
        circuit,
        r,
        np.array([cond.supply for cond in conditions]),
        hfe25.reshape(b, len(circuit.bjts)),
        np.array([cond.ambient for cond in conditions]),
        design.source_resistance,
        design.load_resistance,
    )
    system = linearize(
        circuit, dc, r, c, design.source_resistance, design.load_resistance,
        design.load_capacitance,
    )
    return dc, system


def point_results(
    circuit: Circuit,
    conditions: list[Condition],
    dc: DcBatch,
    system: AcSystem,
    midband: float,
) -> list[PointResult]:
    """Per-condition DC state and swing (section 2: cutoff or VCE = vce_sat, whichever first)."""
    b = len(conditions)
    ic_ratio, vce_ratio = system.swing_ratios(np.full(b, midband))
    vce_sat = np.array([q.device.vce_sat for q in circuit.bjts])
    active = (dc.vce >= vce_sat) & (dc.ic > 0) & dc.converged[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        a_cut = np.where(ic_ratio > 0, dc.ic / ic_ratio, np.inf)
        a_sat = np.where(vce_ratio > 0, (dc.vce - vce_sat) / vce_ratio, np.inf)
    results = []
    names = [*circuit.node_names, "ground", "supply"]
    for i, cond in enumerate(conditions):
        states = {}
        for k, q in enumerate(circuit.bjts):
            states[q.ref] = TransistorState(
                ic=float(dc.ic[i, k]),
                vce=float(dc.vce[i, k]),
                vbe=float(dc.vbe[i, k]),
                ib=float(dc.ib[i, k]),
                tj=float(dc.tj[i, k]),
                hfe=float(dc.hfe[i, k]),
                power=float(dc.power[i, k]),
                active=bool(active[i, k]),
                swing_cut=float(a_cut[i, k]),
                swing_sat=float(a_sat[i, k]),
            )
        all_active = bool(np.all(active[i])) if circuit.bjts else bool(dc.converged[i])
        if all_active and circuit.bjts:
            edges = np.concatenate([a_cut[i], a_sat[i]])
            j = int(np.argmin(edges))
            nq = len(circuit.bjts)
            limit = f"{circuit.bjts[j % nq].ref} {'cutoff' if j < nq else 'saturation'}"
            swing = 2.0 * float(edges[j])
        else:
            limit = "not in the active region" if dc.converged[i] else "no DC solution"
            swing = 0.0
        results.append(
            PointResult(
                condition=cond,
                converged=bool(dc.converged[i]),
                active=all_active,
                swing_vpp=swing,
                swing_limit=limit,
                supply_current=float(dc.supply_current[i]),
                transistors=states,
                node_voltages={
                    n: float(dc.v[i, j]) for j, n in enumerate(names) if not n.endswith(".b'")
                },
            )
        )
    return results


def find_midband(system: AcSystem, band: tuple[float, float] | None) -> float:
    """Geometric mean of the band; without one, of the corners around the gain peak."""
    if band is not None:
        return math.sqrt(band[0] * band[1])
    grid = np.logspace(-2, 11, 14 * 24)
    mag = np.abs(system.gain(grid[None, :]))[0]
    fm = float(grid[int(np.argmax(mag))])
    for _ in range(3):
        _, lo, hi = system.corners(np.array([fm]))
        lo_f = float(lo[0]) if lo[0] > 0 else 1e-2
        hi_f = float(hi[0]) if np.isfinite(hi[0]) else 1e11
        fm = math.sqrt(lo_f * hi_f)
    return fm


def analyze(design: Design, spec=None, environment: Environment | None = None) -> Analysis:
    """The whole analysis of one design (DC, AC, corners, swing) for a verdict or report."""
    env = environment or Environment.for_design(design, spec)
    circuit = compile_design(design)
    conditions = corner_conditions(design, env)
    dc, system = solve_conditions(design, circuit, conditions)
    nominal_system = _select(system, 0)
    midband = find_midband(nominal_system, env.band)
    _, f_low, f_high = nominal_system.corners(np.array([midband]))
    gain = complex(nominal_system.gain(np.array([[midband]]))[0, 0])
    z_in = float(np.abs(nominal_system.z_in(np.array([[midband]]))[0, 0]))
    z_out = float(np.abs(nominal_system.z_out(np.array([[midband]]))[0, 0]))
    points = point_results(circuit, conditions, dc, system, midband)
    return Analysis(
        design=design,
        environment=env,
        midband=midband,
        gain=gain,
        f_low=float(f_low[0]),
        f_high=float(f_high[0]),
        z_in=z_in,
        z_out=z_out,
        nominal=points[0],
        corners=tuple(points[1:]),
        system=nominal_system,
    )


def _select(system: AcSystem, i: int) -> AcSystem:
    """One member of a batched system, kept as a batch of one."""
    s = slice(i, i + 1)
    return AcSystem(
        circuit=system.circuit,
        G=system.G[s],
        C=system.C[s],
        gm=system.gm[s],
        r_o=system.r_o[s],
        source_resistance=system.source_resistance[s],
        load_resistance=system.load_resistance[s],
        load_capacitance=system.load_capacitance[s],
    )
