"""Requirement rows over batched figures: the one set of rules `analyze`, the synthesizer
and the Monte Carlo share (the readable single-design form is `verdict.judge`).

Every requirement is judged at nominal and at every corner (section 2 of the
contract, second release): a row holds the worst value over those conditions
and the index of the condition that decided it. The transistors' absolute
ratings are judged at the corners. `assess` works on batched Figures.
Two margins per row: `margin` is normalized so that requirements can be compared
and ranked (positive passes, 0.1 means 10 % of the limit to spare); `headroom` is
the same distance in the requirement's own unit (dB, V, Ω, A; a ratio for
frequency corners), the one a reader is shown.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stagesynth.contracts.spec import Spec
from stagesynth.engine.circuit import Circuit
from stagesynth.engine.evaluate import Figures


@dataclass(frozen=True)
class Row:
    """One requirement over K value sets: value, ok and margin are (K,) arrays."""

    name: str
    value: np.ndarray
    limit: float | tuple[float, float] | str | bool
    ok: np.ndarray
    margin: np.ndarray
    relation: str  # ">=", "<=", "within", "is"
    unit: str
    where: str  # "nominal" or "every corner"
    condition: np.ndarray | None = None  # (K,) index of the deciding condition

    @property
    def headroom(self) -> np.ndarray:
        """(K,) distance to the limit in `headroom_unit`; see `own_headroom`."""
        return own_headroom(self.name, self.value, self.limit, self.relation, self.unit,
                            self.margin)

    @property
    def headroom_unit(self) -> str:
        return headroom_unit(self.relation, self.unit)


def headroom_unit(relation: str, unit: str) -> str:
    """"×" for a frequency corner (judged as a ratio), else the requirement's own unit."""
    if relation == "is":
        return ""
    return "×" if unit == "Hz" else unit


def own_headroom(name: str, value, limit, relation: str, unit: str, margin) -> np.ndarray:
    """Margin in the requirement's own unit, positive (ratio above 1) where it passes.

    Frequencies: the ratio by which the corner beats its limit (f_high / limit, limit /
    f_low). Windows: the distance to the nearer edge. Limits: the difference. The
    dissipation row's limit is the allowance derated to the corner's ambient, which
    the normalized margin carries (allowed = value / (1 - margin)). NaN for booleans.
    """
    value = np.asarray(value, dtype=float) if relation != "is" else None
    if value is None:
        return np.full(np.shape(margin), np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        if name.endswith(".p_max"):
            m = np.asarray(margin, dtype=float)
            allowed = value / np.maximum(1.0 - m, 1e-300)
            return np.where(np.isfinite(m), allowed - value, -value)
        if relation == "within":
            lo, hi = limit
            return np.minimum(value - lo, hi - value)
        if unit == "Hz":
            ratio = value / limit if relation in (">=", ">") else limit / value
            return np.where(np.isnan(ratio), 0.0, ratio)
        return value - limit if relation in (">=", ">") else limit - value


def _at_least(name, value, limit, unit, where, cond=None) -> Row:
    with np.errstate(divide="ignore", invalid="ignore"):
        margin = (value - limit) / limit if limit > 0 else np.where(value >= limit, np.inf, -np.inf)
    return Row(name, value, limit, value >= limit, margin, ">=", unit, where, cond)


def _at_most(name, value, limit, unit, where, cond=None) -> Row:
    with np.errstate(divide="ignore", invalid="ignore"):
        margin = (limit - value) / limit if limit > 0 else np.where(value <= limit, np.inf, -np.inf)
    return Row(name, value, limit, value <= limit, margin, "<=", unit, where, cond)


def assess(
    fig: Figures,
    spec: Spec,
    circuit: Circuit,
    *,
    first_corner: int = 1,
    ratings: bool = True,
) -> list[Row]:
    """Every requirement of `spec` for the K value sets in `fig`.

    Each row takes the worst over condition 0 (nominal) and the conditions from
    `first_corner` on (the corners; a Monte Carlo unit judged at one ambient passes 0:
    its own condition is both), and records which condition decided it.
    `ratings=False` leaves out the absolute ratings.
    """
    r = spec.require
    rows: list[Row] = []
    judged = _judged(fig.supply_current.shape[1], first_corner)
    where = WORST_WHERE
    tol = r.gain_tolerance_db
    gain_db = fig.gain_db[:, judged]
    err = np.abs(gain_db - r.gain_db)
    j = _pick(err, np.argmax)
    rows.append(
        Row("gain", _take(gain_db, j), (r.gain_db - tol, r.gain_db + tol),
            _take(err, j) <= tol, (tol - _take(err, j)) / tol, "within", "dB", where,
            judged[j])
    )
    rows.append(_worst_row(_at_most, "f_low", fig.f_low[:, judged], r.f_low, "Hz", judged))
    rows.append(_worst_row(_at_least, "f_high", fig.f_high[:, judged], r.f_high, "Hz", judged))
    if r.z_in > 0:
        rows.append(_worst_row(_at_least, "z_in", fig.z_in[:, judged], r.z_in, "Ω", judged))
    if r.z_out is not None:
        rows.append(_worst_row(_at_most, "z_out", fig.z_out[:, judged], r.z_out, "Ω", judged))
    if r.inverting != "any":
        want = r.inverting == "yes"
        sense = fig.inverting[:, judged]
        j = np.argmin(sense == want, axis=1)  # the first condition with the wrong sense
        value = _take(sense, j)
        ok = value == want
        rows.append(Row("inverting", value, r.inverting, ok,
                        np.where(ok, 1.0, -1.0), "is", "", where, judged[j]))
    corners = slice(first_corner, None)
    active = np.all(fig.active[:, corners], axis=1)
    first_bad = np.argmin(fig.active[:, corners], axis=1) + first_corner
    rows.append(Row("active", active, True, active, np.where(active, 1.0, -1.0), "is", "",
                    "every corner", first_bad))
    if r.swing_vpp > 0:
        sw = fig.swing_vpp[:, corners]
        j = np.argmin(sw, axis=1)
        rows.append(_at_least("swing", sw[np.arange(sw.shape[0]), j], r.swing_vpp, "Vpp",
                              "every corner", j + first_corner))
    if r.supply_current is not None:
        cur = fig.supply_current[:, corners]
        j = np.argmax(cur, axis=1)
        rows.append(_at_most("supply_current", cur[np.arange(cur.shape[0]), j],
                             r.supply_current, "A", "every corner", j + first_corner))
    rows.extend(_range_and_match_rows(fig, spec, first_corner))
    rows.extend(noise_rows(fig, spec, first_corner))
    rows.extend(supply_stability_rows(fig, spec, first_corner))
    if r.thd is not None and fig.thd is not None:
        rows.append(thd_row(fig, r.thd, first_corner))
    if ratings:
        rows.extend(_rating_rows(fig, circuit, corners))
    return rows


WORST_WHERE = "worst of nominal and every corner"


def _judged(m: int, first_corner: int) -> np.ndarray:
    """Condition indices a requirement is judged at: nominal (0) and the corners."""
    return np.unique(np.concatenate([[0], np.arange(max(first_corner, 1), m)])).astype(int)


def _pick(badness: np.ndarray, how) -> np.ndarray:
    """(K,) column of the worst condition; a figure not computed (nan) counts as worst."""
    filled = np.where(np.isnan(badness), np.inf if how is np.argmax else -np.inf, badness)
    return how(filled, axis=1)


def _take(values: np.ndarray, j: np.ndarray) -> np.ndarray:
    return values[np.arange(values.shape[0]), j]


def _worst_row(kind, name: str, values: np.ndarray, limit: float, unit: str,
               judged: np.ndarray) -> Row:
    """A bound judged at every condition in `values` (K, C): the worst one decides."""
    j = _pick(values, np.argmax if kind is _at_most else np.argmin)
    return kind(name, _take(values, j), limit, unit, WORST_WHERE, judged[j])


def _range_and_match_rows(fig: Figures, spec: Spec, first_corner: int) -> list[Row]:
    """The upper edge of a z_in range, the lower edge of a z_out range and the return
    loss over the band: each judged at nominal and every corner, worst taken."""
    r = spec.require
    rows: list[Row] = []
    judged = _judged(fig.supply_current.shape[1], first_corner)
    if r.z_in_max is not None:
        rows.append(_worst_row(_at_most, "z_in_max", fig.z_in[:, judged], r.z_in_max, "Ω",
                               judged))
    if r.z_out_min is not None:
        rows.append(_worst_row(_at_least, "z_out_min", fig.z_out[:, judged], r.z_out_min, "Ω",
                               judged))
    if r.return_loss is not None and fig.system is not None:
        from stagesynth.judging.match import worst_return_loss

        k, m = fig.supply_current.shape
        rl = worst_return_loss(fig.system, spec.source.resistance, (r.f_low, r.f_high))
        rows.append(_worst_row(_at_least, "return_loss", rl.reshape(k, m)[:, judged],
                               r.return_loss, "dB", judged))
    return rows


def thd_row(fig: Figures, limit: float, first_corner: int = 1) -> Row:
    """THD at most `limit`, judged at nominal and every corner: the worst, with its condition."""
    judged = _judged(fig.thd.shape[1], first_corner)
    return _worst_row(_at_most, "thd", fig.thd[:, judged], limit, "%", judged)


def noise_rows(fig: Figures, spec: Spec, first_corner: int = 1) -> list[Row]:
    """noise, noise_figure, noise_rms: each at most its limit, at nominal and every corner
    (contract §2, second release); the noisiest condition decides."""
    r = spec.require
    if not r.wants_noise:
        return []
    if fig.noise is None:
        raise ValueError("the spec asks for noise: evaluate(..., noise=NoisePlan(...))")
    judged = _judged(fig.supply_current.shape[1], first_corner)
    rows = []
    for name, arr, limit, unit in (("noise", fig.noise, r.noise, "V/√Hz"),
                                   ("noise_figure", fig.noise_figure, r.noise_figure_db, "dB"),
                                   ("noise_rms", fig.noise_rms, r.noise_rms, "V")):
        if limit is not None:
            rows.append(_worst_row(_at_most, name, arr[:, judged], limit, unit, judged))
    return rows


def _judged_columns(arr: np.ndarray, first_corner: int) -> tuple[np.ndarray, np.ndarray]:
    """(K, M') values at nominal and at every corner, and the condition index of each column."""
    idx = _judged(arr.shape[1], first_corner)
    return arr[:, idx], idx


def supply_stability_rows(fig: Figures, spec: Spec, first_corner: int = 1) -> list[Row]:
    """Supply rejection (when asked), peaking and stability (always), each judged at
    nominal and every corner (contract §2, second release): the worst decides."""
    r = spec.require
    rows: list[Row] = []
    where = WORST_WHERE
    if r.supply_rejection_db is not None and fig.supply_rejection is not None:
        vals, idx = _judged_columns(fig.supply_rejection, first_corner)
        j = np.argmin(vals, axis=1)
        k = np.arange(vals.shape[0])
        # margin in dB over 20 dB: a 2 dB shortfall reads as -10 % (a level, not a ratio)
        worst = vals[k, j]
        ok = worst >= r.supply_rejection_db
        rows.append(Row("supply_rejection", worst, r.supply_rejection_db, ok,
                        (worst - r.supply_rejection_db) / 20.0, ">=", "dB", where, idx[j]))
    if fig.peaking_db is not None:
        vals, idx = _judged_columns(fig.peaking_db, first_corner)
        j = np.argmax(vals, axis=1)
        worst = vals[np.arange(vals.shape[0]), j]
        ok = worst <= r.peaking_db
        rows.append(Row("peaking", worst, r.peaking_db, ok,
                        (r.peaking_db - worst) / max(r.peaking_db, 1.0), "<=", "dB", where,
                        idx[j]))
    if fig.stable is not None:
        vals, idx = _judged_columns(fig.stable, first_corner)
        stable = np.all(vals, axis=1)
        j = np.argmin(vals, axis=1)
        rows.append(Row("stable", stable, True, stable, np.where(stable, 1.0, -1.0), "is", "",
                        where, idx[j]))
    return rows


TJ_MAX_DEFAULT = 150.0  # degC, common practice for small-signal silicon without a figure


def junction_limit(device) -> float:
    """Tj(max): 25 degC plus p_max * theta_ja when both are given (the rating's own
    thermal path), else TJ_MAX_DEFAULT (common practice)."""
    if device.p_max is not None and device.theta_ja is not None:
        return 25.0 + device.p_max * device.theta_ja
    return TJ_MAX_DEFAULT


def derated_power(device, ambient):
    """p_max derated linearly from 25 degC ambient to zero at Tj(max)."""
    tj_max = junction_limit(device)
    return device.p_max * np.clip((tj_max - ambient) / (tj_max - 25.0), 0.0, None)


def _rating_rows(fig: Figures, circuit: Circuit, corners: slice = slice(1, None)) -> list[Row]:
    """Absolute ratings of each transistor at its worst corner, when the device gives them.

    Dissipation is judged against p_max derated to the corner's ambient, recovered from
    the self-heating model as Ta = Tj - theta_ja * P.
    """
    rows = []
    for qi, q in enumerate(circuit.transistors):  # a junction FET: vds_max and p_max
        dev = q.device
        for field, attr, unit in (("ic_max", "ic", "A"), ("vce_max", "vce", "V"),
                                  ("p_max", "power", "W")):
            rating = getattr(dev, field)
            if rating is None:
                continue
            vals = fig.per_condition(attr)[:, corners, qi]
            if field == "p_max":
                tj = fig.per_condition("tj")[:, corners, qi]
                ambient = tj - (dev.theta_ja or 0.0) * vals
                allowed = derated_power(dev, ambient)
                use = vals / np.maximum(allowed, 1e-300)  # fraction of the allowance
                j = np.argmax(use, axis=1)
                k = np.arange(vals.shape[0])
                worst, limit = vals[k, j], allowed[k, j]
                with np.errstate(divide="ignore", invalid="ignore"):
                    margin = np.where(limit > 0, (limit - worst) / limit, -np.inf)
                rows.append(Row(f"{q.ref}.p_max", worst, rating, worst <= limit, margin, "<=",
                                unit, "every corner, derated", j + corners.start))
                continue
            j = np.argmax(vals, axis=1)
            worst = vals[np.arange(vals.shape[0]), j]
            name = "vds_max" if field == "vce_max" and getattr(dev, "kind", "") == "jfet" \
                else field
            rows.append(_at_most(f"{q.ref}.{name}", worst, rating, unit, "every corner",
                                 j + corners.start))
    return rows


def meets(rows: list[Row]) -> np.ndarray:
    """(K,) bool: every requirement passes."""
    return np.all(np.stack([row.ok for row in rows]), axis=0)


def smallest_margin(rows: list[Row], skip: tuple[str, ...] = ()) -> np.ndarray:
    """(K,) the smallest normalized margin over the requirements not in `skip`."""
    kept = [row.margin for row in rows if row.name not in skip]
    return np.min(np.stack(kept), axis=0) if kept else np.full(1, np.inf)
