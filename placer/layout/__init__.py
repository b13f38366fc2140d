"""The pattern as a layout: unit cells, layer map, pitch, routing, parasitics, netlist,
the wiring term, and the GDSII writer."""
