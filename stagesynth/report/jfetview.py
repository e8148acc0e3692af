"""Report blocks for junction FETs: their bias stability (IDSS, VP and temperature).

Display only: the figures come from judging.jfet_stability.
"""

from __future__ import annotations

from stagesynth.quantities.units import format_number as num
from stagesynth.quantities.units import format_quantity as fq
from stagesynth.report.docmodel import Table


def jfet_stability_blocks(rob) -> list:
    """A sentence and a table of each FET's bias sensitivities; [] without a FET."""
    fets = getattr(rob, "jfet", ())
    if not fets:
        return []
    rows = tuple((
        f.ref, fq(f.id, "A"), num(f.s_idss, 3), f"{num(f.s_vp * 1e3, 3)} mA/V",
        f"{num(f.s_t * 1e6, 3)} µA/K",
        f"{fq(f.id_unit_low, 'A')} … {fq(f.id_unit_high, 'A')}",
        f"{f.id_ambient_pct:+.1f} %",
    ) for f in fets)
    text = ("Junction-FET bias stability: the bipolar factors do not apply; the drain "
            "current moves with the unit's IDSS and pinch-off voltage and with temperature. "
            "S_IDSS = (∂ID/ID)/(∂IDSS/IDSS) (1 for a FET at VGS = 0, near 0 for a stiff "
            "source-resistor bias), S_VP = ∂ID/∂|VP|, S_T = ∂ID/∂Ta with self-heating and "
            "the tempcos, from the DC solver; ID at both ends of the IDSS/VP pairing "
            "(25 °C) and its change over the ambient range.")
    return [text, Table(("FET", "ID", "S_IDSS", "S_VP", "S_T", "ID over the pairing",
                         "ID over ambient"), rows, numeric=(1, 2, 3, 4, 6))]


def spread_words(design) -> dict[str, str]:
    """How the report names the production spread: hFE for bipolar transistors, the
    IDSS/VP pairing for junction FETs, both for a design that holds both."""
    bjt, fet = bool(design.bjts), bool(design.jfets)
    nominal = " and ".join(w for w, on in (("hFE typical", bjt or not fet),
                                           ("the nominal IDSS/VP unit", fet)) if on)
    corners = " and ".join(w for w, on in (("hFE min and max", bjt or not fet),
                                           ("both ends of the IDSS/VP pairing", fet)) if on)
    draws = ", ".join(w for w, on in (("hFE log-uniform over its spread", bjt or not fet),
                                      ("each FET's place along its IDSS/VP pairing uniform",
                                       fet)) if on)
    edge = "cutoff or saturation" + (" (for a FET: the triode edge VDS = VGS − VP)"
                                     if fet else "")
    return {"nominal": nominal, "corners": corners, "draws": draws, "edge": edge}
