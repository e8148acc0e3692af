"""Batched figures of merit: K value sets of one circuit, each at M conditions, in one go.

This is the single code path behind `analyze` (K = 1), the synthesizer's
candidate search (K = hundreds) and the Monte Carlo (K = thousands): DC points
for all K*M members in one batched Newton solve, then gain, impedances, -3 dB
corners and swing ratios of every member (contract section 2, second release:
every requirement is judged at nominal and at every corner) as batched MNA solves.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .ac import AcSystem, linearize
from .circuit import Circuit
from .dc import DcBatch, solve_dc
from .distortion import DistortionRequest, distortion_figures

IC_ACTIVE_MIN = 100e-9  # A: below this collector current a transistor counts as cut off


@dataclass(frozen=True)
class Conditions:
    """M operating conditions as arrays: hFE at 25 degC per transistor, ambient, supply.

    Shared by every value set: hfe25 (M, nQ), ambient and supply (M,). Or, for a
    Monte Carlo where each unit has its own transistor and supply, one set per
    value set: hfe25 (K, M, nQ), ambient and supply (K, M) (`per_set` is then True).
    """

    hfe25: np.ndarray
    ambient: np.ndarray
    supply: np.ndarray

    @property
    def per_set(self) -> bool:
        return self.supply.ndim == 2

    @property
    def count(self) -> int:
        return self.supply.shape[-1]

    def expand(self, k: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(supply, ambient, hfe25) for the K*M members, ordered k*M + m."""
        nq = self.hfe25.shape[-1]
        if self.per_set:
            return (self.supply.reshape(-1), self.ambient.reshape(-1),
                    self.hfe25.reshape(-1, nq))
        return (np.tile(self.supply, k), np.tile(self.ambient, k),
                np.tile(self.hfe25, (k, 1)))


@dataclass(frozen=True)
class Figures:
    """Everything the verdict needs, for K value sets (first axis) at M conditions.

    Condition 0 is the nominal one; every (K, M) figure holds all conditions, so a
    verdict can take the worst over nominal and the corners.
    """

    midband: np.ndarray  # (K,)
    gain: np.ndarray  # (K, M) complex, v_load / v_emf at midband
    f_low: np.ndarray  # (K, M), nan where that search was not asked for
    f_high: np.ndarray  # (K, M), nan where that search was not asked for
    z_in: np.ndarray  # (K, M)
    z_out: np.ndarray  # (K, M)
    supply_current: np.ndarray  # (K, M)
    swing_vpp: np.ndarray  # (K, M), 0 where not active
    swing_edge: np.ndarray  # (K, M) int: index j of the limiting edge (j < nQ cutoff of Q_j)
    active: np.ndarray  # (K, M) bool: every transistor active and DC converged
    converged: np.ndarray  # (K, M) bool
    dc: DcBatch  # members ordered k*M + m
    nominal: AcSystem  # the K linearized stages at the nominal condition
    a_cut: np.ndarray  # (K, M, nQ) peak load amplitude to cutoff
    a_sat: np.ndarray  # (K, M, nQ) peak load amplitude to VCE = vce_sat
    system: AcSystem | None = None  # all K*M linearized members, ordered k*M + m
    # distortion (when asked): (K, M) ratios at the load; level (Vpp) and frequency (K,)
    thd: np.ndarray | None = None
    hd2: np.ndarray | None = None
    hd3: np.ndarray | None = None
    thd_level: np.ndarray | None = None
    thd_freq: np.ndarray | None = None
    thd_method: str = ""

    @property
    def gain_db(self) -> np.ndarray:
        """(K, M) |gain| in dB."""
        return 20.0 * np.log10(np.maximum(np.abs(self.gain), 1e-300))

    @property
    def inverting(self) -> np.ndarray:
        return np.cos(np.angle(self.gain)) < 0.0

    def per_condition(self, name: str) -> np.ndarray:
        """A DC quantity (ic, vce, tj, ...) reshaped to (K, M, nQ)."""
        arr = getattr(self.dc, name)
        k, m = self.supply_current.shape
        return arr.reshape(k, m, *arr.shape[1:])


def evaluate(
    circuit: Circuit,
    r_values: np.ndarray,
    c_values: np.ndarray,
    conditions: Conditions,
    *,
    source_resistance: float,
    load_resistance: float,
    load_capacitance: float,
    band: tuple[float, float] | None,
    corners: str = "both",
    corner_guess: tuple[float, float] | None = None,
    source_capacitance: float = 0.0,
    distortion: DistortionRequest | None = None,
) -> Figures:
    """Figures for K value sets (rows of r_values, c_values) at every condition.

    Condition 0 is the nominal one; gain, corners and impedances come back for every
    condition as (K, M) arrays. `corners` = "both", "low", "high" or "none" chooses which
    -3 dB searches run (the others come back as nan): synthesis and capacitor sizing
    need only one. The nominal members are searched outward from midband (or near
    `corner_guess` = (f_low, f_high) of a nearby design: a Monte Carlo); the other
    conditions start from their own value set's nominal corner, which they lie close to.
    `distortion` asks for THD, HD2 and HD3 at every member (harmonic balance or estimate).
    """
    r_values = np.atleast_2d(np.asarray(r_values, dtype=float))
    c_values = np.atleast_2d(np.asarray(c_values, dtype=float))
    k = r_values.shape[0]
    m = conditions.count
    nq = len(circuit.bjts)
    # member index = k*M + m
    r_rep = np.repeat(r_values, m, axis=0)
    c_rep = np.repeat(c_values, m, axis=0)
    supply, ambient, hfe25 = conditions.expand(k)
    dc = solve_dc(circuit, r_rep, supply, hfe25, ambient, source_resistance, load_resistance,
                  source_capacitance=source_capacitance)
    system = linearize(
        circuit, dc, r_rep, c_rep, source_resistance, load_resistance, load_capacitance,
        source_capacitance,
    )
    first = np.arange(k) * m
    nominal = _members(system, first)

    if band is not None:
        midband = np.full(k, math.sqrt(band[0] * band[1]))
    else:
        midband = np.array([_free_midband(_members(nominal, np.array([i]))) for i in range(k)])
    f_low, f_high = _corners(system, nominal, midband, m, corners, corner_guess)
    fm_all = np.repeat(midband, m)
    v_mid = system.node_voltages(fm_all[:, None])[:, 0, :]
    gain = v_mid[:, circuit.output]
    z_in = np.abs(system.z_in(fm_all[:, None])[:, 0])
    z_out = np.abs(system.z_out(fm_all[:, None])[:, 0])

    # swing at every condition (section 2): cutoff or saturation, whichever comes first
    ic_ratio, vce_ratio = system.swing_ratios_of(v_mid)
    vce_sat = np.array([q.device.vce_sat for q in circuit.bjts])
    # contract section 2 (second release): active only with VCE >= vce_sat and IC >= 100 nA
    q_active = (dc.vce >= vce_sat) & (dc.ic >= IC_ACTIVE_MIN) & dc.converged[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        a_cut = np.where(ic_ratio > 0, dc.ic / ic_ratio, np.inf)
        a_sat = np.where(vce_ratio > 0, (dc.vce - vce_sat) / vce_ratio, np.inf)
    edges = np.concatenate([a_cut, a_sat], axis=1)  # (K*M, 2nQ)
    edge = np.argmin(edges, axis=1) if nq else np.zeros(k * m, dtype=int)
    all_active = np.all(q_active, axis=1) & dc.converged
    swing = np.where(all_active, 2.0 * np.min(edges, axis=1, initial=np.inf), 0.0)
    if nq == 0:
        swing = np.zeros(k * m)
    dist = None
    if distortion is not None:
        dist = distortion_figures(
            circuit, dc, system, r_rep, c_rep, distortion, k=k, m=m, midband=midband,
            nominal_swing=swing.reshape(k, m)[:, 0], active=all_active,
            source_resistance=source_resistance, load_resistance=load_resistance,
            load_capacitance=load_capacitance)
    return Figures(
        midband=midband,
        gain=gain.reshape(k, m),
        f_low=f_low.reshape(k, m),
        f_high=f_high.reshape(k, m),
        z_in=z_in.reshape(k, m),
        z_out=z_out.reshape(k, m),
        supply_current=dc.supply_current.reshape(k, m),
        swing_vpp=swing.reshape(k, m),
        swing_edge=edge.reshape(k, m),
        active=all_active.reshape(k, m),
        converged=dc.converged.reshape(k, m),
        dc=dc,
        nominal=nominal,
        a_cut=a_cut.reshape(k, m, nq),
        a_sat=a_sat.reshape(k, m, nq),
        system=system,
        thd=None if dist is None else dist.thd,
        hd2=None if dist is None else dist.hd2,
        hd3=None if dist is None else dist.hd3,
        thd_level=None if dist is None else dist.level_vpp,
        thd_freq=None if dist is None else dist.freq,
        thd_method="" if dist is None else dist.method,
    )


def _corners(
    system: AcSystem,
    nominal: AcSystem,
    midband: np.ndarray,
    m: int,
    which: str,
    guess: tuple[float, float] | None,
) -> tuple[np.ndarray, np.ndarray]:
    """-3 dB corners of all K*M members, (K*M,) each; nan for a search not asked for."""
    k = midband.size
    if which == "none":
        nan = np.full(k * m, np.nan)
        return nan, nan.copy()
    if guess is not None:
        lo0, hi0 = nominal.corners_near(midband, *guess, which=which)
    else:
        _, lo0, hi0 = nominal.corners(midband, which=which)
    if m == 1:
        return lo0, hi0
    rest = np.flatnonzero(np.arange(k * m) % m != 0)
    lo_r, hi_r = system.subset(rest).corners_near(
        np.repeat(midband, m - 1), np.repeat(lo0, m - 1), np.repeat(hi0, m - 1), which=which)
    lo = np.empty(k * m)
    hi = np.empty(k * m)
    lo[::m], hi[::m] = lo0, hi0
    lo[rest], hi[rest] = lo_r, hi_r
    return lo, hi


def _members(system: AcSystem, idx: np.ndarray) -> AcSystem:
    """The batch members `idx` of a linearized system, as a smaller batch."""
    return system.subset(idx)


def member(system: AcSystem, i: int) -> AcSystem:
    """One member of a batched system, kept as a batch of one (for sweeps and plots)."""
    return _members(system, np.array([i]))


def _free_midband(system: AcSystem) -> float:
    """Without a required band: geometric mean of the corners around the gain peak."""
    grid = np.logspace(-2, 11, 14 * 24)
    mag = np.abs(system.gain(grid[None, :]))[0]
    fm = float(grid[int(np.argmax(mag))])
    for _ in range(3):
        _, lo, hi = system.corners(np.array([fm]))
        lo_f = float(lo[0]) if lo[0] > 0 else 1e-2
        hi_f = float(hi[0]) if np.isfinite(hi[0]) else 1e11
        fm = math.sqrt(lo_f * hi_f)
    return fm
