"""Shared fixtures: hand-built stages with invented, realistic values.

Every circuit here is our own scenario (hydrophone front end, tape-head preamp,
cable driver, sensor line stage); the transistor types are invented generic
devices, not any manufacturer's part. Builders are plain functions so that
property tests (which cannot take function-scoped fixtures) can use them too.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pytest

from stagesynth.contracts.device import Device
from stagesynth.contracts.netlist import Design, Part

# Invented small-signal types in the range of common parts (no real part number).
TEST_NPN = Device(
    name="test-npn",
    polarity="npn",
    hfe_min=120.0,
    hfe_max=360.0,
    hfe_typ=210.0,
    vbe=0.66,
    vbe_current=1e-3,
    early_voltage=90.0,
    ft=300e6,
    c_cb=3.5e-12,
    r_bb=40.0,
    vce_sat=0.2,
    ic_max=0.1,
    vce_max=40.0,
    p_max=0.5,
    theta_ja=220.0,
)
TEST_PNP = Device(
    name="test-pnp",
    polarity="pnp",
    hfe_min=90.0,
    hfe_max=280.0,
    hfe_typ=160.0,
    vbe=0.68,
    vbe_current=1e-3,
    early_voltage=70.0,
    ft=180e6,
    c_cb=5.5e-12,
    r_bb=65.0,
    vce_sat=0.25,
    ic_max=0.1,
    vce_max=40.0,
    p_max=0.5,
    theta_ja=250.0,
)


def _r(ref: str, a: str, b: str, value: float) -> Part:
    return Part(ref, "resistor", (a, b), value)


def _c(ref: str, a: str, b: str, value: float) -> Part:
    return Part(ref, "capacitor", (a, b), value)


def _q(ref: str, c: str, b: str, e: str, device: str = "Q") -> Part:
    return Part(ref, "bjt", (c, b, e), device=device)


def npn_ce(device: Device = TEST_NPN) -> Design:
    """Hydrophone front end: NPN common emitter, divider bias, RE split 150 + 820 ohm."""
    parts = (
        _r("R1", "vcc", "b1", 56e3),
        _r("R2", "b1", "0", 12e3),
        _r("R3", "vcc", "c1", 4.7e3),
        _r("R4", "e1", "x1", 150.0),
        _r("R5", "x1", "0", 820.0),
        _c("C1", "in", "b1", 4.7e-6),
        _c("C2", "c1", "out", 10e-6),
        _c("C3", "x1", "0", 220e-6),
        _q("Q1", "c1", "b1", "e1"),
    )
    return Design(
        parts=parts,
        devices={"Q": device},
        supply_voltage=12.0,
        load_resistance=22e3,
        source_resistance=1e3,
        load_capacitance=150e-12,
        title="hydrophone front end (test)",
        topology="ce",
        band=(20.0, 50e3),
    )


def pnp_ce(device: Device = TEST_PNP) -> Design:
    """Tape-head preamp on 9 V: PNP common emitter with the emitter toward the supply."""
    parts = (
        _r("R1", "vcc", "b1", 15e3),
        _r("R2", "b1", "0", 62e3),
        _r("R3", "c1", "0", 2.2e3),
        _r("R4", "e1", "x1", 100.0),
        _r("R5", "x1", "vcc", 560.0),
        _c("C1", "in", "b1", 10e-6),
        _c("C2", "c1", "out", 22e-6),
        _c("C3", "x1", "vcc", 470e-6),
        _q("Q1", "c1", "b1", "e1"),
    )
    return Design(
        parts=parts,
        devices={"Q": device},
        supply_voltage=9.0,
        load_resistance=47e3,
        source_resistance=300.0,
        load_capacitance=47e-12,
        title="tape-head preamp (test)",
        topology="ce-pnp",
        band=(30.0, 20e3),
    )


def emitter_follower(device: Device = TEST_NPN) -> Design:
    """Cable driver on 15 V: NPN emitter follower, collector on the supply."""
    parts = (
        _r("R1", "vcc", "b1", 39e3),
        _r("R2", "b1", "0", 47e3),
        _r("R3", "e1", "0", 2.2e3),
        _c("C1", "in", "b1", 2.2e-6),
        _c("C2", "e1", "out", 47e-6),
        _q("Q1", "vcc", "b1", "e1"),
    )
    return Design(
        parts=parts,
        devices={"Q": device},
        supply_voltage=15.0,
        load_resistance=1e3,
        source_resistance=2.2e3,
        load_capacitance=220e-12,
        title="cable driver (test)",
        topology="ef",
        band=(10.0, 200e3),
    )


def ce_follower(device: Device = TEST_NPN) -> Design:
    """Sensor line stage: NPN common emitter direct-coupled into an NPN emitter follower."""
    parts = (
        _r("R1", "vcc", "b1", 82e3),
        _r("R2", "b1", "0", 15e3),
        _r("R3", "vcc", "c1", 5.6e3),
        _r("R4", "e1", "x1", 220.0),
        _r("R5", "x1", "0", 1e3),
        _r("R6", "e2", "0", 3.3e3),
        _c("C1", "in", "b1", 4.7e-6),
        _c("C2", "e2", "out", 22e-6),
        _c("C3", "x1", "0", 100e-6),
        _q("Q1", "c1", "b1", "e1"),
        _q("Q2", "vcc", "c1", "e2"),
    )
    return Design(
        parts=parts,
        devices={"Q": device},
        supply_voltage=12.0,
        load_resistance=2.2e3,
        source_resistance=600.0,
        load_capacitance=100e-12,
        title="sensor line stage (test)",
        topology="ce-ef",
        band=(20.0, 100e3),
    )


FIXTURE_BUILDERS = {
    "npn_ce": npn_ce,
    "pnp_ce": pnp_ce,
    "emitter_follower": emitter_follower,
    "ce_follower": ce_follower,
}


def mirror_design(design: Design) -> Design:
    """The PNP mirror of an NPN design: swap ground and supply, flip every polarity."""
    swap = {design.ground: design.supply_node, design.supply_node: design.ground}
    parts = tuple(replace(p, nodes=tuple(swap.get(n, n) for n in p.nodes)) for p in design.parts)
    flip = {"npn": "pnp", "pnp": "npn"}
    devices = {k: replace(d, polarity=flip[d.polarity]) for k, d in design.devices.items()}
    return replace(design, parts=parts, devices=devices)


@pytest.fixture(scope="session")
def npn_ce_design() -> Design:
    return npn_ce()


@pytest.fixture(scope="session")
def pnp_ce_design() -> Design:
    return pnp_ce()


@pytest.fixture(scope="session")
def follower_design() -> Design:
    return emitter_follower()


@pytest.fixture(scope="session")
def ce_follower_design() -> Design:
    return ce_follower()


@pytest.fixture(scope="session", params=sorted(FIXTURE_BUILDERS))
def any_design(request: pytest.FixtureRequest) -> Design:
    """Each hand-built fixture in turn."""
    return FIXTURE_BUILDERS[request.param]()


HYDROPHONE_SPEC = Path(__file__).resolve().parents[1] / "specs" / "hydrophone-front-end.toml"


@pytest.fixture(scope="session")
def hydrophone_made(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One `stagesynth design` of specs/hydrophone-front-end.toml with its report, shared
    read-only by the CLI tests (a synthesis costs seconds: made once per session)."""
    from typer.testing import CliRunner

    from stagesynth.cli import app

    out = tmp_path_factory.mktemp("hydrophone") / "out"
    res = CliRunner().invoke(app, ["design", str(HYDROPHONE_SPEC), "--out", str(out)])
    assert res.exit_code == 0, res.output
    return out
