"""The distortion keys of the spec (contract section 1): thd, thd_level, thd_at.

THD in dB is 20·log10(V_harmonics / V_1) (amplitude ratio; IEC 60027-3 defines the
decibel for root-power quantities this way, from memory): -40 dB = 1 %.
"""

from __future__ import annotations

import tomllib

import pytest

from stagesynth.contracts.spec import spec_from_mapping, spec_to_toml
from stagesynth.quantities.errors import StageError
from stagesynth.quantities.units import parse_thd

BASE = {
    "supply": {"voltage": "12 V"},
    "load": {"resistance": "10 kΩ"},
    "require": {"gain": "20 dB", "f_low": "20 Hz", "f_high": "20 kHz", "swing": "4 Vpp"},
    "transistor": {"preset": "generic-npn"},
}


@pytest.mark.parametrize("text, ratio", [
    ("0.5 %", 0.005), ("300 ppm", 3e-4), ("-40 dB", 0.01), ("-60 dB", 1e-3), (0.002, 0.002),
])
def test_thd_units(text, ratio) -> None:
    assert parse_thd(text) == pytest.approx(ratio, rel=1e-12)


@pytest.mark.parametrize("text", ["6 dB", "0 dB", "150 %", "2", "-1 %", "0.5 V"])
def test_thd_refused(text) -> None:
    with pytest.raises(StageError):
        parse_thd(text, key="require.thd", file="x.toml")


def _spec(**require):
    data = {**BASE, "require": {**BASE["require"], **require}}
    return spec_from_mapping(data, "x.toml")


def test_defaults_and_round_trip() -> None:
    s = _spec(thd="-46 dB")
    assert s.require.thd_level_vpp == 4.0  # the required swing
    assert s.require.thd_freq == pytest.approx((20.0 * 20e3) ** 0.5)  # midband
    s2 = _spec(thd="0.1 %", thd_level="2 Vpp", thd_at="1 kHz")
    back = spec_from_mapping(tomllib.loads(spec_to_toml(s2)), "y.toml")
    assert back.require == s2.require


def test_thd_without_any_level_is_refused() -> None:
    data = {**BASE, "require": {k: v for k, v in BASE["require"].items() if k != "swing"}}
    data["require"]["thd"] = "1 %"
    with pytest.raises(StageError) as err:
        spec_from_mapping(data, "x.toml")
    assert "thd_level" in str(err.value)
