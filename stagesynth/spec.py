"""The stage spec: what the user asks for (section 1 of the contract), as frozen values.

All quantities are plain SI floats; temperatures in degrees Celsius; gains as
V/V magnitudes with their dB forms alongside. `load_spec` reads and validates a
TOML file; every error names the file, the key path and what would be accepted.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .device import Device


@dataclass(frozen=True)
class Supply:
    voltage: float  # V, single positive supply to ground
    tolerance: float = 0.0  # fraction, e.g. 0.05 for 5 %


@dataclass(frozen=True)
class Source:
    resistance: float = 0.0  # ohm, Thevenin resistance of the signal source


@dataclass(frozen=True)
class Load:
    resistance: float  # ohm
    capacitance: float = 0.0  # F


@dataclass(frozen=True)
class Requirements:
    gain: float  # V/V, midband |v_load / v_source_emf|
    f_low: float  # Hz, lower -3 dB corner at or below this
    f_high: float  # Hz, upper -3 dB corner at or above this
    gain_tolerance_db: float = 1.0  # dB, nominal gain within +- this
    z_in: float = 0.0  # ohm, at least
    swing_vpp: float = 0.0  # V peak-to-peak at the load, at every corner
    supply_current: float | None = None  # A, at most, at every corner
    ambient: tuple[float, float] = (25.0, 25.0)  # degC, (min, max)
    inverting: str = "any"  # "any", "yes" or "no"
    z_out: float | None = None  # ohm, at most
    yield_target: float | None = None  # fraction, e.g. 0.99

    @property
    def gain_db(self) -> float:
        return 20.0 * math.log10(self.gain)

    @property
    def midband(self) -> float:
        """Geometric mean of the required corners: where midband figures are taken."""
        return math.sqrt(self.f_low * self.f_high)


@dataclass(frozen=True)
class Parts:
    resistors: str = "E24"
    resistor_tolerance: float = 0.01
    capacitors: str = "E6"
    capacitor_tolerance: float = 0.10


@dataclass(frozen=True)
class Spec:
    supply: Supply
    load: Load
    require: Requirements
    transistor: Device
    source: Source = Source()
    parts: Parts = Parts()
    title: str = ""
    path: str = ""  # the file it was read from, for messages
