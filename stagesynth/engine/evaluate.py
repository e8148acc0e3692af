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

from stagesynth.engine.ac import AcSystem, linearize
from stagesynth.engine.circuit import Circuit
from stagesynth.engine.dc import DcBatch, solve_dc
from stagesynth.engine.distortion import DistortionRequest, distortion_figures
from stagesynth.engine.noise import NoisePlan, NoiseSources

IC_ACTIVE_MIN = 100e-9  # A: below this collector current a transistor counts as cut off
ID_ACTIVE_MIN = 1e-6  # A: a junction FET counts as active from this drain current (contract)


@dataclass(frozen=True)
class Conditions:
    """M operating conditions as arrays: the spread value per transistor, ambient, supply.

    `hfe25[..., k]` is transistor k's position in its production spread (columns in
    circuit.transistors order): hFE at 25 degC for a bipolar transistor, the pairing
    position u in [0, 1] for a junction FET (0: idss min with the vp nearest zero,
    1: idss max with the vp farthest, 0.5 nominal).

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
    # noise (second release), (K, M) at every condition when asked for, else None
    noise: np.ndarray | None = None  # V/√Hz input-referred at the spot frequency
    noise_figure: np.ndarray | None = None  # dB (nan without a source resistance)
    noise_rms: np.ndarray | None = None  # V input-referred over the band (nan if not asked)
    noise_output_rms: np.ndarray | None = None  # V at the load over the band
    noise_sources: NoiseSources | None = None  # generators of the K*M members
    noise_band: tuple[np.ndarray, np.ndarray] | None = None  # (K,), (K,) integration band
    # second release: supply and stability (contract §2), every member; None when not asked
    supply_rejection: np.ndarray | None = None  # (K, M) dB at ripple_at
    peaking_db: np.ndarray | None = None  # (K, M) largest |gain| over midband |gain|, dB
    peak_freq: np.ndarray | None = None  # (K, M) Hz where that largest |gain| lies
    stable: np.ndarray | None = None  # (K, M) bool: every pole in the left half-plane
    swing_mid_vpp: np.ndarray | None = None  # (K, M) swing with the ratios at midband
    swing_top_vpp: np.ndarray | None = None  # (K, M) ... at the required f_high (nan: none)
    ripple_at: float = 100.0  # Hz, where supply_rejection was taken
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
    noise: NoisePlan | None = None,
    ripple_at: float = 100.0,
    response: bool = True,
    peak_span: tuple[float, float] | None = None,
    distortion: DistortionRequest | None = None,
) -> Figures:
    """Figures for K value sets (rows of r_values, c_values) at every condition.

    Condition 0 is the nominal one; gain, corners and impedances come back for every
    condition as (K, M) arrays. `corners` = "both", "low", "high" or "none" chooses which
    -3 dB searches run (the others come back as nan): synthesis and capacitor sizing
    need only one. The nominal members are searched outward from midband (or near
    `corner_guess` = (f_low, f_high) of a nearby design: a Monte Carlo); the other
    conditions start from their own value set's nominal corner, which they lie close to.
    `noise` asks for the noise figures at every condition (noise.py).
    Supply rejection at `ripple_at` is taken at every member; peaking and stability
    (a sweep and a pole computation per member) only with `response`; `peak_span`
    narrows the peaking sweep (the synthesizer's search, where the capacitors are
    large placeholders, looks above midband only; the final analysis sweeps everything).
    `distortion` asks for THD, HD2 and HD3 at every member (harmonic balance or estimate).
    """
    r_values = np.atleast_2d(np.asarray(r_values, dtype=float))
    c_values = np.atleast_2d(np.asarray(c_values, dtype=float))
    k = r_values.shape[0]
    m = conditions.count
    nq = circuit.nq
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

    # swing at every condition (section 2): cutoff or saturation, whichever comes first,
    # with the small-signal ratios at midband and at the required f_high (second release)
    ic_ratio, vce_ratio = system.swing_ratios_of(v_mid)
    vce_sat = dc.vsat  # (K*M, nQ): vce_sat, or VGS - VP for a junction FET
    # contract section 2 (second release): active only with VCE >= vce_sat and IC >= 100 nA;
    # a junction FET in saturation (VDS >= VGS - VP) with ID >= 1 uA
    q_active = (dc.vce >= vce_sat) & (dc.ic >= active_current_floor(circuit)) \
        & dc.converged[:, None]
    all_active = np.all(q_active, axis=1) & dc.converged
    swing_mid = _swing(dc, ic_ratio, vce_ratio, vce_sat, all_active)[0]
    swing_top = np.full(k * m, np.nan)
    if band is not None and nq:
        ic_top, vce_top = system.swing_ratios(np.full(k * m, float(band[1])))
        swing_top = _swing(dc, ic_top, vce_top, vce_sat, all_active)[0]
        ic_ratio = np.maximum(ic_ratio, ic_top)
        vce_ratio = np.maximum(vce_ratio, vce_top)
    swing, a_cut, a_sat, edge = _swing(dc, ic_ratio, vce_ratio, vce_sat, all_active)
    if nq == 0:
        swing = np.zeros(k * m)
    noise_fields = {}
    if noise is not None:
        noise_fields = _noise(circuit, system, dc, r_rep, ambient, source_resistance, noise,
                              band, midband, f_low, f_high, m)

    from stagesynth.engine.supply import rejection_db

    psrr = rejection_db(system, ripple_at).reshape(k, m)
    peak_db = peak_f = stable = None
    if response:
        from stagesynth.engine.peaking import peaking, stability

        fm_all = np.repeat(midband, m)
        st = stability(system, fm_all)
        stable = st.stable.reshape(k, m)
        if peak_span is None:
            pk = peaking(system, fm_all)
            peak_db, peak_f = pk.peak_db.reshape(k, m), pk.f_peak.reshape(k, m)
        else:  # a search: sweep only members with a resonant pole pair (Q above 0.6;
            # a pair peaks by itself from Q = 0.71 on), the rest count as flat
            peak_db, peak_f = np.zeros(k * m), fm_all.copy()
            p = st.poles_hz
            with np.errstate(divide="ignore", invalid="ignore"):
                q = np.abs(p) / (2.0 * np.abs(p.real))
            resonant = np.any(np.isfinite(p) & (p.imag != 0) & (q > 0.6), axis=1)
            idx = np.flatnonzero(resonant)
            if idx.size:
                pk = peaking(system.subset(idx), fm_all[idx], peak_span)
                peak_db[idx], peak_f[idx] = pk.peak_db, pk.f_peak
            peak_db, peak_f = peak_db.reshape(k, m), peak_f.reshape(k, m)
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
        **noise_fields,
        supply_rejection=psrr,
        peaking_db=peak_db,
        peak_freq=peak_f,
        stable=stable,
        swing_mid_vpp=swing_mid.reshape(k, m),
        swing_top_vpp=swing_top.reshape(k, m),
        ripple_at=float(ripple_at),
        thd=None if dist is None else dist.thd,
        hd2=None if dist is None else dist.hd2,
        hd3=None if dist is None else dist.hd3,
        thd_level=None if dist is None else dist.level_vpp,
        thd_freq=None if dist is None else dist.freq,
        thd_method="" if dist is None else dist.method,
    )


def active_current_floor(circuit: Circuit) -> np.ndarray:
    """(nQ,) the least current at which each transistor counts as active (contract)."""
    return np.array([IC_ACTIVE_MIN] * len(circuit.bjts) + [ID_ACTIVE_MIN] * len(circuit.jfets))


def _swing(dc: DcBatch, ic_ratio: np.ndarray, vce_ratio: np.ndarray, vce_sat: np.ndarray,
           all_active: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(swing Vpp, a_cut, a_sat, limiting edge) per member from the swing ratios."""
    nq = ic_ratio.shape[1]
    with np.errstate(divide="ignore", invalid="ignore"):
        a_cut = np.where(ic_ratio > 0, dc.ic / ic_ratio, np.inf)
        a_sat = np.where(vce_ratio > 0, (dc.vce - vce_sat) / vce_ratio, np.inf)
    edges = np.concatenate([a_cut, a_sat], axis=1)  # (K*M, 2nQ)
    edge = np.argmin(edges, axis=1) if nq else np.zeros(edges.shape[0], dtype=int)
    swing = np.where(all_active, 2.0 * np.min(edges, axis=1, initial=np.inf), 0.0)
    return swing, a_cut, a_sat, edge


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


def _noise(circuit, system, dc, r_rep, ambient, source_resistance, plan: NoisePlan,
           band, midband, f_low, f_high, m: int) -> dict:
    """The noise fields of Figures for all K*M members (contract §2 "Noise").

    The band is the required one; without it (a design analysed alone) the design's own
    −3 dB band at nominal, a missing corner replaced by four decades from midband.
    """
    from stagesynth.engine.noise import build_sources, noise_figures

    k = midband.size
    if band is not None:
        lo, hi = np.full(k, band[0]), np.full(k, band[1])
    else:
        f_lo, f_hi = f_low[::m], f_high[::m]  # the nominal members' own band
        lo = np.where((f_lo > 0) & np.isfinite(f_lo), f_lo, midband * 1e-4)
        hi = np.where(np.isfinite(f_hi) & (f_hi > 0), f_hi, midband * 1e4)
    sources = build_sources(circuit, dc, r_rep, ambient, source_resistance)
    spot = np.repeat(midband if plan.at is None else np.full(k, plan.at), m)
    fm = np.repeat(midband, m)
    rep_band = (np.repeat(lo, m), np.repeat(hi, m)) if plan.rms else (fm, fm * 1.0001)
    nf = noise_figures(system, sources, spot, rep_band, fm, plan.per_decade)
    rms = nf.rms if plan.rms else np.full(k * m, np.nan)
    out_rms = nf.output_rms if plan.rms else np.full(k * m, np.nan)
    return {
        "noise": nf.density.reshape(k, m),
        "noise_figure": nf.figure_db.reshape(k, m),
        "noise_rms": rms.reshape(k, m),
        "noise_output_rms": out_rms.reshape(k, m),
        "noise_sources": sources,
        "noise_band": (lo, hi),
    }


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
