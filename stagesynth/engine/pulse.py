"""Pulse response of the stage at the load: the edge (rise, overshoot, settling) and the tilt.

Computed with python-control from the state-space form of the gain (lti.py). The
modes are split at midband into fast ones (the high-frequency poles, which shape
the edge) and slow ones (the coupling and bypass capacitors, which make the top of
a long pulse droop) by an ordered real Schur form and a Sylvester equation, so the
two time scales, often six decades apart, are each simulated on their own grid.
The split is exact: the response is the sum of the two parts. Edge figures are
those of a small-signal step of the source EMF, relative to the flat top (the fast
part's final value, i.e. the midband gain); tilt is the share of the flat top lost
at the end of a pulse of the given width.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from stagesynth.engine.lti import StateSpaceMatrices, state_space

if TYPE_CHECKING:  # pragma: no cover - typing only
    from stagesynth.engine.analysis import Analysis

SETTLE_BAND = 0.01  # settling: within 1 % of the flat top from then on
EDGE_POINTS = 4001
PULSE_POINTS = 2001
WIDTH_PER_F_LOW = 0.01  # default width 1/(100 f_low): a single low pole there tilts ~6 %


@dataclass(frozen=True)
class PulseResponse:
    """Step edge and pulse tilt at the load, per volt of source EMF (nominal stage)."""

    width: float  # s, the pulse whose tilt is given
    flat_top: float  # V/V: the level after the edge (negative for an inverting stage)
    rise_time: float  # s, 10 % to 90 % of the flat top (nan if never reached)
    overshoot: float  # fraction of the flat top the edge goes beyond it (0 if none)
    settling_time: float  # s, from the step until within 1 % of the flat top for good
    tilt: float  # fraction of the flat top lost at the end of the pulse (droop)
    edge_t: np.ndarray = field(repr=False)  # s
    edge_y: np.ndarray = field(repr=False)  # V/V
    pulse_t: np.ndarray = field(repr=False)  # s, 0 … 2·width
    pulse_y: np.ndarray = field(repr=False)  # V/V

    def to_dict(self) -> dict:
        def num(x: float) -> float | None:
            return float(x) if math.isfinite(x) else None

        return {"width": self.width, "flat_top": self.flat_top,
                "rise_time": num(self.rise_time), "overshoot": num(self.overshoot),
                "settling_time": num(self.settling_time), "tilt": num(self.tilt),
                "method": "python-control step responses of the state-space gain, fast and "
                          "slow modes split at midband"}


def default_pulse_width(analysis: Analysis) -> float:
    """1/(100·f_low) of the required band (else the stage's own corner), in seconds.

    A DC-coupled stage with no band gets 100 × its 10–90 % rise time estimate 0.35/f_high.
    """
    band = analysis.environment.band
    f_low = band[0] if band is not None else analysis.f_low
    if f_low > 0 and math.isfinite(f_low):
        return WIDTH_PER_F_LOW / f_low
    f_high = analysis.f_high if math.isfinite(analysis.f_high) else analysis.midband * 1e3
    return 100.0 * 0.35 / f_high


def split_modes(m: StateSpaceMatrices, w_split: float) -> tuple[StateSpaceMatrices,
                                                                 StateSpaceMatrices]:
    """(slow, fast): modes with |s| below / at or above w_split (rad/s), D with the fast.

    Ordered real Schur form A = U T U^T with the slow block first, then the coupling
    block T12 removed by the Sylvester equation T11 X − X T22 = −T12.
    """
    from scipy.linalg import schur, solve_sylvester

    n = m.A.shape[0]
    t, u, k = schur(m.A, output="real", sort=lambda re, im: math.hypot(re, im) < w_split)
    b = u.T @ m.B
    c = m.C @ u
    if 0 < k < n:
        x = solve_sylvester(t[:k, :k], -t[k:, k:], -t[:k, k:])
        b = np.vstack([b[:k] - x @ b[k:], b[k:]])  # P^-1 b with P = [[I, X], [0, I]]
        c = np.hstack([c[:, :k], c[:, :k] @ x + c[:, k:]])
    zero = np.zeros((1, 1))
    slow = StateSpaceMatrices(t[:k, :k], b[:k], c[:, :k], zero)
    fast = StateSpaceMatrices(t[k:, k:], b[k:], c[:, k:], m.D)
    return slow, fast


def _step(m: StateSpaceMatrices, t: np.ndarray) -> np.ndarray:
    """python-control's step response of m at the times t (exact for a step input)."""
    import control

    if m.A.shape[0] == 0:
        return np.full(t.shape, float(m.D[0, 0]))
    resp = control.step_response(control.ss(m.A, m.B, m.C, m.D), T=t)
    return np.asarray(resp.outputs, dtype=float).reshape(-1)


def _dc_gain(m: StateSpaceMatrices) -> float:
    if m.A.shape[0] == 0:
        return float(m.D[0, 0])
    return float(m.D[0, 0] - (m.C @ np.linalg.solve(m.A, m.B))[0, 0])


def _crossing(t: np.ndarray, y: np.ndarray, level: float) -> float:
    """First time y reaches `level` (y rising from below), linearly interpolated."""
    idx = np.flatnonzero(y >= level)
    if idx.size == 0:
        return math.nan
    i = int(idx[0])
    if i == 0:
        return float(t[0])
    return float(t[i - 1] + (level - y[i - 1]) * (t[i] - t[i - 1]) / (y[i] - y[i - 1]))


def edge_figures(t: np.ndarray, y: np.ndarray, final: float) -> tuple[float, float, float]:
    """(rise 10–90 %, overshoot, settling to 1 %) of a step response y(t) towards `final`."""
    yn = y / final
    rise = _crossing(t, yn, 0.9) - _crossing(t, yn, 0.1)
    overshoot = max(float(np.max(yn)) - 1.0, 0.0)
    outside = np.flatnonzero(np.abs(yn - 1.0) > SETTLE_BAND)
    if outside.size == 0:
        settle = 0.0
    elif outside[-1] == len(t) - 1:
        settle = math.nan  # not settled within the window
    else:
        settle = float(t[outside[-1] + 1])
    return rise, overshoot, settle


def pulse_response(analysis: Analysis, width: float | None = None,
                   system=None) -> PulseResponse:
    """Edge and tilt of the nominal stage for a pulse of `width` seconds (default above).

    `system`: a linearized stage (batch of one) to use instead of the nominal one.
    """
    width = default_pulse_width(analysis) if width is None else float(width)
    if not (width > 0 and math.isfinite(width)):
        raise ValueError(f"pulse width must be a positive time, got {width!r}")
    m = state_space(system if system is not None else analysis.system)
    if m.A.shape[0] and np.max(np.linalg.eigvals(m.A).real) > 0:
        raise ValueError("the stage is unstable (a pole in the right half-plane): its pulse "
                         "response grows without bound")
    slow, fast = split_modes(m, 2.0 * math.pi * analysis.midband)
    top = _dc_gain(fast)
    if top == 0.0:
        raise ValueError("the stage has no midband gain: no pulse response to describe")
    rates = np.abs(np.linalg.eigvals(fast.A).real) if fast.A.shape[0] else np.array([])
    rates = rates[rates > 0]
    t_end = 12.0 / float(rates.min()) if rates.size else width
    t_edge = np.linspace(0.0, t_end, EDGE_POINTS)
    y_edge = _step(fast, t_edge)
    rise, overshoot, settle = edge_figures(t_edge, y_edge, top)
    # tilt: the slow part's step at the end of the pulse (the fast part has settled)
    t_pulse = np.linspace(0.0, 2.0 * width, PULSE_POINTS)
    step = _step(fast, t_pulse) + _step(slow, t_pulse)
    half = (PULSE_POINTS - 1) // 2  # t_pulse[half] == width
    y_pulse = step.copy()
    y_pulse[half:] -= step[: PULSE_POINTS - half]
    tilt = -float(_step(slow, np.array([0.0, width]))[-1]) / top
    return PulseResponse(width, top, rise, overshoot, settle, tilt, t_edge, y_edge,
                         t_pulse, y_pulse)
