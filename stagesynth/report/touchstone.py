"""The stage as a two-port (input terminal to output terminal) for RF and system tools.

The Y-parameters come straight from the nodal matrices Y = G + jwC of the nominal
linearized stage: ports at the design's input and output nodes, every other node
internal and eliminated by a Schur complement. Source and load are left out (the
user terminates the ports); supply and ground are AC ground. Y becomes S at 50 ohm
(S = (I - Z0 Y)(I + Z0 Y)^-1, Pozar, Microwave Engineering, ch. 4) and the Touchstone
1.0 text is written here, so the package needs no RF library (scikit-rf, with pandas,
is only the outside reference of the tests and the optional `to_network` API).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # pragma: no cover - typing only
    import skrf

    from stagesynth.contracts.netlist import Design
    from stagesynth.engine.ac import AcSystem
    from stagesynth.engine.analysis import Analysis

Z0 = 50.0  # ohm, reference impedance of the file
POINTS_PER_DECADE = 25


def two_port_y(system: AcSystem, freqs: np.ndarray) -> np.ndarray:
    """Y-parameters (F, 2, 2) of the stage between its input and output nodes.

    Y_ports = Y_pp - Y_pk Y_kk^-1 Y_kp at each frequency, from the unloaded nodal
    matrices of the first member of `system`'s batch.
    """
    f = np.asarray(freqs, dtype=float).reshape(-1)
    w = 2.0 * math.pi * f
    y = system.G[0][None, :, :] + 1j * w[:, None, None] * system.C[0][None, :, :]
    ports = np.array([system.circuit.input, system.circuit.output])
    inner = np.array([k for k in range(system.circuit.n) if k not in set(ports.tolist())])
    y_pp = y[:, ports[:, None], ports[None, :]]
    if inner.size == 0:
        return y_pp
    y_pk = y[:, ports[:, None], inner[None, :]]
    y_kp = y[:, inner[:, None], ports[None, :]]
    y_kk = y[:, inner[:, None], inner[None, :]]
    return y_pp - y_pk @ np.linalg.solve(y_kk, y_kp)


def sweep_range(analysis: Analysis) -> tuple[float, float]:
    """f_low/100 to 100*f_high, from the required band when there is one.

    Without a band the engine's corners are used; a DC-coupled stage or one with no
    upper corner falls back to three decades about midband.
    """
    band = analysis.environment.band
    if band is not None:
        lo, hi = band
    else:
        lo = analysis.f_low if analysis.f_low > 0 else analysis.midband / 1e3
        hi = analysis.f_high if math.isfinite(analysis.f_high) else analysis.midband * 1e3
    return lo / 100.0, hi * 100.0


def y_to_s(y: np.ndarray, z0: float = Z0) -> np.ndarray:
    """S-parameters (F, 2, 2) of admittance matrices y at a real reference z0 (all ports)."""
    eye = np.eye(y.shape[-1])
    a = eye - z0 * y
    b = eye + z0 * y
    # S = a b^-1, as solve(b^T, a^T)^T (no explicit inverse)
    return np.swapaxes(np.linalg.solve(np.swapaxes(b, -1, -2), np.swapaxes(a, -1, -2)), -1, -2)


def stage_sparameters(
    design: Design,
    analysis: Analysis,
    f_start: float | None = None,
    f_stop: float | None = None,
    points: int | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """(frequencies in Hz, S of shape (F, 2, 2) at 50 ohm) of the nominal stage.

    Defaults: `sweep_range(analysis)` and 25 points per decade, log-spaced.
    """
    lo, hi = sweep_range(analysis)
    f_start = lo if f_start is None else float(f_start)
    f_stop = hi if f_stop is None else float(f_stop)
    if not 0 < f_start < f_stop:
        raise ValueError(f"need 0 < f_start < f_stop, got {f_start!r}, {f_stop!r}")
    if points is None:
        points = math.ceil(math.log10(f_stop / f_start) * POINTS_PER_DECADE) + 1
    f = np.logspace(math.log10(f_start), math.log10(f_stop), int(points))
    return f, y_to_s(two_port_y(analysis.system, f))


def _comment(design: Design) -> str:
    title = design.title or "stage"
    return (f"stagesynth two-port of '{_ascii(title)}': port 1 = node {_ascii(design.input)}, "
            f"port 2 = node {_ascii(design.output)}, ground and supply at AC ground; source "
            "and load not included; nominal operating point (hFE typ, 25 C)")


def stage_touchstone(design: Design, analysis: Analysis) -> str:
    """The Touchstone 1.0 text of the stage: S at 50 ohm, real/imaginary, frequencies in Hz.

    Data lines hold f, S11, S21, S12, S22 (the order Touchstone 1.0 gives two-ports).
    """
    f, s = stage_sparameters(design, analysis)
    lines = [f"!{_comment(design)}", f"# Hz S RI R {Z0!r}",
             "!freq ReS11 ImS11 ReS21 ImS21 ReS12 ImS12 ReS22 ImS22"]
    for k in range(f.size):
        cells = [s[k, 0, 0], s[k, 1, 0], s[k, 0, 1], s[k, 1, 1]]
        lines.append(" ".join([repr(float(f[k]))]
                              + [f"{float(c.real)!r} {float(c.imag)!r}" for c in cells]))
    return "\n".join(lines) + "\n"


def stage_network(
    design: Design,
    analysis: Analysis,
    f_start: float | None = None,
    f_stop: float | None = None,
    points: int | None = None,
) -> skrf.Network:
    """The nominal stage as a scikit-rf two-port (needs scikit-rf: pip install scikit-rf).

    Port 1 is the input terminal, port 2 the output terminal, both against ground.
    Defaults: `sweep_range(analysis)` and 25 points per decade.
    """
    try:
        import skrf
    except ImportError:
        from stagesynth.quantities.errors import StageError

        raise StageError("a scikit-rf Network needs scikit-rf, which is not installed",
                         accepted="pip install scikit-rf (the Touchstone file stage.s2p "
                         "needs nothing extra)") from None

    f, s = stage_sparameters(design, analysis, f_start, f_stop, points)
    net = skrf.Network(frequency=skrf.Frequency.from_f(f, unit="Hz"), s=s, z0=Z0,
                       name="stage")
    net.comments = _comment(design)
    return net


def touchstone_text(network: skrf.Network) -> str:
    """The Touchstone 1.0 text of `network` (S, real/imaginary, frequencies in Hz)."""
    return network.write_touchstone(return_string=True, form="ri", skrf_comment=False)


def _ascii(text: str) -> str:
    """Touchstone files are ISO-8859-1: keep comments plain ASCII."""
    return text.encode("ascii", "replace").decode("ascii")
