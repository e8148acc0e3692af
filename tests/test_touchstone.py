"""The stage.s2p two-port, read back with scikit-rf and terminated by textbook formulas.

scikit-rf is the outside reference: it parses the Touchstone file and converts S to the
ABCD (chain) matrix. Terminating that two-port in the source resistance and the load
with the chain-matrix formulas (Pozar, Microwave Engineering, ch. 4, from memory) must
give the engine's own gain and terminal impedances.
"""

from __future__ import annotations

import math
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
import conftest as fixtures
from independent import designs as ds

from stagesynth.contracts.netlist import Design, design_from_dict
from stagesynth.engine.analysis import analyze
from stagesynth.report.touchstone import (
    stage_touchstone,
    two_port_y,
    y_to_s,
)


def _designs() -> dict[str, Design]:
    out = {name: build() for name, build in fixtures.FIXTURE_BUILDERS.items()}
    for name in ("ce_pnp", "ce_ce_cap"):  # both driven by an ideal source (Rs = 0)
        if name in ds.DESIGNS:
            d = design_from_dict(ds.DESIGNS[name])
            out[name] = d if d.band is not None else replace(d, band=(20.0, 20e3))
    return out


DESIGNS = _designs()


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """Each design analysed, its two-port written as stage.s2p and read back by scikit-rf."""
    import skrf

    root = tmp_path_factory.mktemp("s2p")
    out = {}
    for name, design in DESIGNS.items():
        a = analyze(design)
        path = root / name / "stage.s2p"
        path.parent.mkdir()
        path.write_text(stage_touchstone(design, a), encoding="latin-1")  # our own writer
        out[name] = (a, skrf.Network(str(path)), path)  # scikit-rf's Touchstone reader
    return out


def _terminations(a, f):
    rs = a.design.source_resistance
    zl = 1.0 / (1.0 / a.design.load_resistance + 2j * math.pi * f * a.design.load_capacitance)
    return rs, zl


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_terminated_two_port_gives_engine_gain(name, written):
    """v_load/v_s = ZL / (A ZL + B + Zs (C ZL + D)) (chain matrix, Pozar, from memory)."""
    a, net, _ = written[name]
    f = net.f
    abcd = net.a  # scikit-rf S -> ABCD conversion
    A, B, C, D = abcd[:, 0, 0], abcd[:, 0, 1], abcd[:, 1, 0], abcd[:, 1, 1]
    rs, zl = _terminations(a, f)
    h = zl / (A * zl + B + rs * (C * zl + D))
    ref = a.system.gain(f)[0]
    lo, hi = a.environment.band
    band = (f >= lo) & (f <= hi)
    err_db = np.abs(20 * np.log10(np.abs(h / ref)))
    assert err_db[band].max() < 0.05  # the brief's limit across the band
    assert err_db.max() < 0.05  # and across the whole file
    assert np.degrees(np.abs(np.angle(h / ref))).max() < 0.5


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_terminal_impedances_from_file(name, written):
    """Zin = (A ZL + B)/(C ZL + D), Zout = (D Zs + B)/(C Zs + A) (Pozar, from memory)."""
    a, net, _ = written[name]
    f = net.f
    abcd = net.a
    A, B, C, D = abcd[:, 0, 0], abcd[:, 0, 1], abcd[:, 1, 0], abcd[:, 1, 1]
    rs, zl = _terminations(a, f)
    z_in = (A * zl + B) / (C * zl + D)
    z_out = (D * rs + B) / (C * rs + A)
    assert np.allclose(z_in, a.system.z_in(f)[0], rtol=2e-3)
    assert np.allclose(z_out, a.system.z_out(f)[0], rtol=2e-3)


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_file_layout(name, written):
    """Touchstone 1.0: option line '# Hz S RI R 50', 2-port data rows of 9 numbers.

    The layout is that of the Touchstone File Format Specification (IBIS Open Forum,
    from memory); the sweep spans f_low/100 ... 100 f_high of the required band, log-spaced.
    """
    a, net, path = written[name]
    lines = path.read_text(encoding="latin-1").splitlines()
    options = [ln for ln in lines if ln.startswith("#")]
    assert len(options) == 1
    assert options[0].split() == ["#", "Hz", "S", "RI", "R", "50.0"]
    data = [ln.split() for ln in lines if ln.strip() and not ln.startswith(("!", "#"))]
    assert all(len(row) == 9 for row in data)
    assert len(data) == len(net.f)
    assert np.allclose(net.z0, 50.0)
    lo, hi = a.environment.band
    assert net.f[0] == pytest.approx(lo / 100, rel=1e-9)
    assert net.f[-1] == pytest.approx(hi * 100, rel=1e-9)
    ratios = net.f[1:] / net.f[:-1]
    assert np.allclose(ratios, ratios[0], rtol=1e-6)


def test_two_port_is_the_y_parameter_definition(written):
    """Our Schur complement = the definition of Y-parameters, applied to the full nodal matrix.

    With port voltages (1, 0) and (0, 1) and no current into internal nodes, the port
    currents are the columns of Y (two-port definition, Pozar, from memory).
    """
    a, _, _ = written["npn_ce"]
    f = np.array([1.0, 1e3, 1e6])
    y2 = two_port_y(a.system, f)
    c = a.system.circuit
    for k, fk in enumerate(f):
        y = a.system.G[0] + 2j * math.pi * fk * a.system.C[0]
        ports = [c.input, c.output]
        inner = [i for i in range(c.n) if i not in ports]
        for j, p in enumerate(ports):
            v = np.zeros(c.n, dtype=complex)
            v[p] = 1.0
            # internal nodes carry no external current: Y_kk v_k = -Y_kp v_p
            v[inner] = np.linalg.solve(y[np.ix_(inner, inner)], -y[np.ix_(inner, [p])][:, 0])
            currents = y @ v
            assert np.allclose(currents[ports], y2[k, :, j], rtol=1e-9, atol=1e-15)


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_own_writer_matches_scikit_rf(name, written):
    """Our Y->S conversion, and the S parameters in the file as scikit-rf reads them,
    against scikit-rf's own y2s of the same Y parameters."""
    import skrf

    a, net, _ = written[name]
    y = two_port_y(a.system, net.f)
    np.testing.assert_allclose(y_to_s(y), skrf.network.y2s(y, z0=50.0), rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(net.s, skrf.network.y2s(y, z0=50.0), rtol=1e-9, atol=1e-12)
