"""File contracts: the stage spec, the design file, the reference device record, file writing.

Imports only from quantities.
"""
