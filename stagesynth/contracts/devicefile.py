"""The design file's "devices" entries (contract section 3): bipolar and junction FET.

A bipolar entry holds the [transistor] fields in SI units with "hfe": [min, max]; a
junction FET holds "kind": "jfet", "idss": [min, max], "vp": [a, b] (signed as the spec
writes it) and its other fields. Every error names the file and the key path.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from stagesynth.contracts.device import Device
from stagesynth.contracts.jfet import Jfet
from stagesynth.quantities.errors import StageError
from stagesynth.quantities.limits import device_problem, jfet_problem

# Device fields as the design file spells them (SI floats); "hfe" is [min, max].
_DEVICE_REQUIRED = ("polarity", "hfe", "vbe", "ft", "c_cb")
_DEVICE_FLOAT_KEYS = (
    "hfe_typ",
    "vbe",
    "vbe_current",
    "early_voltage",
    "ft",
    "c_cb",
    "r_bb",
    "vce_sat",
    "ic_max",
    "vce_max",
    "p_max",
    "theta_ja",
    "vbe_tempco",
    "hfe_tempco",
    # second release (contract section 2)
    "ft_current",
    "c_je",
    "hfe_reverse",
)
_DEVICE_FLOAT_KEYS += ("flicker_corner",)  # noise (second release)
_SIGNED_DEVICE_KEYS = ("vbe_tempco", "hfe_tempco")
_ZERO_OK_DEVICE_KEYS = ("r_bb", "vce_sat", "c_je", "flicker_corner")



class _Reader:
    """Validating reader: every error names the file and the key path."""

    def __init__(self, file: str) -> None:
        self.file = file

    def fail(self, key: str, message: str, accepted: str | None = None) -> StageError:
        return StageError(message, file=self.file, key=key, accepted=accepted)

    def number(
        self,
        data: Mapping[str, Any],
        key: str,
        path: str,
        *,
        positive: bool = True,
        zero_ok: bool = False,
        default: float | None = None,
        required: bool = True,
    ) -> float | None:
        if key not in data or data[key] is None:
            if default is not None or not required:
                return default
            raise self.fail(f"{path}.{key}" if path else key, "is missing", "a number in SI units")
        value = data[key]
        where = f"{path}.{key}" if path else key
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.fail(where, f"{value!r} is not a number", "a number in SI units")
        value = float(value)
        if not math.isfinite(value):
            raise self.fail(where, f"{value!r} is not finite", "a finite number")
        if positive and (value < 0 or (value == 0 and not zero_ok)):
            need = "a number >= 0" if zero_ok else "a number > 0"
            raise self.fail(where, f"{value!r} must be {'non-negative' if zero_ok else 'positive'}",
                            need)
        return value

    def text(self, data: Mapping[str, Any], key: str, path: str, default: str | None = None) -> str:
        where = f"{path}.{key}" if path else key
        if key not in data:
            if default is not None:
                return default
            raise self.fail(where, "is missing", "a string")
        value = data[key]
        if not isinstance(value, str) or not value:
            raise self.fail(where, f"{value!r} is not a non-empty string", "a string")
        return value

    def mapping(self, data: Mapping[str, Any], key: str, required: bool = True) -> Mapping:
        if key not in data:
            if not required:
                return {}
            raise self.fail(key, "is missing", "an object")
        value = data[key]
        if not isinstance(value, Mapping):
            raise self.fail(key, f"is a {type(value).__name__}, not an object", "an object")
        return value


def device_from_design_dict(data: Mapping[str, Any], name: str, file: str) -> Device:
    """Read one entry of the design file's "devices" object."""
    r = _Reader(file)
    path = f"devices.{name}"
    if not isinstance(data, Mapping):
        raise r.fail(path, "is not an object", "an object of device fields")
    for key in _DEVICE_REQUIRED:
        if data.get(key) is None:  # absent or null
            raise r.fail(f"{path}.{key}", "is missing", "see the design-file format")
    polarity = data["polarity"]
    if polarity not in ("npn", "pnp"):
        raise r.fail(f"{path}.polarity", f"{polarity!r} is not a polarity", '"npn" or "pnp"')
    spread = data["hfe"]
    if (
        not isinstance(spread, list | tuple)
        or len(spread) != 2
        or not all(isinstance(v, int | float) and not isinstance(v, bool) for v in spread)
    ):
        raise r.fail(f"{path}.hfe", f"{spread!r} is not [min, max]", "[min, max], e.g. [100, 300]")
    hfe_min, hfe_max = float(spread[0]), float(spread[1])
    if not 0 < hfe_min <= hfe_max:
        raise r.fail(f"{path}.hfe", f"{spread!r} must have 0 < min <= max", "[min, max]")
    values: dict[str, Any] = {"polarity": polarity, "hfe_min": hfe_min, "hfe_max": hfe_max}
    for key in _DEVICE_FLOAT_KEYS:
        if key in data and data[key] is not None:
            values[key] = r.number(
                data,
                key,
                path,
                positive=key not in _SIGNED_DEVICE_KEYS,
                zero_ok=key in _ZERO_OK_DEVICE_KEYS,
            )
    if "hfe_typ" in values and not hfe_min <= values["hfe_typ"] <= hfe_max:
        raise r.fail(f"{path}.hfe_typ", f"{values['hfe_typ']} lies outside hfe {spread}",
                     "a value between hfe min and max")
    if isinstance(data.get("preset"), str):
        values["name"] = data["preset"]
    device = Device(**values)
    problem = device_problem(device)
    if problem is not None:  # the same limits the spec loader applies
        field, message, accepted = problem
        raise r.fail(f"{path}.{field}", message, accepted)
    return device


# Junction-FET fields as the design file spells them (SI floats).
_JFET_REQUIRED = ("polarity", "idss", "vp", "c_gs", "c_gd")
_JFET_FLOAT_KEYS = ("c_gs", "c_gd", "early_voltage", "i_gss", "vp_tempco", "idss_tempco",
                    "flicker_corner", "vds_max", "p_max", "theta_ja")
_JFET_SIGNED = ("vp_tempco", "idss_tempco")
_JFET_ZERO_OK = ("c_gs", "c_gd", "i_gss", "flicker_corner")


def _number_pair(r: _Reader, data: Mapping[str, Any], key: str, path: str,
                 example: str) -> tuple[float, float]:
    value = data[key]
    if (not isinstance(value, list | tuple) or len(value) != 2
            or not all(isinstance(v, int | float) and not isinstance(v, bool)
                       and math.isfinite(v) for v in value)):
        raise r.fail(f"{path}.{key}", f"{value!r} is not a pair of numbers", example)
    return float(value[0]), float(value[1])


def jfet_from_design_dict(data: Mapping[str, Any], name: str, file: str) -> Jfet:
    """Read one junction-FET entry ("kind": "jfet") of the design file's "devices"."""
    r = _Reader(file)
    path = f"devices.{name}"
    for key in _JFET_REQUIRED:
        if data.get(key) is None:
            raise r.fail(f"{path}.{key}", "is missing",
                         'a junction FET needs "polarity", "idss", "vp", "c_gs", "c_gd"')
    polarity = data["polarity"]
    if polarity not in ("n", "p"):
        raise r.fail(f"{path}.polarity", f"{polarity!r} is not a channel polarity",
                     '"n" or "p"')
    lo, hi = _number_pair(r, data, "idss", path, "[min, max] in A, e.g. [0.002, 0.012]")
    if not 0 < lo <= hi:
        raise r.fail(f"{path}.idss", f"{[lo, hi]!r} must have 0 < min <= max",
                     "[min, max] in A, e.g. [0.002, 0.012]")
    vp = _number_pair(r, data, "vp", path, "[a, b] in V, e.g. [-0.6, -2.5]")
    want = -1.0 if polarity == "n" else 1.0
    if vp[0] * want <= 0 or vp[1] * want <= 0:
        sign = "negative" if want < 0 else "positive"
        raise r.fail(f"{path}.vp", f"{list(vp)!r}: the pinch-off voltage of a "
                     f"{polarity.upper()}-channel JFET is {sign}",
                     f"two {sign} numbers in V, e.g. {[-0.6 * -want, -2.5 * -want]!r}")
    values: dict[str, Any] = {"polarity": polarity, "idss_min": lo, "idss_max": hi, "vp": vp}
    for key in _JFET_FLOAT_KEYS:
        if data.get(key) is not None:
            values[key] = r.number(data, key, path, positive=key not in _JFET_SIGNED,
                                   zero_ok=key in _JFET_ZERO_OK)
    if isinstance(data.get("preset"), str):
        values["name"] = data["preset"]
    device = Jfet(**values)
    problem = jfet_problem(device)
    if problem is not None:
        field, message, accepted = problem
        raise r.fail(f"{path}.{field}", message, accepted)
    return device


def any_device_from_design_dict(data: Any, name: str, file: str) -> Device | Jfet:
    """A "devices" entry: a junction FET with "kind": "jfet", else a bipolar transistor."""
    if isinstance(data, Mapping) and "kind" in data:
        kind = data["kind"]
        if kind == "jfet":
            return jfet_from_design_dict(data, name, file)
        if kind != "bjt":
            raise StageError(f"{kind!r} is not a device kind", file=file,
                             key=f"devices.{name}.kind", accepted='"bjt" (default) or "jfet"')
        data = {k: v for k, v in data.items() if k != "kind"}
    return device_from_design_dict(data, name, file)
