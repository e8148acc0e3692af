"""Thermal safety of any netlist: dissipation against the derated rating, and runaway.

Dissipation VCE*IC at each transistor's hottest corner against the rating derated
linearly to that ambient, and the thermal-runaway loop gain L = theta_ja * dP/dTj with
the thermal loop opened (runaway when L >= 1). A stable equilibrium always has L < 1, so
L is also scanned along the heating path from the ambient up to that equilibrium: a peak
>= 1 is a runaway that only the circuit's resistors stop (usually far beyond Tj_max).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from stagesynth.contracts.device import T_REF_C
from stagesynth.engine.analysis import Analysis, PointResult
from stagesynth.engine.circuit import compile_design
from stagesynth.engine.dc import solve_dc
from stagesynth.quantities.units import format_number as num
from stagesynth.quantities.units import format_quantity as eng

TJ_STEP = 0.5  # K, junction-temperature step for dP/dTj
PATH_POINTS = 17  # loop-open solves along the heating path, ambient -> hottest Tj
SCAN_SPAN = 400.0  # K above ambient scanned at a corner without a self-heated DC point
SCAN_POINTS = 41
TJ_MAX_DEFAULT = 150.0  # degC, common practice for small-signal silicon when not derivable


@dataclass(frozen=True)
class ThermalCheck:
    """Dissipation against the derated rating, and the runaway loop gain, for one transistor.

    Taken at the transistor's hottest converged corner (highest Tj). `p_allowed` and
    `margin` are None without a p_max rating; margin = (p_allowed - p_hot)/p_allowed.
    `loop_gain` is L at that operating point; `loop_gain_peak` the largest L on the way
    there (and at corners without a DC point); runaway_margin = 1 - max of the two.
    """

    ref: str
    p_hot: float
    p_allowed: float | None
    margin: float | None
    loop_gain: float
    runaway_margin: float
    tj_hot: float
    ambient_hot: float
    ok: bool
    corner: str = ""
    tj_max: float | None = None
    tj_max_source: str = ""
    dp_dtj: float = 0.0  # W/K with the thermal loop open
    loop_gain_peak: float = 0.0  # largest loop gain on the heating path, ambient -> tj_hot
    runaway: bool = False
    violations: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()


# ---------------------------------------------------------------------------
# Derating
# ---------------------------------------------------------------------------
def junction_max(p_max: float | None, theta_ja: float | None) -> tuple[float, str]:
    """Tj_max = 25 degC + p_max*theta_ja when both are given, else 150 degC (common practice)."""
    if p_max is not None and theta_ja is not None and p_max > 0 and theta_ja > 0:
        return T_REF_C + p_max * theta_ja, "25 °C + p_max·theta_ja"
    return TJ_MAX_DEFAULT, "150 °C (common practice for small-signal silicon)"


def derated_power(p_max: float, theta_ja: float | None, ambient: float) -> float:
    """P_allowed(Ta) = p_max*(Tj_max - Ta)/(Tj_max - 25 degC), capped at p_max, floored at 0."""
    tj_max, _ = junction_max(p_max, theta_ja)
    frac = (tj_max - ambient) / (tj_max - T_REF_C)
    return float(p_max * min(max(frac, 0.0), 1.0))


# ---------------------------------------------------------------------------
# Thermal safety
# ---------------------------------------------------------------------------
def _hottest(corners: Sequence[PointResult], ref: str) -> PointResult | None:
    """The converged corner where transistor `ref` runs hottest (highest Tj, then power)."""
    ok = [c for c in corners if c.converged and math.isfinite(c.transistors[ref].tj)]
    if not ok:
        return None
    return max(ok, key=lambda c: (c.transistors[ref].tj, c.transistors[ref].power))


def _scan(temps: np.ndarray, power: np.ndarray, theta: float, ambient: float):
    """Peak loop gain theta*dP/dTj up to the first thermal equilibrium on a loop-open scan.

    Equilibrium: Ta + theta*P(Tj) = Tj. Returns (peak, equilibrium Tj or None).
    """
    ok = np.isfinite(power)
    t, pw = temps[ok], power[ok]
    if t.size < 3:
        return math.nan, None
    gain = theta * np.gradient(pw, t)
    excess = ambient + theta * pw - t  # > 0: the junction is still heating up
    below = np.flatnonzero(excess <= 0.0)
    if below.size == 0:
        return float(np.max(gain)), None
    i = int(below[0])
    if i == 0:
        return float(gain[0]), float(t[0])
    t_eq = float(t[i - 1] + (t[i] - t[i - 1]) * excess[i - 1] / (excess[i - 1] - excess[i]))
    return float(np.max(gain[: i + 1])), t_eq


def thermal_checks(analysis: Analysis, *, step: float = TJ_STEP) -> tuple[ThermalCheck, ...]:
    """Derated dissipation and runaway loop gain of every transistor (one batched solve).

    dP/dTj: the circuit with theta_ja removed, solved at ambient = hottest-corner Tj +- step
    (so Tj equals that ambient) with that corner's hFE and supply. A stable thermal
    equilibrium always has L < 1, so the loop gain is also scanned along the heating
    path, Tj from the corner's ambient up to its equilibrium: a peak >= 1 means the
    junction runs away before the circuit's resistors catch it. Corners without a
    self-heated DC point are scanned from ambient up by SCAN_SPAN kelvin to tell a
    thermal runaway (peak >= 1 or no equilibrium) from a solver failure. With several
    transistors each solve moves every junction together (one ambient per solve).
    """
    design = analysis.design
    opened = replace(
        design, devices={n: d.with_overrides(theta_ja=None) for n, d in design.devices.items()}
    )
    circuit = compile_design(opened)
    nq = circuit.nq  # bipolar transistors and junction FETs alike (VDS·ID heats a FET)
    if nq == 0:
        return ()
    trans = circuit.transistors
    corners = list(analysis.corners)
    hottest = [_hottest(corners, q.ref) for q in trans]
    failed = [c for c in corners if not c.converged]

    # members: per transistor Tj +- step and the heating path; then a scan per failed corner
    conds: list[tuple[PointResult, float]] = []
    paths: list[np.ndarray] = []
    for q, hot in zip(trans, hottest, strict=True):
        if hot is None:
            paths.append(np.zeros(0))
            continue
        tj = hot.transistors[q.ref].tj
        paths.append(np.linspace(hot.condition.ambient, tj, PATH_POINTS))
        conds += [(hot, tj + step), (hot, tj - step)] + [(hot, float(t)) for t in paths[-1]]
    first_scan = len(conds)
    scan_t = [c.condition.ambient + np.linspace(0.0, SCAN_SPAN, SCAN_POINTS) for c in failed]
    for c, temps in zip(failed, scan_t, strict=True):
        conds += [(c, float(t)) for t in temps]
    power = np.zeros((0, nq))
    if conds:
        r_row = np.array([design.values()[ref] for ref, _, _ in circuit.resistors])
        dc = solve_dc(
            circuit,
            np.tile(r_row, (len(conds), 1)),
            np.array([c.condition.supply for c, _ in conds]),
            np.array([[c.condition.hfe[q.device_name] for q in trans] for c, _ in conds]),
            np.array([t for _, t in conds]),
            design.source_resistance,
            design.load_resistance,
        )
        power = np.where(dc.converged[:, None], dc.power, np.nan)

    checks = []
    m = 0
    for j, q in enumerate(trans):
        dev = design.devices[q.device_name]
        theta = dev.theta_ja or 0.0
        tj_max, tj_src = junction_max(dev.p_max, dev.theta_ja)
        notes: list[str] = []
        violations: list[str] = []
        hot = hottest[j]
        if hot is None:
            p_hot = tj_hot = amb_hot = dp = loop = peak = math.nan
            label = ""
            notes.append("no corner has a DC operating point")
        else:
            st = hot.transistors[q.ref]
            p_hot, tj_hot = st.power, st.tj
            amb_hot, label = hot.condition.ambient, hot.condition.label
            dp = float((power[m, j] - power[m + 1, j]) / (2.0 * step))
            loop = theta * dp
            path, p_path = paths[j], power[m + 2 : m + 2 + PATH_POINTS, j]
            m += 2 + PATH_POINTS
            peak = loop
            if path[-1] - path[0] > 2.0 * step:
                peak = max(loop, _scan(path, p_path, theta, amb_hot)[0])
            if loop >= 1.0:
                violations.append(
                    f"{q.ref}: thermal runaway, loop gain theta_ja·dP/dTj = {num(loop, 3)} >= 1 at "
                    f"corner '{label}'"
                )
            elif peak >= 1.0:
                violations.append(
                    f"{q.ref}: thermal runaway, loop gain theta_ja·dP/dTj reaches {num(peak, 3)} "
                    f">= 1 while the junction heats from {amb_hot:g} °C to {num(tj_hot, 4)} °C at "
                    f"corner '{label}'"
                )
        if dev.p_max is not None and hot is not None:
            p_allowed = derated_power(dev.p_max, dev.theta_ja, amb_hot)
            margin = (p_allowed - p_hot) / p_allowed if p_allowed > 0 else -math.inf
            for c in corners:  # every converged corner against its own derated rating
                if not c.converged:
                    continue
                pc = c.transistors[q.ref].power
                pa = derated_power(dev.p_max, dev.theta_ja, c.condition.ambient)
                if pc > pa:
                    violations.append(
                        f"{q.ref}: dissipation {eng(pc, 'W', 4)} exceeds the rating derated to "
                        f"{c.condition.ambient:g} °C ({eng(pa, 'W', 4)}) at corner "
                        f"'{c.condition.label}'"
                    )
        else:
            p_allowed = margin = None
        hits = []  # corners without a self-heated DC point that a loop-open scan explains
        for i, c in enumerate(failed):
            lo = first_scan + i * SCAN_POINTS
            amb = c.condition.ambient
            pk, t_eq = _scan(scan_t[i], power[lo : lo + SCAN_POINTS, j], theta, amb)
            if theta > 0 and math.isfinite(pk) and (pk >= 1.0 or t_eq is None):
                hits.append((pk, t_eq, c))
            elif theta > 0:
                notes.append(f"no DC point at corner '{c.condition.label}', not thermal")
        if hits:
            pk, t_eq, c = max(hits, key=lambda h: h[0])
            peak = pk if math.isnan(peak) else max(peak, pk)
            where = (f"no thermal equilibrium within {c.condition.ambient + SCAN_SPAN:g} °C"
                     if t_eq is None else f"the next equilibrium is at {num(t_eq, 4)} °C")
            violations.append(
                f"{q.ref}: thermal runaway at {len(hits)} corner(s) without a self-heated DC "
                f"point, e.g. '{c.condition.label}': with the thermal loop open, theta_ja·dP/dTj "
                f"peaks at {num(pk, 3)} on heating from {c.condition.ambient:g} °C; {where}"
            )
        finite = [x for x in (loop, peak) if not math.isnan(x)]
        worst = max(finite) if finite else math.nan
        if dev.theta_ja is None:
            notes.append("no theta_ja given: no self-heating, loop gain 0")
        if dev.p_max is None:
            notes.append("no p_max given: dissipation not checked against a rating")
        if nq > 1:
            notes.append("dP/dTj moves every junction together (one ambient per solve)")
        checks.append(
            ThermalCheck(
                ref=q.ref,
                p_hot=p_hot,
                p_allowed=p_allowed,
                margin=margin,
                loop_gain=loop,
                runaway_margin=1.0 - worst,
                tj_hot=tj_hot,
                ambient_hot=amb_hot,
                ok=not violations and hot is not None,
                corner=label,
                tj_max=tj_max if dev.p_max is not None else None,
                tj_max_source=tj_src if dev.p_max is not None else "",
                dp_dtj=dp,
                loop_gain_peak=peak,
                runaway=any("runaway" in v for v in violations),
                violations=tuple(violations),
                notes=tuple(notes),
            )
        )
    return tuple(checks)
