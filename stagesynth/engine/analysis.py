"""How a given design behaves: nominal figures and every corner of the reference model.

Nominal = hfe_typ, 25 degC, nominal supply and parts. Corners = every combination
of hFE min/max (per device type), ambient min/max and supply +- tolerance. The
DC points of nominal and corners are one batched solve; so are their AC systems.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace

import numpy as np

from stagesynth.contracts.device import T_REF_C
from stagesynth.contracts.jfet import NOMINAL_U, is_jfet
from stagesynth.contracts.netlist import Design
from stagesynth.engine.ac import AcSystem
from stagesynth.engine.circuit import Circuit, compile_design
from stagesynth.engine.distortion import DistortionRequest
from stagesynth.engine.evaluate import (
    IC_ACTIVE_MIN,
    ID_ACTIVE_MIN,
    Conditions,
    Figures,
    evaluate,
)
from stagesynth.engine.noise import NoisePlan


@dataclass(frozen=True)
class Environment:
    """What the design must survive: ambient range, supply tolerance, requirement band."""

    ambient: tuple[float, float] = (T_REF_C, T_REF_C)
    supply_tolerance: float = 0.0
    band: tuple[float, float] | None = None  # (f_low, f_high) required; midband between
    noise_at: float | None = None  # spot frequency of the noise figures (None: midband)
    ripple_at: float = 100.0  # Hz, where supply rejection is taken (contract default)
    thd_level: float | None = None  # Vpp at which THD is taken (None: half the nominal swing)
    thd_at: float | None = None  # Hz (None: midband)

    @classmethod
    def for_design(cls, design: Design, spec=None) -> Environment:
        """From the spec when given, else from what the design file recorded."""
        if spec is not None:
            r = spec.require
            level = r.thd_level_vpp if r.thd_level_vpp > 0 else None
            return cls(tuple(r.ambient), spec.supply.tolerance, (r.f_low, r.f_high),
                       r.noise_at, float(getattr(r, "ripple_at", 100.0)), level,
                       r.thd_freq)
        cond = design.extra.get("conditions") or {}
        amb = cond.get("ambient") or (T_REF_C, T_REF_C)
        return cls(
            (float(amb[0]), float(amb[-1])),
            float(cond.get("supply_tolerance") or 0.0),
            design.band,
        )  # the design reader has checked the types of "conditions"


@dataclass(frozen=True)
class Condition:
    """One operating condition: hFE at 25 degC per device type, ambient, supply."""

    label: str
    hfe_case: str  # "typ", "min", "max" or "min/max" per device for several types
    hfe: Mapping[str, float]
    ambient: float
    supply: float
    # junction FETs: the unit at this condition (u along the pairing, IDSS and VP at
    # 25 degC, VP signed as the channel has it); `hfe` holds u for them
    jfet_units: Mapping[str, Mapping[str, float]] = field(default_factory=dict)

    def to_dict(self) -> dict:
        out = {
            "label": self.label,
            "hfe": self.hfe_case,
            "hfe_values": dict(self.hfe),
            "ambient_c": self.ambient,
            "supply_v": self.supply,
        }
        if self.jfet_units:
            out["jfet_units"] = {k: dict(v) for k, v in self.jfet_units.items()}
        return out


def _jfet_units(design: Design, spread: Mapping[str, float]) -> dict[str, dict[str, float]]:
    """IDSS and VP (25 degC) of each junction-FET type at its spread position u."""
    out = {}
    for name, u in spread.items():
        dev = design.devices[name]
        if is_jfet(dev):
            idss, vp = dev.unit(u)
            out[name] = {"u": float(u), "idss": float(idss), "vp": float(vp) * dev.sign}
    return out


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
    region: str = "active"  # "active", "saturated", "cut off" or "no DC solution"
    # junction FET (second release): ic is ID, vce VDS, vbe VGS, ib the gate current,
    # hfe nan; vsat the VDS where the active region ends (VGS - VP; vce_sat for a BJT);
    # idss and vp (signed as the device's polarity) of this unit at Tj
    kind: str = "bjt"
    vsat: float = math.nan
    idss: float | None = None
    vp: float | None = None

    @property
    def vgs(self) -> float:
        """Gate-source voltage of a junction FET (N-channel frame), the same as vbe."""
        return self.vbe


@dataclass(frozen=True)
class PointResult:
    """A design at one condition: DC state, the output swing it allows, and its midband
    gain, -3 dB corners and impedances (every requirement is judged at every condition)."""

    condition: Condition
    converged: bool
    active: bool
    swing_vpp: float
    swing_limit: str  # which transistor and which edge limits the swing
    supply_current: float
    transistors: Mapping[str, TransistorState]
    node_voltages: Mapping[str, float]
    gain: complex = complex("nan")  # v_load / v_emf at midband, this condition
    f_low: float = math.nan
    f_high: float = math.nan
    z_in: float = math.nan
    z_out: float = math.nan
    noise: float | None = None  # V/√Hz input-referred at the spot frequency
    noise_figure: float | None = None  # dB; None without a source resistance
    noise_rms: float | None = None  # V input-referred over the band
    # supply and stability (second release): this condition's own figures
    supply_rejection: float = math.nan  # dB at the environment's ripple_at
    peaking_db: float = math.nan  # largest |gain| over its midband value, dB
    peak_freq: float = math.nan  # Hz
    stable: bool = True  # every pole in the left half-plane
    swing_mid_vpp: float = math.nan  # swing with the small-signal ratios at midband
    swing_top_vpp: float = math.nan  # ... at the required f_high (nan without a band)

    @property
    def gain_db(self) -> float:
        return 20.0 * math.log10(max(abs(self.gain), 1e-300))

    @property
    def inverting(self) -> bool:
        return math.cos(np.angle(self.gain)) < 0.0
    thd: float | None = None  # total harmonic distortion at the load (ratio), harmonic balance
    hd2: float | None = None
    hd3: float | None = None


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
    figures: Figures | None = field(default=None, repr=False)  # batched form (K = 1)

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

    @property
    def noise(self) -> float | None:
        """Input-referred density at the spot frequency, nominal (V/√Hz)."""
        return self.nominal.noise

    @property
    def noise_figure(self) -> float | None:
        return self.nominal.noise_figure

    @property
    def noise_rms(self) -> float | None:
        return self.nominal.noise_rms

    @property
    def supply_rejection(self) -> float:
        """Nominal supply rejection, dB at the environment's ripple_at."""
        return self.nominal.supply_rejection

    @property
    def peaking_db(self) -> float:
        return self.nominal.peaking_db

    @property
    def stable(self) -> bool:
        return self.nominal.stable

    @property
    def stable_everywhere(self) -> bool:
        return self.nominal.stable and all(c.stable for c in self.corners)

    @property
    def thd(self) -> float | None:
        """THD at the load at nominal (harmonic balance), at `thd_level`."""
        return self.nominal.thd

    @property
    def thd_level(self) -> float | None:
        """Output level (Vpp) of the distortion figures."""
        fig = self.figures
        return None if fig is None or fig.thd_level is None else float(fig.thd_level[0])

    @property
    def thd_at(self) -> float | None:
        """Frequency (Hz) of the distortion figures."""
        fig = self.figures
        return None if fig is None or fig.thd_freq is None else float(fig.thd_freq[0])

    def max_corner(self, attr: str) -> float:
        return max(getattr(c, attr) for c in self.corners)


def spread_values(device) -> tuple[float, float, float]:
    """(min, nominal, max) of a device's spread axis: hFE at 25 degC for a bipolar
    transistor; the pairing position u (0, 0.5, 1) for a junction FET (contract)."""
    if is_jfet(device):
        return 0.0, NOMINAL_U, 1.0
    return device.hfe_min, device.hfe_nominal, device.hfe_max


def _case_label(design: Design, names: list[str], cases: tuple[str, ...]) -> str:
    """"hFE min", "IDSS max" or "hFE min, IDSS max" (IDSS min pairs with the vp nearest
    zero): the spread corner of each kind of device, as the corner labels read."""
    parts = []
    for word, want in (("hFE", False), ("IDSS", True)):
        cs = tuple(c for n, c in zip(names, cases, strict=True)
                   if is_jfet(design.devices[n]) == want)
        if cs:
            case = "/".join(sorted(set(cs), key=cs.index)) if len(set(cs)) <= 1 \
                else "/".join(cs)
            parts.append(f"{word} {case}")
    return ", ".join(parts) if parts else "hFE none"


def corner_conditions(design: Design, env: Environment) -> list[Condition]:
    """Nominal first, then every distinct corner of the reference model.

    Each device's spread takes its two ends: hFE min and max for a bipolar transistor,
    u = 0 and 1 along the IDSS/VP pairing for a junction FET (contract section 2).
    """
    names = sorted(design.devices)
    v0 = design.supply_voltage
    nominal = Condition(
        "nominal",
        "typ",
        {n: spread_values(design.devices[n])[1] for n in names},
        T_REF_C,
        v0,
    )
    nominal = replace(nominal, jfet_units=_jfet_units(design, nominal.hfe))
    ambients = sorted(set(env.ambient))
    supplies = sorted({v0 * (1 - env.supply_tolerance), v0 * (1 + env.supply_tolerance)})
    out = [nominal]
    for cases in itertools.product(("min", "max"), repeat=len(names)):
        hfe = {
            n: spread_values(design.devices[n])[0 if c == "min" else 2]
            for n, c in zip(names, cases, strict=True)
        }
        # with no transistor at all only the ambient and the supply vary
        case = "/".join(sorted(set(cases), key=cases.index)) if cases else "none"
        case = case if len(set(cases)) <= 1 else "/".join(cases)
        for amb in ambients:
            for vs in supplies:
                label = f"{_case_label(design, names, cases)}, {amb:g} °C, {vs:.4g} V"
                out.append(Condition(label, case, hfe, amb, vs, _jfet_units(design, hfe)))
    return out


def batch_values(design: Design, circuit: Circuit) -> tuple[np.ndarray, np.ndarray]:
    """Resistor and capacitor values (1, nR) and (1, nC) in circuit order."""
    vals = design.values()
    r = np.array([[vals[ref] for ref, _, _ in circuit.resistors]], dtype=float)
    c = np.array([[vals[ref] for ref, _, _ in circuit.capacitors]], dtype=float)
    return r, c


def condition_arrays(circuit: Circuit, conditions: list[Condition]) -> Conditions:
    """Condition list -> the arrays the batched evaluator takes."""
    return Conditions(
        hfe25=np.array(
            [[cond.hfe[q.device_name] for q in circuit.transistors] for cond in conditions]
        ).reshape(len(conditions), circuit.nq),
        ambient=np.array([cond.ambient for cond in conditions]),
        supply=np.array([cond.supply for cond in conditions]),
    )


def region(converged: bool, ic: float, vce: float, vce_sat: float, *,
           jfet: bool = False) -> str:
    """Operating region as the contract counts it: cut off below IC = 100 nA (checked
    first: a starved transistor has no meaningful VCE(sat)), saturated below vce_sat.
    A junction FET: cut off below ID = 1 uA, "triode" below VDS = VGS - VP."""
    if not converged:
        return "no DC solution"
    if ic < (ID_ACTIVE_MIN if jfet else IC_ACTIVE_MIN):
        return "cut off"
    if vce < vce_sat:
        return "triode" if jfet else "saturated"
    return "active"


def point_results(
    circuit: Circuit, conditions: list[Condition], fig: Figures, k: int = 0
) -> list[PointResult]:
    """Per-condition DC state and swing of value set `k`, as readable records."""
    names = [*circuit.node_names, "ground", "supply"]
    m = len(conditions)
    nq = circuit.nq
    nb = len(circuit.bjts)
    dc = fig.dc
    results = []
    for j, cond in enumerate(conditions):
        i = k * m + j
        states = {}
        for q_i, q in enumerate(circuit.transistors):
            fet = q_i >= nb
            vce_sat = dc.vsat[i]
            reg = region(bool(dc.converged[i]), float(dc.ic[i, q_i]), float(dc.vce[i, q_i]),
                         float(vce_sat[q_i]), jfet=fet)
            states[q.ref] = TransistorState(
                ic=float(dc.ic[i, q_i]),
                vce=float(dc.vce[i, q_i]),
                vbe=float(dc.vbe[i, q_i]),
                ib=float(dc.ib[i, q_i]),
                tj=float(dc.tj[i, q_i]),
                hfe=float(dc.hfe[i, q_i]),
                power=float(dc.power[i, q_i]),
                active=reg == "active",
                swing_cut=float(fig.a_cut[k, j, q_i]),
                swing_sat=float(fig.a_sat[k, j, q_i]),
                region=reg,
                kind="jfet" if fet else "bjt",
                vsat=float(vce_sat[q_i]),
                idss=float(dc.idss[i, q_i - nb]) if fet else None,
                vp=float(q.device.sign * dc.vp[i, q_i - nb]) if fet else None,
            )
        if fig.active[k, j] and nq:
            e = int(fig.swing_edge[k, j])
            q_e = circuit.transistors[e % nq]
            edge = "cutoff" if e < nq else ("the triode edge" if e % nq >= nb else "saturation")
            limit = f"{q_e.ref} {edge}"
        else:
            out = [f"{ref} {s.region}" for ref, s in states.items() if s.region != "active"]
            limit = ("not in the active region: " + ", ".join(out)) if dc.converged[i] and out \
                else ("not in the active region" if dc.converged[i] else "no DC solution")
        results.append(
            PointResult(
                condition=cond,
                converged=bool(dc.converged[i]),
                active=bool(fig.active[k, j]),
                swing_vpp=float(fig.swing_vpp[k, j]),
                swing_limit=limit,
                supply_current=float(fig.supply_current[k, j]),
                transistors=states,
                node_voltages={
                    n: float(dc.v[i, c]) for c, n in enumerate(names) if not n.endswith(".b'")
                },
                gain=complex(fig.gain[k, j]),
                f_low=float(fig.f_low[k, j]),
                f_high=float(fig.f_high[k, j]),
                z_in=float(fig.z_in[k, j]),
                z_out=float(fig.z_out[k, j]),
                **_noise_point(fig, k, j),
                **_response_fields(fig, k, j),
                thd=_ratio(fig.thd, k, j),
                hd2=_ratio(fig.hd2, k, j),
                hd3=_ratio(fig.hd3, k, j),
            )
        )
    return results


def _ratio(arr: np.ndarray | None, k: int, j: int) -> float | None:
    """One distortion figure as a float; None where not computed or not defined."""
    if arr is None or not np.isfinite(arr[k, j]):
        return None
    return float(arr[k, j])


def _noise_point(fig: Figures, k: int, j: int) -> dict[str, float | None]:
    """The noise figures of value set k at condition j (None where not computed or
    undefined: a noise figure without a source resistance)."""
    out: dict[str, float | None] = {}
    for name in ("noise", "noise_figure", "noise_rms"):
        arr = getattr(fig, name)
        x = None if arr is None else float(arr[k, j])
        out[name] = x if x is not None and math.isfinite(x) else None
    return out


def _response_fields(fig: Figures, k: int, j: int) -> dict:
    """Supply rejection, peaking, stability and the two swing figures of one member."""
    out: dict = {}
    for name in ("supply_rejection", "peaking_db", "peak_freq", "swing_mid_vpp",
                 "swing_top_vpp"):
        arr = getattr(fig, name)
        if arr is not None:
            out[name] = float(arr[k, j])
    if fig.stable is not None:
        out["stable"] = bool(fig.stable[k, j])
    return out


def analyze(design: Design, spec=None, environment: Environment | None = None) -> Analysis:
    """The whole analysis of one design (DC, AC, corners, swing) for a verdict or report."""
    env = environment or Environment.for_design(design, spec)
    circuit = compile_design(design)
    conditions = corner_conditions(design, env)
    r, c = batch_values(design, circuit)
    fig = evaluate(
        circuit,
        r,
        c,
        condition_arrays(circuit, conditions),
        source_resistance=design.source_resistance,
        load_resistance=design.load_resistance,
        load_capacitance=design.load_capacitance,
                   source_capacitance=design.source_capacitance,
        band=env.band,
        noise=NoisePlan(at=env.noise_at),
        ripple_at=env.ripple_at,
        distortion=DistortionRequest(env.thd_level, env.thd_at, "hb"),
    )
    points = point_results(circuit, conditions, fig)
    return Analysis(
        design=design,
        environment=env,
        midband=float(fig.midband[0]),
        gain=complex(fig.gain[0, 0]),
        f_low=float(fig.f_low[0, 0]),
        f_high=float(fig.f_high[0, 0]),
        z_in=float(fig.z_in[0, 0]),
        z_out=float(fig.z_out[0, 0]),
        nominal=points[0],
        corners=tuple(points[1:]),
        system=fig.nominal,
        figures=fig,
    )
