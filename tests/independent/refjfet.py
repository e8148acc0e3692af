"""Independent reference of the contract's junction FET (spec-format.md §2 "Junction FET").

Written from the contract text alone (nothing from stagesynth but its error types): the
square law with its triode region, the temperature laws, gate leakage and self-heating,
the one-axis production spread along the IDSS/VP pairing, and the DC solution of a design
file that may mix JFETs and bipolar transistors (the bipolar law is refmodel's), by
scipy.optimize.root on the node voltages and junction temperatures with a supply
continuation. AC, noise and the verdict live in refjfetac.py.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from stagesynth.quantities.errors import ConvergenceError, StageError

from . import refmodel as rm

ID_ACTIVE = 1e-6  # A: "saturation region with ID >= 1 uA at every corner"


@dataclass(frozen=True)
class JfetDevice:
    """JFET type parameters in SI units; pinch-off voltages as magnitudes, paired."""

    polarity: str  # "n" or "p"
    idss_min: float
    idss_max: float
    vp_near: float  # |VP| of the idss_min unit (the one nearest zero)
    vp_far: float  # |VP| of the idss_max unit
    early_voltage: float = 100.0
    c_gs: float = 0.0
    c_gd: float = 0.0
    i_gss: float = 10e-12
    vp_tempco: float = -2e-3  # V/K, applied to the (negative) N-channel VP
    idss_tempco: float = -6e-3  # 1/K, linear about 25 degC
    flicker_corner: float = 0.0
    theta_ja: float | None = None

    @property
    def sign(self) -> float:
        """+1 for N channel, -1 for P (the mirror image)."""
        return 1.0 if self.polarity == "n" else -1.0

    def unit(self, u: float) -> tuple[float, float]:
        """(IDSS, |VP|) at 25 degC of the unit at u along the pairing, log-interpolated."""
        idss = self.idss_min ** (1.0 - u) * self.idss_max**u
        return idss, self.vp_near ** (1.0 - u) * self.vp_far**u


def _pair(d: Mapping[str, Any], key: str) -> tuple[float, float]:
    """A [min, max]-style pair (or one number for both)."""
    v = d[key]
    if isinstance(v, Sequence) and not isinstance(v, str):
        return float(v[0]), float(v[1])
    return float(v), float(v)


def jfet_from_dict(d: Mapping[str, Any]) -> JfetDevice:
    """A JfetDevice from a design-file device entry (contract §1 fields in SI, defaults)."""
    pol = str(d.get("polarity", "n")).lower()
    if pol not in ("n", "p"):
        raise StageError(f"polarity {pol!r}", key="polarity", accepted="n, p")
    i_lo, i_hi = sorted(_pair(d, "idss"))
    vps = sorted(abs(x) for x in _pair(d, "vp"))

    def opt(key: str, default: float) -> float:
        return float(default if d.get(key) is None else d[key])

    return JfetDevice(
        polarity=pol, idss_min=i_lo, idss_max=i_hi, vp_near=vps[0], vp_far=vps[1],
        early_voltage=opt("early_voltage", 100.0), c_gs=opt("c_gs", 0.0),
        c_gd=opt("c_gd", 0.0), i_gss=opt("i_gss", 10e-12), vp_tempco=opt("vp_tempco", -2e-3),
        idss_tempco=opt("idss_tempco", -6e-3), flicker_corner=opt("flicker_corner", 0.0),
        theta_ja=None if d.get("theta_ja") is None else float(d["theta_ja"]),
    )


# --------------------------------------------------------------------------- device laws


def idss_at(idss25: float, dev: JfetDevice, tj: float) -> float:
    """IDSS(Tj) = IDSS25*(1 + idss_tempco*(Tj - 25 degC))."""
    return idss25 * (1.0 + dev.idss_tempco * (tj - 25.0))


def vp_at(vp_mag25: float, dev: JfetDevice, tj: float) -> float:
    """VP(Tj) in the N-channel frame (negative): -|VP25| + vp_tempco*(Tj - 25 degC)."""
    return -vp_mag25 + dev.vp_tempco * (tj - 25.0)


def i_gss_at(dev: JfetDevice, tj: float) -> float:
    """Gate leakage i_gss(Tj): doubles every 10 K from its 25 degC value."""
    return dev.i_gss * 2.0 ** ((tj - 25.0) / 10.0)


def drain_law(idss: float, vp: float, va: float, vgs: float, vds: float
              ) -> tuple[float, float, float]:
    """(ID, dID/dVGS, dID/dVDS) by the contract's law in the N frame (vp < 0).

    Saturation (VDS >= VGS - VP): IDSS*(1 - VGS/VP)^2*(1 + VDS/VA); triode below it:
    IDSS*(2(1 - VGS/VP)*(VDS/-VP) - (VDS/VP)^2)*(1 + VDS/VA); 0 for VGS <= VP. A negative
    VDS (outside the contract, only met during iterations) swaps drain and source.
    """
    if vds < 0.0:
        i, g_c, g_v = drain_law(idss, vp, va, vgs - vds, -vds)
        return -i, -g_c, g_c + g_v
    vov = vgs - vp
    if vov <= 0.0:
        return 0.0, 0.0, 0.0
    early = 1.0 + vds / va
    if vds >= vov:
        law = idss * (vov / vp) ** 2
        return law * early, 2.0 * idss * vov / vp**2 * early, law / va
    law = idss * (2.0 * vov * vds - vds * vds) / vp**2
    return (law * early, 2.0 * idss * vds / vp**2 * early,
            2.0 * idss * (vov - vds) / vp**2 * early + law / va)


def bjt_law(dev: rm.Device, hfe25: float, vbe: float, vce: float, tj: float
            ) -> tuple[float, float]:
    """(IC, IB) of the contract's bipolar law, Ebers-Moll transport form (mirrored for PNP)."""
    vt = float(rm.thermal_voltage(tj))
    vbe_t = dev.vbe + dev.vbe_tempco * (tj - 25.0)
    i_f = dev.vbe_current * math.exp(min((vbe - vbe_t) / vt, 200.0)) * (
        1.0 + vce / dev.early_voltage)
    i_r = dev.vbe_current * math.exp(min((vbe - vce - vbe_t) / vt, 200.0))
    h = float(rm.hfe_at(hfe25, dev, tj))
    br = dev.hfe_reverse
    return i_f - i_r * (1.0 + 1.0 / br), i_f / h + i_r / br


# --------------------------------------------------------------------------- circuit


@dataclass(frozen=True)
class Jfet:
    """One JFET instance: reference, device name, drain, gate, source."""

    ref: str
    device: str
    d: str
    g: str
    s: str


@dataclass(frozen=True)
class Circuit:
    """A design file (contract §3) holding JFETs and possibly bipolar transistors."""

    ground: str
    supply_node: str
    supply_voltage: float
    input: str
    output: str
    source_resistance: float
    source_capacitance: float
    load_resistance: float
    load_capacitance: float
    resistors: tuple[tuple[str, str, str, float], ...]
    capacitors: tuple[tuple[str, str, str, float], ...]
    jfets: tuple[Jfet, ...]
    bjts: tuple[rm.Bjt, ...]
    jdevices: Mapping[str, JfetDevice] = field(hash=False)
    bdevices: Mapping[str, rm.Device] = field(hash=False)


def circuit_from_design(design: Mapping[str, Any]) -> Circuit:
    """Read a section-3 design dict (parts resistor, capacitor, bjt, jfet)."""
    jdev, bdev = {}, {}
    for name, d in design.get("devices", {}).items():
        if str(d.get("kind", "bjt")).lower() == "jfet":
            jdev[name] = jfet_from_dict(d)
        else:
            bdev[name] = rm.device_from_dict(d)
    res, caps, jfets, bjts = [], [], [], []
    for p in design["parts"]:
        kind, n = p["kind"], p["nodes"]
        if kind == "resistor":
            res.append((p["ref"], n[0], n[1], float(p["value"])))
        elif kind == "capacitor":
            caps.append((p["ref"], n[0], n[1], float(p["value"])))
        elif kind == "jfet" and p["device"] in jdev:
            jfets.append(Jfet(p["ref"], p["device"], n["d"], n["g"], n["s"]))
        elif kind == "bjt" and p["device"] in bdev:
            bjts.append(rm.Bjt(p["ref"], p["device"], n["c"], n["b"], n["e"]))
        else:
            raise StageError(f"part {p['ref']}: kind {kind!r} with device {p.get('device')!r}",
                             key=f"parts.{p['ref']}")
    src, load = design.get("source", {}), design["load"]
    return Circuit(
        ground=str(design.get("ground", "0")), supply_node=design["supply"]["node"],
        supply_voltage=float(design["supply"]["voltage"]), input=design["input"],
        output=design["output"], source_resistance=float(src.get("resistance", 0.0)),
        source_capacitance=float(src.get("capacitance") or 0.0),
        load_resistance=float(load["resistance"]),
        load_capacitance=float(load.get("capacitance", 0.0)), resistors=tuple(res),
        capacitors=tuple(caps), jfets=tuple(jfets), bjts=tuple(bjts), jdevices=jdev,
        bdevices=bdev)


# --------------------------------------------------------------------------- conditions


@dataclass(frozen=True)
class Conditions:
    """Spread position u per JFET device, hFE(25 degC) per bipolar device, ambient, supply."""

    spread: tuple[tuple[str, float], ...]
    hfe: tuple[tuple[str, float], ...]
    ambient: float
    supply: float


def nominal_conditions(cir: Circuit) -> Conditions:
    """u = 0.5 (the geometric means), hfe_typ, 25 degC, nominal supply."""
    return Conditions(tuple((k, 0.5) for k in sorted(cir.jdevices)),
                      tuple((k, d.hfe_typ) for k, d in sorted(cir.bdevices.items())),
                      25.0, cir.supply_voltage)


def corner_conditions(cir: Circuit, ambient: Sequence[float] = (25.0,),
                      supply_tolerance: float = 0.0) -> list[Conditions]:
    """u in {0, 1} per JFET device x hFE min/max per bipolar device x ambient x supply."""
    jn, bn = sorted(cir.jdevices), sorted(cir.bdevices)
    hs = [sorted({cir.bdevices[k].hfe_min, cir.bdevices[k].hfe_max}) for k in bn]
    temps = sorted({float(min(ambient)), float(max(ambient))})
    v = cir.supply_voltage
    sup = sorted({v * (1 - supply_tolerance), v * (1 + supply_tolerance)})
    return [Conditions(tuple(zip(jn, us, strict=True)), tuple(zip(bn, h, strict=True)), t, s)
            for us in itertools.product((0.0, 1.0), repeat=len(jn))
            for h in itertools.product(*hs) for t in temps for s in sup]


# --------------------------------------------------------------------------- DC


@dataclass(frozen=True)
class JfetOP:
    """Operating point and small-signal values of one JFET (N-frame magnitudes)."""

    ref: str
    id: float
    vgs: float
    vds: float
    tj: float
    idss: float  # at Tj
    vp: float  # at Tj, N frame (negative)
    i_gss: float  # at Tj
    gm: float
    ro: float
    c_gs: float
    c_gd: float
    saturated: bool
    active: bool


@dataclass(frozen=True)
class OperatingPoint:
    """DC solution: node voltages, JFETs, bipolar transistors (refmodel records), supply."""

    conditions: Conditions
    voltages: Mapping[str, float] = field(hash=False)
    jfets: Mapping[str, JfetOP] = field(hash=False)
    bjts: Mapping[str, rm.TransistorOP] = field(hash=False)
    supply_current: float

    @property
    def active(self) -> bool:
        """Every transistor in its active region (JFET: saturation, ID >= 1 uA)."""
        return all(t.active for t in self.jfets.values()) and all(
            t.active for t in self.bjts.values())


class DcSystem:
    """KCL residual over node voltages plus a heat balance per self-heating transistor."""

    def __init__(self, cir: Circuit, cond: Conditions) -> None:
        self.cir, self.cond = cir, cond
        self.ibase = {q.ref: rm.internal_base(q, cir.bdevices[q.device]) for q in cir.bjts}
        nodes = {cir.ground, cir.supply_node, cir.input, cir.output}
        for _, a, b, _ in cir.resistors + cir.capacitors:
            nodes |= {a, b}
        for j in cir.jfets:
            nodes |= {j.d, j.g, j.s}
        for q in cir.bjts:
            nodes |= {q.c, q.b, q.e, self.ibase[q.ref]}
        self.nodes = sorted(nodes)
        idx = self.idx = {n: i for i, n in enumerate(self.nodes)}
        fixed = {cir.ground: 0.0, cir.supply_node: cond.supply}
        blocked = cir.source_capacitance > 0
        if cir.source_resistance == 0.0 and not blocked:
            fixed[cir.input] = 0.0  # the source EMF (0 V at DC) holds the input
        self.fixed = fixed
        two = [(a, b, 1.0 / r) for _, a, b, r in cir.resistors]
        for q in cir.bjts:
            d = cir.bdevices[q.device]
            if d.r_bb > 0:
                two.append((q.b, self.ibase[q.ref], 1.0 / d.r_bb))
        if cir.source_resistance > 0 and not blocked:
            two.append((cir.input, cir.ground, 1.0 / cir.source_resistance))
        two.append((cir.output, cir.ground, 1.0 / cir.load_resistance))
        links = [(a, b) for a, b, _ in two] + [(j.d, j.s) for j in cir.jfets]
        links += [(q.c, self.ibase[q.ref]) for q in cir.bjts]
        links += [(q.e, self.ibase[q.ref]) for q in cir.bjts]
        two += [(n, cir.ground, rm.GMIN) for n in self._floating(links)]
        self.g = np.zeros((len(nodes), len(nodes)))
        for a, b, y in two:
            for r, sr in ((a, 1.0), (b, -1.0)):
                for c, sc in ((a, 1.0), (b, -1.0)):
                    self.g[idx[r], idx[c]] += sr * sc * y
        self.free = [idx[n] for n in self.nodes if n not in fixed]
        self.hot = [("j", j.ref) for j in cir.jfets
                    if cir.jdevices[j.device].theta_ja is not None]
        self.hot += [("q", q.ref) for q in cir.bjts
                     if cir.bdevices[q.device].theta_ja is not None]
        spread, hfe = dict(cond.spread), dict(cond.hfe)
        self.units = {j.ref: cir.jdevices[j.device].unit(spread[j.device]) for j in cir.jfets}
        self.hfe25 = {q.ref: hfe[q.device] for q in cir.bjts}

    def _floating(self, links: list[tuple[str, str]]) -> list[str]:
        """Nodes with no DC path to a fixed node (fed by capacitors or gates only)."""
        parent = {n: n for n in self.nodes}

        def find(n: str) -> str:
            while parent[n] != n:
                n = parent[n]
            return n

        for a, b in links:
            parent[find(a)] = find(b)
        anchored = {find(n) for n in self.fixed}
        return [n for n in self.nodes if n not in self.fixed and find(n) not in anchored]

    def unpack(self, x: np.ndarray, scale: float) -> tuple[np.ndarray, dict[str, float]]:
        """Node voltages and junction temperatures (ambient where no theta_ja)."""
        v = np.zeros(len(self.nodes))
        for n, val in self.fixed.items():
            v[self.idx[n]] = val * scale
        v[self.free] = x[: len(self.free)]
        tj = {j.ref: self.cond.ambient for j in self.cir.jfets}
        tj |= {q.ref: self.cond.ambient for q in self.cir.bjts}
        for (_, ref), t in zip(self.hot, x[len(self.free):], strict=True):
            tj[ref] = float(t)
        return v, tj

    def jfet_state(self, j: Jfet, v: np.ndarray, t: float) -> dict[str, float]:
        """N-frame VGS, VDS, ID and slopes of one JFET at node voltages v and Tj."""
        dev = self.cir.jdevices[j.device]
        p = dev.sign
        idss25, vp25 = self.units[j.ref]
        idss, vp = idss_at(idss25, dev, t), vp_at(vp25, dev, t)
        vgs = p * (v[self.idx[j.g]] - v[self.idx[j.s]])
        vds = p * (v[self.idx[j.d]] - v[self.idx[j.s]])
        i, gm, gds = drain_law(idss, vp, dev.early_voltage, vgs, vds)
        return dict(p=p, vgs=vgs, vds=vds, id=i, gm=gm, gds=gds, idss=idss, vp=vp,
                    igss=i_gss_at(dev, t))

    def bjt_state(self, q: rm.Bjt, v: np.ndarray, t: float) -> dict[str, float]:
        """Mirrored VBE', VCE, IC, IB of one bipolar transistor."""
        dev = self.cir.bdevices[q.device]
        p = dev.sign
        vbe = p * (v[self.idx[self.ibase[q.ref]]] - v[self.idx[q.e]])
        vce = p * (v[self.idx[q.c]] - v[self.idx[q.e]])
        ic, ib = bjt_law(dev, self.hfe25[q.ref], vbe, vce, t)
        return dict(p=p, vbe=vbe, vce=vce, ic=ic, ib=ib)

    def kcl(self, v: np.ndarray, tj: Mapping[str, float]) -> np.ndarray:
        """Net current leaving every node through the elements."""
        f = self.g @ v
        ix = self.idx
        for j in self.cir.jfets:
            s = self.jfet_state(j, v, tj[j.ref])
            f[ix[j.d]] += s["p"] * s["id"]
            f[ix[j.s]] -= s["p"] * s["id"]
            f[ix[j.g]] -= s["p"] * s["igss"]  # leakage out of the gate (N), in via the source
            f[ix[j.s]] += s["p"] * s["igss"]
        for q in self.cir.bjts:
            s = self.bjt_state(q, v, tj[q.ref])
            f[ix[q.c]] += s["p"] * s["ic"]
            f[ix[self.ibase[q.ref]]] += s["p"] * s["ib"]
            f[ix[q.e]] -= s["p"] * (s["ic"] + s["ib"])
        return f

    def residual(self, x: np.ndarray, scale: float) -> np.ndarray:
        """KCL at free nodes (A) and Tj - Ta - theta_ja*P for each heated device (K)."""
        v, tj = self.unpack(x, scale)
        heat = []
        for kind, ref in self.hot:
            if kind == "j":
                j = next(j for j in self.cir.jfets if j.ref == ref)
                s = self.jfet_state(j, v, tj[ref])
                th, pw = self.cir.jdevices[j.device].theta_ja, s["vds"] * s["id"]
            else:
                q = next(q for q in self.cir.bjts if q.ref == ref)
                s = self.bjt_state(q, v, tj[ref])
                th, pw = self.cir.bdevices[q.device].theta_ja, s["vce"] * s["ic"]
            heat.append(tj[ref] - self.cond.ambient - th * max(pw, 0.0))
        return np.concatenate([self.kcl(v, tj)[self.free], heat])

    def jacobian(self, x: np.ndarray, scale: float) -> np.ndarray:
        """Central differences (small systems: a dozen unknowns)."""
        n = len(x)
        jac = np.zeros((n, n))
        for k in range(n):
            h = 1e-7 * max(1.0, abs(x[k]))
            e = np.zeros(n)
            e[k] = h
            jac[:, k] = (self.residual(x + e, scale) - self.residual(x - e, scale)) / (2 * h)
        return jac

    def converged(self, x: np.ndarray, scale: float) -> bool:
        """A Newton step from x moves no voltage by 1 nV (no temperature by 1 uK), and KCL
        holds to 1 nA (the step test is the strict one: a 1 GOhm gate resistor turns 1 pA
        of residual into 1 mV)."""
        r = self.residual(x, scale)
        if not np.all(np.isfinite(r)) or np.max(np.abs(r[: len(self.free)]), initial=0) > 1e-9:
            return False
        dx = np.linalg.lstsq(self.jacobian(x, scale), -r, rcond=None)[0]
        return bool(np.max(np.abs(dx), initial=0.0) < 1e-9)


def _newton(sys_: DcSystem, x: np.ndarray, scale: float, steps: int = 60,
            clip: float = 0.2) -> np.ndarray:
    """Newton with each step clipped to `clip` volts (kelvin)."""
    for _ in range(steps):
        dx = np.linalg.lstsq(sys_.jacobian(x, scale), -sys_.residual(x, scale), rcond=None)[0]
        big = float(np.max(np.abs(dx))) if dx.size else 0.0
        x = x + (dx * clip / big if big > clip else dx)
        if big < 1e-12:
            break
    return x


def _root(sys_: DcSystem, x0: np.ndarray, scale: float) -> np.ndarray | None:
    """scipy.optimize.root (MINPACK hybrid) then Newton polish; damped Newton fallback."""
    from scipy.optimize import root

    with np.errstate(all="ignore"):
        sol = root(sys_.residual, x0, args=(scale,), method="hybr", options={"xtol": 1e-13})
        x = _newton(sys_, sol.x, scale, steps=3)
        if np.all(np.isfinite(x)) and sys_.converged(x, scale):
            return x
        x = _newton(sys_, np.asarray(x0, float), scale)
    return x if np.all(np.isfinite(x)) and sys_.converged(x, scale) else None


def solve_dc(cir: Circuit, cond: Conditions, guess: np.ndarray | None = None
             ) -> OperatingPoint:
    """Operating point at conditions, from a guess or by continuation in the supply."""
    sys_ = DcSystem(cir, cond)
    n = len(sys_.free) + len(sys_.hot)
    x = _root(sys_, guess, 1.0) if guess is not None and len(guess) == n else None
    if x is None:
        x = np.concatenate([np.zeros(len(sys_.free)), np.full(len(sys_.hot), cond.ambient)])
        s, ds = 0.0, 0.1
        while s < 1.0:
            s_next = min(1.0, s + ds)
            xn = _root(sys_, x, s_next)
            if xn is None:
                ds /= 2.0
                if ds < 1e-5:
                    raise ConvergenceError(f"JFET reference DC stuck at supply x{s:.4f}")
                continue
            x, s, ds = xn, s_next, min(ds * 1.5, 0.25)
    return operating_point(sys_, x)


def operating_point(sys_: DcSystem, x: np.ndarray) -> OperatingPoint:
    """Pack converged unknowns: JFET small-signal values (the law's own slopes), hybrid-pi."""
    v, tj = sys_.unpack(x, 1.0)
    cir = sys_.cir
    jops = {}
    for j in cir.jfets:
        s = sys_.jfet_state(j, v, tj[j.ref])
        dev = cir.jdevices[j.device]
        sat = s["vgs"] > s["vp"] and s["vds"] >= s["vgs"] - s["vp"]
        jops[j.ref] = JfetOP(
            ref=j.ref, id=s["id"], vgs=s["vgs"], vds=s["vds"], tj=tj[j.ref], idss=s["idss"],
            vp=s["vp"], i_gss=s["igss"], gm=s["gm"],
            ro=1.0 / s["gds"] if s["gds"] > 0 else math.inf, c_gs=dev.c_gs, c_gd=dev.c_gd,
            saturated=bool(sat), active=bool(sat and s["id"] >= ID_ACTIVE))
    bops = {}
    for q in cir.bjts:
        s, d = sys_.bjt_state(q, v, tj[q.ref]), cir.bdevices[q.device]
        vt = float(rm.thermal_voltage(tj[q.ref]))
        h = float(rm.hfe_at(sys_.hfe25[q.ref], d, tj[q.ref]))
        gm = s["ic"] / vt
        bops[q.ref] = rm.TransistorOP(
            ref=q.ref, ic=s["ic"], ib=s["ib"], vce=s["vce"], vbe_int=s["vbe"], tj=tj[q.ref],
            hfe=h, vt=vt, gm=gm, rpi=h / gm if gm > 0 else math.inf,
            ro=(d.early_voltage + s["vce"]) / s["ic"] if s["ic"] > 0 else math.inf,
            cpi=rm.c_pi(d, gm), cmu=d.c_cb, rx=d.r_bb,
            active=bool(s["ic"] >= rm.IC_ACTIVE and s["vce"] >= d.vce_sat))
    supply = float(sys_.kcl(v, tj)[sys_.idx[cir.supply_node]])
    return OperatingPoint(sys_.cond, {n: float(v[i]) for n, i in sys_.idx.items()}, jops, bops,
                          supply)


def guess_vector(cir: Circuit, op: OperatingPoint) -> np.ndarray:
    """Unknown vector of a solved point, to start nearby corners."""
    sys_ = DcSystem(cir, op.conditions)
    v = np.array([op.voltages[n] for n in sys_.nodes])
    t = [(op.jfets[r].tj if k == "j" else op.bjts[r].tj) for k, r in sys_.hot]
    return np.concatenate([v[sys_.free], t])
