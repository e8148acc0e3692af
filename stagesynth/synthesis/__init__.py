"""Synthesis: the search, capacitor sizing, practical parts, remedies and circuit families.

Imports judging, engine, contracts, quantities; never the report.
"""
