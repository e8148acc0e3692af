"""stagesynth: synthesize and verify discrete transistor gain stages.

From Python::

    import stagesynth as ss
    spec = ss.load_spec("specs/hydrophone-front-end.toml")
    result = ss.synthesize(spec)
    edited = result.design.with_value("R3", "4k7")
    check = ss.analyze(edited, spec)
    sys = ss.to_lti(edited)          # python-control StateSpace of the gain

The names below load on first use (module __getattr__), so `import stagesynth`
and `stagesynth --help` stay light.
"""

from __future__ import annotations

import os as _os
from typing import TYPE_CHECKING, Any

# The engine solves many small matrices in batches: one BLAS thread each is fastest,
# and threaded OpenBLAS on a busy machine can be a thousand times slower (measured:
# 2.7 s instead of 1.3 ms for nine 100x100 solves at a load of 35 on two cores). Set
# before numpy is first imported; a user's own setting wins.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    _os.environ.setdefault(_var, "1")

__version__ = "0.1.0"

# public name -> module that defines it
_LAZY: dict[str, str] = {
    "load_spec": "api",
    "load_design": "api",
    "synthesize": "api",
    "analyze": "api",
    "monte_carlo": "api",
    "write_report": "api",
    "resize_capacitors": "api",
    "to_lti": "api",
    "to_network": "api",
    "pulse_response": "api",
    "Result": "api",
    "Assessment": "api",
    "YieldResult": "api",
    "CapacitorChange": "api",
    "Design": "contracts.netlist",
    "Part": "contracts.netlist",
    "Spec": "contracts.spec",
    "StageError": "quantities.errors",
}

__all__ = [  # noqa: RUF022 - in the order of the flow, not alphabetical
    "__version__",
    "load_spec", "load_design", "synthesize", "analyze", "monte_carlo", "write_report",
    "resize_capacitors", "to_lti", "to_network", "pulse_response",
    "Result", "Assessment", "YieldResult", "CapacitorChange", "Design", "Part", "Spec",
    "StageError",
]

if TYPE_CHECKING:  # pragma: no cover - for type checkers and editors
    from stagesynth.api import (
        Assessment,
        CapacitorChange,
        Result,
        YieldResult,
        analyze,
        load_design,
        load_spec,
        monte_carlo,
        pulse_response,
        resize_capacitors,
        synthesize,
        to_lti,
        to_network,
        write_report,
    )
    from stagesynth.contracts.netlist import Design, Part
    from stagesynth.contracts.spec import Spec
    from stagesynth.quantities.errors import StageError


def __getattr__(name: str) -> Any:
    """Import the public names on first access (keeps `import stagesynth` light)."""
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'stagesynth' has no attribute {name!r}")
    from importlib import import_module

    value = getattr(import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted({*globals(), *_LAZY})
