"""Independent reference implementation of the contract's device model, for outside checks.

Written from the contract text (spec-format.md, section 2) only; it imports nothing from
stagesynth except the error type, so that it can judge the engine from the outside.
"""
