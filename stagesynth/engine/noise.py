"""Noise analysis (contract §2 "Noise"): every source of the stage transferred to the load.

Each source is a current between two nodes with a one-sided density: resistors
4k·Ta/R at the ambient, per transistor the base shot noise 2q·IB·(1 + fc/f) between
the internal base and the emitter, the collector shot noise 2q·IC between collector
and emitter and 4k·Tj/rx across rx; the source resistance 4k·T0/Rs at T0 = 290 K.
The load is noiseless. One adjoint (transposed) solve of the same nodal matrix that
gives the gain, Yᵀ z = e_out, yields at once every transfer (z_a − z_b) and the gain
itself, for every batch member and frequency.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from stagesynth.contracts.device import BOLTZMANN, ELEMENTARY_CHARGE, ZERO_CELSIUS
from stagesynth.engine.ac import AcSystem
from stagesynth.engine.circuit import Circuit
from stagesynth.engine.dc import DcBatch

T0 = 290.0  # K: the reference temperature of the noise figure (IEEE)
POINTS_PER_DECADE = 16  # band integration grid (Simpson in ln f; error far below 0.01 dB)
SOURCE_LABEL = "source resistance"


@dataclass(frozen=True)
class NoisePlan:
    """Which noise figures `evaluate` computes: the spot frequency (None: midband) and
    whether the band rms is wanted (its integration costs a grid of solves)."""

    at: float | None = None
    rms: bool = True
    per_decade: int = POINTS_PER_DECADE  # band grid; a search may screen on a coarser one


def plan_for(require, per_decade: int = POINTS_PER_DECADE) -> NoisePlan | None:
    """The plan a spec's requirements call for (None when it asks no noise figure)."""
    if not require.wants_noise:
        return None
    return NoisePlan(at=require.noise_at, rms=require.noise_rms is not None,
                     per_decade=per_decade)


@dataclass(frozen=True)
class NoiseSources:
    """S noise current generators for B batch members (members ordered as the AcSystem).

    `a`, `b` are node indices into the extended vector (n = ground, n+1 = supply): the
    current flows from b to a through the network. white (B, S) in A²/Hz; corner (B, S)
    the 1/f corner (0: none). The source resistance is always the last generator.
    """

    labels: tuple[str, ...]  # "R1", "Q1 base shot", ..., "source resistance"
    owners: tuple[str, ...]  # the part each belongs to ("R1", "Q1", "source")
    a: np.ndarray
    b: np.ndarray
    white: np.ndarray
    corner: np.ndarray

    def density(self, freqs: np.ndarray) -> np.ndarray:
        """Current densities (B, F, S) at freqs (B, F)."""
        f = np.asarray(freqs, dtype=float)[:, :, None]
        return self.white[:, None, :] * (1.0 + self.corner[:, None, :] / f)

    def subset(self, idx: np.ndarray) -> NoiseSources:
        return NoiseSources(self.labels, self.owners, self.a, self.b, self.white[idx],
                            self.corner[idx])


def build_sources(
    circuit: Circuit,
    dc: DcBatch,
    r_values: np.ndarray,
    ambient_c: np.ndarray,
    source_resistance: float | np.ndarray,
) -> NoiseSources:
    """The contract's generators for every member: resistors at the ambient, transistors
    at their operating point and junction temperature, the source resistance at T0."""
    B = dc.v.shape[0]
    r_values = np.asarray(r_values, dtype=float).reshape(B, -1)
    ta = np.asarray(ambient_c, dtype=float).reshape(B) + ZERO_CELSIUS
    labels: list[str] = []
    owners: list[str] = []
    a: list[int] = []
    b: list[int] = []
    white: list[np.ndarray] = []
    corner: list[np.ndarray] = []
    zero = np.zeros(B)
    for j, (ref, i, k) in enumerate(circuit.resistors):
        labels.append(ref)
        owners.append(ref)
        a.append(i)
        b.append(k)
        white.append(4.0 * BOLTZMANN * ta / r_values[:, j])
        corner.append(zero)
    two_q = 2.0 * ELEMENTARY_CHARGE
    for qi, q in enumerate(circuit.bjts):
        ic = np.maximum(dc.ic[:, qi], 0.0)
        ib = np.maximum(dc.ib[:, qi], 0.0)
        tj = dc.tj[:, qi] + ZERO_CELSIUS
        labels += [f"{q.ref} base shot", f"{q.ref} collector shot"]
        owners += [q.ref, q.ref]
        a += [q.bi, q.c]
        b += [q.e, q.e]
        white += [two_q * ib, two_q * ic]
        corner += [np.full(B, q.device.flicker_corner), zero]
        if q.bi != q.b:
            labels.append(f"{q.ref} rx")
            owners.append(q.ref)
            a.append(q.b)
            b.append(q.bi)
            white.append(4.0 * BOLTZMANN * tj / q.device.r_bb)
            corner.append(zero)
    if circuit.jfets:  # contract "Junction FET": channel thermal and gate shot noise
        from stagesynth.engine.jfet_ac import small_signal

        gm, _ = small_signal(circuit, dc)
        nb = len(circuit.bjts)
        for k, q in enumerate(circuit.jfets):
            tj = dc.tj[:, nb + k] + ZERO_CELSIUS
            labels += [f"{q.ref} channel", f"{q.ref} gate shot"]
            owners += [q.ref, q.ref]
            a += [q.d, q.g]
            b += [q.s, q.s]
            white += [4.0 * BOLTZMANN * tj * (2.0 / 3.0) * np.maximum(gm[:, k], 0.0),
                      two_q * np.abs(dc.ib[:, nb + k])]  # i_gss(Tj), the gate leakage
            corner += [np.full(B, q.device.flicker_corner), zero]
    rs = np.broadcast_to(np.asarray(source_resistance, dtype=float), (B,))
    labels.append(SOURCE_LABEL)
    owners.append("source")
    a.append(circuit.input)
    b.append(circuit.ground)
    with np.errstate(divide="ignore"):
        white.append(np.where(rs > 0, 4.0 * BOLTZMANN * T0 / np.where(rs > 0, rs, 1.0), 0.0))
    corner.append(zero)
    return NoiseSources(tuple(labels), tuple(owners), np.array(a), np.array(b),
                        np.stack(white, axis=1), np.stack(corner, axis=1))


def adjoint(system: AcSystem, freqs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(z, gain): z (B, F, n+2) with v_load = Σ z_j·i_j for currents i_j injected at the
    nodes (zero at ground and supply), and the gain v_load/v_emf, from one solve of Yᵀ.

    The source resistance is part of Y; with Rs = 0 the input node is held at the EMF,
    so a current injected there reaches nothing (z = 0 there).
    """
    f = system._freqs(freqs)
    y = system._y(f, load=True)
    c = system.circuit
    n, i_in, out = c.n, c.input, c.output
    rs = system.source_resistance
    z = np.zeros((*y.shape[:2], n + 2), dtype=complex)
    ys = system._source_admittance(f)  # Rs in series with the source capacitance
    if ys is not None:
        y[:, :, i_in, i_in] += ys
        rhs = np.zeros(y.shape[:3], dtype=complex)
        rhs[:, :, out] = 1.0
        z[:, :, :n] = np.linalg.solve(np.swapaxes(y, -1, -2), rhs[..., None])[..., 0]
        return z, z[:, :, i_in] * ys
    if np.all(rs > 0):
        gs = 1.0 / rs
        y[:, :, i_in, i_in] += gs[:, None]
        rhs = np.zeros(y.shape[:3], dtype=complex)
        rhs[:, :, out] = 1.0
        z[:, :, :n] = np.linalg.solve(np.swapaxes(y, -1, -2), rhs[..., None])[..., 0]
        return z, z[:, :, i_in] * gs[:, None]
    keep = np.array([k for k in range(n) if k != i_in])
    y_red = y[:, :, keep[:, None], keep[None, :]]
    rhs = np.zeros(y_red.shape[:3], dtype=complex)
    rhs[:, :, int(np.flatnonzero(keep == out)[0])] = 1.0
    zr = np.linalg.solve(np.swapaxes(y_red, -1, -2), rhs[..., None])[..., 0]
    z[:, :, keep] = zr
    gain = -np.einsum("bfk,bfk->bf", zr, y[:, :, keep, i_in])
    return z, gain


@dataclass(frozen=True)
class NoiseSpectrum:
    """Noise of B members at F frequencies: per-generator output densities and the gain."""

    freqs: np.ndarray  # (B, F)
    labels: tuple[str, ...]
    owners: tuple[str, ...]
    out_each: np.ndarray  # (B, F, S) V²/Hz at the load, per generator
    gain: np.ndarray  # (B, F) complex

    @property
    def s_src(self) -> np.ndarray:
        """Output density of the source resistance alone (B, F)."""
        return self.out_each[:, :, -1]

    @property
    def s_amp(self) -> np.ndarray:
        """Output density of the stage without the source's own term (B, F)."""
        return np.sum(self.out_each[:, :, :-1], axis=2)

    @property
    def density(self) -> np.ndarray:
        """Input-referred density sqrt(S_amp)/|A| in V/√Hz (B, F)."""
        return np.sqrt(self.s_amp) / np.maximum(np.abs(self.gain), 1e-300)

    @property
    def figure_db(self) -> np.ndarray:
        """Spot noise figure 10·log10(1 + S_amp/S_src); nan without a source resistance."""
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = self.s_amp / self.s_src
        return np.where(self.s_src > 0, 10.0 * np.log10(1.0 + ratio), np.nan)

    def shares(self) -> np.ndarray:
        """Each generator's part of S_amp (B, F, S-1), summing to 1."""
        return self.out_each[:, :, :-1] / np.maximum(self.s_amp[:, :, None], 1e-300)

    def input_referred(self) -> np.ndarray:
        """Each generator referred to the input, V²/Hz (B, F, S) (the source's own last)."""
        g2 = np.maximum(np.abs(self.gain) ** 2, 1e-300)
        return self.out_each / g2[:, :, None]


def spectrum(system: AcSystem, sources: NoiseSources, freqs: np.ndarray) -> NoiseSpectrum:
    """Per-generator output densities at `freqs` ((F,) or (B, F)) for every member."""
    f = system._freqs(freqs)
    z, gain = adjoint(system, f)
    h = z[:, :, sources.a] - z[:, :, sources.b]  # (B, F, S) transfer to the load voltage
    density = sources.density(f)
    ys = system._source_admittance(f)
    if ys is not None:  # Rs's thermal EMF behind Rs + Cs: its Norton current 4kT0·Rs·|ys|²
        density[:, :, -1] *= np.abs(ys * system.source_resistance[:, None]) ** 2
    out_each = (h.real ** 2 + h.imag ** 2) * density
    return NoiseSpectrum(np.asarray(f), sources.labels, sources.owners, out_each, gain)


def band_grid(f_lo: np.ndarray, f_hi: np.ndarray, per_decade: int = POINTS_PER_DECADE
              ) -> np.ndarray:
    """Log-spaced integration grid (B, G), G odd, from f_lo to f_hi of each member."""
    lo = np.log(np.asarray(f_lo, dtype=float))
    hi = np.log(np.asarray(f_hi, dtype=float))
    decades = float(np.max(hi - lo)) / math.log(10.0) if lo.size else 1.0
    g = max(math.ceil(decades * per_decade), 16) + 1
    g += 1 - g % 2  # an odd count of points for Simpson's rule
    t = np.linspace(0.0, 1.0, g)
    return np.exp(lo[:, None] + (hi - lo)[:, None] * t[None, :])


def integrate_log(grid: np.ndarray, s: np.ndarray) -> np.ndarray:
    """∫ s df over each row of a log grid: composite Simpson in u = ln f of s·f."""
    u = np.log(grid)
    h = (u[:, -1] - u[:, 0]) / (grid.shape[1] - 1)
    y = s * grid
    w = np.ones(grid.shape[1])
    w[1:-1:2] = 4.0
    w[2:-1:2] = 2.0
    return h / 3.0 * (y @ w)


@dataclass(frozen=True)
class NoiseFigures:
    """The contract's noise figures for B members: density, spot NF, band rms and the
    output rms (the load's own noise over the band)."""

    density: np.ndarray  # V/√Hz at the spot frequency
    figure_db: np.ndarray  # dB (nan without a source resistance)
    rms: np.ndarray  # V, input-referred over the band
    output_rms: np.ndarray  # V at the load over the band (the stage without the source)


def noise_figures(
    system: AcSystem,
    sources: NoiseSources,
    spot: np.ndarray,
    band: tuple[np.ndarray, np.ndarray],
    midband: np.ndarray,
    per_decade: int = POINTS_PER_DECADE,
) -> NoiseFigures:
    """Density and noise figure at `spot` (B,), rms over `band` ((B,), (B,)) referred by
    the gain at `midband` (B,): one batched adjoint solve for all the frequencies."""
    B = system.batch
    grid = band_grid(band[0], band[1], per_decade)
    freqs = np.concatenate([np.reshape(spot, (B, 1)), np.reshape(midband, (B, 1)), grid],
                           axis=1)
    sp = spectrum(system, sources, freqs)
    s_amp = sp.s_amp
    out_ms = integrate_log(grid, s_amp[:, 2:])
    a_mid = np.maximum(np.abs(sp.gain[:, 1]), 1e-300)
    return NoiseFigures(
        density=sp.density[:, 0],
        figure_db=sp.figure_db[:, 0],
        rms=np.sqrt(out_ms) / a_mid,
        output_rms=np.sqrt(out_ms),
    )


@dataclass(frozen=True)
class Contribution:
    """One part's share of the stage noise at one frequency, referred to the input."""

    label: str  # a resistor's reference, or "Q1 base shot" / "Q1 collector shot" / "Q1 rx"
    owner: str
    density2: float  # V²/Hz at the input
    share: float  # of S_amp (the source's own term excluded)


def nominal_spectrum(analysis, freqs: np.ndarray) -> NoiseSpectrum:
    """The nominal design's spectrum at `freqs` (F,), from an analysis (analysis.py)."""
    sources = analysis.figures.noise_sources.subset(np.array([0]))
    return spectrum(analysis.system, sources, np.asarray(freqs, dtype=float)[None, :])


def contributions(analysis, f: float) -> list[Contribution]:
    """Every generator's input-referred share at f, largest first (nominal condition)."""
    fig = analysis.figures
    if fig is None or fig.noise_sources is None:
        return []
    sp = nominal_spectrum(analysis, np.array([f]))
    ref = sp.input_referred()[0, 0, :-1]
    total = float(np.sum(ref))
    rows = [Contribution(lab, own, float(v), float(v) / total if total > 0 else 0.0)
            for lab, own, v in zip(sp.labels[:-1], sp.owners[:-1], ref, strict=True)]
    return sorted(rows, key=lambda c: -c.density2)


@dataclass(frozen=True)
class NoiseSummary:
    """What the report shows about noise, all from the engine (nominal condition)."""

    spot: float  # Hz, noise_at or midband
    density: float  # V/√Hz input-referred at spot
    figure_db: float | None  # dB at spot (None without a source resistance)
    source_density: float  # V/√Hz: the source resistance's own thermal noise at T0
    band: tuple[float, float]  # Hz, the integration band
    rms: float  # V input-referred over the band
    output_rms: float  # V at the load over the band (the stage's own noise)
    swing_vpp: float  # the rated swing the SNR is taken at
    snr_db: float  # 20·log10(swing rms / output_rms)
    contributions: tuple[Contribution, ...]  # at spot, largest first


def noise_summary(analysis, swing_vpp: float | None = None) -> NoiseSummary | None:
    """The nominal noise figures of an analysis, with the SNR at `swing_vpp` (default:
    the analysis's own smallest swing over the corners)."""
    fig = analysis.figures
    if fig is None or fig.noise is None or fig.noise_band is None:
        return None
    spot = analysis.environment.noise_at or analysis.midband
    sp = nominal_spectrum(analysis, np.array([spot]))
    swing = float(swing_vpp if swing_vpp else analysis.swing_vpp)
    out_rms = float(fig.noise_output_rms[0, 0])
    signal_rms = swing / (2.0 * math.sqrt(2.0))
    snr = 20.0 * math.log10(signal_rms / out_rms) if swing > 0 and out_rms > 0 else math.nan
    nf = float(fig.noise_figure[0, 0])
    return NoiseSummary(
        spot=float(spot),
        density=float(fig.noise[0, 0]),
        figure_db=nf if math.isfinite(nf) else None,
        source_density=float(np.sqrt(sp.input_referred()[0, 0, -1])),
        band=(float(fig.noise_band[0][0]), float(fig.noise_band[1][0])),
        rms=float(fig.noise_rms[0, 0]),
        output_rms=out_rms,
        swing_vpp=swing,
        snr_db=snr,
        contributions=tuple(contributions(analysis, spot)),
    )


def noise_curves(analysis, freqs: np.ndarray) -> dict[str, np.ndarray]:
    """Sweep for the report's plot: input-referred density, the source's own thermal
    density and the spot noise figure (nan without a source resistance) at `freqs`."""
    sp = nominal_spectrum(analysis, freqs)
    return {
        "f": np.asarray(freqs, dtype=float),
        "density": sp.density[0],
        "source": np.sqrt(sp.input_referred()[0, :, -1]),
        "figure_db": sp.figure_db[0],
    }
