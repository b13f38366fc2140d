"""Reading and writing files: the spec, patterns, hand layouts (CSV and GDSII), bounded
file reading, and the set-or-nothing output staging."""
