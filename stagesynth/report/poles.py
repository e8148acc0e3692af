"""Former home of the pole/zero computation, now in the engine (`stagesynth.engine.polezero`).

Kept so that older imports keep working; the report itself computes no physics.
"""

from stagesynth.engine.polezero import (  # noqa: F401
    PoleZeroMap,
    Root,
    corner_estimates,
    pole_zero_map,
    poles_zeros_dict,
)
