"""Circuit families: each module builds its netlist and gives the synthesizer a first cut.

The registry is ordered from the simplest circuit to the most elaborate; the
selector tries single stages before cascades. See base.py for what a family gives.
"""

from __future__ import annotations

from . import common_emitter

FAMILIES = {
    common_emitter.NAME: common_emitter,
}
