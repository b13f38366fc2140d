"""Rebuild samples/bias_mirror_hand.gds, the flawed hand layout the README grades and repairs.

The scenario: a layout engineer drew the bias_mirror array as a common-centroid pattern
but, editing it by hand, exchanged one MREF finger with a neighbouring MOUTB finger. The
file is written with placer's own GDSII writer.

    python samples/make_hand_gds.py
"""

from pathlib import Path

from placer.gds import build_library, load_layers, load_template, write_gds
from placer.pattern import check_against_spec, parse_pattern
from placer.spec import load_spec

HERE = Path(__file__).resolve().parent

# common centroid except for the swapped pair in the second row (MREF <-> MOUTB)
HAND = """\
.  MOUTB< MOUTA> MREF<  MOUTB> MOUTB< MOUTA> MOUTB> .
.  MOUTB< MOUTA< MOUTB> MOUTB< MOUTB> MOUTA< MREF>  .
"""


def main() -> None:
    spec = load_spec(HERE / "bias_mirror.toml")
    pattern = check_against_spec(parse_pattern(HAND, "hand"), spec, "hand")
    lib = build_library(pattern, spec, load_template(spec), load_layers())
    write_gds(lib, HERE / "bias_mirror_hand.gds")


if __name__ == "__main__":
    main()
