"""Electrolytic leakage: which capacitors may be electrolytic and which must be film or ceramic.

Common practice: an aluminium electrolytic leaks about 0.01·C·V µA (C in µF, V its rated
voltage in volts), at least 3 µA. That current flows through the capacitor's place in
the circuit at DC, where the capacitor is otherwise open: injected across its two
nodes, it moves the operating point. A capacitor whose leakage would move any
transistor's collector (or a junction FET's drain) current by more than BIAS_SHIFT_MAX
must be film or ceramic; from
FILM_MAX up those get large and costly (common practice), so the synthesizer keeps such
capacitors at or below FILM_MAX and lets the others carry the low corner.

The shift is linear: ΔV = G⁻¹·(e_a − e_b)·I with G the circuit's DC conductance matrix
at the operating point (transistors linearized, capacitors open, source and load
attached), and ΔIC = gm·(ΔVb' − ΔVe) + (ΔVc − ΔVe)/ro for each transistor.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

LEAK_UA_PER_UF_V = 0.01  # µA per µF·V (common practice)
LEAK_FLOOR = 3e-6  # A: the smallest leakage figure to assume (common practice)
BIAS_SHIFT_MAX = 0.01  # largest relative collector-current shift leakage may cause
FILM_MAX = 4.7e-6  # F: above this film and ceramic parts get large and costly (common practice)
DERATING = 2.0  # rated voltage >= 2x the highest DC voltage (common practice)
VOLTAGE_RATINGS = (6.3, 10.0, 16.0, 25.0, 35.0, 50.0, 63.0, 100.0, 160.0, 250.0, 400.0, 630.0)


def rated_voltage(v_dc: np.ndarray | float) -> np.ndarray:
    """The standard working voltage a capacitor with this DC voltage would be bought with:
    the first catalogue step at or above DERATING times it (at least the lowest step)."""
    need = np.maximum(DERATING * np.abs(np.asarray(v_dc, dtype=float)), VOLTAGE_RATINGS[0])
    steps = np.asarray(VOLTAGE_RATINGS)
    idx = np.searchsorted(steps, need * (1 - 1e-12))
    return np.where(idx < steps.size, steps[np.minimum(idx, steps.size - 1)], need)


def leakage_current(capacitance: np.ndarray | float, v_rated: np.ndarray | float
                    ) -> np.ndarray:
    """Common-practice leakage of an aluminium electrolytic: max(0.01·C[µF]·V, 3 µA), in A."""
    c_uf = np.asarray(capacitance, dtype=float) * 1e6
    return np.maximum(LEAK_UA_PER_UF_V * c_uf * np.asarray(v_rated, dtype=float) * 1e-6,
                      LEAK_FLOOR)


def shift_per_ampere(circuit, g: np.ndarray, gm: np.ndarray, r_o: np.ndarray,
                     ic: np.ndarray, source_resistance: float, load_resistance: float
                     ) -> np.ndarray:
    """(K, n_cap): the largest |ΔIC|/IC over the transistors per ampere injected across each
    capacitor, for K linearized operating points (`g` (K, n, n) without source and load,
    `gm`, `r_o`, `ic` (K, nQ) polarity-normalized)."""
    k, n = g.shape[0], circuit.n
    caps = circuit.capacitors
    if not caps or not circuit.nq:
        return np.zeros((k, len(caps)))
    y = np.array(g, dtype=float, copy=True)
    o, i = circuit.output, circuit.input
    if o < n:
        y[:, o, o] += 1.0 / load_resistance
    if i < n:  # the source EMF is 0 V at DC, behind its resistance (an ideal one grounds it)
        y[:, i, i] += 1.0 / source_resistance if source_resistance > 0 else 1e6
    rhs = np.zeros((n, len(caps)))
    for j, (_, a, b) in enumerate(caps):
        if a < n:
            rhs[a, j] += 1.0
        if b < n:
            rhs[b, j] -= 1.0
    y += np.eye(n)[None] * 1e-12  # a node held only by capacitors floats at DC
    dv = np.linalg.solve(y, np.broadcast_to(rhs, (k, n, len(caps))))
    full = np.concatenate([dv, np.zeros((k, 2, len(caps)))], axis=1)  # ground, supply fixed
    worst = np.zeros((k, len(caps)))
    # a junction FET the same way: its drain current moves by gm·(ΔVg − ΔVs) + ΔVds/ro
    # (CompiledJfet names its terminals c, bi, e too)
    for q, t in enumerate(circuit.transistors):
        d_ic = (gm[:, q, None] * (full[:, t.bi] - full[:, t.e])
                + (full[:, t.c] - full[:, t.e]) / r_o[:, q, None])
        rel = np.abs(d_ic) / np.maximum(np.abs(ic[:, q, None]), 1e-12)
        worst = np.maximum(worst, rel)
    return worst


@dataclass(frozen=True)
class CapacitorKind:
    """Whether one capacitor may be an electrolytic, and why (for the parts list and report)."""

    ref: str
    value: float
    dc_voltage: float  # largest |DC voltage| over the analysed points
    rated_voltage: float
    leakage: float  # A, the common-practice figure for an electrolytic of this size
    bias_shift: float  # relative collector-current shift that leakage would cause
    electrolytic_ok: bool
    kind: str  # "film or ceramic", "electrolytic allowed", "film or ceramic required"

    def to_dict(self) -> dict:
        return {"value": self.value, "dc_voltage": self.dc_voltage,
                "rated_voltage": self.rated_voltage, "electrolytic_leakage": self.leakage,
                "bias_shift": self.bias_shift, "electrolytic_ok": self.electrolytic_ok,
                "kind": self.kind}

    @property
    def reason(self) -> str:
        from stagesynth.quantities.units import format_number, format_quantity

        pct = format_number(100.0 * self.bias_shift, 2)
        leak = format_quantity(self.leakage, "A")
        if self.kind == "film or ceramic required":
            return (f"an electrolytic's leakage (about {leak} at "
                    f"{format_quantity(self.rated_voltage, 'V')} rating) would move a "
                    f"collector or drain current by {pct} % (more than "
                    f"{format_number(100 * BIAS_SHIFT_MAX)} %)")
        if self.kind == "electrolytic allowed":
            return (f"an electrolytic's leakage (about {leak}) moves a collector or drain "
                    f"current by {pct} % at most")
        return f"small enough for film or ceramic (≤ {format_quantity(FILM_MAX, 'F')})"


def classify(value: float, dc_voltage: float, shift_per_amp: float, ref: str = ""
             ) -> CapacitorKind:
    """The kind of one capacitor from its value, DC voltage and bias sensitivity."""
    rating = float(rated_voltage(dc_voltage))
    leak = float(leakage_current(value, rating))
    shift = leak * shift_per_amp
    ok = shift <= BIAS_SHIFT_MAX
    if value <= FILM_MAX * (1 + 1e-9):
        kind = "film or ceramic"
    elif ok:
        kind = "electrolytic allowed"
    else:
        kind = "film or ceramic required"
    return CapacitorKind(ref, value, dc_voltage, rating, leak, shift, ok, kind)


def capacitor_kinds(design, spec=None) -> dict[str, CapacitorKind]:
    """Every capacitor of `design` classified at its nominal operating point (DC voltages
    the largest over nominal and every corner)."""
    from stagesynth.engine.analysis import (
        Environment,
        batch_values,
        condition_arrays,
        corner_conditions,
    )
    from stagesynth.engine.circuit import compile_design
    from stagesynth.engine.evaluate import evaluate

    circuit = compile_design(design)
    if not circuit.capacitors:
        return {}
    env = Environment.for_design(design, spec)
    conds = condition_arrays(circuit, corner_conditions(design, env))
    r, c = batch_values(design, circuit)
    fig = evaluate(circuit, r, c, conds, source_resistance=design.source_resistance,
                   load_resistance=design.load_resistance,
                   load_capacitance=design.load_capacitance, band=env.band, corners="none")
    sys = fig.nominal
    m = conds.count
    ic0 = fig.dc.ic[:1]  # member 0: value set 0 at the nominal condition
    per_amp = shift_per_ampere(circuit, sys.G[:1], sys.gm[:1], sys.r_o[:1], ic0,
                               design.source_resistance, design.load_resistance)[0]
    v = fig.dc.v[:m]
    out = {}
    for j, (ref, a, b) in enumerate(circuit.capacitors):
        volts = float(np.max(np.abs(v[:, a] - v[:, b]))) if m else math.nan
        out[ref] = classify(float(c[0, j]), volts, float(per_amp[j]), ref)
    return out
