"""Which circuit families a spec's devices allow, and the spec each family is searched with.

A family says what it needs in DEVICES: "bjt" (the default: the bipolar families),
"jfet" (a junction FET alone) or "jfet+bjt" (a junction FET with a bipolar stage). A
bipolar [transistor] runs the bipolar families exactly as before; a junction-FET
[companion] beside it adds the FET families, searched with the JFET swapped into
[transistor] (the bipolar one becomes their companion). A JFET [transistor] runs the FET
and mixed families; the mixed ones take the bipolar [companion], else a generic preset.
"""

from __future__ import annotations

from dataclasses import replace

from stagesynth.contracts.jfet import is_jfet
from stagesynth.contracts.spec import Spec


def needs(family) -> str:
    """What the family needs: "bjt", "jfet" or "jfet+bjt"."""
    return getattr(family, "DEVICES", "bjt")


def family_spec(spec: Spec, family) -> Spec | None:
    """The spec `family` is searched with, or None when the spec's devices cannot build it."""
    main, comp = spec.transistor, getattr(spec, "companion", None)
    if needs(family) == "bjt":
        return None if is_jfet(main) else spec
    if is_jfet(main):
        return spec
    if comp is not None and is_jfet(comp):
        return replace(spec, transistor=comp, companion=main)
    return None


def missing_device(spec: Spec, family) -> str:
    """Why `family` cannot be built from this spec's devices (for an error message)."""
    if needs(family) == "bjt":
        return ("a bipolar circuit needs a bipolar [transistor]; this spec's [transistor] is a "
                "junction FET")
    return ("a junction-FET circuit needs a junction FET in [transistor] or [companion] "
            '(kind = "jfet")')
