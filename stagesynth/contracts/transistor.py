"""The [transistor] and [companion] sections: a bipolar transistor or a junction FET.

`device_from_mapping` reads [transistor]-style keys (a preset or a device file, then
overrides) into a bipolar `Device` or, with `kind = "jfet"` or a junction-FET preset,
a `Jfet` (contract section 1, "Second release: a junction FET"). Every error names
the file, the key path and what would be accepted.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

from stagesynth.contracts.device import PRESETS, Device
from stagesynth.contracts.jfet import JFET_PRESETS, Jfet, is_jfet
from stagesynth.contracts.tomlread import (
    _bound,
    _check_keys,
    _did_you_mean,
    _hfe_spread,
    _q,
    _read_toml,
    _toml_str,
    _where,
)
from stagesynth.quantities.errors import StageError
from stagesynth.quantities.limits import device_problem, jfet_problem
from stagesynth.quantities.units import (
    accepted_for,
    format_quantity,
    parse_number,
    parse_per_kelvin,
    parse_quantity,
)

REQUIRED_DEVICE_KEYS: tuple[str, ...] = ("polarity", "hfe", "vbe", "ft", "c_cb")
# [transistor] keys: quantity keys map to (unit or parser, lower bound: ">0", ">=0" or "").
_DEVICE_QUANTITIES: dict[str, tuple[str, str]] = {
    "vbe": ("V", ">0"),
    "vbe_current": ("A", ">0"),
    "early_voltage": ("V", ">0"),
    "ft": ("Hz", ">0"),
    "c_cb": ("F", ">0"),
    "r_bb": ("Ω", ">=0"),
    "vce_sat": ("V", ">=0"),
    "ic_max": ("A", ">0"),
    "vce_max": ("V", ">0"),
    "p_max": ("W", ">0"),
    "theta_ja": ("K/W", ">0"),
    "vbe_tempco": ("V/K", ""),
    "hfe_tempco": ("%/K", ""),
    # second release, contract section 2: charge-control capacitance model
    "ft_current": ("A", ">0"),
    "c_je": ("F", ">=0"),
    "flicker_corner": ("Hz", ">=0"),  # noise (second release)
}
# bare-number [transistor] keys (second release): the Ebers-Moll reverse current gain
_DEVICE_NUMBERS: dict[str, str] = {"hfe_reverse": "a reverse current gain such as 1"}
BJT_KEYS: tuple[str, ...] = (
    "preset", "file", "name", "kind", "polarity", "hfe", "hfe_typ", *_DEVICE_QUANTITIES,
    *_DEVICE_NUMBERS,
)
_MAGNITUDE_KEYS = ("vbe", "vce_sat", "vce_max")
# junction FET (contract section 1, second release): quantity keys as above
REQUIRED_JFET_KEYS: tuple[str, ...] = ("polarity", "idss", "vp", "c_gs", "c_gd")
_JFET_QUANTITIES: dict[str, tuple[str, str]] = {
    "early_voltage": ("V", ">0"),
    "c_gs": ("F", ">=0"),
    "c_gd": ("F", ">=0"),
    "i_gss": ("A", ">=0"),
    "vp_tempco": ("V/K", ""),
    "idss_tempco": ("%/K", ""),
    "flicker_corner": ("Hz", ">=0"),
    "vds_max": ("V", ">0"),
    "p_max": ("W", ">0"),
    "theta_ja": ("K/W", ">0"),
}
JFET_KEYS: tuple[str, ...] = ("preset", "file", "name", "kind", "polarity", "idss", "vp",
                              *_JFET_QUANTITIES)
DEVICE_KEYS: tuple[str, ...] = (*BJT_KEYS, *(k for k in JFET_KEYS if k not in BJT_KEYS))
KINDS = ("bjt", "jfet")

def _name(data: Mapping[str, Any], file: str, key_prefix: str) -> dict[str, str]:
    """The optional free-text `name` of a [transistor]-style table, checked."""
    if "name" not in data:
        return {}
    if not isinstance(data["name"], str):
        raise StageError(f"{data['name']!r} is not text", file=file,
                         key=_where(key_prefix, "name"), accepted="a free-text name")
    return {"name": data["name"]}


def device_from_mapping(
    data: Mapping[str, Any],
    file: str,
    key_prefix: str = "transistor",
    *,
    base_dir: str | Path | None = None,
    allow_file: bool = True,
) -> Device | Jfet:
    """A bipolar `Device` or a `Jfet` from [transistor]-style keys (preset or file, then
    overrides): a junction FET with `kind = "jfet"`, a junction-FET preset or device file."""
    if not isinstance(data, Mapping):
        raise StageError(f"must be a table, not {data!r}", file=file, key=key_prefix or None,
                         accepted="keys such as kind, polarity, hfe, vbe, ft, c_cb")
    kind = _kind(data, file, key_prefix)
    base = None
    if kind is None or kind == "jfet":
        if "preset" in data and "file" not in data and isinstance(data["preset"], str):
            if data["preset"].strip().lower() in JFET_PRESETS:
                kind = "jfet"
        elif "file" in data and allow_file and "preset" not in data:
            base = _base_file(data, file, key_prefix, base_dir)
            if is_jfet(base):
                kind = "jfet"
            elif kind == "jfet":
                raise StageError("names a bipolar device file, but kind is \"jfet\"",
                                 file=file, key=_where(key_prefix, "file"),
                                 accepted="a junction-FET device file, or kind = \"bjt\"")
    if kind == "jfet":
        return jfet_from_mapping(data, file, key_prefix, base=base, allow_file=allow_file)
    if isinstance(data.get("preset"), str) and data["preset"].strip().lower() in JFET_PRESETS:
        raise StageError(f"{data['preset']!r} is a junction-FET preset, but kind is \"bjt\"",
                         file=file, key=_where(key_prefix, "preset"),
                         accepted=f"kind = \"jfet\", or a bipolar preset: {', '.join(PRESETS)}")
    return _bjt_from_mapping(data, file, key_prefix, base_dir=base_dir, allow_file=allow_file,
                             base=base)


def _kind(data: Mapping[str, Any], file: str, prefix: str) -> str | None:
    """The `kind` key: "bjt" or "jfet" (None when absent)."""
    if "kind" not in data:
        return None
    kind = data["kind"]
    norm = kind.strip().lower() if isinstance(kind, str) else None
    if norm not in KINDS:
        raise StageError(f"{kind!r} is not a transistor kind", file=file,
                         key=_where(prefix, "kind"),
                         accepted='"bjt" (bipolar, the default) or "jfet" (junction FET)')
    return norm


def _base_file(data: Mapping[str, Any], file: str, prefix: str,
               base_dir: str | Path | None) -> Device | Jfet:
    """The device file named by `file = "..."`, read relative to `base_dir`."""
    rel = data["file"]
    where = _where(prefix, "file")
    if not isinstance(rel, str) or not rel.strip():
        raise StageError(f"{rel!r} is not a file name", file=file, key=where,
                         accepted="a path to a device TOML file, relative to this file")
    folder = Path(base_dir) if base_dir is not None else Path(file).parent
    return load_device_file(folder / rel, _referrer=(file, where))


def _bjt_from_mapping(
    data: Mapping[str, Any],
    file: str,
    key_prefix: str = "transistor",
    *,
    base_dir: str | Path | None = None,
    allow_file: bool = True,
    base: Device | Jfet | None = None,
) -> Device:
    """Build a Device from [transistor]-style keys: a preset or a device file, then overrides.

    Quantities take units as in the spec ("0.65 V", "250 MHz"); `vbe` and `vce_sat` are
    magnitudes for either polarity. A `file` is read relative to `base_dir` (default: the
    directory of `file`). Giving `hfe` without `hfe_typ` over a preset drops the preset's
    hfe_typ, so the nominal becomes sqrt(min * max) of the new spread.
    """
    if not isinstance(data, Mapping):
        raise StageError(f"must be a table, not {data!r}", file=file, key=key_prefix or None,
                         accepted="keys such as polarity, hfe, vbe, ft, c_cb")
    if not allow_file and "file" in data:
        raise StageError("a device file cannot refer to another file", file=file,
                         key=_where(key_prefix, "file"), accepted="preset = \"...\" or the fields")
    allowed = BJT_KEYS if allow_file else tuple(k for k in BJT_KEYS if k != "file")
    for key in data:
        if key in JFET_KEYS and key not in BJT_KEYS:
            raise StageError(f"'{key}' is a junction-FET key, but this is a bipolar transistor",
                             file=file, key=_where(key_prefix, key),
                             accepted='kind = "jfet" for a junction FET, or the bipolar keys: '
                             + ", ".join(allowed))
    _check_keys(data, allowed, key_prefix, file)
    presets = ", ".join(PRESETS)

    if base is None:
        if "preset" in data and "file" in data:
            raise StageError("give either preset or file, not both", file=file,
                             key=_where(key_prefix, "file"),
                             accepted="preset = \"generic-npn\" or file = \"my-device.toml\"")
        if "preset" in data:
            name = data["preset"]
            if not isinstance(name, str) or name.strip().lower() not in PRESETS:
                names = [*PRESETS, *JFET_PRESETS]
                hint = _did_you_mean(str(name), names) if isinstance(name, str) else ""
                raise StageError(f"{name!r} is not a built-in preset{hint}", file=file,
                                 key=_where(key_prefix, "preset"), accepted=", ".join(names))
            base = PRESETS[name.strip().lower()]
        elif "file" in data:
            base = _base_file(data, file, key_prefix, base_dir)

    values: dict[str, Any] = {}
    values.update(_name(data, file, key_prefix))
    if "polarity" in data:
        polarity = data["polarity"]
        norm = polarity.strip().lower() if isinstance(polarity, str) else None
        if norm not in ("npn", "pnp"):
            raise StageError(f"{polarity!r} is not a polarity", file=file,
                             key=_where(key_prefix, "polarity"), accepted='"npn" or "pnp"')
        values["polarity"] = norm
    if "hfe" in data:
        values["hfe_min"], values["hfe_max"] = _hfe_spread(
            data["hfe"], file, _where(key_prefix, "hfe"))
        if "hfe_typ" not in data:
            values["hfe_typ"] = None
    if "hfe_typ" in data:
        where = _where(key_prefix, "hfe_typ")
        typ = parse_number(data["hfe_typ"], key=where, file=file)
        values["hfe_typ"] = _bound(typ, ">0", file, where, "", "a typical hFE such as 175")
    for key, (unit, rule) in _DEVICE_QUANTITIES.items():
        if key not in data:
            continue
        where = _where(key_prefix, key)
        if unit == "%/K":
            values[key] = parse_per_kelvin(data[key], key=where, file=file)
            continue
        value = parse_quantity(data[key], unit, key=where, file=file)
        if key in _MAGNITUDE_KEYS and value < 0:
            raise StageError(f"is negative ({format_quantity(value, unit)}): give the magnitude, "
                             "as datasheets do for either polarity", file=file, key=where,
                             accepted=f"a positive value such as {format_quantity(-value, unit)}")
        values[key] = _bound(value, rule, file, where, unit, accepted_for(unit))
    for key, accepted in _DEVICE_NUMBERS.items():
        if key in data:
            where = _where(key_prefix, key)
            values[key] = _bound(parse_number(data[key], key=where, file=file), ">0", file,
                                 where, "", accepted)

    if base is None:
        for key in REQUIRED_DEVICE_KEYS:
            if key not in data:
                raise StageError(
                    "is missing (required unless a preset or device file gives it)", file=file,
                    key=_where(key_prefix, key),
                    accepted=f"the key, or preset = one of {presets}, or file = \"...toml\"")
        device = Device(**values)
    else:
        overrides = {k: v for k, v in values.items() if k != "name"}
        device = base.with_overrides(**overrides)
        if "name" in values:
            device = device.with_overrides(name=values["name"])
        elif device != base and base.name:
            device = device.with_overrides(name=f"{base.name} (modified)")
    if device.hfe_typ is not None and not device.hfe_min <= device.hfe_typ <= device.hfe_max:
        raise StageError(
            f"hfe_typ {device.hfe_typ:g} lies outside hfe [{device.hfe_min:g}, "
            f"{device.hfe_max:g}]", file=file, key=_where(key_prefix, "hfe_typ"),
            accepted="a value between the hfe min and max")
    problem = device_problem(device)
    if problem is not None:  # the same limits the design-file reader applies
        field, message, accepted = problem
        raise StageError(message, file=file, key=_where(key_prefix, field), accepted=accepted)
    return device


def load_device_file(path: str | Path, *,
                     _referrer: tuple[str, str] | None = None) -> Device | Jfet:
    """Read a user's device TOML: the [transistor] keys, at top level or under [transistor].

    The device is named after the file (its stem) unless it gives `name`.
    """
    path = Path(path)
    data = _read_toml(path, file_key=_referrer)
    file = str(path)
    if "transistor" in data:
        _check_keys(data, ("transistor",), "", file)
        table, prefix = data["transistor"], "transistor"
    else:
        table, prefix = data, ""
    device = device_from_mapping(table, file, prefix, allow_file=False)
    if not (isinstance(table, Mapping) and "name" in table):
        device = device.with_overrides(name=path.stem)
    return device


def _jfet_pair(value: Any, file: str, key: str, unit: str, example: str) -> tuple[float, float]:
    """A [a, b] pair of quantities in `unit`, as written (signs kept)."""
    accepted = f"a [min, max] production spread such as {example}"
    if not isinstance(value, list | tuple):
        raise StageError(f"{value!r} is not a pair", file=file, key=key, accepted=accepted)
    if len(value) != 2:
        raise StageError(f"{value!r} has {len(value)} entries, not 2", file=file, key=key,
                         accepted=accepted)
    a, b = (parse_quantity(v, unit, key=key, file=file) for v in value)
    return a, b


def jfet_from_mapping(
    data: Mapping[str, Any],
    file: str,
    key_prefix: str = "transistor",
    *,
    base: Device | Jfet | None = None,
    allow_file: bool = True,
) -> Jfet:
    """A `Jfet` from [transistor] keys with kind = "jfet": a preset or file, then overrides.

    `idss` is the [min, max] spread at 25 degC; `vp` the pinch-off pair, signed as
    written (negative for an N channel, positive for a P channel), paired low with low:
    idss min goes with the vp nearest zero.
    """
    allowed = JFET_KEYS if allow_file else tuple(k for k in JFET_KEYS if k != "file")
    for key in data:
        if key in BJT_KEYS and key not in JFET_KEYS:
            raise StageError(f"'{key}' is a bipolar-transistor key, but this is a junction FET",
                             file=file, key=_where(key_prefix, key),
                             accepted="the junction-FET keys: " + ", ".join(allowed))
    _check_keys(data, allowed, key_prefix, file)
    if not allow_file and "file" in data:
        raise StageError("a device file cannot refer to another file", file=file,
                         key=_where(key_prefix, "file"), accepted="preset = \"...\" or the fields")
    if base is None and "preset" in data:
        name = data["preset"]
        if not isinstance(name, str) or name.strip().lower() not in JFET_PRESETS:
            hint = _did_you_mean(str(name), list(JFET_PRESETS)) if isinstance(name, str) else ""
            raise StageError(f"{name!r} is not a built-in junction-FET preset{hint}", file=file,
                             key=_where(key_prefix, "preset"), accepted=", ".join(JFET_PRESETS))
        base = JFET_PRESETS[name.strip().lower()]
    if base is not None and not is_jfet(base):
        raise StageError("names a bipolar device, but kind is \"jfet\"", file=file,
                         key=_where(key_prefix, "file" if "file" in data else "preset"),
                         accepted=", ".join(JFET_PRESETS))
    values: dict[str, Any] = {}
    values.update(_name(data, file, key_prefix))
    if "polarity" in data:
        pol = data["polarity"]
        norm = pol.strip().lower() if isinstance(pol, str) else None
        norm = {"n-channel": "n", "p-channel": "p"}.get(norm, norm)
        if norm not in ("n", "p"):
            raise StageError(f"{pol!r} is not a channel polarity", file=file,
                             key=_where(key_prefix, "polarity"),
                             accepted='"n" (N channel) or "p" (P channel)')
        values["polarity"] = norm
    if "idss" in data:
        where = _where(key_prefix, "idss")
        lo, hi = _jfet_pair(data["idss"], file, where, "A", '["2 mA", "12 mA"]')
        if not 0 < lo <= hi:
            raise StageError(f"[{format_quantity(lo, 'A')}, {format_quantity(hi, 'A')}] must "
                             "have 0 < min <= max", file=file, key=where,
                             accepted='[min, max] such as ["2 mA", "12 mA"]')
        values["idss_min"], values["idss_max"] = lo, hi
    if "vp" in data:
        values["vp"] = _jfet_pair(data["vp"], file, _where(key_prefix, "vp"), "V",
                                  '["-0.6 V", "-2.5 V"]')
    for key, (unit, rule) in _JFET_QUANTITIES.items():
        if key not in data:
            continue
        where = _where(key_prefix, key)
        if unit == "%/K":
            values[key] = parse_per_kelvin(data[key], key=where, file=file)
            continue
        value = parse_quantity(data[key], unit, key=where, file=file)
        values[key] = _bound(value, rule, file, where, unit, accepted_for(unit))
    if base is None:
        for key in REQUIRED_JFET_KEYS:
            if key not in data:
                raise StageError(
                    "is missing (required for a junction FET unless a preset gives it)",
                    file=file, key=_where(key_prefix, key),
                    accepted=f"the key, or preset = one of {', '.join(JFET_PRESETS)}")
        device = Jfet(**values)
    else:
        device = base.with_overrides(**{k: v for k, v in values.items() if k != "name"})
        if "name" in values:
            device = device.with_overrides(name=values["name"])
        elif device != base and base.name:
            device = device.with_overrides(name=f"{base.name} (modified)")
    _check_jfet(device, file, key_prefix)
    return device


def _check_jfet(device: Jfet, file: str, prefix: str) -> None:
    """vp signed for the polarity (negative for N, positive for P), both ends nonzero;
    every field within the model's limits."""
    a, b = device.vp
    want = -1.0 if device.polarity == "n" else 1.0
    shown = f"[{format_quantity(a, 'V')}, {format_quantity(b, 'V')}]"
    if a * want <= 0 or b * want <= 0:
        channel = "an N-channel" if want < 0 else "a P-channel"
        sign = "negative" if want < 0 else "positive"
        example = '["-0.6 V", "-2.5 V"]' if want < 0 else '["0.6 V", "2.5 V"]'
        raise StageError(f"{shown}: the pinch-off voltage of {channel} JFET is {sign}",
                         file=file, key=_where(prefix, "vp"),
                         accepted=f"two {sign} voltages such as {example} "
                         f"(polarity = \"{device.polarity}\")")
    problem = jfet_problem(device)
    if problem is not None:
        field, message, accepted = problem
        raise StageError(message, file=file, key=_where(prefix, field), accepted=accepted)


def transistor_toml_lines(d: Device | Jfet) -> list[str]:
    """The [transistor] (or [companion]) keys of `d`, field by field (no preset), so the
    file stands alone and reads back to an equal record."""
    lines: list[str] = []
    if d.name:
        lines.append(f"name = {_toml_str(d.name)}")
    if is_jfet(d):
        lines += ['kind = "jfet"', f"polarity = {_toml_str(d.polarity)}",
                  f"idss = [{_q(d.idss_min, 'A')}, {_q(d.idss_max, 'A')}]",
                  f"vp = [{_q(d.vp[0], 'V')}, {_q(d.vp[1], 'V')}]"]
        for key, (unit, _rule) in _JFET_QUANTITIES.items():
            value = getattr(d, key)
            if value is not None:
                lines.append(f"{key} = {_q(value, unit)}")
        return lines
    lines += [f"polarity = {_toml_str(d.polarity)}", f"hfe = [{d.hfe_min!r}, {d.hfe_max!r}]"]
    if d.hfe_typ is not None:
        lines.append(f"hfe_typ = {d.hfe_typ!r}")
    for key, (unit, _rule) in _DEVICE_QUANTITIES.items():
        value = getattr(d, key)
        if value is not None:
            lines.append(f"{key} = {_q(value, unit)}")
    for key in _DEVICE_NUMBERS:
        lines.append(f"{key} = {getattr(d, key)!r}")
    return lines


def default_companion(transistor: Device | Jfet, companion: Device | Jfet | None
                      ) -> Device | None:
    """The bipolar transistor of a JFET-bipolar family: the spec's [companion] when given,
    else the preset "generic-npn" for a JFET spec; None for a bipolar spec without one."""
    if companion is not None:
        return companion if not is_jfet(companion) else None
    return PRESETS["generic-npn"] if is_jfet(transistor) else None
