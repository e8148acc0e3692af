"""Noise rationale of a junction-FET input: its two generators and what dominates.

The channel's thermal noise 4kT·(2/3)·gm referred to the gate is en² = 4kT·(2/3)/gm (van der
Ziel, from memory); the gate's shot noise in² = 2q·i_gss flows in the source impedance. The
numbers come from the analysis (the engine's operating point and noise terms); these lines
only explain them for the report, the verdict is the engine's.
"""

from __future__ import annotations

import math

from stagesynth.contracts.device import BOLTZMANN, ELEMENTARY_CHARGE, ZERO_CELSIUS
from stagesynth.contracts.jfet import gate_leakage, is_jfet
from stagesynth.engine.jfetbias import gm_at
from stagesynth.quantities.units import format_quantity as fq
from stagesynth.synthesis.lownoise import dominant_terms


def rationale(spec, analysis) -> list[str]:
    """Which noise term dominates at noise_at, and the input JFET's en and in (report notes)."""
    from stagesynth.engine.noise import contributions

    r = spec.require
    f = r.noise_frequency
    rows = contributions(analysis, f)
    if not rows:
        return []
    lines = [dominant_terms(rows, f)]
    fets = [(ref, st) for ref, st in analysis.nominal.transistors.items()
            if getattr(st, "kind", "bjt") == "jfet" and st.idss]
    dev = spec.transistor
    if not fets or not is_jfet(dev):
        return lines
    ref, st = fets[0]
    gm = float(gm_at(st.idss, st.vp, st.ic))
    t_k = st.tj + ZERO_CELSIUS
    en = math.sqrt(4.0 * BOLTZMANN * t_k * (2.0 / 3.0) / gm)
    i_n = math.sqrt(2.0 * ELEMENTARY_CHARGE * float(gate_leakage(dev, st.tj)))
    text = (f"Input junction FET {ref} at ID = {fq(st.ic, 'A', 3)}: gm ≈ {fq(gm, 'S', 3)}, "
            f"channel noise at the gate en = √(4kT·(2/3)/gm) ≈ {fq(en, 'V/√Hz', 3)} (van der "
            f"Ziel), gate shot noise in = √(2q·i_gss) ≈ {fq(i_n, 'A/√Hz', 3)}")
    cs = spec.source.capacitance
    if cs:
        z = 1.0 / (2.0 * math.pi * f * cs)
        text += (f"; into the source capacitance ({fq(z, 'Ω', 3)} at {fq(f, 'Hz')}) the current "
                 f"noise gives {fq(i_n * z, 'V/√Hz', 3)}, so en and the gate return's thermal "
                 "current dominate, not the gate current")
    lines.append(text + ".")
    return lines
