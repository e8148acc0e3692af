"""Supply rejection: how much of the ripple on the rail reaches the load (contract §2).

The rail is taken as an AC source on the same batched nodal matrices that give the
gain (the signal EMF at zero): `supply_rejection = -20 log10 |v_load / v_supply|`.
Also the ripple paths of a stage, for the rationale: which parts tie the rail to the
stage (divider, collector load, emitter bypass) and how much each contributes.
"""

from __future__ import annotations

import math

import numpy as np

from stagesynth.engine.ac import AcSystem

RIPPLE_AT_DEFAULT = 100.0  # Hz, contract default for ripple_at (full-wave rectified 50 Hz)


def rejection_db(system: AcSystem, ripple_at: float | np.ndarray) -> np.ndarray:
    """-20 log10 |v_load / v_supply| at `ripple_at` for every member: (B,)."""
    f = np.broadcast_to(np.asarray(ripple_at, dtype=float), (system.batch,))
    h = np.abs(system.supply_gain(f[:, None]))[:, 0]
    return -20.0 * np.log10(np.maximum(h, 1e-300))


def ripple_transfer(system: AcSystem, freqs: np.ndarray) -> np.ndarray:
    """|v_load / v_supply| over `freqs` for every member: (B, F), for plots."""
    return np.abs(system.supply_gain(np.asarray(freqs, dtype=float)))


def ripple_by_node(system: AcSystem, ripple_at: float) -> dict[str, complex]:
    """v_load / v_supply of member 0 split by the stage node where the rail injects it.

    The stage is linear, so the load ripple is the sum of the rail's injections
    (g + jwC) * v_supply into each node it touches (through a resistor, a capacitor or a
    transistor terminal); each term is solved alone. Keys are node names.
    """
    c = system.circuit
    col = system.g_supply[0] + 2j * math.pi * ripple_at * system.c_supply[0]
    f = np.array([[ripple_at]])
    y = system._y(f, load=True)[0, 0]
    i_in = c.input
    keep = np.arange(c.n)
    if float(system.source_resistance[0]) > 0:
        y[i_in, i_in] += 1.0 / float(system.source_resistance[0])
    else:
        keep = np.array([k for k in range(c.n) if k != i_in])
    y = y[np.ix_(keep, keep)]
    out = int(np.flatnonzero(keep == c.output)[0])
    paths: dict[str, complex] = {}
    for j, k in enumerate(keep):
        if col[k] == 0:
            continue
        rhs = np.zeros(keep.size, dtype=complex)
        rhs[j] = -col[k]
        paths[c.node_names[k]] = complex(np.linalg.solve(y, rhs)[out])
    return paths
