"""What the junction-FET families share: their devices, netlist, gate return and drain window.

A JFET family runs on a spec whose [transistor] is the junction FET (the synthesizer
swaps a JFET [companion] in for it, see synthesis/devices.py); a mixed family's bipolar
stage uses the spec's bipolar [companion], else the preset "generic-npn". The bias is
designed for the pairing corners (engine/jfetbias.py): the bias line's crossings with the
low and the high unit's transfer curves at both ambient extremes bound the drain current,
and the drain resistor is placed inside the window where the low unit still swings before
cutoff and the high unit still swings before the triode edge.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from stagesynth.contracts.device import PRESETS, Device
from stagesynth.contracts.jfet import NOMINAL_U, Jfet, is_jfet
from stagesynth.contracts.netlist import Design, Part
from stagesynth.contracts.spec import Spec
from stagesynth.engine.jfetbias import SpreadPoints
from stagesynth.quantities.units import format_quantity as eng

SWING_MARGIN = 1.15  # the first cut's swing aim over the required peak (corners, rounding)
F_LOW_SHARE = 0.5  # the source-capacitance pole's share of the low corner in the first cut
LEAK_SHIFT_MAX = 0.3  # V: the largest gate lift by leakage the first cut accepts at the hot end


def jfet(spec: Spec) -> Jfet:
    """The junction FET of a JFET family's spec (its [transistor])."""
    dev = spec.transistor
    if not is_jfet(dev):
        raise ValueError("a junction-FET family needs a junction FET in [transistor]")
    return dev


def bipolar(spec: Spec) -> Device:
    """The bipolar transistor of a mixed family: the spec's [companion], else the preset
    "generic-npn" ("generic-pnp" beside a P channel, the mirror image)."""
    comp = getattr(spec, "companion", None)
    if comp is not None and not is_jfet(comp):
        return comp
    return PRESETS["generic-pnp" if jfet(spec).polarity == "p" else "generic-npn"]


def companion_note(spec: Spec) -> str:
    """The rationale's line on where the bipolar stage's device came from."""
    comp = getattr(spec, "companion", None)
    if comp is not None and not is_jfet(comp):
        return "The bipolar stage uses the spec's [companion] transistor."
    name = bipolar(spec).name
    return (f'The bipolar stage uses the preset "{name}" (the spec gives no bipolar '
            "[companion]).")


def make_design(spec: Spec, name: str, nodes: Mapping[str, tuple[str, str]],
                values: Mapping[str, float], jfets: Mapping[str, tuple[str, str, str]],
                roles: Mapping[str, str], title: str = "",
                bjts: Mapping[str, tuple[str, str, str]] | None = None) -> Design:
    """A JFET family's netlist: passive parts, junction FETs (ref -> d, g, s) of device
    "J" and bipolar transistors (ref -> c, b, e) of device "Q", with the spec's source,
    load and conditions. The P-channel mirror is the family's own node choice."""
    dev = jfet(spec)
    parts = [Part(ref, "resistor" if ref.startswith("R") else "capacitor", nodes[ref],
                  float(values[ref])) for ref in nodes]
    parts += [Part(ref, "jfet", dgs, device="J") for ref, dgs in jfets.items()]
    devices: dict = {"J": dev}
    if bjts:
        parts += [Part(ref, "bjt", cbe, device="Q") for ref, cbe in bjts.items()]
        devices["Q"] = bipolar(spec)
    r = spec.require
    return Design(
        parts=tuple(parts),
        devices=devices,
        supply_voltage=spec.supply.voltage,
        load_resistance=spec.load.resistance,
        source_resistance=spec.source.resistance,
        load_capacitance=spec.load.capacitance,
        source_capacitance=spec.source.capacitance or 0.0,
        title=title or spec.title,
        topology=f"{name}-{dev.polarity}",
        band=(r.f_low, r.f_high),
        extra={
            "roles": dict(roles),
            "conditions": {"ambient": list(r.ambient), "supply_tolerance": spec.supply.tolerance},
        },
    )


def rails(spec: Spec) -> tuple[str, str]:
    """(source rail, drain rail): ground and supply for N channel, swapped for P."""
    return ("vcc", "0") if jfet(spec).polarity == "p" else ("0", "vcc")


def supply_low(spec: Spec) -> float:
    """The least supply voltage the design must work from."""
    return spec.supply.voltage * (1.0 - spec.supply.tolerance)


def swing_amplitude(spec: Spec) -> float:
    """Peak load amplitude the first cut aims for (the required swing with a margin)."""
    return SWING_MARGIN * max(spec.require.swing_vpp / 2.0, 0.02)


def gate_resistance_needed(spec: Spec, bootstrap: float = 1.0) -> float:
    """Gate-return resistance the input needs: z_in (with 30 % margin), and with a
    capacitive source the pole 1/(2π·Cs·(Rs + Rin)) at F_LOW_SHARE of f_low (the source
    capacitance and the input resistance set the low corner). `bootstrap` divides it:
    a bootstrapped resistor looks `bootstrap` times larger."""
    r = spec.require
    need = 1.3 * r.z_in
    cs = spec.source.capacitance
    if cs:
        need = max(need, 1.0 / (2.0 * math.pi * F_LOW_SHARE * r.f_low * cs)
                   - spec.source.resistance)
    return max(need / bootstrap, 10e3)


def gate_resistors(spec: Spec, bootstrap: float = 1.0) -> np.ndarray:
    """Gate-return resistor values to try: what the input needs, a few times more (less
    noise current, lower corner), and the part limit itself; never above resistor_max."""
    rmax = spec.parts.resistor_max
    need = gate_resistance_needed(spec, bootstrap)
    vals = np.unique(np.minimum([need, 2.5 * need, 8.0 * need, rmax], rmax))
    return vals[vals >= min(need, rmax) * (1 - 1e-9)]


def drain_window(spec: Spec, pts: SpreadPoints, r_source: np.ndarray, *, ac_load: float,
                 headroom: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """(least, largest) drain resistor that keeps both corner units swinging.

    Cutoff (common practice, class-A stage): the low unit's least drain current must
    carry the load's peak, ID_low·(RD ∥ Rload) ≥ A. Triode edge: the high unit at the low
    supply keeps VDS − (VGS − VP) ≥ A plus `headroom` (what the source and a following
    stage take): VDD_min − ID_high·(RD + RS) − (VGS − VP)_high ≥ A + headroom.
    """
    amp = swing_amplitude(spec)
    id_lo, id_hi = pts.id_low, pts.id_high
    rl = ac_load
    with np.errstate(divide="ignore", invalid="ignore"):
        denom = id_lo * rl - amp
        rd_min = np.where(denom > 0, amp * rl / denom, np.inf)
        rd_max = (supply_low(spec) - id_hi * r_source - pts.overdrive_high - amp
                  - headroom) / id_hi
    return rd_min, rd_max


def place(lo: np.ndarray, hi: np.ndarray, pos: np.ndarray) -> np.ndarray:
    """A value at fraction `pos` of the way from lo to hi (geometric), or lo when the window
    is empty or unbounded (the verdict then names what fails)."""
    ok = np.isfinite(lo) & np.isfinite(hi) & (hi > lo) & (lo > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        inside = lo * (hi / lo) ** pos
    fallback = np.where(np.isfinite(lo) & (lo > 0), lo, np.where(hi > 0, hi, 1.0))
    return np.where(ok, inside, fallback)


def gain_knob(target: float, gm: np.ndarray, r_ac: np.ndarray, kin: np.ndarray,
              upper: np.ndarray) -> np.ndarray:
    """Unbypassed source resistor for the target gain: |A| = kin·gm·Rac/(1 + gm·RS1)
    (Sedra & Smith, common source with source degeneration, ro → ∞)."""
    rs1 = (kin * gm * r_ac / target - 1.0) / gm
    return np.clip(rs1, 0.0, upper)


def nominal_unit(device: Jfet) -> tuple[float, float]:
    """(IDSS, VP) of the nominal unit at 25 °C (N frame)."""
    idss, vp = device.unit(NOMINAL_U)
    return float(idss), float(vp)


def bias_notes(spec: Spec, analysis, ref: str = "J1") -> list[str]:
    """The spread of the drain current over the corners, read from the analysis."""
    points = (analysis.nominal, *analysis.corners)
    states = [(c.condition.label, c.transistors[ref]) for c in points]
    ids = [s.ic for _, s in states]
    lo = min(range(len(ids)), key=ids.__getitem__)
    hi = max(range(len(ids)), key=ids.__getitem__)
    return [
        f"Bias over the spread: the bias line crosses the transfer curves of the low unit "
        f"(IDSS min, VP nearest zero) and the high unit (IDSS max, VP farthest); over every "
        f"corner {ref} runs between {eng(ids[lo], 'A', 3)} ({states[lo][0]}) and "
        f"{eng(ids[hi], 'A', 3)} ({states[hi][0]}), nominal {eng(ids[0], 'A', 3)}, "
        + ("every unit in saturation at every corner" if all(s.active for _, s in states)
           else "but not every corner keeps it in saturation")
        + " (the report's transfer-curve figure draws it)."
    ]


def input_note(spec: Spec, analysis, r_gate: float, bootstrapped: bool) -> str:
    """Why the gate return is this large: z_in, and the source capacitance's corner."""
    cs = spec.source.capacitance
    zin = analysis.z_in
    text = (f"Gate return {eng(r_gate, 'Ω', 3)}"
            + (" (bootstrapped)" if bootstrapped else "")
            + f": input impedance {eng(zin, 'Ω', 3)} at midband.")
    if cs:
        f_c = 1.0 / (2.0 * math.pi * cs * (spec.source.resistance + abs(zin)))
        text += (f" With the source capacitance {eng(cs, 'F', 3)} the input alone puts a "
                 f"pole near 1/(2π·Cs·Rin) ≈ {eng(f_c, 'Hz', 3)} (f_low asked: "
                 f"{eng(spec.require.f_low, 'Hz', 3)}).")
    return text
