"""Independent noise computation from the contract's "Noise" section (spec-format.md §2).

Written from the contract text only, on top of refmodel.py's operating point and nodal
network: each noise generator is injected on its own as a unit current (a forward solve
per generator, not the engine's adjoint), its transfer to the load voltage squared and
weighted by its one-sided density; band rms by a dense trapezoid on a log grid.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from .refmodel import (
    K_BOLTZMANN,
    Q_ELECTRON,
    ZERO_CELSIUS,
    Circuit,
    Conditions,
    OperatingPoint,
    _AcNetwork,
    circuit_from_design,
    corner_conditions,
    gain,
    internal_base,
    nominal_conditions,
    solve_dc,
)

T0 = 290.0  # K, the source resistance's temperature for the noise figure


@dataclass(frozen=True)
class NoiseResult:
    """The contract's three noise figures at one condition."""

    conditions: Conditions
    noise: float  # V/sqrt(Hz)
    noise_figure: float | None  # dB
    noise_rms: float  # V


def _generators(cir: Circuit, op: OperatingPoint, flicker: Mapping[str, float]
                ) -> list[tuple[str, str, float, float]]:
    """(node a, node b, white density A^2/Hz, 1/f corner) for every stage generator."""
    ta = op.conditions.ambient + ZERO_CELSIUS
    gens = [(a, b, 4 * K_BOLTZMANN * ta / r, 0.0) for _, a, b, r in cir.resistors]
    for q in cir.bjts:
        dev = cir.devices[q.device]
        t = op.transistors[q.ref]
        bi = internal_base(q, dev)
        gens.append((bi, q.e, 2 * Q_ELECTRON * t.ib, flicker.get(q.device, 0.0)))
        gens.append((q.c, q.e, 2 * Q_ELECTRON * t.ic, 0.0))
        if dev.r_bb > 0:
            gens.append((q.b, bi, 4 * K_BOLTZMANN * (t.tj + ZERO_CELSIUS) / dev.r_bb, 0.0))
    return gens


def output_densities(cir: Circuit, op: OperatingPoint, flicker: Mapping[str, float],
                     freqs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(S_amp, S_src) at the load in V^2/Hz for each frequency."""
    freqs = np.atleast_1d(np.asarray(freqs, dtype=float))
    net = _AcNetwork(cir, op, load=True, source=True)
    s_amp = np.zeros(freqs.size)
    for a, b, white, corner in _generators(cir, op, flicker):
        inject = {}
        if a in net.idx:
            inject[a] = inject.get(a, 0.0) + 1.0
        if b in net.idx:
            inject[b] = inject.get(b, 0.0) - 1.0
        if not inject:
            continue
        v = net.voltage(net.solve(freqs, inject), cir.output)
        s_amp += np.abs(v) ** 2 * white * (1.0 + corner / freqs)
    s_src = np.zeros(freqs.size)
    if cir.source_resistance > 0:
        v = net.voltage(net.solve(freqs, {cir.input: 1.0}), cir.output)
        s_src = np.abs(v) ** 2 * 4 * K_BOLTZMANN * T0 / cir.source_resistance
    return s_amp, s_src


def noise_at(cir: Circuit, op: OperatingPoint, flicker: Mapping[str, float], f_spot: float,
             band: tuple[float, float]) -> tuple[float, float | None, float]:
    """(noise, noise_figure, noise_rms) of the contract at one operating point."""
    s_amp, s_src = output_densities(cir, op, flicker, np.array([f_spot]))
    a_spot = abs(complex(gain(cir, op, [f_spot])[0]))
    density = math.sqrt(s_amp[0]) / a_spot
    nf = 10 * math.log10(1 + s_amp[0] / s_src[0]) if s_src[0] > 0 else None
    grid = np.geomspace(band[0], band[1], 2001)
    s_band, _ = output_densities(cir, op, flicker, grid)
    fm = math.sqrt(band[0] * band[1])
    a_mid = abs(complex(gain(cir, op, [fm])[0]))
    rms = math.sqrt(np.trapezoid(s_band, grid)) / a_mid
    return density, nf, rms


def noise_of_design(design: Mapping[str, Any], band: tuple[float, float],
                    f_spot: float | None = None, ambient=(25.0,), supply_tolerance: float = 0.0
                    ) -> tuple[NoiseResult, list[NoiseResult]]:
    """Nominal and every corner's noise figures of a design file (section 3) for a band."""
    cir = circuit_from_design(design)
    flicker = {name: float(d.get("flicker_corner", 0.0) or 0.0)
               for name, d in design.get("devices", {}).items()}
    f = f_spot if f_spot is not None else math.sqrt(band[0] * band[1])
    out = []
    nominal = None
    for cond in [nominal_conditions(cir), *corner_conditions(cir, ambient, supply_tolerance)]:
        op = solve_dc(cir, cond)
        res = NoiseResult(cond, *noise_at(cir, op, flicker, f, band))
        if nominal is None:
            nominal = res
        else:
            out.append(res)
    assert nominal is not None
    return nominal, out
