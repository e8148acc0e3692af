"""Junction FETs in harmonic balance (contract section 2, "Distortion"): the drain law on
instantaneous values with IDSS and VP held at the DC junction temperature, the gate
leakage a constant current, c_gs and c_gd linear.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.jfet import drain_current, gate_leakage


def setup(circuit, dc, c: np.ndarray) -> dict[str, np.ndarray]:
    """Stamp c_gs and c_gd into the capacitance matrix c (in place); the per-member FET
    data the large-signal model keeps: IDSS, VP at Tj (B, nJ), VA (nJ,), leakage (B, nJ)."""
    nb = len(circuit.bjts)
    for q in circuit.jfets:
        for a, b, y in ((q.g, q.s, q.device.c_gs), (q.g, q.d, q.device.c_gd)):
            if a != b:
                c[:, a, a] += y
                c[:, b, b] += y
                c[:, a, b] -= y
                c[:, b, a] -= y
    b = dc.v.shape[0]
    leak = np.stack([gate_leakage(q.device, dc.tj[:, nb + k])
                     for k, q in enumerate(circuit.jfets)], axis=1) if circuit.jfets \
        else np.zeros((b, 0))
    return {"j_idss": np.asarray(dc.idss, dtype=float).reshape(b, -1),
            "j_vp": np.asarray(dc.vp, dtype=float).reshape(b, -1),
            "j_leak": leak,
            "j_va": np.array([q.device.early_voltage for q in circuit.jfets])}


def currents(model, vgs: np.ndarray, vds: np.ndarray):
    """(id, ig, gm, gds) on time samples, (B, nJ, N) each, N frame: ig = -i_gss."""
    idss = model.j_idss[:, :, None]
    vp = model.j_vp[:, :, None]
    i_d, gm, gds = drain_current(idss, vp, vgs, vds, model.j_va[None, :, None])
    ig = np.broadcast_to(-model.j_leak[:, :, None], i_d.shape)
    return i_d, ig, gm, gds
