"""The benchmark's cases: spec text, and the time the targets allow for each."""

from __future__ import annotations

from math import factorial, prod


def binary(bits: int) -> str:
    """[devices] lines of a binary-weighted capacitor array: termination, LSB, ... MSB."""
    names = ["CT", "C0"] + [f"C{b}" for b in range(1, bits)]
    counts = [1, 1] + [2 ** b for b in range(1, bits)]
    return "\n".join(f"{n} = {c}" for n, c in zip(names, counts, strict=True))


def ratio(counts: list[int], prefix: str = "M") -> str:
    """[devices] lines of devices with the given unit counts."""
    return "\n".join(f"{prefix}{i} = {c}" for i, c in enumerate(counts))


def _core(rows: int, cols: int, dummies: str = "none", pitch: tuple[float, float] = (1.0, 1.0),
          kind: str = "mos") -> str:
    # [array] after [devices]; the kind goes first (see _spec)
    return (f"#kind {kind}\n" if kind != "mos" else "") + (
        f'[array]\nrows = {rows}\ncolumns = {cols}\ndummies = "{dummies}"\n'
        f"pitch_um = [{pitch[0]}, {pitch[1]}]\n")


def _spec(text: str) -> str:
    """Move a '#kind K' marker line to a top-level kind = "K" line."""
    lines = text.splitlines()
    kinds = [ln.split()[1] for ln in lines if ln.startswith("#kind ")]
    body = "\n".join(ln for ln in lines if not ln.startswith("#kind "))
    return (f'kind = "{kinds[0]}"\n' if kinds else "") + body + "\n"


def _sample(name: str) -> str:
    from pathlib import Path

    return (Path(__file__).resolve().parents[2] / "samples" / f"{name}.toml").read_text()


# (label, spec text, seconds the targets allow)
CASES: list[tuple[str, str, float]] = [
    ("row 8+8, end dummies", "[devices]\nA = 8\nB = 8\n" + _core(1, 16, "ends"), 2.0),
    ("1:2:4 mirror, 2 rows", "[devices]\n" + ratio([2, 4, 8]) + "\n" + _core(2, 7, "ends"),
     2.0),
    ("2:4:6 on 2x6", "[devices]\n" + ratio([2, 4, 6]) + "\n" + _core(2, 6), 2.0),
    ("3:5:7 on 3x5", "[devices]\n" + ratio([3, 5, 7]) + "\n" + _core(3, 5), 2.0),
    ("1:2:4:8 on 4x4, one spare", "[devices]\n" + ratio([1, 2, 4, 8]) + "\n" + _core(4, 4),
     2.0),
    ("3:4:5:6 on 3x6, pitch 1.5 x 1", "[devices]\n" + ratio([3, 4, 5, 6]) + "\n"
     + _core(3, 6, pitch=(1.5, 1.0)), 2.0),
    ("4:8:12 on 4x6, pitch 0.5 x 2", "[devices]\n" + ratio([4, 8, 12]) + "\n"
     + _core(4, 6, pitch=(0.5, 2.0)), 2.0),
    ("3:5:7:9 on 4x6", "[devices]\n" + ratio([3, 5, 7, 9]) + "\n" + _core(4, 6), 2.0),
    ("resistors 2:3:5:7:9 on 2x13", "[devices]\n" + ratio([2, 3, 5, 7, 9], "R") + "\n"
     + _core(2, 13, kind="res"), 2.0),
    ("4:6:9:13 on 4x8", "[devices]\n" + ratio([4, 6, 9, 13]) + "\n" + _core(4, 8), 2.0),
    ("5:6:7:8:9:10 on 5x9", "[devices]\n" + ratio([5, 6, 7, 8, 9, 10]) + "\n"
     + _core(5, 9), 2.0),
    ("resistors 6:10:14:18:16 on 8x8, pitch 2 x 1", "[devices]\n"
     + ratio([6, 10, 14, 18, 16], "R") + "\n" + _core(8, 8, pitch=(2.0, 1.0), kind="res"), 2.0),
    ("6-bit cap array 8x8 + ring", "[devices]\n" + binary(6) + "\n"
     + _core(8, 8, "ring", kind="cap"), 2.0),
    ("7-bit cap array 8x16 + ring", "[devices]\n" + binary(7) + "\n"
     + _core(8, 16, "ring", kind="cap"), 2.0),
    ("8-bit cap array 16x16 + ring", "[devices]\n" + binary(8) + "\n"
     + _core(16, 16, "ring", kind="cap"), 2.0),
    ("9-bit cap array 16x32 + ring", "[devices]\n" + binary(9) + "\n"
     + _core(16, 32, "ring", kind="cap"), 10.0),
    ("10-bit cap array 32x32 + ring", "[devices]\n" + binary(10) + "\n"
     + _core(32, 32, "ring", kind="cap"), 10.0),
    ("12-bit cap array 64x64 + ring", "[devices]\n" + binary(12) + "\n"
     + _core(64, 64, "ring", kind="cap"), 30.0),
    ("groups: amplifier pair, tail, load (samples/fc_amp)", "@fc_amp", 2.0),
    ("pinned: mirror with a pinned finger (samples/pinned_mirror)", "@pinned_mirror", 2.0),
    ("masked: 5-bit DAC in an L (samples/lshape_cdac)", "@lshape_cdac", 2.0),
]
CASES = [(label, _sample(text[1:]) if text.startswith("@") else _spec(text), t)
         for label, text, t in CASES]


def n_assignments(counts: list[int], slots: int) -> int:
    """Distinct assignments of the counts (and spare slots) to the slots."""
    return factorial(slots) // (prod(factorial(c) for c in counts)
                                * factorial(slots - sum(counts)))
