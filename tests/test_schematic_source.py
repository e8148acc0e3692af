"""The schematic's source box draws what contract §1 says the source is: an EMF with
`resistance` and, when given, `capacitance` in series (a piezo or capacitive sensor)."""

from __future__ import annotations

import json
from pathlib import Path

from stagesynth.contracts.netlist import design_from_dict
from stagesynth.report.schematic import draw_schematic

EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "piezo-accelerometer-preamp"


def _svg(data: dict) -> str:
    out = draw_schematic(design_from_dict(data, "<test>"))
    return out if isinstance(out, str) else out.decode()


def test_source_capacitance_is_drawn_in_series_with_the_emf() -> None:
    data = json.loads((EXAMPLE / "design.json").read_text())
    assert data["source"]["capacitance"] == 2.2e-9  # the scenario's piezo element
    svg = _svg(data)
    assert "Cs" in svg and "2.2 nF" in svg and "Rs" in svg
    without = dict(data, source={"resistance": data["source"]["resistance"]})
    assert "Cs" not in _svg(without)
