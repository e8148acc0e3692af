"""Input match: return loss of the stage's input against the source resistance.

Return loss RL(f) = −20·log10|Γ(f)| with Γ = (Zin − Rs)/(Zin + Rs), Zin the complex
impedance into the input terminal (load in place) and Rs the source resistance
(spec-format.md section 2). The requirement is judged at its smallest over the band
f_low..f_high, for every member of a batched linearized system at once.
"""

from __future__ import annotations

import math

import numpy as np

from stagesynth.engine.ac import AcSystem

POINTS_PER_DECADE = 32  # grid density over the band; RL is smooth between poles
SCREEN_PER_DECADE = 4  # for large batches (candidate search, Monte Carlo): ends + midband
LARGE_BATCH = 256  # members above which the screening grid is used


def band_grid(f_low: float, f_high: float, per_decade: int = POINTS_PER_DECADE) -> np.ndarray:
    """Log-spaced frequencies from f_low to f_high inclusive (both ends judged)."""
    decades = max(math.log10(f_high / f_low), 0.0)
    n = max(math.ceil(decades * per_decade), 1) + 1
    return np.logspace(math.log10(f_low), math.log10(f_high), n)


def return_loss_db(z_in: np.ndarray, rs: float) -> np.ndarray:
    """−20·log10|(Zin − Rs)/(Zin + Rs)| elementwise (dB); +inf for a perfect match."""
    z = np.asarray(z_in, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        gamma = np.abs((z - rs) / (z + rs))
        return np.where(gamma > 0, -20.0 * np.log10(gamma), np.inf)


def worst_return_loss(system: AcSystem, rs: float, band: tuple[float, float],
                      per_decade: int | None = None) -> np.ndarray:
    """(B,) the smallest return loss over `band` of each member of `system` (dB).

    A single design (or a few) is judged on the fine grid; a large batch (the search's
    candidates, Monte Carlo units) on a coarse one that keeps both band ends and the
    midband, where a coupled stage's match is worst or best: the written design is
    judged again on the fine grid by `analyze`.
    """
    if per_decade is None:
        per_decade = POINTS_PER_DECADE if system.batch <= LARGE_BATCH else SCREEN_PER_DECADE
    f = band_grid(*band, per_decade)
    f = np.unique(np.append(f, math.sqrt(band[0] * band[1])))
    z = system.z_in(np.broadcast_to(f, (system.batch, f.size)))
    return np.min(return_loss_db(z, rs), axis=1)


def condition_return_loss(analysis) -> list[float]:
    """Return loss of an analysed design at nominal and each corner (dB), over the spec's
    band, or without a spec over the design's own −3 dB band (section 4)."""
    fig = analysis.figures
    if fig is None or fig.system is None:
        return []
    band = analysis.environment.band
    if band is None:
        lo = analysis.f_low if analysis.f_low > 0 else analysis.midband / 1e3
        hi = analysis.f_high if math.isfinite(analysis.f_high) else analysis.midband * 1e3
        band = (lo, hi)
    rs = float(analysis.design.source_resistance)
    return [float(x) for x in worst_return_loss(fig.system, rs, band)]
