"""Reading spec-style TOML: files, keys, quantities, pairs (shared by the spec and device readers).

Every failure is one StageError naming the file, the key path and what would be accepted.
"""

from __future__ import annotations

import difflib
import json
import tomllib
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from stagesynth.quantities.errors import StageError
from stagesynth.quantities.limits import MAX_DEPTH, nesting_depth
from stagesynth.quantities.units import (
    accepted_for,
    format_quantity,
    parse_fraction,
    parse_number,
    parse_quantity,
)


def _where(prefix: str, key: str) -> str:
    return f"{prefix}.{key}" if prefix else key


def _did_you_mean(word: str, choices: Sequence[str]) -> str:
    """"; did you mean 'x'?" for the closest choice (case-insensitive), else ""."""
    lowered = {c.lower(): c for c in choices}
    match = difflib.get_close_matches(word.lower(), list(lowered), n=1, cutoff=0.6)
    return f"; did you mean '{lowered[match[0]]}'?" if match else ""


def _check_keys(table: Mapping[str, Any], allowed: Sequence[str], prefix: str, file: str,
                homes: Mapping[str, Sequence[str]] | None = None) -> None:
    """Refuse unknown keys, with a hint: a near spelling, or the section the key belongs in."""
    for key in table:
        if key in allowed:
            continue
        hint = _did_you_mean(key, allowed)
        if not hint:
            where = [s for s, keys in (homes or {}).items() if key in keys and s != prefix]
            if where:
                hint = f"; '{key}' belongs in [{where[0]}]"
        raise StageError(f"unknown key{hint}", file=file, key=_where(prefix, key),
                         accepted=", ".join(allowed))


def _missing(file: str, key: str, example: str) -> StageError:
    return StageError("is missing (required)", file=file, key=key, accepted=f"e.g. {example}")


def _bound(value: float, rule: str, file: str, key: str, unit: str, accepted: str) -> float:
    """Apply a sign rule (">0", ">=0" or "") with a message that prints the value read."""
    shown = format_quantity(value, unit)
    if rule == ">0" and value <= 0:
        raise StageError(f"must be greater than zero, got {shown}", file=file, key=key,
                         accepted=accepted)
    if rule == ">=0" and value < 0:
        raise StageError(f"must not be negative, got {shown}", file=file, key=key,
                         accepted=accepted)
    return value


def _quantity(table: Mapping[str, Any], key: str, prefix: str, file: str, unit: str,
              rule: str, default: Any = None, *, required_example: str = "") -> Any:
    """Read table[key] in `unit`; default when absent; StageError when required and absent."""
    where = _where(prefix, key)
    if key not in table:
        if required_example:
            raise _missing(file, where, required_example)
        return default
    value = parse_quantity(table[key], unit, key=where, file=file)
    return _bound(value, rule, file, where, unit, accepted_for(unit))


def _tolerance(table: Mapping[str, Any], key: str, prefix: str, file: str, default: float) -> float:
    """A tolerance: a fraction in [0, 1)."""
    where = _where(prefix, key)
    if key not in table:
        return default
    value = parse_fraction(table[key], key=where, file=file)
    if not value < 1:
        raise StageError(f"must be below 100 %, got {format_quantity(value, '%')}", file=file,
                         key=where, accepted="a tolerance such as '5 %' (0 to below 100 %)")
    return value


def _hfe_spread(value: Any, file: str, key: str) -> tuple[float, float]:
    accepted = "the production spread [min, max] at 25 °C, e.g. [100, 300]"
    if not isinstance(value, list | tuple):
        hint = ""
        if isinstance(value, int | float | str) and not isinstance(value, bool):
            hint = f"; for one fixed value write [{value}, {value}]"
        raise StageError(f"{value!r} is not a [min, max] pair{hint}", file=file, key=key,
                         accepted=accepted)
    if len(value) != 2:
        raise StageError(f"{value!r} has {len(value)} entries, not 2", file=file, key=key,
                         accepted=accepted)
    lo, hi = (parse_number(v, key=key, file=file) for v in value)
    if not 0 < lo <= hi:
        raise StageError(f"{value!r} must have 0 < min <= max", file=file, key=key,
                         accepted=accepted)
    return lo, hi


def _read_toml(path: Path, *, file_key: tuple[str, str] | None = None) -> dict[str, Any]:
    """Parse a TOML file; every failure is one StageError (no traceback).

    `file_key` = (referring file, key) names where a missing file was referenced from.
    """
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        if file_key:
            raise StageError(f"file {str(path)!r} not found", file=file_key[0], key=file_key[1],
                             accepted="a path relative to the spec file") from None
        raise StageError("file not found", file=str(path)) from None
    except IsADirectoryError:
        raise StageError("is a directory, not a TOML file", file=str(path)) from None
    except OSError as exc:
        raise StageError(f"cannot be read: {exc.strerror}", file=str(path)) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise StageError(f"is not UTF-8 text (byte {exc.start})", file=str(path),
                         accepted="a UTF-8 TOML file") from None
    if text.lstrip().startswith("{"):
        raise StageError("is JSON, not a TOML spec (a design file?)", file=str(path),
                         accepted="a spec file such as 'stagesynth new' writes; design files "
                         "go to analyze, caps, report and plot")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise StageError(f"is not valid TOML: {exc}", file=str(path),
                         accepted="TOML, e.g. key = \"value\" lines under [section] headers"
                         ) from None
    except RecursionError:
        raise StageError("is nested too deeply to be a spec", file=str(path),
                         accepted="TOML, e.g. key = \"value\" lines under [section] headers"
                         ) from None
    if nesting_depth(data) > MAX_DEPTH:
        raise StageError(f"is nested more than {MAX_DEPTH} levels deep", file=str(path),
                         accepted="a spec file: [section] headers with key = value lines")
    return data


def _pair(value: Any, key: str, file: str, unit: str, example: str) -> tuple[float, float]:
    """A [min, max] pair of quantities in `unit`, min > 0 and min <= max."""
    accepted = f"[min, max] such as {example}"
    if len(value) != 2:
        raise StageError(f"{value!r} has {len(value)} entries, not 2", file=file, key=key,
                         accepted=accepted)
    lo, hi = (parse_quantity(v, unit, key=key, file=file) for v in value)
    if not 0 < lo <= hi:
        raise StageError(f"[{format_quantity(lo, unit)}, {format_quantity(hi, unit)}] must "
                         f"have 0 < min <= max", file=file, key=key, accepted=accepted)
    return lo, hi


def _toml_str(text: str) -> str:
    return json.dumps(text, ensure_ascii=False)


def _q(value: float, unit: str) -> str:
    """A quantity as TOML text that reads back exactly."""
    return _toml_str(format_quantity(value, unit, digits=None))
