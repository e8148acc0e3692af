"""Circuit families: each module builds its netlist and gives the synthesizer a first cut.

The registry's order is the order of simplicity the selector follows: the plain
common emitter first, then the other single stages from the most to the least
general-purpose, then the two-stage circuits: the feedback pair first (its gain is a
resistor ratio, held over hFE and temperature by the loop), then the cascades (the
six-resistor ones before the ten-resistor CE->CE). See base.py for what a family gives.
"""

from __future__ import annotations

from stagesynth.synthesis.topologies import (
    ce_ce,
    ce_ef,
    ce_feedback,
    common_base,
    common_emitter,
    ef_bootstrap,
    ef_ce,
    emitter_follower,
    fb_pair,
    jfet_cascode,
    jfet_cs,
    jfet_cs_div,
    jfet_cs_ef,
    jfet_sf_boot,
    jfet_sf_ce,
)

FAMILIES = {
    family.NAME: family
    for family in (
        common_emitter,
        jfet_cs,
        ce_feedback,
        jfet_cs_div,
        emitter_follower,
        jfet_sf_boot,
        ef_bootstrap,
        common_base,
        fb_pair,
        jfet_cs_ef,
        ce_ef,
        jfet_cascode,
        ef_ce,
        jfet_sf_ce,
        ce_ce,
    )
}
