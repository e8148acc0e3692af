"""Bias of a junction FET over its production spread: the bias line through the corner units.

The classic graphical design (Horowitz & Hill and Sedra & Smith, the FET chapters, from
memory): the source resistor gives the bias line VGS = VG - ID*RS (VG = 0 for plain
self-bias, a divider voltage for the steeper divider line); where it crosses the square-law
transfer curve ID = IDSS*(1 - VGS/VP)^2 of a unit is that unit's operating point. The two
corner units of the pairing (u = 0: IDSS min with VP nearest zero; u = 1: IDSS max with
VP farthest) at the ambient extremes bound the drain current every built unit runs at.
Gate leakage i_gss(T) flows out of the gate through the gate's DC resistance and lifts
the gate by i_gss*RG (N-channel frame; P is the mirror image).

Everything is in the N-channel frame (VP < 0, VGS <= 0), vectorized, with the Early factor
left out (these are closed forms for first cuts and the report's picture; the verdict is
the engine's exact DC solution).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stagesynth.contracts.jfet import Jfet, gate_leakage, idss_at, vp_at

CORNER_U = (0.0, 1.0)  # the pairing's two ends: low unit, high unit


def transfer(idss, vp, vgs) -> np.ndarray:
    """Saturation-law drain current ID = IDSS*(1 - VGS/VP)^2 for VP < VGS, else 0 (N frame)."""
    vgs = np.asarray(vgs, dtype=float)
    ov = np.clip(1.0 - vgs / vp, 0.0, None)
    return idss * ov * ov


def bias_point(idss, vp, rs, vg=0.0) -> tuple[np.ndarray, np.ndarray]:
    """(ID, VGS) where the bias line VGS = VG - ID*RS crosses the square law (N frame).

    With y = 1 - VGS/VP in [0, 1] and P = |VP|: RS*IDSS*y^2 + P*y - (P + VG) = 0, the
    positive root y = (-P + sqrt(P^2 + 4*RS*IDSS*(P + VG))) / (2*RS*IDSS) (the textbook
    self-bias quadratic; RS = 0 gives y = 1 + VG/P). A line below pinch-off (P + VG <= 0)
    leaves the unit cut off (ID = 0, VGS = VG).
    """
    idss, vp, rs, vg = np.broadcast_arrays(*(np.asarray(x, dtype=float)
                                             for x in (idss, vp, rs, vg)))
    p = -vp
    head = np.maximum(p + vg, 0.0)
    a = rs * idss
    with np.errstate(divide="ignore", invalid="ignore"):
        # the stable form of the positive root: 2c / (b + sqrt(b^2 + 4ac)), c = P + VG
        y = 2.0 * head / (p + np.sqrt(p * p + 4.0 * a * head))
    i_d = idss * y * y
    vgs = np.where(head > 0, vp * (1.0 - y), vg)
    return i_d, vgs


def gm_at(idss, vp, i_d) -> np.ndarray:
    """gm = 2*sqrt(IDSS*ID)/|VP| = 2*IDSS/|VP|*(1 - VGS/VP) in saturation (Sedra & Smith)."""
    return 2.0 * np.sqrt(np.asarray(idss) * np.maximum(i_d, 0.0)) / np.abs(vp)


@dataclass(frozen=True)
class SpreadPoints:
    """The corner units' operating points on one bias line: arrays (..., 2 units, 2 ambients).

    Axis -2 is the unit (0: low, 1: high), axis -1 the ambient (min, max)."""

    idss: np.ndarray
    vp: np.ndarray  # N frame, negative
    i_gate: np.ndarray  # gate leakage at that ambient
    vg: np.ndarray  # effective gate voltage: bias source plus leakage through RG
    i_d: np.ndarray
    vgs: np.ndarray
    gm: np.ndarray

    @property
    def id_low(self) -> np.ndarray:
        """The least drain current over units and ambients."""
        return np.min(self.i_d, axis=(-2, -1))

    @property
    def id_high(self) -> np.ndarray:
        """The largest drain current over units and ambients."""
        return np.max(self.i_d, axis=(-2, -1))

    @property
    def overdrive_high(self) -> np.ndarray:
        """The largest VGS - VP (the saturation edge of VDS) over units and ambients."""
        return np.max(self.vgs - self.vp, axis=(-2, -1))

    @property
    def gm_low(self) -> np.ndarray:
        return np.min(self.gm, axis=(-2, -1))

    @property
    def gm_high(self) -> np.ndarray:
        return np.max(self.gm, axis=(-2, -1))


def corner_units(device: Jfet, ambient: tuple[float, float]
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(IDSS, VP, i_gss) of the low and high unit at the ambient extremes, each (2, 2)
    (unit, ambient); junction temperature taken as the ambient (self-heating left out)."""
    u = np.array(CORNER_U)[:, None]
    t = np.array([ambient[0], ambient[-1]], dtype=float)[None, :]
    idss25, vp25 = device.unit(u)
    return (idss_at(device, idss25, t) * np.ones_like(t), vp_at(device, vp25, t) * np.ones_like(t),
            gate_leakage(device, t) * np.ones_like(u))


def spread_points(device: Jfet, ambient: tuple[float, float], rs, vg=0.0,
                  r_gate=0.0) -> SpreadPoints:
    """The corner units' points on the line VGS = VG + i_gss*RG - ID*RS, for arrays of
    candidates `rs`, `vg`, `r_gate` (broadcast to shape (...)); results (..., 2, 2)."""
    idss, vp, ig = corner_units(device, ambient)
    rs = np.asarray(rs, dtype=float)[..., None, None]
    vg_eff = np.asarray(vg, dtype=float)[..., None, None] + ig * np.asarray(
        r_gate, dtype=float)[..., None, None]
    i_d, vgs = bias_point(idss, vp, rs, vg_eff)
    shape = i_d.shape
    return SpreadPoints(np.broadcast_to(idss, shape), np.broadcast_to(vp, shape),
                        np.broadcast_to(ig, shape), vg_eff * np.ones(shape), i_d, vgs,
                        gm_at(idss, vp, i_d))


def source_resistance_for(idss, vp, i_d, vg=0.0) -> np.ndarray:
    """RS that puts a unit (IDSS, VP) at drain current ID on the line from VG:
    VGS = VP*(1 - sqrt(ID/IDSS)), RS = (VG - VGS)/ID (the square law inverted)."""
    vgs = vp * (1.0 - np.sqrt(np.clip(np.asarray(i_d) / idss, 0.0, 1.0)))
    return (np.asarray(vg) - vgs) / np.asarray(i_d)


def transfer_curves(device: Jfet, ambient: tuple[float, float], points: int = 200
                    ) -> dict[str, np.ndarray]:
    """Sampled transfer curves of both corner units at both ambient extremes (for the
    report's picture): 'vgs' (points,) from the farthest VP to 0, 'i_d' (2, 2, points),
    and the units' 'idss' and 'vp' (2, 2)."""
    idss, vp, _ = corner_units(device, ambient)
    vgs = np.linspace(float(np.min(vp)), 0.0, points)
    return {"vgs": vgs, "i_d": transfer(idss[..., None], vp[..., None], vgs),
            "idss": idss, "vp": vp}


@dataclass(frozen=True)
class UnitPoint:
    """One corner unit of one junction FET at one ambient: its law and where it sits."""

    label: str
    unit: str  # "low" (IDSS min, VP nearest zero) or "high"
    ambient: float
    idss: float  # at its junction temperature
    vp: float  # N frame, negative
    vgs: float  # N frame
    i_d: float
    vds: float

    @property
    def edge(self) -> float:
        """VGS - VP: the VDS below which the channel leaves saturation (triode edge)."""
        return self.vgs - self.vp

    @property
    def headroom(self) -> float:
        """VDS above the triode edge at the operating point."""
        return self.vds - self.edge


@dataclass(frozen=True)
class BiasView:
    """What the report draws for one junction FET: both corner units' transfer curves at
    the ambient extremes, their operating points (the engine's exact DC solution at the
    low-supply corners) and the bias line through each ambient's pair of points."""

    ref: str
    points: tuple[UnitPoint, ...]
    vgs: np.ndarray  # sweep from the farthest VP to 0
    curves: np.ndarray  # (len(points), len(vgs)) transfer curves, ID

    def line(self, ambient: float) -> tuple[float, float] | None:
        """(VG_eff, RS_eff) of the bias line VGS = VG_eff - ID*RS_eff through the low and
        the high unit's points at `ambient` (None without both points)."""
        pair = [p for p in self.points if p.ambient == ambient]
        lo = next((p for p in pair if p.unit == "low"), None)
        hi = next((p for p in pair if p.unit == "high"), None)
        if lo is None or hi is None or abs(hi.i_d - lo.i_d) < 1e-15:
            return None
        rs = -(hi.vgs - lo.vgs) / (hi.i_d - lo.i_d)
        return lo.vgs + lo.i_d * rs, rs

    def line_current(self, ambient: float) -> np.ndarray:
        """ID along the bias line at `ambient` over the `vgs` sweep (nan without a line)."""
        line = self.line(ambient)
        if line is None:
            return np.full_like(self.vgs, np.nan)
        vg, rs = line
        return (vg - self.vgs) / rs


def bias_views(analysis) -> tuple[BiasView, ...]:
    """One BiasView per junction FET of an analysed design (empty for a bipolar design)."""
    design = analysis.design
    views = []
    corners = [c for c in analysis.corners if c.converged]
    if not corners:
        return ()
    v_low = min(c.condition.supply for c in corners)
    for part in design.jfets:
        pts = []
        for unit, u in (("low", 0.0), ("high", 1.0)):
            for amb in sorted({c.condition.ambient for c in corners}):
                match = [c for c in corners if c.condition.ambient == amb
                         and abs(c.condition.hfe.get(part.device, -1.0) - u) < 1e-9]
                if not match:
                    continue
                best = min(match, key=lambda c: (abs(c.condition.supply - v_low),
                                                 c.condition.label))
                st = best.transistors[part.ref]
                if st.idss is None or st.vp is None:
                    continue
                vp_n = -abs(st.vp)
                pts.append(UnitPoint(best.condition.label, unit, amb, st.idss, vp_n, st.vgs,
                                     st.ic, st.vce))
        if not pts:
            continue
        vgs = np.linspace(min(p.vp for p in pts), 0.0, 240)
        curves = np.array([transfer(p.idss, p.vp, vgs) for p in pts])
        views.append(BiasView(part.ref, tuple(pts), vgs, curves))
    return tuple(views)
