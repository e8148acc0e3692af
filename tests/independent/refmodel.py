"""Independent reference of the contract's device model (spec-format.md section 2).

Written from the contract text only (nothing from stagesynth but its error type) so the
engine can be judged from the outside: DC by scipy.optimize.root with a supply-voltage
continuation over node voltages and junction temperatures, AC by a plain nodal admittance
matrix solved for every frequency at once.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from stagesynth.quantities.errors import ConvergenceError, StageError

# CODATA 2018 exact values (SI redefinition of 2019).
K_BOLTZMANN = 1.380649e-23  # J/K
Q_ELECTRON = 1.602176634e-19  # C
ZERO_CELSIUS = 273.15  # K
GMIN = 1e-12  # S to ground from DC-floating nodes only (fed by capacitors), to define them
THREE_DB = 10.0 ** (-3.0 / 20.0)  # "3 dB below": literally 3.0 dB


def thermal_voltage(t_celsius: float | np.ndarray) -> float | np.ndarray:
    """VT = k*T/q with T in kelvin (CODATA 2018 exact k and q)."""
    return K_BOLTZMANN * (np.asarray(t_celsius, dtype=float) + ZERO_CELSIUS) / Q_ELECTRON


# --------------------------------------------------------------------------- circuit


@dataclass(frozen=True)
class Device:
    """Transistor type parameters of the reference model, SI units (magnitudes for PNP)."""

    polarity: str
    hfe_min: float
    hfe_max: float
    hfe_typ: float
    vbe: float
    vbe_current: float
    early_voltage: float
    ft: float
    c_cb: float
    r_bb: float
    vce_sat: float
    vbe_tempco: float
    hfe_tempco: float
    theta_ja: float | None
    ft_current: float | None = None  # second release: current at which ft is stated
    c_je: float = 0.0  # second release: zero-bias B-E junction capacitance
    hfe_reverse: float = 1.0  # second release: Ebers-Moll reverse current gain

    @property
    def sign(self) -> float:
        """+1 for NPN, -1 for PNP (the mirror image)."""
        return 1.0 if self.polarity == "npn" else -1.0


@dataclass(frozen=True)
class Bjt:
    """One transistor instance: reference, device name and its three nodes."""

    ref: str
    device: str
    c: str
    b: str
    e: str


@dataclass(frozen=True)
class Circuit:
    """The design file read into plain values (section 3 of the contract)."""

    ground: str
    supply_node: str
    supply_voltage: float
    input: str
    output: str
    source_resistance: float
    source_capacitance: float  # 0 when the source has none (second release)
    load_resistance: float
    load_capacitance: float
    resistors: tuple[tuple[str, str, str, float], ...]
    capacitors: tuple[tuple[str, str, str, float], ...]
    bjts: tuple[Bjt, ...]
    devices: Mapping[str, Device] = field(hash=False)


def _num(d: Mapping[str, Any], key: str, default: float | None = None) -> float:
    """A float from a dict, or the default; StageError when missing and required."""
    if key not in d or d[key] is None:
        if default is None:
            raise StageError(f"missing key '{key}'", key=key)
        return float(default)
    return float(d[key])


def device_from_dict(d: Mapping[str, Any]) -> Device:
    """A Device from the design-file device dict, with the contract's defaults."""
    hfe = d["hfe"]
    hmin, hmax = (float(hfe[0]), float(hfe[1])) if isinstance(hfe, Sequence) else (hfe, hfe)
    pol = str(d["polarity"]).lower()
    if pol not in ("npn", "pnp"):
        raise StageError(f"polarity {pol!r}", key="polarity", accepted="npn, pnp")
    return Device(
        polarity=pol,
        hfe_min=hmin,
        hfe_max=hmax,
        hfe_typ=_num(d, "hfe_typ", math.sqrt(hmin * hmax)),
        vbe=_num(d, "vbe"),
        vbe_current=_num(d, "vbe_current", 1e-3),
        early_voltage=_num(d, "early_voltage", 100.0),
        ft=_num(d, "ft"),
        c_cb=_num(d, "c_cb"),
        r_bb=_num(d, "r_bb", 0.0),
        vce_sat=_num(d, "vce_sat", 0.2),
        vbe_tempco=_num(d, "vbe_tempco", -2e-3),
        hfe_tempco=_num(d, "hfe_tempco", 5e-3),
        theta_ja=None if d.get("theta_ja") is None else float(d["theta_ja"]),
        ft_current=None if d.get("ft_current") is None else float(d["ft_current"]),
        c_je=_num(d, "c_je", 0.0),
        hfe_reverse=_num(d, "hfe_reverse", 1.0),
    )


def circuit_from_design(design: Mapping[str, Any]) -> Circuit:
    """Read a section-3 design dict into a Circuit."""
    res, caps, bjts = [], [], []
    devices = {name: device_from_dict(dd) for name, dd in design.get("devices", {}).items()}
    for p in design["parts"]:
        kind = p["kind"]
        if kind == "resistor":
            res.append((p["ref"], p["nodes"][0], p["nodes"][1], float(p["value"])))
        elif kind == "capacitor":
            caps.append((p["ref"], p["nodes"][0], p["nodes"][1], float(p["value"])))
        elif kind == "bjt":
            if p["device"] not in devices:
                raise StageError(f"unknown device {p['device']!r}", key=f"parts.{p['ref']}")
            n = p["nodes"]
            bjts.append(Bjt(p["ref"], p["device"], n["c"], n["b"], n["e"]))
        else:
            raise StageError(f"unknown part kind {kind!r}", key=f"parts.{p['ref']}")
    load = design.get("load", {})
    return Circuit(
        ground=str(design.get("ground", "0")),
        supply_node=design["supply"]["node"],
        supply_voltage=float(design["supply"]["voltage"]),
        input=design["input"],
        output=design["output"],
        source_resistance=float(design.get("source", {}).get("resistance", 0.0)),
        source_capacitance=float(design.get("source", {}).get("capacitance") or 0.0),
        load_resistance=float(load["resistance"]),
        load_capacitance=float(load.get("capacitance", 0.0)),
        resistors=tuple(res),
        capacitors=tuple(caps),
        bjts=tuple(bjts),
        devices=devices,
    )


# --------------------------------------------------------------------------- device physics


def saturation_current(dev: Device, tj: float | np.ndarray) -> float | np.ndarray:
    """IS(Tj): chosen so VBE at vbe_current is vbe + vbe_tempco*(Tj-25) (Early factor 1 there)."""
    vbe_t = dev.vbe + dev.vbe_tempco * (np.asarray(tj) - 25.0)
    return dev.vbe_current * np.exp(-vbe_t / thermal_voltage(tj))


def hfe_at(hfe25: float, dev: Device, tj: float | np.ndarray) -> float | np.ndarray:
    """hFE(Tj) = hFE25*(1 + hfe_tempco*(Tj - 25 degC)), linear as the contract says."""
    return hfe25 * (1.0 + dev.hfe_tempco * (np.asarray(tj) - 25.0))


def collector_current(dev: Device, vbe_int: float, vce: float, tj: float) -> float:
    """IC = IS(Tj)*exp(VBE'/VT)*(1 + VCE/VA), mirrored quantities for PNP."""
    return float(
        saturation_current(dev, tj)
        * np.exp(vbe_int / thermal_voltage(tj))
        * (1.0 + vce / dev.early_voltage)
    )


# --------------------------------------------------------------------------- DC


@dataclass(frozen=True)
class Conditions:
    """One set of operating conditions: hFE(25 degC) per device, ambient degC, supply volts."""

    hfe: tuple[tuple[str, float], ...]
    ambient: float
    supply: float

    def hfe_of(self, device: str) -> float:
        """hFE(25 degC) of one device name."""
        return dict(self.hfe)[device]


@dataclass(frozen=True)
class TransistorOP:
    """Operating point and hybrid-pi values of one transistor (magnitudes for PNP)."""

    ref: str
    ic: float
    ib: float
    vce: float
    vbe_int: float
    tj: float
    hfe: float
    vt: float
    gm: float
    rpi: float
    ro: float
    cpi: float
    cmu: float
    rx: float
    active: bool


@dataclass(frozen=True)
class OperatingPoint:
    """DC solution: node voltages (incl. internal base nodes), transistors, supply current."""

    conditions: Conditions
    voltages: Mapping[str, float] = field(hash=False)
    transistors: Mapping[str, TransistorOP] = field(hash=False)
    supply_current: float


def internal_base(b: Bjt, dev: Device) -> str:
    """Name of the internal base node (the external one when r_bb is zero)."""
    return f"{b.ref}:b'" if dev.r_bb > 0 else b.b


class _DcSystem:
    """Vectorised KCL residual and analytic Jacobian of the DC network at given conditions."""

    def __init__(self, cir: Circuit, cond: Conditions) -> None:
        self.cir, self.cond = cir, cond
        nodes = {cir.ground, cir.supply_node, cir.input, cir.output}
        for _, a, b, _ in cir.resistors + cir.capacitors:
            nodes |= {a, b}
        for q in cir.bjts:
            nodes |= {q.c, q.b, q.e, internal_base(q, cir.devices[q.device])}
        self.nodes = sorted(nodes)
        idx = {n: i for i, n in enumerate(self.nodes)}
        self.idx = idx
        fixed = {cir.ground: 0.0, cir.supply_node: cond.supply}
        blocked = cir.source_capacitance > 0  # a series capacitor: no DC path to the source
        if cir.source_resistance == 0.0 and not blocked:
            fixed[cir.input] = 0.0  # the source at DC: its resistance to ground, EMF 0 V
        self.fixed_idx = np.array([idx[n] for n in fixed], dtype=int)
        self.fixed_val = np.array(list(fixed.values()))
        self.free = np.array([i for n, i in idx.items() if n not in fixed], dtype=int)
        # two-terminal conductances at DC (capacitors open)
        two = [(idx[a], idx[b], 1.0 / r) for _, a, b, r in cir.resistors]
        for q in cir.bjts:
            dev = cir.devices[q.device]
            if dev.r_bb > 0:
                two.append((idx[q.b], idx[internal_base(q, dev)], 1.0 / dev.r_bb))
        if cir.source_resistance > 0 and not blocked:
            two.append((idx[cir.input], idx[cir.ground], 1.0 / cir.source_resistance))
        two.append((idx[cir.output], idx[cir.ground], 1.0 / cir.load_resistance))
        two += [(i, idx[cir.ground], GMIN) for i in self._floating(two, cir)]
        n = len(self.nodes)
        a_mat = np.zeros((len(two), n))
        for k, (i, j, _) in enumerate(two):
            a_mat[k, i] += 1.0
            a_mat[k, j] -= 1.0
        g = np.array([t[2] for t in two])
        self.g_full = a_mat.T @ (g[:, None] * a_mat)
        self.devs = [cir.devices[q.device] for q in cir.bjts]
        self.qc = [idx[q.c] for q in cir.bjts]
        self.qb = [idx[internal_base(q, d)] for q, d in zip(cir.bjts, self.devs, strict=True)]
        self.qe = [idx[q.e] for q in cir.bjts]
        self.hfe25 = [cond.hfe_of(q.device) for q in cir.bjts]
        self.thermal = [k for k, d in enumerate(self.devs) if d.theta_ja is not None]
        self.nf = len(self.free)

    def _floating(self, two: list[tuple[int, int, float]], cir: Circuit) -> list[int]:
        """Free nodes with no DC path to a fixed node (e.g. between two capacitors)."""
        parent = list(range(len(self.nodes)))

        def find(i: int) -> int:
            while parent[i] != i:
                parent[i] = parent[parent[i]]
                i = parent[i]
            return i

        links = [(i, j) for i, j, _ in two]
        for q in cir.bjts:
            tri = [self.idx[q.c], self.idx[internal_base(q, cir.devices[q.device])],
                   self.idx[q.e]]
            links += [(tri[0], tri[1]), (tri[1], tri[2])]
        for i, j in links:
            parent[find(i)] = find(j)
        anchored = {find(int(i)) for i in self.fixed_idx}
        return [int(i) for i in self.free if find(int(i)) not in anchored]

    def unpack(self, x: np.ndarray, scale: float) -> tuple[np.ndarray, np.ndarray]:
        """Full node voltages and junction temperatures from the unknown vector."""
        v = np.zeros(len(self.nodes))
        v[self.fixed_idx] = self.fixed_val * scale
        v[self.free] = x[: self.nf]
        tj = np.full(len(self.devs), self.cond.ambient)
        tj[self.thermal] = x[self.nf :]
        return v, tj

    def device_state(self, v: np.ndarray, tj: np.ndarray) -> list[dict[str, float]]:
        """Per transistor: vbe', vce, IC, IB and their partial derivatives (mirrored for PNP).

        Both junctions in the Ebers-Moll transport form (second release): the forward
        current iF = IS*exp(VBE'/VT)*(1 + VCE/VA) is the contract's active-region IC;
        the base-collector junction adds iR = IS*exp(VBC/VT), so that
        IC = iF - iR*(1 + 1/beta_R) and IB = iF/hFE + iR/beta_R.
        """
        out = []
        kq = K_BOLTZMANN / Q_ELECTRON
        for k, d in enumerate(self.devs):
            p = d.sign
            vbe = p * (v[self.qb[k]] - v[self.qe[k]])
            vce = p * (v[self.qc[k]] - v[self.qe[k]])
            vbc = vbe - vce
            t = tj[k]
            vt = float(thermal_voltage(t))
            vbe_t = d.vbe + d.vbe_tempco * (t - 25.0)
            expo = math.exp(min(vbe / vt - vbe_t / vt, 200.0))
            expr = math.exp(min(vbc / vt - vbe_t / vt, 200.0))
            early = 1.0 + vce / d.early_voltage
            i_f = d.vbe_current * expo * early
            i_r = d.vbe_current * expr
            br = d.hfe_reverse
            h = float(hfe_at(self.hfe25[k], d, t))
            ic = i_f - i_r * (1.0 + 1.0 / br)
            ib = i_f / h + i_r / br
            g_f = i_f / vt  # d iF / d VBE
            go = d.vbe_current * expo / d.early_voltage  # d iF / d VCE
            g_r = i_r / vt  # d iR / d VBC
            dif_dt = i_f * (-d.vbe_tempco / vt + (vbe_t - vbe) * kq / vt**2)
            dir_dt = i_r * (-d.vbe_tempco / vt + (vbe_t - vbc) * kq / vt**2)
            out.append(dict(
                p=p, vbe=vbe, vce=vce, ic=ic, ib=ib, h=h, vt=vt, t=t,
                # VBC = VBE - VCE
                dic_vbe=g_f - g_r * (1.0 + 1.0 / br), dic_vce=go + g_r * (1.0 + 1.0 / br),
                dib_vbe=g_f / h + g_r / br, dib_vce=go / h - g_r / br,
                dt=dif_dt - dir_dt * (1.0 + 1.0 / br),
                dibt=dif_dt / h - i_f * self.hfe25[k] * d.hfe_tempco / h**2 + dir_dt / br,
            ))
        return out

    def full_kcl(self, v: np.ndarray, tj: np.ndarray) -> np.ndarray:
        """Net current leaving every node through the elements (amperes)."""
        f = self.g_full @ v
        for k, s in enumerate(self.device_state(v, tj)):
            p = s["p"]
            f[self.qc[k]] += p * s["ic"]
            f[self.qb[k]] += p * s["ib"]
            f[self.qe[k]] -= p * (s["ic"] + s["ib"])
        return f

    def fun(self, x: np.ndarray, scale: float) -> tuple[np.ndarray, np.ndarray]:
        """Residual (KCL at free nodes, self-heating balance) and its Jacobian."""
        v, tj = self.unpack(x, scale)
        n = len(self.nodes)
        nt = len(self.thermal)
        f = self.g_full @ v
        jac = np.zeros((n + nt, n + nt))
        jac[:n, :n] = self.g_full
        states = self.device_state(v, tj)
        tres = np.zeros(nt)
        for k, s in enumerate(states):
            p, c, b, e = s["p"], self.qc[k], self.qb[k], self.qe[k]
            ic, ib = s["ic"], s["ib"]
            f[c] += p * ic
            f[b] += p * ib
            f[e] -= p * (ic + ib)
            dvbe: dict[int, float] = {}
            dvce: dict[int, float] = {}
            for node, val in ((b, p), (e, -p)):
                dvbe[node] = dvbe.get(node, 0.0) + val
            for node, val in ((c, p), (e, -p)):
                dvce[node] = dvce.get(node, 0.0) + val
            nodes = set(dvbe) | set(dvce)
            dic = {nd: dvbe.get(nd, 0.0) * s["dic_vbe"] + dvce.get(nd, 0.0) * s["dic_vce"]
                   for nd in nodes}
            dib = {nd: dvbe.get(nd, 0.0) * s["dib_vbe"] + dvce.get(nd, 0.0) * s["dib_vce"]
                   for nd in nodes}
            for node in nodes:
                jac[c, node] += p * dic[node]
                jac[b, node] += p * dib[node]
                jac[e, node] -= p * (dic[node] + dib[node])
            if k in self.thermal:
                j = self.thermal.index(k)
                col = n + j
                jac[c, col] += p * s["dt"]
                jac[b, col] += p * s["dibt"]
                jac[e, col] -= p * (s["dt"] + s["dibt"])
                th = self.devs[k].theta_ja
                # a reversed or cut-off transistor dissipates nothing (never negative power)
                hot = s["vce"] > 0 and ic > 0
                tres[j] = s["t"] - self.cond.ambient - (th * s["vce"] * ic if hot else 0.0)
                jac[col, col] = 1.0 - (th * s["vce"] * s["dt"] if hot else 0.0)
                if hot:
                    for node, dd in dic.items():
                        jac[col, node] -= th * (dvce.get(node, 0.0) * ic + s["vce"] * dd)
        sel = np.concatenate([self.free, np.arange(n, n + nt)])
        res = np.concatenate([f[self.free], tres])
        return res, jac[np.ix_(sel, sel)]

    def converged(self, x: np.ndarray, scale: float) -> bool:
        """KCL met to 1e-12 A plus 1e-9 of the largest current, heat balance to 1 uK."""
        res, _ = self.fun(x, scale)
        v, tj = self.unpack(x, scale)
        big = max([abs(s["ic"]) for s in self.device_state(v, tj)] + [1e-3])
        ok_kcl = np.all(np.abs(res[: self.nf]) < 1e-12 + 1e-9 * big)
        return bool(ok_kcl and np.all(np.abs(res[self.nf :]) < 1e-6))


def _newton_polish(sys_: _DcSystem, x: np.ndarray, scale: float, steps: int = 4) -> np.ndarray:
    """A few plain Newton steps with the analytic Jacobian, to tighten the root."""
    for _ in range(steps):
        res, jac = sys_.fun(x, scale)
        try:
            dx = np.linalg.solve(jac, -res)
        except np.linalg.LinAlgError:
            break
        x = x + dx
        if np.max(np.abs(dx)) < 1e-13:
            break
    return x


def _root(sys_: _DcSystem, x0: np.ndarray, scale: float) -> np.ndarray | None:
    """scipy.optimize.root (MINPACK hybrid) from x0; None when it does not converge."""
    from scipy.optimize import root

    with np.errstate(all="ignore"):
        sol = root(sys_.fun, x0, args=(scale,), jac=True, method="hybr", options={"xtol": 1e-13})
        x = _newton_polish(sys_, sol.x, scale)
    if np.all(np.isfinite(x)) and sys_.converged(x, scale):
        return x
    x = _damped_newton(sys_, np.asarray(x0, dtype=float), scale)
    return x if x is not None and sys_.converged(x, scale) else None


def _damped_newton(sys_: _DcSystem, x: np.ndarray, scale: float) -> np.ndarray | None:
    """Newton with every step clipped to 0.1 V (0.1 K), the fallback when hybr stalls."""
    with np.errstate(all="ignore"):
        for _ in range(300):
            res, jac = sys_.fun(x, scale)
            try:
                dx = np.linalg.solve(jac, -res)
            except np.linalg.LinAlgError:
                return None
            big = np.max(np.abs(dx))
            if not np.isfinite(big):
                return None
            x = x + (dx * (0.1 / big) if big > 0.1 else dx)
            if big < 1e-12:
                break
    return x


def solve_dc(cir: Circuit, cond: Conditions, guess: np.ndarray | None = None) -> OperatingPoint:
    """DC operating point by scipy root, with a homotopy on the supply voltage when needed."""
    sys_ = _DcSystem(cir, cond)
    x = _root(sys_, guess, 1.0) if guess is not None and len(guess) == sys_.nf + len(
        sys_.thermal
    ) else None
    if x is None:
        x = np.concatenate([np.zeros(sys_.nf), np.full(len(sys_.thermal), cond.ambient)])
        s, ds = 0.0, 0.05
        while s < 1.0:
            s_next = min(1.0, s + ds)
            xn = _root(sys_, x, s_next)
            if xn is None:
                ds /= 2.0
                if ds < 1e-5:
                    raise ConvergenceError(f"reference DC did not converge at supply x{s:.4f}")
                continue
            x, s, ds = xn, s_next, min(ds * 1.5, 0.25)
    return _operating_point(sys_, x)


IC_ACTIVE = 100e-9  # A: "active only with VCE >= vce_sat and IC >= 100 nA" (second release)


def c_pi(d: Device, gm: float) -> float:
    """Cpi at gm: without ft_current max(gm/(2 pi ft) - Cmu, 0); with it (second release)
    gm*tauF + c_je, tauF = max(1/(2 pi ft) - (c_je + c_cb)/gm_ft, 0), gm_ft = ft_current/VT(25)."""
    if d.ft_current is None:
        return max(gm / (2 * math.pi * d.ft) - d.c_cb, 0.0)
    gm_ft = d.ft_current / float(thermal_voltage(25.0))
    tau_f = max(1.0 / (2 * math.pi * d.ft) - (d.c_je + d.c_cb) / gm_ft, 0.0)
    return gm * tau_f + d.c_je


def _operating_point(sys_: _DcSystem, x: np.ndarray) -> OperatingPoint:
    """Pack the converged unknowns into an OperatingPoint with hybrid-pi values."""
    v, tj = sys_.unpack(x, 1.0)
    volts = {n: float(v[i]) for n, i in sys_.idx.items()}
    trs = {}
    for q, d, s in zip(sys_.cir.bjts, sys_.devs, sys_.device_state(v, tj), strict=True):
        ic, vce, vt, h = s["ic"], s["vce"], s["vt"], s["h"]
        gm = ic / vt
        trs[q.ref] = TransistorOP(
            ref=q.ref, ic=ic, ib=s["ib"], vce=vce, vbe_int=s["vbe"], tj=s["t"], hfe=h, vt=vt,
            gm=gm, rpi=h / gm if gm > 0 else math.inf,
            ro=(d.early_voltage + vce) / ic if ic > 0 else math.inf,
            cpi=c_pi(d, gm), cmu=d.c_cb, rx=d.r_bb,
            active=bool(ic >= IC_ACTIVE and vce >= d.vce_sat),
        )
    f = sys_.full_kcl(v, tj)
    supply = float(f[sys_.idx[sys_.cir.supply_node]])  # current the supply pushes into the circuit
    # gmin is not connected to the supply node, so this is exactly the parts' current
    return OperatingPoint(sys_.cond, volts, trs, supply)


# --------------------------------------------------------------------------- AC


class _AcNetwork:
    """Small-signal nodal matrices G + jwC of the whole linear circuit at one operating point."""

    def __init__(self, cir: Circuit, op: OperatingPoint, *, load: bool, source: bool) -> None:
        ground = {cir.ground, cir.supply_node}  # supply = AC ground
        names = sorted({n for n in op.voltages if n not in ground})
        self.idx = {n: i for i, n in enumerate(names)}
        n = len(names)
        self.g = np.zeros((n, n))
        self.c = np.zeros((n, n))
        self.cir, self.op = cir, op
        for _, a, b, r in cir.resistors:
            self._two(self.g, a, b, 1.0 / r)
        for _, a, b, cval in cir.capacitors:
            self._two(self.c, a, b, cval)
        if load:
            self._two(self.g, cir.output, cir.ground, 1.0 / cir.load_resistance)
            self._two(self.c, cir.output, cir.ground, cir.load_capacitance)
        self.fixed: dict[int, float] = {}
        self.rs_norton = source and cir.source_resistance > 0
        if self.rs_norton:
            self._two(self.g, cir.input, cir.ground, 1.0 / cir.source_resistance)
        elif source:
            self.fixed[self.idx[cir.input]] = 0.0  # zero source resistance: input held
        for q in cir.bjts:
            d = cir.devices[q.device]
            t = op.transistors[q.ref]
            bi = internal_base(q, d)
            if d.r_bb > 0:
                self._two(self.g, q.b, bi, 1.0 / d.r_bb)
            self._two(self.g, bi, q.e, 1.0 / t.rpi)
            self._two(self.c, bi, q.e, t.cpi)
            self._two(self.c, bi, q.c, t.cmu)  # C_mu from the internal base to the collector
            self._two(self.g, q.c, q.e, 1.0 / t.ro)
            # VCCS gm*v(b'e) from collector to emitter through the device
            for row, sr in ((q.c, 1.0), (q.e, -1.0)):
                for col, sc in ((bi, 1.0), (q.e, -1.0)):
                    self._stamp(self.g, row, col, sr * sc * t.gm)

    def _stamp(self, m: np.ndarray, r: str, c: str, val: float) -> None:
        """Add val at (r, c) unless either is an AC ground."""
        if r in self.idx and c in self.idx:
            m[self.idx[r], self.idx[c]] += val

    def _two(self, m: np.ndarray, a: str, b: str, val: float) -> None:
        """Stamp a two-terminal admittance between a and b."""
        self._stamp(m, a, a, val)
        self._stamp(m, b, b, val)
        self._stamp(m, a, b, -val)
        self._stamp(m, b, a, -val)

    def solve(self, freqs: np.ndarray, inject: Mapping[str, complex],
              fixed: Mapping[str, complex] | None = None) -> np.ndarray:
        """Node voltages (nf, n) for current injections and fixed node voltages at all freqs."""
        freqs = np.atleast_1d(np.asarray(freqs, dtype=float))
        n = len(self.idx)
        fix = dict(self.fixed)
        for k, val in (fixed or {}).items():
            fix[self.idx[k]] = val
        rhs = np.zeros(n, dtype=complex)
        for k, val in inject.items():
            rhs[self.idx[k]] += val
        y = self.g[None, :, :] + 2j * np.pi * freqs[:, None, None] * self.c[None, :, :]
        free = np.array([i for i in range(n) if i not in fix], dtype=int)
        fi = np.array(list(fix), dtype=int)
        fv = np.array(list(fix.values()), dtype=complex)
        out = np.zeros((len(freqs), n), dtype=complex)
        out[:, fi] = fv
        b = rhs[free][None, :] - (y[:, free][:, :, fi] @ fv if len(fi) else 0.0)
        out[:, free] = np.linalg.solve(y[:, free][:, :, free], b[..., None])[..., 0]
        return out

    def voltage(self, v: np.ndarray, node: str) -> np.ndarray:
        """Column of one node (zero for an AC ground)."""
        return v[:, self.idx[node]] if node in self.idx else np.zeros(v.shape[0], dtype=complex)


def _series_source(cir: Circuit, op: OperatingPoint, freqs: np.ndarray, load: bool,
                   inject_emf: bool, probe: str | None = None) -> np.ndarray:
    """Node voltages with the source EMF behind Rs and Cs in series (second release): one
    extra node between them, solved frequency by frequency (EMF 1 V, or 0 V with a 1 A
    test current into `probe`)."""
    net = _AcNetwork(cir, op, load=load, source=False)
    n = len(net.idx)
    freqs = np.atleast_1d(np.asarray(freqs, dtype=float))
    i_in = net.idx[cir.input]
    out = np.zeros((len(freqs), n), dtype=complex)
    for k, f in enumerate(freqs):
        w = 2 * np.pi * f
        y = np.zeros((n + 1, n + 1), dtype=complex)
        y[:n, :n] = net.g + 1j * w * net.c
        yc = 1j * w * cir.source_capacitance
        y[i_in, i_in] += yc  # Cs between the input and the extra node x
        y[n, n] += yc
        y[i_in, n] -= yc
        y[n, i_in] -= yc
        rhs = np.zeros(n + 1, dtype=complex)
        if cir.source_resistance > 0:
            y[n, n] += 1.0 / cir.source_resistance
            if inject_emf:
                rhs[n] = 1.0 / cir.source_resistance
        else:  # x is the EMF itself
            y[n, :] = 0.0
            y[n, n] = 1.0
            rhs[n] = 1.0 if inject_emf else 0.0
        if probe is not None:
            rhs[net.idx[probe]] += 1.0
        out[k] = np.linalg.solve(y, rhs)[:n]
    return out


def gain(cir: Circuit, op: OperatingPoint, freqs: np.ndarray | float) -> np.ndarray:
    """v_load / v_source_emf with the source (EMF + resistance) and the load in place."""
    net = _AcNetwork(cir, op, load=True, source=False)
    if cir.source_capacitance > 0:
        v = _series_source(cir, op, freqs, load=True, inject_emf=True)
        return net.voltage(v, cir.output)
    if cir.source_resistance > 0:
        net_s = _AcNetwork(cir, op, load=True, source=True)
        v = net_s.solve(freqs, {cir.input: 1.0 / cir.source_resistance})
        return net_s.voltage(v, cir.output)
    v = net.solve(freqs, {}, fixed={cir.input: 1.0})
    return net.voltage(v, cir.output)


def node_response(cir: Circuit, op: OperatingPoint, freq: float) -> dict[str, complex]:
    """All node voltages for 1 V source EMF at one frequency (AC grounds = 0)."""
    net = _AcNetwork(cir, op, load=True, source=cir.source_resistance > 0)
    if cir.source_capacitance > 0:
        v = _series_source(cir, op, [freq], load=True, inject_emf=True)
    elif cir.source_resistance > 0:
        v = net.solve([freq], {cir.input: 1.0 / cir.source_resistance})
    else:
        v = net.solve([freq], {}, fixed={cir.input: 1.0})
    out = {n: complex(v[0, i]) for n, i in net.idx.items()}
    out[cir.ground] = 0j
    out[cir.supply_node] = 0j
    return out


def input_impedance(cir: Circuit, op: OperatingPoint, freq: float) -> complex:
    """Z into the input terminal, load in place, source removed (1 A test current)."""
    net = _AcNetwork(cir, op, load=True, source=False)
    return complex(net.voltage(net.solve([freq], {cir.input: 1.0}), cir.input)[0])


def output_impedance(cir: Circuit, op: OperatingPoint, freq: float) -> complex:
    """Z back into the output terminal, source resistance in place (EMF 0), load removed."""
    net = _AcNetwork(cir, op, load=False, source=True)
    if cir.source_capacitance > 0:
        v = _series_source(cir, op, [freq], load=False, inject_emf=False, probe=cir.output)
        return complex(net.voltage(v, cir.output)[0])
    return complex(net.voltage(net.solve([freq], {cir.output: 1.0}), cir.output)[0])


def _edge(cir: Circuit, op: OperatingPoint, fm: float, up: bool) -> float:
    """Nearest frequency beyond fm (down or up) where |gain| is 3.0 dB below |gain(fm)|."""
    from scipy.optimize import brentq

    ref = abs(complex(gain(cir, op, [fm])[0]))
    decades = math.log10(1e13 / fm) if up else math.log10(fm / 1e-4)
    steps = np.arange(0.0, decades + 1e-9, 1.0 / 40.0)
    grid = fm * 10.0 ** (steps if up else -steps)
    ratio = np.abs(gain(cir, op, grid)) / ref
    below = np.nonzero(ratio < THREE_DB)[0]
    if len(below) == 0:
        return math.inf if up else 0.0
    i = below[0]

    def h(lf: float) -> float:
        return abs(complex(gain(cir, op, [10.0**lf])[0])) / ref - THREE_DB

    return 10.0 ** brentq(h, math.log10(grid[i - 1]), math.log10(grid[i]), xtol=1e-12)


def band_edges(cir: Circuit, op: OperatingPoint, fm: float) -> tuple[float, float]:
    """(f_low, f_high): -3 dB corners below and above fm; 0 / inf when never reached."""
    return _edge(cir, op, fm, up=False), _edge(cir, op, fm, up=True)


def swing_vpp(cir: Circuit, op: OperatingPoint, fm: float) -> float:
    """Largest symmetric load sine (Vpp) before cutoff or saturation, small-signal ratios."""
    if not all(t.active for t in op.transistors.values()):
        return 0.0
    v = node_response(cir, op, fm)
    vl = v[cir.output]
    amp = math.inf
    for q in cir.bjts:
        t = op.transistors[q.ref]
        d = cir.devices[q.device]
        vbe = v[internal_base(q, d)] - v[q.e]
        vce = v[q.c] - v[q.e]
        ic = t.gm * vbe + vce / t.ro  # intrinsic collector current
        if abs(ic) > 0:
            amp = min(amp, t.ic / abs(ic / vl))
        if abs(vce) > 0:
            amp = min(amp, (t.vce - d.vce_sat) / abs(vce / vl))
    return 2.0 * amp


# --------------------------------------------------------------------------- corners, verdict


def nominal_conditions(cir: Circuit) -> Conditions:
    """hfe_typ for every device, 25 degC, nominal supply."""
    return Conditions(
        tuple((k, d.hfe_typ) for k, d in sorted(cir.devices.items())), 25.0, cir.supply_voltage
    )


def corner_conditions(
    cir: Circuit, ambient: Sequence[float] = (25.0,), supply_tolerance: float = 0.0
) -> list[Conditions]:
    """Every combination of hFE min/max (per device), ambient min/max, supply +-tolerance."""
    names = sorted(cir.devices)
    hfe_sets = [sorted({cir.devices[k].hfe_min, cir.devices[k].hfe_max}) for k in names]
    temps = sorted({float(min(ambient)), float(max(ambient))})
    v = cir.supply_voltage
    supplies = sorted({v * (1 - supply_tolerance), v * (1 + supply_tolerance)})
    out = []
    for hs in itertools.product(*hfe_sets):
        for ta in temps:
            for vs in supplies:
                out.append(Conditions(tuple(zip(names, hs, strict=True)), ta, vs))
    return out


@dataclass(frozen=True)
class Corner:
    """Result at one corner: its operating point, whether all are active, swing (Vpp), and
    (second release: every requirement is judged at every corner) its own midband gain,
    -3 dB corners and impedances."""

    conditions: Conditions
    op: OperatingPoint
    active: bool
    swing_vpp: float
    gain_db: float = math.nan
    inverting: bool = False
    f_low: float = math.nan
    f_high: float = math.nan
    z_in: float = math.nan
    z_out: float = math.nan


@dataclass(frozen=True)
class Analysis:
    """Nominal figures and corner results of one design (reference model)."""

    fm: float
    gain: complex
    gain_db: float
    inverting: bool
    f_low: float
    f_high: float
    z_in: float
    z_out: float
    supply_current: float
    swing_vpp: float
    nominal: OperatingPoint
    corners: tuple[Corner, ...]


def analyze(
    design: Mapping[str, Any],
    band: tuple[float, float],
    ambient: Sequence[float] = (25.0,),
    supply_tolerance: float = 0.0,
) -> Analysis:
    """All the contract's figures of a design for a requirement band (f_low, f_high)."""
    cir = circuit_from_design(design)
    fm = math.sqrt(band[0] * band[1])
    nom = solve_dc(cir, nominal_conditions(cir))
    sys_guess = _guess_vector(cir, nom)
    h = complex(gain(cir, nom, [fm])[0])
    f_lo, f_hi = band_edges(cir, nom, fm)
    corners = []
    for cond in corner_conditions(cir, ambient, supply_tolerance):
        op = solve_dc(cir, cond, guess=sys_guess)
        active = all(t.active for t in op.transistors.values())
        # second release: the smaller of the swing at midband and at the required f_high
        swing = min(swing_vpp(cir, op, fm), swing_vpp(cir, op, band[1])) if active else 0.0
        hc = complex(gain(cir, op, [fm])[0])
        lo_c, hi_c = band_edges(cir, op, fm)
        corners.append(Corner(
            cond, op, active, swing,
            gain_db=20.0 * math.log10(max(abs(hc), 1e-300)), inverting=bool(hc.real < 0),
            f_low=lo_c, f_high=hi_c, z_in=abs(input_impedance(cir, op, fm)),
            z_out=abs(output_impedance(cir, op, fm)),
        ))
    return Analysis(
        fm=fm,
        gain=h,
        gain_db=20.0 * math.log10(abs(h)),
        inverting=bool(h.real < 0),  # phase closer to 180 deg than to 0 deg
        f_low=f_lo,
        f_high=f_hi,
        z_in=abs(input_impedance(cir, nom, fm)),
        z_out=abs(output_impedance(cir, nom, fm)),
        supply_current=nom.supply_current,
        swing_vpp=min(c.swing_vpp for c in corners),
        nominal=nom,
        corners=tuple(corners),
    )


def _guess_vector(cir: Circuit, op: OperatingPoint) -> np.ndarray:
    """Unknown vector of a solved point, as a start for nearby corners."""
    sys_ = _DcSystem(cir, op.conditions)
    v = np.array([op.voltages[n] for n in sys_.nodes])
    tj = [op.transistors[cir.bjts[k].ref].tj for k in sys_.thermal]
    return np.concatenate([v[sys_.free], tj])


@dataclass(frozen=True)
class Check:
    """One requirement: name, value reached, limit, met or not."""

    name: str
    value: float
    limit: float | str
    ok: bool


def judge(an: Analysis, require: Mapping[str, Any]) -> tuple[bool, tuple[Check, ...]]:
    """The contract's verdict (second release): gain window, f_low, f_high, z_in, z_out and
    the sense at nominal AND every corner (the worst decides); swing, supply current and the
    active region at every corner."""
    checks = []
    tol = float(require.get("gain_tolerance_db", 1.0))
    every = [an, *an.corners]  # nominal first, then the corners
    if "gain_db" in require:
        g = float(require["gain_db"])
        far = max((p.gain_db for p in every), key=lambda x: abs(x - g))
        checks.append(Check("gain", far, g, abs(far - g) <= tol))
    if "f_low" in require:
        worst = max(p.f_low for p in every)
        checks.append(Check("f_low", worst, require["f_low"], worst <= require["f_low"]))
    if "f_high" in require:
        worst = min(p.f_high for p in every)
        checks.append(Check("f_high", worst, require["f_high"], worst >= require["f_high"]))
    zin = float(require.get("z_in", 0.0))
    worst = min(p.z_in for p in every)
    checks.append(Check("z_in", worst, zin, worst >= zin))
    if require.get("z_out") is not None:
        worst = max(p.z_out for p in every)
        checks.append(Check("z_out", worst, require["z_out"], worst <= require["z_out"]))
    if "swing" in require:
        checks.append(Check("swing", an.swing_vpp, require["swing"],
                            an.swing_vpp >= require["swing"]))
    if require.get("supply_current") is not None:
        worst = max(c.op.supply_current for c in an.corners)
        checks.append(Check("supply_current", worst, require["supply_current"],
                            worst <= require["supply_current"]))
    checks.append(Check("active", float(all(c.active for c in an.corners)), 1.0,
                        all(c.active for c in an.corners)))
    inv = str(require.get("inverting", "any"))
    if inv in ("yes", "no"):
        same = all(p.inverting == (inv == "yes") for p in every)
        checks.append(Check("inverting", float(an.inverting), inv, same))
    checks = [Check(c.name, float(c.value), c.limit, bool(c.ok)) for c in checks]
    return all(c.ok for c in checks), tuple(checks)


def analyze_spec(design: Mapping[str, Any], spec: Mapping[str, Any]
                 ) -> tuple[Analysis, bool, tuple[Check, ...]]:
    """Analysis and verdict of a design for a reference spec dict (see designs.py)."""
    req = spec["require"]
    an = analyze(
        design,
        (float(req["f_low"]), float(req["f_high"])),
        ambient=tuple(req.get("ambient", (25.0,))),
        supply_tolerance=float(spec.get("supply", {}).get("tolerance", 0.0)),
    )
    _, checks = judge(an, req)
    from . import supplyref  # second release: supply rejection, peaking, stability

    checks = checks + supplyref.checks(design, spec)
    return an, all(c.ok for c in checks), checks
