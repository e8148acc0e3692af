"""stagesynth from Python: a geophone preamp designed, edited, re-checked and modelled.

Run it as a script (`python examples/python-api.py [OUT_DIR]`) or cell by cell in an
editor that understands `# %%` cells. It writes only into OUT_DIR, or into a fresh
temporary folder when none is given, and prints what it did.
"""

# %% Setup: where the files go; matplotlib without a display
import sys
import tempfile
from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # no display needed; figures are saved to files

import control
import numpy as np

import stagesynth as ss

out = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(tempfile.mkdtemp(prefix="stagesynth-"))
out.mkdir(parents=True, exist_ok=True)

# %% A spec: the same keys as a TOML spec file (ss.load_spec("my.toml") reads one)
spec = ss.load_spec({
    "title": "Geophone preamp, channel 3",
    "supply": {"voltage": "9 V", "tolerance": "5 %"},
    "source": {"resistance": "2.2 kΩ"},
    "load": {"resistance": "22 kΩ", "capacitance": "220 pF"},
    "require": {"gain": "20 dB", "f_low": "5 Hz", "f_high": "20 kHz", "z_in": "10 kΩ",
                "swing": "2 Vpp", "ambient": ["-10 °C", "50 °C"]},
    "transistor": {"preset": "lownoise-npn"},
})

# %% Synthesize: the simplest circuit that meets every requirement
result = ss.synthesize(spec)
print(f"circuit {result.design.topology}: meets spec = {result.meets_spec}")
for part in result.design.parts:
    if part.value is not None:
        print(f"  {part.ref:4s} {part.value:.4g}")
for check in result.verdict.checks[:6]:
    print(f"  {check.name}: {check.value} (limit {check.limit}) {'ok' if check.ok else 'FAIL'}")

# %% What if: a different collector resistor (IEC 60062 codes and units both work)
rc = next(ref for ref, role in result.design.extra["roles"].items() if "collector" in role)
edited = result.design.with_value(rc, "4k7")
check = ss.analyze(edited, spec)
print(f"{rc} -> 4.7 kΩ: gain {check.analysis.gain_db:.2f} dB "
      f"(was {result.analysis.gain_db:.2f} dB), meets spec = {check.meets_spec}")

# %% The stage as a python-control system: poles, step response, Bode plot
sys_ = ss.to_lti(result.design)
poles_hz = np.sort(np.abs(control.poles(sys_))) / (2 * np.pi)
print("poles |s|/2π (Hz):", ", ".join(f"{p:.4g}" for p in poles_hz))
f = np.logspace(0, 7, 300)
plot = control.bode_plot(sys_, 2 * np.pi * f, dB=True, Hz=True)
plot.figure.savefig(out / "bode-python-control.png", dpi=100)
pulse = ss.pulse_response(result.design, width=1e-3)
print(f"step: rise {pulse.rise_time * 1e6:.2f} µs, overshoot {100 * pulse.overshoot:.1f} %; "
      f"1 ms pulse tilts {100 * pulse.tilt:.2f} %")

# %% The same stage as a scikit-rf two-port (what stage.s2p holds)
net = ss.to_network(result.design)
print(f"two-port: {len(net.f)} points, |S21| at {net.f[0]:.3g} Hz = {abs(net.s[0, 1, 0]):.3g}")

# %% Yield: how many of a production run meet the spec
y = ss.monte_carlo(result.design, spec, units=1000, seed=7)
print(f"yield {100 * y.estimate:.1f} % of {y.units} units "
      f"(95 % interval {100 * y.interval[0]:.1f} … {100 * y.interval[1]:.1f} %)")

# %% The full report, as `stagesynth design` writes it
written = ss.write_report(result, out / "report")
print(f"wrote {len(written)} files into {out}")
