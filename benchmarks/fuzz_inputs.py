"""Fuzz the CLI with mutated spec and design files; print counts, exit codes and any crash.

Not a test (it runs for minutes): `python benchmarks/fuzz_inputs.py [N] [--seed S]
[--design-runs M]`. Every input goes through the CLI in process (typer's runner);
a crash is an exception other than a clean exit, a run over 60 s, or exit 0 from
`design` with a design that does not re-analyse as meeting its spec.
"""

from __future__ import annotations

import argparse
import collections
import copy
import json
import random
import sys
import tempfile
import time
import traceback
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from typer.testing import CliRunner  # noqa: E402

from stagesynth.cli import app  # noqa: E402

NASTY_VALUES = [
    "1e999 V", "4e400k", "1e99999999 V", "inf", "nan", "-inf", "NaN V", "1e400 dB", "1e300 dB",
    "0", "0 V", "-1", "1e-300", "1 nA", "1 µV", "1 V/K", "0 K", "-300 °C", "1e6 °C", "",
    "   ", "12 V V", "4k7k", "1,5 V", "1.5.5 V", "5 %", "500 %", "-5 %", "1 TΩ", "1 fF",
    "1e12", "1e-12", 1e308, -1e308, 0, -1, 10**400, True, [], {}, ["1 V"], ["1 V", "2 V", "3 V"],
    "20 dB", "10 V/V", "3 Vpp", "3 V", "1 Vrms", "25 °C", "250 MHz", "1 Hz", "1 GHz", "10 kΩ",
    "1 mΩ", "100 pF", "1 mA", "100 A", "E24", "E1", "E192", "yes", "no", "any", "\x00",
    "é" * 50, "1" * 400 + " V",
]
SPEC_KEYS = {
    "supply": ["voltage", "tolerance"],
    "source": ["resistance"],
    "load": ["resistance", "capacitance"],
    "require": ["gain", "gain_tolerance", "f_low", "f_high", "z_in", "swing", "supply_current",
                "ambient", "inverting", "z_out", "yield"],
    "transistor": ["preset", "polarity", "hfe", "hfe_typ", "vbe", "vbe_current",
                   "early_voltage", "ft", "c_cb", "r_bb", "vce_sat", "ic_max", "vce_max",
                   "p_max", "theta_ja", "vbe_tempco", "hfe_tempco"],
    "parts": ["resistors", "resistor_tolerance", "capacitors", "capacitor_tolerance"],
}


def toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int) and abs(v) > 2**63:
        return str(float(v)) if abs(v) < 1e308 else "inf"
    if isinstance(v, int | float):
        return repr(float(v)).replace("inf", "inf") if isinstance(v, float) else str(v)
    if isinstance(v, list):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{}"
    return json.dumps(v, ensure_ascii=False)


def spec_text(tables: dict[str, dict]) -> str:
    out = []
    for name, table in tables.items():
        out.append(f"[{name}]")
        out.extend(f"{k} = {toml_value(v)}" for k, v in table.items())
    return "\n".join(out) + "\n"


def base_spec() -> dict[str, dict]:
    import tomllib

    data = tomllib.loads((ROOT / "specs" / "hydrophone-front-end.toml").read_text())
    data.pop("title", None)
    return data


def mutate_spec(rng: random.Random, base: dict) -> bytes:
    data = copy.deepcopy(base)
    for _ in range(rng.randint(1, 3)):
        op = rng.random()
        section = rng.choice(list(SPEC_KEYS))
        table = data.setdefault(section, {})
        if op < 0.7:
            table[rng.choice(SPEC_KEYS[section])] = rng.choice(NASTY_VALUES)
        elif op < 0.85 and table:
            table.pop(rng.choice(list(table)))
        else:
            table[rng.choice(["bogus", "gian", "voltge"])] = "1"
    text = spec_text(data)
    r = rng.random()
    if r < 0.03:
        return b"\xff\xfe" + text.encode("utf-16-le")
    if r < 0.05:
        return ("a = " + "[" * 5000 + "]" * 5000 + "\n").encode()
    if r < 0.07:
        return ("a = " + "{b = " * 3000 + "1" + "}" * 3000 + "\n").encode()
    if r < 0.09:
        return text.encode()[: rng.randint(0, len(text))]
    return text.encode("utf-8", "surrogatepass")


def mutate_design(rng: random.Random, base: dict) -> bytes:
    d = copy.deepcopy(base)
    parts = d["parts"]
    for _ in range(rng.randint(1, 3)):
        op = rng.randrange(11)
        p = rng.choice(parts) if parts else None
        if op == 0 and p is not None and p["kind"] != "bjt":
            p["value"] = rng.choice([0, -1, 1e-300, 1e300, 1e308, "1k", None, True, 1e-15, 1e15])
        elif op == 1 and p is not None:  # rename one terminal: a floating node
            if isinstance(p["nodes"], dict):
                p["nodes"][rng.choice("cbe")] = f"n{rng.randrange(99)}"
            else:
                p["nodes"][rng.randrange(2)] = f"n{rng.randrange(99)}"
        elif op == 2 and parts:
            parts.remove(p)
        elif op == 3:  # an isolated loop
            parts.append({"ref": "RX1", "kind": "resistor", "value": 1e3, "nodes": ["i1", "i2"]})
            parts.append({"ref": "RX2", "kind": "resistor", "value": 1e3, "nodes": ["i2", "i1"]})
        elif op == 4:  # a dangling transistor
            parts.append({"ref": "QX", "kind": "bjt", "device": next(iter(d["devices"])),
                          "nodes": {"c": "dx", "b": "dy", "e": "dz"}})
        elif op == 5:
            dev = next(iter(d["devices"].values()))
            dev[rng.choice(list(dev))] = rng.choice([0, -1, 1e-9, 1e9, 1.0, [1, 2], "x", None])
        elif op == 6:
            d[rng.choice(["supply", "load", "source"])] = rng.choice(
                [{"voltage": 0.5}, {"resistance": 0}, {}, 5, {"voltage": 1e9, "node": "vcc"}])
        elif op == 7:
            d["conditions"] = {"ambient": rng.choice([[-273.15], [0, 1e9], [25], "x"]),
                               "supply_tolerance": rng.choice([0.05, 2, -1])}
        elif op == 8 and p is not None:  # short a part's ends to ground or supply
            key = rng.choice("cbe") if isinstance(p["nodes"], dict) else rng.randrange(2)
            p["nodes"][key] = rng.choice([base["ground"], base["supply"]["node"]])
        elif op == 9:
            d[rng.choice(["input", "output", "ground"])] = rng.choice(["vcc", "0", "nowhere"])
        else:
            n = rng.randint(2, 400)  # a long ladder (size handling)
            parts.extend({"ref": f"RL{i}", "kind": "resistor", "value": 1e3,
                          "nodes": [f"l{i}", f"l{i + 1}" if i < n - 1 else d["ground"]]}
                         for i in range(n))
            parts.append({"ref": "RL_in", "kind": "resistor", "value": 1e3,
                          "nodes": [d["output"], "l0"]})
    r = rng.random()
    text = json.dumps(d)
    if r < 0.03:
        return text.encode("latin-1", "replace") + b"\xe9\xff"
    if r < 0.05:
        return ("[" * 100000 + "]" * 100000).encode()
    if r < 0.07:
        return text.encode()[: rng.randint(0, len(text))]
    return text.encode()


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("n", type=int, nargs="?", default=3000)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--design-runs", type=int, default=40)
    args = ap.parse_args()
    rng = random.Random(args.seed)
    runner = CliRunner()
    spec0 = base_spec()
    tmp = Path(tempfile.mkdtemp(prefix="stagesynth-fuzz-"))
    runner.invoke(app, ["design", str(ROOT / "specs" / "hydrophone-front-end.toml"),
                              "--out", str(tmp / "base"), "--no-report"])
    design0 = json.loads((tmp / "base" / "design.json").read_text())
    codes: collections.Counter = collections.Counter()
    crashes: list[str] = []
    slow: list[str] = []
    t_start = time.perf_counter()
    for i in range(args.n):
        kind = rng.random()
        spec_path = tmp / f"s{i}.toml"
        design_path = tmp / f"d{i}.json"
        if i < args.design_runs:
            spec_path.write_bytes(mutate_spec(rng, spec0))
            argv = ["design", str(spec_path), "--out", str(tmp / f"o{i}"), "--no-report"]
            circuit = rng.choice([None, "ce", "ce_fb", "ef", "ef_boot", "cb", "ce_ef", "ef_ce",
                                  "ce_ce", "bogus"])
            if circuit:
                argv += ["--circuit", circuit]
            label = "design"
        elif kind < 0.5:
            spec_path.write_bytes(mutate_spec(rng, spec0))
            design_path.write_text(json.dumps(design0))
            argv = ["analyze", str(design_path), "--spec", str(spec_path)]
            label = "spec"
        else:
            design_path.write_bytes(mutate_design(rng, design0))
            argv = ["analyze", str(design_path), "--json"]
            label = "design-file"
        t0 = time.perf_counter()
        result = runner.invoke(app, argv, catch_exceptions=True)
        dt = time.perf_counter() - t0
        codes[(label, result.exit_code)] += 1
        if result.exception is not None and not isinstance(result.exception, SystemExit):
            tb = "".join(traceback.format_exception(result.exception))[-600:]
            crashes.append(f"{label} #{i} {argv}: {type(result.exception).__name__}\n{tb}")
            print("CRASH " + crashes[-1], flush=True)
        if dt > 60:
            slow.append(f"{label} #{i}: {dt:.0f} s")
        if label == "design" and result.exit_code == 0:
            check = runner.invoke(app, ["analyze", str(tmp / f"o{i}" / "design.json"),
                                        "--spec", str(spec_path)])
            if check.exit_code != 0:
                crashes.append(f"design #{i} exit 0 but re-analysis exit {check.exit_code}")
        spec_path.unlink(missing_ok=True)
        design_path.unlink(missing_ok=True)
        if (i + 1) % 250 == 0:
            print(f"{i + 1} inputs, {time.perf_counter() - t_start:.0f} s, "
                  f"{len(crashes)} crashes", flush=True)
    total = time.perf_counter() - t_start
    print(f"{args.n} inputs in {total:.0f} s (seed {args.seed})")
    for (label, code), count in sorted(codes.items()):
        print(f"  {label:12s} exit {code}: {count}")
    print(f"crashes: {len(crashes)}; over 60 s: {len(slow)}")
    for c in crashes[:15]:
        print("----\n" + c)
    for s in slow:
        print(s)
    return 1 if crashes or slow else 0


if __name__ == "__main__":
    raise SystemExit(main())
