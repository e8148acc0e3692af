"""stagesynth: synthesize and verify discrete transistor gain stages."""

__version__ = "0.1.0"
