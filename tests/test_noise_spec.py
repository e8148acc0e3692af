"""Noise keys of the spec (contract §1, second release): spellings, units, refusals."""

from __future__ import annotations

import subprocess
import sys
import tomllib

import pytest

from stagesynth.contracts.spec import spec_from_mapping, spec_template, spec_to_toml
from stagesynth.quantities.errors import StageError

BASE = {
    "supply": {"voltage": "12 V"},
    "source": {"resistance": "600 Ω"},
    "load": {"resistance": "10 kΩ"},
    "require": {"gain": "20 dB", "f_low": "20 Hz", "f_high": "20 kHz"},
    "transistor": {"preset": "lownoise-npn"},
}


def _spec(**require):
    data = {k: dict(v) for k, v in BASE.items()}
    data["require"].update(require)
    return spec_from_mapping(data, "t.toml")


@pytest.mark.parametrize("text", ["3 nV/√Hz", "3 nV/rtHz", "3 nV/sqrt(Hz)", "3nV/√Hz", 3e-9])
def test_density_spellings(text):
    """The contract's three spellings of V/√Hz, with an SI prefix (BIPM SI Brochure)."""
    assert _spec(noise=text).require.noise == pytest.approx(3e-9, rel=1e-12)


def test_noise_keys_read_and_written_back():
    s = _spec(noise="2.5 nV/rtHz", noise_figure="1.5 dB", noise_rms="800 nV",
              noise_at="1 kHz")
    r = s.require
    assert (r.noise, r.noise_figure_db, r.noise_rms, r.noise_at) == (2.5e-9, 1.5, 8e-7, 1e3)
    assert r.noise_frequency == 1e3
    again = spec_from_mapping(tomllib.loads(spec_to_toml(s)), "again.toml")
    assert again.require == r
    assert _spec().require.noise_frequency == pytest.approx((20 * 20e3) ** 0.5)


@pytest.mark.parametrize("key,value,words", [
    ("noise", "3 nV", "reads as a voltage, not a noise density"),
    ("noise", "-3 nV/√Hz", "greater than zero"),
    ("noise_figure", "0 dB", "greater than 0 dB"),
    ("noise_rms", "2 nV/√Hz", "not a voltage"),
    ("noise_at", "1 kV", "not a frequency"),
])
def test_bad_noise_values_name_the_key(key, value, words):
    with pytest.raises(StageError) as err:
        _spec(**{key: value})
    assert f"require.{key}" in str(err.value)
    assert words in str(err.value)


def test_flicker_corner_in_transistor_and_presets():
    data = {k: dict(v) for k, v in BASE.items()}
    data["transistor"]["flicker_corner"] = "150 Hz"
    assert spec_from_mapping(data, "t.toml").transistor.flicker_corner == 150.0
    assert _spec().transistor.flicker_corner > 0  # the preset gives one


def test_noise_figure_without_source_resistance_is_refused_exit_2(tmp_path):
    """Contract §2: a spec asking noise_figure with a source resistance of 0 is invalid."""
    text = spec_template().replace('resistance = "400 Ω"', 'resistance = "0 Ω"')
    text = text.replace('# noise_figure = "3 dB"', 'noise_figure = "3 dB"')
    assert 'noise_figure = "3 dB"' in text and 'resistance = "0 Ω"' in text
    path = tmp_path / "zero-rs.toml"
    path.write_text(text, encoding="utf-8")
    proc = subprocess.run([sys.executable, "-m", "stagesynth", "design", str(path), "--out",
                           str(tmp_path / "out")], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2
    assert "require.noise_figure" in proc.stderr + proc.stdout
    assert "Traceback" not in proc.stderr
