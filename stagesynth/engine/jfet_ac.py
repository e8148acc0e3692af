"""Junction FETs in the small-signal network (contract section 2, "Junction FET").

At the operating point: gm = dID/dVGS and gds = dID/dVDS of the contract's laws (in
saturation gm = 2 IDSS/|VP| (1 - VGS/VP)(1 + VDS/VA) and ro = 1/gds = (VA + VDS)/ID),
c_gs gate-source and c_gd gate-drain. The gate draws no signal current otherwise.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.jfet import drain_current

RO_MAX = 1e15  # ohm: a FET in cutoff (ID = 0) still gets a finite output resistance


def small_signal(circuit, dc) -> tuple[np.ndarray, np.ndarray]:
    """(gm, gds) of every FET at the DC points `dc`, (B, nJ) each, N frame (>= 0 when on)."""
    nb = len(circuit.bjts)
    va = np.array([q.device.early_voltage for q in circuit.jfets])
    _, gm, gds = drain_current(dc.idss, dc.vp, dc.vbe[:, nb:], dc.vce[:, nb:], va)
    return gm, np.maximum(gds, 1.0 / RO_MAX)


def stamp_jfets(circuit, dc, G: np.ndarray, C: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Stamp every FET into G and C (in place); returns (gm, r_o), (B, nJ) each.

    The mirror image (P channel) has the same small-signal stamps: both the control
    voltage and the drain current change sign.
    """
    gm, gds = small_signal(circuit, dc)
    for k, q in enumerate(circuit.jfets):
        d, g, s = q.d, q.g, q.s
        for a, b, y, m in ((d, s, gds[:, k], G), (g, s, q.device.c_gs, C),
                           (g, d, q.device.c_gd, C)):
            if a == b:
                continue
            m[:, a, a] += y
            m[:, b, b] += y
            m[:, a, b] -= y
            m[:, b, a] -= y
        # VCCS gm * v(gs) from drain to source
        G[:, d, g] += gm[:, k]
        G[:, d, s] -= gm[:, k]
        G[:, s, g] -= gm[:, k]
        G[:, s, s] += gm[:, k]
    return gm, 1.0 / gds
