"""The junction-FET device record of the contract (section 2, "Junction FET") and its laws.

A `Jfet` is the datasheet description of one N- or P-channel junction FET type. Its
production spread is one axis u in [0, 1] along the pairing the contract gives:
u = 0 is the (idss min, vp nearest zero) unit, u = 1 the (idss max, vp farthest) unit,
log-interpolated; the nominal unit u = 0.5 is the geometric mean of each spread.
All laws here work in the N-channel frame (VP < 0); a P-channel device is its mirror
image (terminal voltages and currents change sign). Pure, vectorized functions.
"""

from __future__ import annotations

from dataclasses import dataclass, fields, replace

import numpy as np

T_REF_C = 25.0  # degC, where the datasheet values hold
NOMINAL_U = 0.5  # the nominal unit: geometric mean of the idss and vp spreads
GATE_LEAK_DOUBLING_K = 10.0  # i_gss doubles every 10 K (contract)


@dataclass(frozen=True)
class Jfet:
    """Datasheet description of one junction-FET type (spec `[transistor] kind = "jfet"`).

    `vp` is the pinch-off pair as the user wrote it (signed: negative for N channel,
    positive for P); which end pairs with idss min is fixed by magnitude (the end
    nearest zero). Tempcos per kelvin: `vp_tempco` in V/K (N-channel sense; a P
    channel mirrors it), `idss_tempco` a fraction.
    """

    polarity: str  # "n" or "p"
    idss_min: float
    idss_max: float
    vp: tuple[float, float]
    c_gs: float
    c_gd: float
    early_voltage: float = 100.0
    i_gss: float = 10e-12
    vp_tempco: float = -2e-3
    idss_tempco: float = -6e-3
    flicker_corner: float = 0.0
    vds_max: float | None = None
    p_max: float | None = None
    theta_ja: float | None = None
    name: str = ""

    kind = "jfet"  # class attribute: tells a Jfet from a bipolar Device
    r_bb = 0.0  # no base spreading resistance: the gate node is the channel's control node

    @property
    def sign(self) -> int:
        """+1 for N channel, -1 for P channel: terminal voltages and currents mirror."""
        return 1 if self.polarity == "n" else -1

    @property
    def vp_near(self) -> float:
        """|VP| of the low-IDSS unit (the end of the vp pair nearest zero), a magnitude."""
        return min(abs(self.vp[0]), abs(self.vp[1]))

    @property
    def vp_far(self) -> float:
        """|VP| of the high-IDSS unit, a magnitude."""
        return max(abs(self.vp[0]), abs(self.vp[1]))

    @property
    def vce_max(self) -> float | None:
        """The drain-source rating under the bipolar name the rating checks share."""
        return self.vds_max

    @property
    def ic_max(self) -> float | None:
        """Drain current rating: a JFET's drain current cannot exceed IDSS by design."""
        return None

    def unit(self, u: float | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(IDSS at 25 degC, VP at 25 degC in the N frame, negative) of the unit at spread u."""
        u = np.asarray(u, dtype=float)
        idss = self.idss_min ** (1.0 - u) * self.idss_max**u
        vp = -(self.vp_near ** (1.0 - u)) * self.vp_far**u
        return idss, vp

    def with_overrides(self, **values: object) -> Jfet:
        """A copy with some fields replaced (spec fields override a preset)."""
        return replace(self, **values)

    def to_design_dict(self) -> dict:
        """The design-file form (contract section 3): SI floats, "kind": "jfet"."""
        data: dict = {"kind": "jfet", "polarity": self.polarity,
                      "idss": [self.idss_min, self.idss_max], "vp": list(self.vp)}
        for f in fields(self):
            if f.name in ("polarity", "idss_min", "idss_max", "vp", "name"):
                continue
            value = getattr(self, f.name)
            if value is not None:
                data[f.name] = value
        if self.name:
            data["preset"] = self.name
        return data

    @classmethod
    def field_names(cls) -> tuple[str, ...]:
        return tuple(f.name for f in fields(cls))


def is_jfet(device: object) -> bool:
    """True for a junction-FET record (the bipolar `Device` has no kind "jfet")."""
    return getattr(device, "kind", "bjt") == "jfet"


def idss_at(device: Jfet, idss25, tj_c):
    """IDSS(Tj) = IDSS25 * (1 + idss_tempco * (Tj - 25 degC)), linear (contract)."""
    return idss25 * (1.0 + device.idss_tempco * (np.asarray(tj_c) - T_REF_C))


def vp_at(device: Jfet, vp25, tj_c):
    """VP(Tj) in the N frame: VP25 + vp_tempco * (Tj - 25 degC), linear (contract)."""
    return vp25 + device.vp_tempco * (np.asarray(tj_c) - T_REF_C)


def gate_leakage(device: Jfet, tj_c):
    """i_gss(Tj) = i_gss * 2^((Tj - 25 degC)/10 K): doubles every 10 K (contract)."""
    return device.i_gss * 2.0 ** ((np.asarray(tj_c) - T_REF_C) / GATE_LEAK_DOUBLING_K)


def _forward(idss, vp, vgs, vds, va):
    """Drain current and its slopes for VDS >= 0 in the N frame (the contract's laws).

    Saturation (VDS >= VGS - VP): ID = IDSS (1 - VGS/VP)^2 (1 + VDS/VA); triode
    (0 <= VDS < VGS - VP): ID = IDSS (2 (1 - VGS/VP) VDS/(-VP) - (VDS/VP)^2)(1 + VDS/VA);
    cutoff (VGS <= VP): 0. Returns (id, d id/d vgs, d id/d vds).
    """
    vov = np.maximum(vgs - vp, 0.0)  # overdrive VGS - VP, 0 in cutoff
    vp2 = vp * vp
    early = 1.0 + vds / va
    sat = vds >= vov
    # saturation: IDSS (vov/VP)^2 ; triode: IDSS (2 vov vds - vds^2)/VP^2
    core = np.where(sat, vov * vov, 2.0 * vov * vds - vds * vds) * (idss / vp2)
    dcore_dvgs = np.where(sat, 2.0 * vov, 2.0 * vds) * (idss / vp2)
    dcore_dvds = np.where(sat, 0.0, 2.0 * (vov - vds)) * (idss / vp2)
    i_d = core * early
    return i_d, dcore_dvgs * early, dcore_dvds * early + core / va


def drain_current(idss, vp, vgs, vds, va):
    """(ID, gm = dID/dVGS, gds = dID/dVDS) in the N frame, for either sign of VDS.

    For VDS < 0 the channel is symmetric: source and drain swap roles, so
    ID(VGS, VDS) = -ID(VGD, -VDS) with VGD = VGS - VDS (the laws above, mirrored).
    Both laws meet with equal value and slope at VDS = VGS - VP and at VGS = VP, so
    Newton sees a continuously differentiable device.
    """
    vgs, vds = np.asarray(vgs, dtype=float), np.asarray(vds, dtype=float)
    rev = vds < 0
    vgs_e = np.where(rev, vgs - vds, vgs)
    vds_e = np.abs(vds)
    i_f, g_g, g_d = _forward(idss, vp, vgs_e, vds_e, va)
    # reversed: ID = -f(VGS - VDS, -VDS): dID/dVGS = -f_g, dID/dVDS = f_g + f_d
    i_d = np.where(rev, -i_f, i_f)
    gm = np.where(rev, -g_g, g_g)
    gds = np.where(rev, g_g + g_d, g_d)
    return i_d, gm, gds


def saturation_edge(vgs, vp):
    """VDS at which the channel leaves saturation, VGS - VP (0 in cutoff), N frame."""
    return np.maximum(np.asarray(vgs) - vp, 0.0)


def gm_formula(idss: float, vp: float, vgs: float) -> float:
    """The textbook gm = 2 IDSS/|VP| (1 - VGS/VP) (saturation, VA -> infinity)."""
    return 2.0 * idss / abs(vp) * (1.0 - vgs / vp)


# Built-in presets: generic, invented values in the range of common small-signal
# junction FETs; no manufacturer's part, no part number. A low-noise N channel with a
# large gate area (high IDSS, large capacitances, low flicker corner), a general-purpose
# N channel, and a P channel.
JFET_PRESETS: dict[str, Jfet] = {
    "generic-njfet-lownoise": Jfet(
        name="generic-njfet-lownoise", polarity="n", idss_min=5e-3, idss_max=24e-3,
        vp=(-0.4, -1.6), c_gs=18e-12, c_gd=5e-12, early_voltage=120.0, i_gss=20e-12,
        flicker_corner=30.0, vds_max=40.0, p_max=0.35, theta_ja=350.0),
    "generic-njfet": Jfet(
        name="generic-njfet", polarity="n", idss_min=2e-3, idss_max=12e-3,
        vp=(-0.6, -3.0), c_gs=5e-12, c_gd=1.5e-12, early_voltage=100.0, i_gss=10e-12,
        flicker_corner=200.0, vds_max=30.0, p_max=0.35, theta_ja=350.0),
    "generic-pjfet": Jfet(
        name="generic-pjfet", polarity="p", idss_min=2e-3, idss_max=10e-3,
        vp=(0.8, 3.5), c_gs=8e-12, c_gd=2.5e-12, early_voltage=80.0, i_gss=15e-12,
        flicker_corner=300.0, vds_max=30.0, p_max=0.35, theta_ja=350.0),
}


def nominal_gm(device: Jfet) -> float:
    """gm at VGS = 0 of the nominal unit, 2 IDSS/|VP| (a scale for first cuts)."""
    idss, vp = device.unit(NOMINAL_U)
    return 2.0 * float(idss) / abs(float(vp))

