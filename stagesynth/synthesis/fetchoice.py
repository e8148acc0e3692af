"""Why a junction FET won or lost against a bipolar input (the rationale of the choice).

The two-generator view (Motchenbacher & Connelly; Horowitz & Hill, the FET chapter, from
memory): a bipolar input draws base current IB = IC/hFE, whose shot noise √(2q·IB) flows in
the source impedance, and whose DC flows through the input's bias resistance; a junction
FET's gate draws only its leakage i_gss. With a capacitive sensor the source impedance
at the spot frequency is 1/(2π·f·Cs), and the input resistance must be large enough that
Cs and it keep the low corner: the numbers below say which input suits the spec.
"""

from __future__ import annotations

import math

from stagesynth.contracts.device import ELEMENTARY_CHARGE, PRESETS
from stagesynth.contracts.jfet import gate_leakage, is_jfet
from stagesynth.contracts.spec import Spec
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.devices import needs
from stagesynth.synthesis.topologies.jfet_common import F_LOW_SHARE


def input_resistance_needed(spec: Spec) -> float:
    """The input resistance the spec asks for: z_in, and with a source capacitance the value
    that puts the input pole 1/(2π·Cs·(Rs + Rin)) at F_LOW_SHARE of f_low."""
    r = spec.require
    need = r.z_in
    cs = spec.source.capacitance
    if cs:
        need = max(need, 1.0 / (2.0 * math.pi * F_LOW_SHARE * r.f_low * cs)
                   - spec.source.resistance)
    return need


def _devices(spec: Spec):
    """(junction FET or None, bipolar transistor) the spec offers."""
    main, comp = spec.transistor, getattr(spec, "companion", None)
    fet = main if is_jfet(main) else (comp if comp is not None and is_jfet(comp) else None)
    bjt = main if not is_jfet(main) else (
        comp if comp is not None and not is_jfet(comp) else PRESETS["generic-npn"])
    return fet, bjt


def _input_current(result) -> float | None:
    """Collector current of the bipolar input transistor of a bipolar design (nominal)."""
    states = result.analysis.nominal.transistors
    for st in states.values():
        if getattr(st, "kind", "bjt") == "bjt":
            return st.ic
    return None


def comparison(spec: Spec, ic: float) -> str:
    """The numbers behind the choice for an input at collector current `ic`."""
    fet, bjt = _devices(spec)
    r_need = input_resistance_needed(spec)
    ib = ic / bjt.hfe_min
    f = spec.require.noise_frequency
    cs = spec.source.capacitance
    z_src = 1.0 / (2.0 * math.pi * f * cs) if cs else spec.source.resistance
    in_bjt = math.sqrt(2.0 * ELEMENTARY_CHARGE * ib)
    text = (f"A bipolar input at IC ≈ {eng(ic, 'A', 2)} draws IB = IC/hFE_min ≈ "
            f"{eng(ib, 'A', 2)}")
    if r_need > 0:
        drop = ib * r_need
        text += (f"; the input must present about {eng(r_need, 'Ω', 2)}, through which that "
                 f"current would drop {eng(drop, 'V', 2)}")
        if drop > 0.1 * spec.supply.voltage:
            text += " (so a bipolar input gets there only by bootstrapping)"
        else:
            text += " (no obstacle at this input resistance)"
    if z_src > 0:
        text += (f", and its shot noise √(2q·IB) ≈ {eng(in_bjt, 'A/√Hz', 2)} in the source "
                 f"impedance ({eng(z_src, 'Ω', 2)} at {eng(f, 'Hz', 3)}) is "
                 f"{eng(in_bjt * z_src, 'V/√Hz', 2)}")
        if fet is not None:
            t_hot = spec.require.ambient[-1]
            in_fet = math.sqrt(2.0 * ELEMENTARY_CHARGE * float(gate_leakage(fet, t_hot)))
            text += (f", against {eng(in_fet * z_src, 'V/√Hz', 2)} from a junction FET's gate "
                     f"leakage (√(2q·i_gss) at {t_hot:g} °C)")
    return text + "."


def fet_notes(spec: Spec, chosen, results: list) -> list[str]:
    """Rationale lines on the junction FET against the bipolar input, when the spec offers a
    junction FET (none for a bipolar spec without one: its rationale stays as it was)."""
    fet, _ = _devices(spec)
    if fet is None:
        return []
    kinds = {r.name: needs_of(r.name) for r, _ in results}
    fet_res = [(r, res) for r, res in results if kinds[r.name] != "bjt"]
    bjt_res = [(r, res) for r, res in results if kinds[r.name] == "bjt"]
    if not bjt_res:
        return ["Junction FET: the spec's [transistor] is a junction FET, so the junction-FET "
                "circuits (and the JFET-bipolar ones) were searched. "
                + comparison(spec, 100e-6)]
    best_bjt = max(bjt_res, key=lambda p: (p[0].meets, p[0].worst_margin))
    ic = _input_current(best_bjt[1]) or 100e-6
    why = comparison(spec, ic)
    if chosen is not None and kinds.get(chosen.name) != "bjt":
        head = (f"Junction FET or bipolar: the junction FET won ({chosen.title}); the best "
                f"bipolar circuit, {best_bjt[0].title}, "
                + ("also meets but is less practical" if best_bjt[0].meets else
                   f"fails {', '.join(best_bjt[0].failed)}") + ".")
    elif chosen is not None:
        best_fet = max(fet_res, key=lambda p: (p[0].meets, p[0].worst_margin), default=None)
        lost = ("no junction-FET circuit was searched" if best_fet is None else
                f"the best junction-FET circuit, {best_fet[0].title}, "
                + ("also meets but is less practical" if best_fet[0].meets else
                   f"fails {', '.join(best_fet[0].failed)}"))
        head = f"Junction FET or bipolar: the bipolar circuit won ({chosen.title}); {lost}."
    else:
        head = "Junction FET or bipolar: neither kind of input met every requirement."
    return [head + " " + why]


def needs_of(name: str) -> str:
    """What the family called `name` needs (bjt, jfet, jfet+bjt)."""
    from stagesynth.synthesis.topologies import FAMILIES

    return needs(FAMILIES[name])


def spec_has_fet(spec: Spec) -> bool:
    """True when the spec offers a junction FET ([transistor] or [companion])."""
    return _devices(spec)[0] is not None
