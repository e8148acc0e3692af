"""Former home of the pole/zero computation, now in the engine (`stagesynth.polezero`).

Kept so that older imports keep working; the report itself computes no physics.
"""

from ..polezero import (  # noqa: F401
    PoleZeroMap,
    Root,
    corner_estimates,
    pole_zero_map,
    poles_zeros_dict,
)
