"""Report outputs of a design: schematic, plots, bill of materials, text report."""
