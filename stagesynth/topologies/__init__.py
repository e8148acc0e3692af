"""Circuit families: each module builds its netlist and gives the synthesizer a first cut."""
