"""Extraction check of placer's routed layouts: the README's table and a routed-row picture.

Every sample is arranged and its GDSII checked; then ``--cases`` random patterns per kind
(1-8 devices, 1-12 rows, dummies none/ends/ring, capacitor rings of strips, both finger
orientations, random shared nets, empty slots, computed and larger non-square pitches)
are written and checked by
``tests/extraction.py``, which reads only the GDSII and the layer map.

Run:  python docs/wiring_check.py [--cases 1000] [--seed 0] [--update-readme]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from placer.cli import cli  # noqa: E402
from placer.io.pattern import DUMMY, EMPTY, Pattern  # noqa: E402
from placer.jobs.load import parse_spec  # noqa: E402
from placer.layout.block import layout_of  # noqa: E402
from placer.layout.cells import load_rules, spacing_rules  # noqa: E402
from placer.layout.gdswrite import write_gds  # noqa: E402
from placer.layout.pitch import fitted  # noqa: E402
from tests import extraction  # noqa: E402
from tests.bench.readme_block import replace_block  # noqa: E402

LAYERS = ROOT / "templates" / "layers.toml"
NETS = ["N0", "N1", "N2", "N3", "N4", "N5"]
TERMS = {"mos": ("gate", "source", "drain"), "cap": ("top", "bottom"), "res": ("a", "b")}
SIZES = {"mos": ([0.5, 1.0, 2.0, 4.5], [0.15, 0.5, 1.0, 3.0]),
         "cap": ([1.6, 2.5, 5.0], [1.3, 3.0, 6.0]),      # the notched plate's least size
         "res": ([0.4, 1.0, 2.0], [2.0, 8.0, 20.0])}


def spacing(kind: str) -> dict[str, float]:
    """The template's spacing rules per conductor."""
    return spacing_rules(load_rules(kind))


def random_case(kind: str, rng: np.random.Generator) -> tuple[object, Pattern]:
    """One random spec and pattern of ``kind``."""
    n_dev = int(rng.integers(1, 9))
    counts = [int(c) for c in rng.integers(1, 6, n_dev)]
    total = sum(counts)
    rows = int(rng.integers(1, min(12, total) + 1))
    cols = -(-total // rows) + int(rng.integers(0, 3))
    dummies = str(rng.choice(["none", "ends", "ring"]))
    seq = [d for d, n in enumerate(counts) for _ in range(n)]
    seq += [int(rng.choice([DUMMY, EMPTY])) for _ in range(rows * cols - total)]
    ids = np.array(seq)[rng.permutation(rows * cols)].reshape(rows, cols)
    if dummies == "ends":
        ids = np.pad(ids, ((0, 0), (1, 1)), constant_values=DUMMY)
    elif dummies == "ring":
        ids = np.pad(ids, 1, constant_values=DUMMY)
    orient = np.zeros(ids.shape, dtype=np.int8)
    if kind == "mos":
        orient = np.where(ids >= 0, rng.choice([-1, 1], ids.shape), 0).astype(np.int8)
    names = [f"D{i}" for i in range(n_dev)]
    w = float(rng.choice(SIZES[kind][0]))
    length = float(rng.choice(SIZES[kind][1]))
    # a third of the capacitor rings: one shared top plate, the ring drawn as strips
    strips = kind == "cap" and dummies == "ring" and length >= 3.0 and rng.random() < 1 / 3
    lines = []
    for name in names:
        nets = {t: str(rng.choice(NETS)) for t in TERMS[kind]}
        if strips:
            nets = {"top": "N5", "bottom": str(rng.choice(NETS[:5]))}
        if kind == "res":
            nets["join"] = str(rng.choice(["series", "parallel"]))
        lines.append(f"{name} = {{ " + ", ".join(f'{k} = "{v}"' for k, v in nets.items())
                     + " }")
    # a third of the MOS blocks in a guard ring, NMOS or PMOS (then in a well)
    guard = kind == "mos" and rng.random() < 1 / 3
    text = (f'kind = "{kind}"\n[devices]\n'
            + "".join(f"{n} = {c}\n" for n, c in zip(names, counts, strict=True))
            + f'[array]\ndummies = "{dummies}"\ndummy_net = '
            + f'"{rng.choice([*NETS[:5], "TIE"] if strips else [*NETS, "TIE"])}"\n'
            + (f"ring_depth_um = {rng.choice([0.95, 1.0, 1.5])}\n" if strips else "")
            + ("guard_ring = true\n" if guard else "")
            + f"[unit]\nwidth_um = {w}\nlength_um = {length}\n"
            + (f'polarity = "{rng.choice(["n", "p"])}"\n' if guard else "") + "[terminals]\n"
            + "\n".join(lines) + "\n")
    spec = parse_spec(text, "random.toml")
    pattern = Pattern(tuple(names), ids, orient)
    if rng.random() < 0.5:      # a given pitch at least the one the routing needs
        px, py = fitted(pattern, spec).array.pitch_um
        dx, dy = rng.choice([0.0, 0.3, 0.75]), rng.choice([0.0, 1.1, 2.3])
        text = text.replace("[array]\n", f"[array]\npitch_um = [{px + dx:.3f}, {py + dy:.3f}]\n")
        spec = parse_spec(text, "random.toml")
    return spec, pattern


def check_samples(tmp: Path) -> list[tuple[str, extraction.Report]]:
    """Arrange every sample spec with the command line and check its GDSII."""
    from click.testing import CliRunner

    out = []
    for sample in sorted((ROOT / "samples").glob("*.toml")):
        folder = tmp / sample.stem
        result = CliRunner().invoke(cli, ["arrange", str(sample), "--out", str(folder),
                                          "--quiet", "--time-limit", "20"])
        if result.exit_code != 0:
            raise SystemExit(f"{sample}: arrange failed: {result.output}")
        kind = parse_spec(sample.read_text(), str(sample), sample.stem).kind
        out.append((sample.name, extraction.check(folder / "pattern.gds", LAYERS,
                                                  spacing_um=spacing(kind))))
    return out


def routed_row_picture(gds: Path, png: Path, columns: int = 6) -> None:
    """A zoomed picture of the first row of ``gds`` and its channel, by role."""
    import gdstk
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure
    from matplotlib.patches import Patch, Polygon

    from placer.layout.layers import load_layers

    layers = load_layers()
    style = {"diffusion": ("#7fc97f", 0.55), "gate": ("#e7298a", 0.55),
             "resistor": ("#bf5b17", 0.5), "contact": ("#1b1b1b", 0.95),
             "metal1": ("#386cb0", 0.45), "metal2": ("#fdb462", 0.55),
             "via1": ("#444444", 0.95), "marker": ("#beaed4", 0.25)}
    role_of = {layers[r]: r for r in style}
    lib = gdstk.read_gds(str(gds))
    flat = lib.top_level()[0].copy("flat").flatten()
    origins = [tuple(r.origin) for r in lib.top_level()[0].references]
    xs = sorted({round(x, 3) for x, _ in origins})
    ys = sorted({round(y, 3) for _, y in origins})
    px = xs[1] - xs[0] if len(xs) > 1 else 1.0
    py = ys[-1] - ys[-2] if len(ys) > 1 else 2 * px
    x0, x1 = -0.5 * px, (columns - 0.5) * px
    present = {role_of.get((p.layer, p.datatype)) for p in flat.polygons}
    top = max(p.bounding_box()[1][1] for p in flat.polygons
              if role_of.get((p.layer, p.datatype)) in ("diffusion", "gate", "resistor",
                                                         "metal1"))
    y0, y1 = top - py - 0.2, top + 0.3
    fig = Figure(figsize=(10, 5.2))
    ax = fig.add_subplot()
    style = {r: v for r, v in style.items() if r in present}
    for role in style:                          # draw in a fixed order, lowest layer first
        colour, alpha = style[role]
        for p in flat.polygons:
            if role_of.get((p.layer, p.datatype)) != role:
                continue
            (a, b), (c, d) = p.bounding_box()
            if c < x0 or a > x1 or d < y0 or b > y1:
                continue
            ax.add_patch(Polygon(p.points, closed=True, facecolor=colour, alpha=alpha,
                                 edgecolor="black", linewidth=0.3))
    for lab in flat.labels:
        role = role_of.get((lab.layer, lab.texttype))
        x, y = lab.origin
        if role in ("metal1", "metal2") and x0 <= x <= x1 and y0 <= y <= y1:
            ax.text(x, y, lab.text, fontsize=6, ha="center", va="center", rotation=90,
                    color="#08306b" if role == "metal1" else "#7f2704")
    ax.set_xlim(x0, x1)
    ax.set_ylim(y0, y1)
    ax.set_aspect("equal")
    ax.set_xlabel("x (um)")
    ax.set_ylabel("y (um)")
    ax.legend(handles=[Patch(facecolor=c, alpha=a, edgecolor="black", label=r)
                       for r, (c, a) in style.items() if r != "marker"],
              loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=False)
    ax.set_title(f"{gds.parent.name}: the first {columns} slots of row 0 and the routing "
                 "channel below it (net labels on metal1 blue, metal2 brown)", fontsize=9,
                 loc="left")
    fig.set_layout_engine("constrained")
    fig.savefig(png, dpi=130, metadata={"Software": None})


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", type=int, default=1000, help="random layouts per kind")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--update-readme", action="store_true")
    args = ap.parse_args()
    rng = np.random.default_rng(args.seed)
    t0 = time.perf_counter()
    rows = []
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)
        samples = check_samples(tmp)
        for name, rep in samples:
            rows.append((f"sample {name}", 1, rep))
        routed_row_picture(tmp / "bias_mirror" / "pattern.gds", ROOT / "docs" / "routed_row.png")
        for kind in ("mos", "cap", "res"):
            totals = [0, 0, 0, 0]
            for i in range(args.cases):
                spec, pattern = random_case(kind, rng)
                lib, _ = layout_of(pattern, spec)
                path = tmp / f"{kind}.gds"
                write_gds(lib, path)
                rep = extraction.check(path, LAYERS, spacing_um=spacing(kind))
                counts = (len(rep.shorts), len(rep.opens), len(rep.stray_labels),
                          len(rep.spacing_violations))
                totals = [a + b for a, b in zip(totals, counts, strict=True)]
                if any(counts):
                    print(f"{kind} case {i}: {rep.summary()}", file=sys.stderr)
            rows.append((f"random {kind} patterns", args.cases, totals))
    lines = ["| layouts | count | shorts | opens | stray labels | spacing below the rules |",
             "|---|---|---|---|---|---|"]
    bad = 0
    for name, n, rep in rows:
        counts = (rep if isinstance(rep, list) else
                  [len(rep.shorts), len(rep.opens), len(rep.stray_labels),
                   len(rep.spacing_violations)])
        bad += sum(counts)
        lines.append(f"| {name} | {n} | " + " | ".join(str(c) for c in counts) + " |")
    lines.append("")
    lines.append(f"`python docs/wiring_check.py --cases {args.cases} --seed {args.seed}`: "
                 f"{time.perf_counter() - t0:.0f} s on this machine.")
    table = "\n".join(lines)
    print(table)
    if args.update_readme:
        replace_block("wiring:check", table)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
