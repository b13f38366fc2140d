"""Regenerate the README's pictures and sample outputs from the tool itself.

    python docs/make_docs.py

Writes docs/bias_mirror.png (arrange's preview), docs/bias_mirror-compare.png (the
comparison sheet), docs/heron_msb-sequence.png and docs/heron_dac10-sequence.png (unary
and segmented arrays' orders and INL), and
replaces the README blocks between <!-- sample:NAME --> markers with what the commands
print, so no figure in the README is typed by hand.
"""

from __future__ import annotations

import os
import shutil
import sys
import tempfile
from pathlib import Path

from click.testing import CliRunner

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))   # run as a script from docs/: make tests.bench importable

from placer.cli import cli  # noqa: E402
from tests.bench.readme_block import replace_block  # noqa: E402


def run(args: list[str]) -> str:
    result = CliRunner().invoke(cli, args)
    if result.exit_code != 0:
        raise SystemExit(f"placer {' '.join(args)} failed:\n{result.output}")
    return result.output


def block(text: str) -> str:
    return "```text\n" + text.rstrip() + "\n```"


def section(output: str, start: str, stop: str | None = None) -> str:
    lines = output.splitlines()
    i = next(k for k, ln in enumerate(lines) if ln.startswith(start))
    j = next((k for k, ln in enumerate(lines[i + 1:], i + 1)
              if stop is not None and ln.startswith(stop)),
             len(lines))
    return "\n".join(lines[i:j])


def main() -> None:
    os.chdir(ROOT)          # relative paths in what the commands print
    hand = "samples/bias_mirror_hand.gds"
    spec = "samples/bias_mirror.toml"
    blocks = {}
    with tempfile.TemporaryDirectory() as tmp:
        t = Path(tmp)
        run(["arrange", spec, "--out", str(t / "a"), "--quiet"])
        shutil.copy(t / "a" / "pattern.png", ROOT / "docs" / "bias_mirror.png")
        run(["compare", spec, "--out", str(t / "c")])
        shutil.copy(t / "c" / "bias_mirror-compare.png", ROOT / "docs"
                    / "bias_mirror-compare.png")
        graded = run(["grade", hand, "--spec", spec, "--sensitivity-plot", str(t / "s.png")])
        blocks["grade"] = block(
            section(graded, "Recognised", "bias_mirror:") + "\n...\n"
            + section(graded, "Pairs", "Worst linear")
            + "\n" + section(graded, "Units adding most", ""))
        repaired = run(["repair", hand, "--spec", spec, "--out", str(t / "r")])
        blocks["repair"] = block("\n".join(ln for ln in repaired.splitlines()
                                           if not ln.startswith(("Recognised", "Wrote"))))
        blocks["budget"] = block(section(graded, "Electrical budget"))
        cdac = run(["arrange", "samples/sar_cdac.toml", "--out", str(t / "d"), "--quiet"])
        blocks["cdac"] = block(section(cdac, "Electrical budget", "Wrote"))
        for name, sample in (("fcamp", "fc_amp"), ("lshape", "lshape_cdac"),
                             ("pinned", "pinned_mirror")):
            out = run(["arrange", f"samples/{sample}.toml", "--out", str(t / sample),
                       "--quiet"])
            pattern = (t / sample / "pattern.txt").read_text().splitlines()
            blocks[name] = block("\n".join(ln for ln in pattern if not ln.startswith("#"))
                                 + "\n\n" + section(out, "Linear:", "Routing:").rstrip()
                                 + "\n" + section(out, "Worst linear", "Assumptions")
                                 .rstrip())
        for name, sample in (("diffpair", "input_pair"), ("splitmirror", "split_mirror")):
            out = run(["arrange", f"samples/{sample}.toml", "--out", str(t / sample),
                       "--quiet"])
            pattern = (t / sample / "pattern.txt").read_text().splitlines()
            blocks[name] = block("\n".join(ln for ln in pattern if not ln.startswith("#"))
                                 + "\n\n" + section(out, "Linear:", "Routing:") + "\n"
                                 + section(out, "Layout:", "Wrote").rstrip())
        # the five-transistor amplifier: n and p rows, a well with its tie, a guard ring
        out = run(["arrange", "samples/ota5.toml", "--out", str(t / "ota5"), "--quiet"])
        pattern = (t / "ota5" / "pattern.txt").read_text().splitlines()
        blocks["ota5"] = block("\n".join(ln for ln in pattern if not ln.startswith("#"))
                               + "\n\n" + section(out, "Diffusion and well", "Assumptions")
                               .rstrip() + "\n\n" + section(out, "Electrical budget",
                                                             "Wrote").rstrip())
        seq = run(["sequence", "samples/unary/heron_msb.toml", "--out", str(t / "u")])
        grid = (t / "u" / "sequence.txt").read_text()
        blocks["sequence"] = block("$ placer sequence samples/unary/heron_msb.toml --out msb\n"
                                   + section(seq, "heron_msb:", "Figures are").rstrip()
                                   + "\n\n$ cat msb/sequence.txt\n" + grid)
        shutil.copy(t / "u" / "sequence.png", ROOT / "docs" / "heron_msb-sequence.png")
        # the segmented 10-bit DAC: found (the whole move budget: a repeatable order),
        # then graded again from the GDSII it wrote
        seg = run(["sequence", "samples/unary/heron_dac10.toml", "--out", str(t / "s"),
                   "--time-limit", "60"])
        graded = run(["sequence", "samples/unary/heron_dac10.toml", "--grid",
                      str(t / "s" / "sequence.gds"), "--out", str(t / "sg")])
        head = (t / "s" / "sequence.txt").read_text().splitlines()[:6]
        blocks["segmented"] = block(
            "$ placer sequence samples/unary/heron_dac10.toml --out dac10 --time-limit 60\n"
            + section(seg, "heron_dac10:", "Figures are").rstrip()
            + "\n\n$ head -6 dac10/sequence.txt\n" + "\n".join(head)
            + "\n\n$ placer sequence samples/unary/heron_dac10.toml --grid dac10/sequence.gds "
              "--out graded\n"
            + "\n".join(ln for ln in graded.splitlines()
                        if not ln.startswith(("Wrote", "Figures are"))).replace(str(t / "s"),
                                                                             "dac10"))
        shutil.copy(t / "s" / "sequence.png", ROOT / "docs" / "heron_dac10-sequence.png")
    for name, body in blocks.items():
        replace_block(f"sample:{name}", body)


if __name__ == "__main__":
    main()
