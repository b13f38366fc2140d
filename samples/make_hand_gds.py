"""Rebuild the sample hand layouts the README grades and repairs.

The scenario: a layout engineer first drew the bias_mirror array with the outputs
clustered (bias_mirror_hand.txt, exported from the layout tool as unit centres in
bias_mirror_hand.csv), then as a common-centroid pattern but, editing it by hand,
exchanged one MREF finger with a neighbouring MOUTB finger (bias_mirror_hand.gds,
written with placer's own GDSII writer). Both at the pitch placer computes for the spec.

    python samples/make_hand_gds.py
"""

from pathlib import Path

from placer.io.pattern import check_against_spec, parse_pattern, read_pattern
from placer.jobs.load import load_spec
from placer.layout.block import layout_of
from placer.layout.gdswrite import write_gds

HERE = Path(__file__).resolve().parent

# common centroid except for the swapped pair in the second row (MREF <-> MOUTB)
HAND = """\
.  MOUTB< MOUTA> MREF<  MOUTB> MOUTB< MOUTA> MOUTB> .
.  MOUTB< MOUTA< MOUTB> MOUTB< MOUTB> MOUTA< MREF>  .
"""


def main() -> None:
    spec = load_spec(HERE / "bias_mirror.toml")
    pattern = check_against_spec(parse_pattern(HAND, "hand"), spec, "hand")
    lib, _ = layout_of(pattern, spec)
    write_gds(lib, HERE / "bias_mirror_hand.gds")
    first = read_pattern(HERE / "bias_mirror_hand.txt")
    px, py = spec.array.pitch_um
    lines = ["# bias_mirror hand layout exported as unit centres", "x_um,y_um,device,orientation"]
    for r in range(first.shape[0]):
        for c in range(first.shape[1]):
            d = int(first.ids[r, c])
            mark = {1: ">", -1: "<", 0: ""}[int(first.orient[r, c])]
            name = first.devices[d] if d >= 0 else "."
            lines.append(f"{100 + c * px:g},{50 - r * py:g},{name},{mark}")
    (HERE / "bias_mirror_hand.csv").write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
