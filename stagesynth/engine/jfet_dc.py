"""Junction FETs in the batched DC solution: the contract's laws stamped into KCL.

Per FET, in the N-channel frame (a P channel mirrors with sign s = -1): drain current
ID(VGS, VDS) from `contracts.jfet.drain_current` into the drain and out of the source;
gate leakage i_gss(Tj) out of the gate terminal, drawn in through the source. IDSS and
VP of each batch member follow its spread position u (the pairing axis) and Tj.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.jfet import (
    drain_current,
    gate_leakage,
    idss_at,
    saturation_edge,
    vp_at,
)

VGS_STEP_FLOOR = 0.25  # V: a Newton step may move VGS by max(this, |VP| far) at most


def unit_at(jfets, u: np.ndarray, tj: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(IDSS(Tj), VP(Tj)) per member and FET, (B, nJ) each, VP in the N frame (< 0)."""
    idss = np.empty_like(tj)
    vp = np.empty_like(tj)
    for k, q in enumerate(jfets):
        i25, v25 = q.device.unit(u[:, k])
        idss[:, k] = idss_at(q.device, i25, tj[:, k])
        vp[:, k] = vp_at(q.device, v25, tj[:, k])
    return idss, vp


def terminal_voltages(jfets, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(VGS, VDS) in the N frame, (B, nJ) each."""
    b = v.shape[0]
    vgs = np.empty((b, len(jfets)))
    vds = np.empty_like(vgs)
    for k, q in enumerate(jfets):
        s = q.device.sign
        vgs[:, k] = s * (v[:, q.g] - v[:, q.s])
        vds[:, k] = s * (v[:, q.d] - v[:, q.s])
    return vgs, vds


def stamp(jfets, v: np.ndarray, u: np.ndarray, tj: np.ndarray, F: np.ndarray,
          J: np.ndarray) -> dict[str, np.ndarray]:
    """Add every FET's currents to the KCL residual F and their slopes to J (in place).

    Returns the per-FET quantities in the names the bipolar ones use (polarity-normalized):
    ic = ID, ib = gate current into the gate (-i_gss), vbe = VGS, vce = VDS, gm = dID/dVGS,
    go = dID/dVDS, vsat = VGS - VP (the VDS where saturation ends), idss, vp.
    """
    if not jfets:  # a bipolar-only circuit: nothing to stamp (the common case, kept cheap)
        e = np.zeros((v.shape[0], 0))
        return dict(ic=e, ib=e, vbe=e, vce=e, gm=e, go=e, vsat=e, idss=e, vp=e)
    idss, vp = unit_at(jfets, u, tj)
    vgs, vds = terminal_voltages(jfets, v)
    va = np.array([q.device.early_voltage for q in jfets])
    i_d, gm, gds = drain_current(idss, vp, vgs, vds, va)
    leak = np.stack([gate_leakage(q.device, tj[:, k]) for k, q in enumerate(jfets)], axis=1)
    for k, q in enumerate(jfets):
        s = q.device.sign
        F[:, q.d] += s * i_d[:, k]
        F[:, q.s] -= s * i_d[:, k]
        F[:, q.g] -= s * leak[:, k]  # out of the gate terminal into the gate node
        F[:, q.s] += s * leak[:, k]  # drawn in through the source
        # d(vgs)/dv = s (0, 1, -1), d(vds)/dv = s (1, 0, -1) over (d, g, s); s*s = 1
        for node, sign in ((q.d, 1.0), (q.s, -1.0)):
            J[:, node, q.g] += sign * gm[:, k]
            J[:, node, q.d] += sign * gds[:, k]
            J[:, node, q.s] -= sign * (gm[:, k] + gds[:, k])
    return dict(ic=i_d, ib=-leak, vbe=vgs, vce=vds, gm=gm, go=gds,
                vsat=saturation_edge(vgs, vp), idss=idss, vp=vp)


def step_limit(jfets, vgs_old: np.ndarray, vgs_new: np.ndarray) -> np.ndarray:
    """(B, nJ) step factors so that no VGS moves by more than max(0.25 V, |VP| far):
    the square law's curvature changes at pinch-off, and a long step would carry a
    FET deep into cutoff where its slope is zero."""
    lim = np.array([max(VGS_STEP_FLOOR, q.device.vp_far) for q in jfets])
    dv = np.abs(vgs_new - vgs_old)
    return np.where(dv > lim, lim / np.where(dv > 0, dv, 1.0), 1.0)
