"""Quantities: SI prefixes and IEC 60062 codes, IEC 60063 series, physical limits, user errors.

The bottom layer: imports nothing else from stagesynth.
"""
