"""Peaking and stability of the gain at every operating condition (contract §2, second release).

Peaking: the largest |v_load/v_emf| over all frequencies against its midband value,
found by one batched sweep on a log grid and refined by zooming twice around the
maximum. Stability: every natural frequency of the loaded stage in the left
half-plane, from the batched pole computation of `polezero`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from stagesynth.engine.ac import AcSystem
from stagesynth.engine.polezero import batch_poles, right_half_plane

SWEEP_LOW = 1e-2  # Hz: the sweep for the largest |gain| spans these frequencies
SWEEP_HIGH = 1e11
SWEEP_PER_DECADE = 6
_ZOOM_POINTS = 9
_ZOOMS = 3


@dataclass(frozen=True)
class Peaking:
    """Largest |gain| over frequency for a batch: (B,) arrays."""

    peak_db: np.ndarray  # max |H| over midband |H|, dB (0 when the midband is the largest)
    f_peak: np.ndarray  # Hz, where the largest |H| lies


@dataclass(frozen=True)
class Stability:
    """Poles of a batch: `stable` (B,) and the right-half-plane poles found (Hz, nan-padded)."""

    stable: np.ndarray  # (B,) bool
    poles_hz: np.ndarray  # (B, m) complex, s / 2pi, nan for roots at infinity
    rhp: np.ndarray  # (B, m) bool


def peaking(system: AcSystem, midband: np.ndarray,
            span: tuple[float, float] = (SWEEP_LOW, SWEEP_HIGH)) -> Peaking:
    """Largest |gain| over `span` (default SWEEP_LOW..SWEEP_HIGH: all frequencies that
    matter) against |gain(midband)|, for every member."""
    fm = np.asarray(midband, dtype=float).reshape(system.batch)
    h_mid = np.abs(system.gain(fm[:, None]))[:, 0]
    lo, hi = span
    decades = math.log10(hi / lo)
    grid = np.logspace(math.log10(lo), math.log10(hi),
                       max(int(decades * SWEEP_PER_DECADE), 1) + 1)
    lg = np.broadcast_to(np.log10(grid), (system.batch, grid.size))
    mag = _sweep(system, 10.0 ** lg)
    step = 1.0 / SWEEP_PER_DECADE
    rows = np.arange(system.batch)
    best = np.argmax(mag, axis=1)
    centre = lg[rows, best]
    peak = mag[rows, best]
    for _ in range(_ZOOMS):
        offs = np.linspace(-step, step, _ZOOM_POINTS)
        lgz = centre[:, None] + offs[None, :]
        magz = _sweep(system, 10.0 ** lgz)
        j = np.argmax(magz, axis=1)
        better = magz[rows, j] > peak
        centre = np.where(better, lgz[rows, j], centre)
        peak = np.maximum(peak, magz[rows, j])
        step = 2.0 * step / (_ZOOM_POINTS - 1)
    # the midband itself is a candidate: never report a peak below it
    above = peak > h_mid
    f_peak = np.where(above, 10.0 ** centre, fm)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(above, peak / np.maximum(h_mid, 1e-300), 1.0)
    return Peaking(20.0 * np.log10(ratio), f_peak)


_CHUNK_ELEMENTS = 4_000_000  # complex matrix entries per batched solve (about 64 MB)


def _sweep(system: AcSystem, freqs: np.ndarray) -> np.ndarray:
    """|gain| at (B, F) frequencies, solved in frequency chunks to bound the memory."""
    n = system.circuit.n
    per = max(1, _CHUNK_ELEMENTS // max(system.batch * n * n, 1))
    if per >= freqs.shape[1]:
        return np.abs(system.gain(freqs))
    return np.concatenate([np.abs(system.gain(freqs[:, i:i + per]))
                           for i in range(0, freqs.shape[1], per)], axis=1)


def stability(system: AcSystem, midband: np.ndarray) -> Stability:
    """Every member's poles and whether all lie in the left half-plane."""
    w0 = 2.0 * math.pi * np.asarray(midband, dtype=float).reshape(system.batch)
    poles = batch_poles(system, w0)
    rhp = right_half_plane(poles, w0)
    return Stability(~np.any(rhp, axis=1), poles / (2.0 * math.pi), rhp)


def resonances(poles_hz: np.ndarray, q_min: float = 0.7) -> list[tuple[float, float]]:
    """(natural frequency Hz, Q) of each complex pair of one member with Q above q_min."""
    out = []
    for p in np.asarray(poles_hz).ravel():
        if not np.isfinite(p) or p.imag <= 0 or p.real == 0:
            continue
        q = abs(p) / (2.0 * abs(p.real))
        if q > q_min:
            out.append((float(abs(p)), float(q)))
    return sorted(out)
