"""The reference transistor model of the spec contract, and built-in generic presets.

Everything here is a pure function of a `Device` and an operating condition, so
that DC, AC, synthesis and the Monte Carlo all share one model. Temperatures are
in degrees Celsius; everything else is SI.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields, replace

import numpy as np

# CODATA 2018 exact values (SI redefinition of 2019).
BOLTZMANN = 1.380649e-23  # J/K
ELEMENTARY_CHARGE = 1.602176634e-19  # C
ZERO_CELSIUS = 273.15  # K
T_REF_C = 25.0  # reference temperature of the datasheet values, degrees Celsius


def thermal_voltage(tj_c: float | np.ndarray) -> float | np.ndarray:
    """VT = k*T/q at junction temperature `tj_c` (degrees Celsius)."""
    return BOLTZMANN * (np.asarray(tj_c) + ZERO_CELSIUS) / ELEMENTARY_CHARGE


@dataclass(frozen=True)
class Device:
    """Datasheet description of one bipolar transistor type (spec section [transistor]).

    `vbe` and `vce_sat` are magnitudes for either polarity; `hfe_min`/`hfe_max`
    are the production spread at 25 degC; tempcos are per kelvin (`hfe_tempco`
    as a fraction, `vbe_tempco` in V/K).
    """

    polarity: str  # "npn" or "pnp"
    hfe_min: float
    hfe_max: float
    vbe: float
    ft: float
    c_cb: float
    hfe_typ: float | None = None
    vbe_current: float = 1e-3
    early_voltage: float = 100.0
    r_bb: float = 0.0
    vce_sat: float = 0.2
    ic_max: float | None = None
    vce_max: float | None = None
    p_max: float | None = None
    theta_ja: float | None = None
    vbe_tempco: float = -2e-3
    hfe_tempco: float = 5e-3
    name: str = ""
    # second release (contract section 2): the charge-control capacitance model and the
    # base-collector junction of the DC solution
    ft_current: float | None = None  # collector current at which `ft` is stated
    c_je: float = 0.0  # zero-bias base-emitter junction capacitance
    hfe_reverse: float = 1.0  # reverse current gain of the Ebers-Moll transport model
    flicker_corner: float = 0.0  # Hz, 1/f corner of the base-current noise (0: none)

    @property
    def sign(self) -> int:
        """+1 for NPN, -1 for PNP: terminal voltages and currents mirror."""
        return 1 if self.polarity == "npn" else -1

    @property
    def hfe_nominal(self) -> float:
        """hfe_typ when given, else the geometric mean of the spread."""
        if self.hfe_typ is not None:
            return self.hfe_typ
        return math.sqrt(self.hfe_min * self.hfe_max)

    def with_overrides(self, **values: object) -> Device:
        """A copy with some fields replaced (spec fields override a preset)."""
        return replace(self, **values)

    def to_design_dict(self) -> dict:
        """The design-file form (section 3 of the contract): SI floats, spread as a list."""
        data = {k: v for k, v in asdict(self).items() if v is not None and k != "name"}
        data["hfe"] = [data.pop("hfe_min"), data.pop("hfe_max")]
        data["hfe_typ"] = self.hfe_nominal
        if self.name:
            data["preset"] = self.name
        return data

    @classmethod
    def field_names(cls) -> tuple[str, ...]:
        return tuple(f.name for f in fields(cls))


def hfe_at(device: Device, hfe25: float | np.ndarray, tj_c: float | np.ndarray):
    """hFE(Tj) = hFE25 * (1 + hfe_tempco * (Tj - 25 degC)), linear about 25 degC."""
    return hfe25 * (1.0 + device.hfe_tempco * (np.asarray(tj_c) - T_REF_C))


def vbe_at_reference_current(device: Device, tj_c: float | np.ndarray):
    """Junction voltage that carries `vbe_current` at Tj: moves by `vbe_tempco` per kelvin."""
    return device.vbe + device.vbe_tempco * (np.asarray(tj_c) - T_REF_C)


def saturation_current(device: Device, tj_c: float | np.ndarray):
    """IS(Tj) chosen so that IS*exp(VBE(Tj)/VT(Tj)) = vbe_current.

    The Early factor is taken as 1 at the datasheet point (VCE small against VA),
    and `vbe` is the junction voltage at `vbe_current`.
    """
    vt = thermal_voltage(tj_c)
    return device.vbe_current * np.exp(-vbe_at_reference_current(device, tj_c) / vt)


@dataclass(frozen=True)
class HybridPi:
    """Small-signal parameters at operating points (section 2 of the contract).

    Fields are floats or numpy arrays of one shape (a batch of operating points).
    """

    gm: np.ndarray
    r_pi: np.ndarray
    r_o: np.ndarray
    c_pi: np.ndarray
    c_mu: float
    r_x: float


def forward_transit_time(device: Device) -> float | None:
    """tau_F = max(1/(2 pi fT) - (c_je + c_cb)/gm_ft, 0), gm_ft = ft_current/VT(25 degC).

    The charge-control model (Gray, Hurst, Lewis & Meyer, device-model chapter): fT is
    stated at `ft_current`, where the junction capacitances take their share of the
    transit; None without `ft_current` (then fT counts as constant).
    """
    if device.ft_current is None:
        return None
    gm_ft = device.ft_current / thermal_voltage(T_REF_C)
    return max(1.0 / (2.0 * math.pi * device.ft) - (device.c_je + device.c_cb) / gm_ft, 0.0)


def c_pi_of(device: Device, gm):
    """Cpi at transconductance gm: gm*tau_F + c_je with `ft_current`, else
    max(gm/(2 pi fT) - Cmu, 0) (fT constant), as contract section 2 says."""
    tau = forward_transit_time(device)
    if tau is None:
        return np.maximum(gm / (2.0 * math.pi * device.ft) - device.c_cb, 0.0)
    return gm * tau + device.c_je


def hybrid_pi(device: Device, ic, vce, hfe, tj_c) -> HybridPi:
    """gm = IC/VT, r_pi = hFE/gm, ro = (VA+VCE)/IC, Cpi from `c_pi_of`.

    `ic` and `vce` are polarity-normalized (positive in the active region); `hfe` is
    the DC gain at the junction temperature `tj_c`. Works elementwise on arrays.
    """
    vt = thermal_voltage(tj_c)
    ic_eff = np.maximum(ic, 1e-15)
    gm = ic_eff / vt
    return HybridPi(
        gm=gm,
        r_pi=hfe / gm,
        r_o=(device.early_voltage + np.maximum(np.asarray(vce), 0.0)) / ic_eff,
        c_pi=c_pi_of(device, gm),
        c_mu=device.c_cb,
        r_x=device.r_bb,
    )


# Built-in presets: generic, invented values in the range of common small-signal
# parts. They are not any manufacturer's part and carry no part number. r_bb and
# flicker_corner (the 1/f corner of the base-current noise) are invented too: a
# general-purpose part with tens of ohms and a corner of a few hundred hertz, a
# low-noise part with a low rx and a low corner, an RF part with a low rx and a
# high corner.
PRESETS: dict[str, Device] = {
    "generic-npn": Device(
        name="generic-npn",
        polarity="npn",
        hfe_min=100.0,
        hfe_max=300.0,
        hfe_typ=175.0,
        vbe=0.65,
        vbe_current=1e-3,
        early_voltage=100.0,
        ft=250e6,
        c_cb=4e-12,
        r_bb=50.0,
        vce_sat=0.2,
        ic_max=0.1,
        vce_max=40.0,
        p_max=0.5,
        theta_ja=250.0,
        ft_current=10e-3,
        c_je=8e-12,
        flicker_corner=300.0,
    ),
    "generic-pnp": Device(
        name="generic-pnp",
        polarity="pnp",
        hfe_min=100.0,
        hfe_max=300.0,
        hfe_typ=170.0,
        vbe=0.66,
        vbe_current=1e-3,
        early_voltage=80.0,
        ft=200e6,
        c_cb=5e-12,
        r_bb=60.0,
        vce_sat=0.25,
        ic_max=0.1,
        vce_max=40.0,
        p_max=0.5,
        theta_ja=250.0,
        ft_current=10e-3,
        c_je=10e-12,
        flicker_corner=200.0,
    ),
    "lownoise-npn": Device(
        name="lownoise-npn",
        polarity="npn",
        hfe_min=250.0,
        hfe_max=800.0,
        hfe_typ=450.0,
        vbe=0.62,
        vbe_current=1e-3,
        early_voltage=120.0,
        ft=150e6,
        c_cb=3.5e-12,
        r_bb=15.0,
        vce_sat=0.2,
        ic_max=0.05,
        vce_max=45.0,
        p_max=0.5,
        theta_ja=250.0,
        ft_current=2e-3,
        c_je=9e-12,
        flicker_corner=60.0,
    ),
    "rf-npn": Device(
        name="rf-npn",
        polarity="npn",
        hfe_min=60.0,
        hfe_max=200.0,
        hfe_typ=110.0,
        vbe=0.75,
        vbe_current=1e-3,
        early_voltage=40.0,
        ft=5e9,
        c_cb=0.5e-12,
        r_bb=10.0,
        vce_sat=0.3,
        ic_max=0.03,
        vce_max=12.0,
        p_max=0.25,
        theta_ja=400.0,
        ft_current=10e-3,
        c_je=1.2e-12,
        flicker_corner=3e3,
    ),
}
