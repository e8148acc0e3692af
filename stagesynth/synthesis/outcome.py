"""What a synthesis gives back: the design with its verdict, and how each family fared."""

from __future__ import annotations

from dataclasses import dataclass, field

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.engine.analysis import Analysis
from stagesynth.judging.verdict import Verdict
from stagesynth.synthesis.topologies.base import Conflict


@dataclass(frozen=True)
class FamilyReport:
    """How one circuit family fared for the spec (for the choice of circuit)."""

    name: str
    title: str
    stages: int
    meets: bool
    worst_margin: float
    failed: tuple[str, ...]
    note: str = ""
    tightest: str = ""  # the requirement closest to its limit (or missing it most), readable


@dataclass(frozen=True)
class SynthesisResult:
    spec: Spec
    design: Design
    analysis: Analysis
    verdict: Verdict
    conflicts: tuple[Conflict, ...]
    notes: tuple[str, ...]
    stats: dict = field(default_factory=dict)
    families: tuple[FamilyReport, ...] = ()

    @property
    def meets_spec(self) -> bool:
        return self.verdict.meets_spec
