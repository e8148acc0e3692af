"""Practical parts in the search: capacitor sizes and electrolytic leakage per candidate.

The resistors of a candidate decide how large its coupling and bypass capacitors must
be (each sees a resistance; the low corner needs 1/(2π·f_low·R) shared out) and
whether an electrolytic may sit there (leakage.py). This module estimates both for a
whole batch of candidates at once, so the bias trades against capacitor size: the
candidate's largest estimated capacitor costs a little margin per doubling, and a
candidate that cannot reach f_low with its capacitors within capacitor_max (or within
FILM_MAX where leakage rules out an electrolytic) is not a candidate that meets.
"""

from __future__ import annotations

import math

import numpy as np

from stagesynth.synthesis.leakage import (
    BIAS_SHIFT_MAX,
    FILM_MAX,
    LEAK_FLOOR,
    LEAK_UA_PER_UF_V,
    leakage_current,
    rated_voltage,
    shift_per_ampere,
)

DOMINANT_SHARE = 0.8  # as capsizing.py: the capacitor seeing the least resistance leads
CAP_HALVING_WORTH = 0.01  # margin one halving of the largest capacitor is worth
R_DOUBLING_COST = 0.01  # margin each doubling of the largest resistor above 100 kΩ costs
PART_COST = 0.004  # margin one more part costs
MARGIN_CAP = 0.25  # margins beyond this buy no more practicality
CAP_REFERENCE = 1e-6  # F: capacitors up to this size cost nothing in the objective
SIZING_ALLOWANCE = 1.4  # the sized capacitors' excess over the bare estimate (tolerance,
#                         the corner's own margin, rounding up to the series)


def shorted_resistances(circuit, g: np.ndarray, source_resistance: float,
                        load_resistance: float) -> np.ndarray:
    """(K, n_cap): the resistance each capacitor sees with the others shorted, for K
    linearized candidates at once (the short-circuit time-constant method)."""
    k, n = g.shape[0], circuit.n
    caps = circuit.capacitors
    y0 = np.array(g, dtype=float, copy=True)
    o, i = circuit.output, circuit.input
    if o < n:
        y0[:, o, o] += 1.0 / load_resistance
    if i < n:
        y0[:, i, i] += 1.0 / source_resistance if source_resistance > 0 else 1e9
    big = 1e4 * max(float(np.max(np.abs(np.diagonal(y0, axis1=1, axis2=2)))), 1.0)
    out = np.empty((k, len(caps)))
    for j, (_, a, b) in enumerate(caps):
        y = y0.copy()
        for j2, (_, a2, b2) in enumerate(caps):
            if j2 != j:
                _stamp(y, a2, b2, big, n)
        rhs = np.zeros(n)
        if a < n:
            rhs[a] += 1.0
        if b < n:
            rhs[b] -= 1.0
        y += np.eye(n)[None] * 1e-12
        try:
            x = np.linalg.solve(y, np.broadcast_to(rhs[:, None], (k, n, 1)))[..., 0]
        except np.linalg.LinAlgError:  # megohm resistors beside the shorts: lift the floor
            y += np.eye(n)[None] * (1e-15 * big)
            x = np.linalg.solve(y, np.broadcast_to(rhs[:, None], (k, n, 1)))[..., 0]
        va = x[:, a] if a < n else 0.0
        vb = x[:, b] if b < n else 0.0
        out[:, j] = np.abs(va - vb)
    return out


def _stamp(y: np.ndarray, a: int, b: int, val: float, n: int) -> None:
    if a < n:
        y[:, a, a] += val
    if b < n:
        y[:, b, b] += val
    if a < n and b < n:
        y[:, a, b] -= val
        y[:, b, a] -= val


def capacitor_estimate(fig, circuit, f_low: float, capacitor_max: float,
                       source_resistance: float, load_resistance: float
                       ) -> tuple[np.ndarray, np.ndarray]:
    """(largest capacitor (K,), f_low margin (K,)) for K candidates evaluated in `fig`.

    The corner is shared as capsizing.py shares it; each capacitor is capped at
    capacitor_max, and at FILM_MAX where an electrolytic's leakage would move a
    collector current by more than BIAS_SHIFT_MAX; capped capacitors leave their share
    to the others. Where the capped capacitors alone already exceed the corner, the
    margin is 1 − f_est/f_low with every capacitor at its ceiling (negative); else +inf
    (the sizing then meets f_low exactly).
    """
    k = fig.gain.shape[0]
    ncap = len(circuit.capacitors)
    if ncap == 0 or f_low <= 0:
        return np.zeros(k), np.full(k, np.inf)
    sys = fig.nominal
    res = shorted_resistances(circuit, sys.G, source_resistance, load_resistance)
    res = np.where(np.isfinite(res) & (res > 0), res, 1e12)
    w = 2.0 * math.pi * f_low
    dom = np.argmin(res, axis=1)
    share = np.full((k, ncap), (1.0 - DOMINANT_SHARE) / max(ncap - 1, 1))
    share[np.arange(k), dom] = DOMINANT_SHARE if ncap > 1 else 1.0
    # the sizing that follows aims below f_low with every capacitor at -tolerance and
    # rounds to the series: judge sizes and leakage with that much to spare
    c = SIZING_ALLOWANCE / (w * share * res)
    # leakage: DC volts across each capacitor at the nominal point, sensitivity per ampere
    m = fig.dc.v.shape[0] // k
    v = fig.dc.v[::m]
    volts = np.stack([np.abs(v[:, a] - v[:, b]) for _, a, b in circuit.capacitors], axis=1)
    ic = fig.dc.ic[::m]
    per_amp = shift_per_ampere(circuit, sys.G, sys.gm, sys.r_o, ic, source_resistance,
                               load_resistance)
    cap = np.full((k, ncap), capacitor_max)
    for _ in range(3):
        with np.errstate(invalid="ignore"):  # an unbounded size times no shift: not leaky
            leaky = (c > FILM_MAX) & (leakage_current(c, rated_voltage(volts)) * per_amp
                                      > BIAS_SHIFT_MAX)
        cap = np.where(leaky, np.minimum(cap, FILM_MAX), cap)
        held = c >= cap
        used = np.sum(np.where(held, 1.0 / (res * cap), 0.0), axis=1)
        budget = w / SIZING_ALLOWANCE - used
        free_w = np.sum(np.where(held, 0.0, 1.0 / (res * c)), axis=1)
        scale = np.where(budget > 0, free_w / np.maximum(budget, 1e-30), np.inf)
        c = np.where(held, cap, c * scale[:, None])
    reached = np.sum(1.0 / (res * np.where(np.isfinite(c), c, 1e300)), axis=1)
    feasible = (np.all(c <= cap * (1 + 1e-9), axis=1) & np.all(np.isfinite(c), axis=1)
                & (reached <= w / SIZING_ALLOWANCE * (1 + 1e-6)))
    # where infeasible: the corner every capacitor at its ceiling gives, as a margin
    f_est = SIZING_ALLOWANCE * np.sum(1.0 / (res * cap), axis=1) / (2.0 * math.pi)
    lf_margin = np.where(feasible, np.inf, 1.0 - f_est / f_low)
    return np.max(np.where(np.isfinite(c), c, cap), axis=1), lf_margin


def capacitor_cost(c_big: np.ndarray) -> np.ndarray:
    """Margin the largest capacitor costs: CAP_HALVING_WORTH per halving it could lose
    before reaching CAP_REFERENCE."""
    c = np.asarray(c_big, dtype=float)
    return CAP_HALVING_WORTH * np.maximum(np.log2(np.maximum(c, 1e-30) / CAP_REFERENCE), 0.0)


def practicality(result) -> float:
    """How practical a meeting design is, in units of normalized margin: its smallest
    margin (capped: beyond MARGIN_CAP more is no better), less a little for each
    halving of size its largest capacitor could lose, its largest resistor above
    100 kΩ (leakage, humidity, noise) and each part it needs."""
    margins = [c.margin for c in result.verdict.checks if math.isfinite(c.margin)]
    margin = min(min(margins, default=0.0), MARGIN_CAP)
    caps = [float(p.value) for p in result.design.parts if p.kind == "capacitor"]
    res = [float(p.value) for p in result.design.parts if p.kind == "resistor"]
    cap_cost = float(capacitor_cost(np.array(max(caps, default=0.0))))
    r_big = max(res, default=0.0)
    r_cost = R_DOUBLING_COST * max(0.0, math.log2(r_big / 100e3)) if r_big > 0 else 0.0
    return margin - cap_cost - r_cost - PART_COST * len(result.design.parts)


def leakage_limits(design, spec) -> dict[str, float]:
    """Capacitors of a sized design whose electrolytic would leak too much, each with its
    ceiling for the next sizing: the largest electrolytic whose common-practice leakage
    still moves no bias current by more than BIAS_SHIFT_MAX (leakage grows with C above
    its floor), or FILM_MAX where even the smallest electrolytic's floor leakage does."""
    from stagesynth.synthesis.leakage import capacitor_kinds

    out = {}
    for ref, kind in capacitor_kinds(design, spec).items():
        if kind.kind != "film or ceramic required":
            continue
        allowed = BIAS_SHIFT_MAX * kind.leakage / kind.bias_shift  # A of leakage
        largest = 0.0
        if allowed > LEAK_FLOOR:  # 0.9: room for the leakage figure's own rounding
            largest = 0.9 * allowed / (LEAK_UA_PER_UF_V * 1e-6 * kind.rated_voltage) * 1e-6
        out[ref] = max(FILM_MAX, largest)
    return out
