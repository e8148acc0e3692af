"""Judging: requirement rows, yield, sensitivity, bias stability, and the figures' records.

Reads the engine's figures against a spec. Imports engine, contracts, quantities.
"""
