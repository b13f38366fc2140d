"""Preview pictures and the comparison sheet."""

import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import to_rgb
from matplotlib.figure import Figure

from placer.cli import cli
from placer.io.pattern import parse_pattern
from placer.present.plot import device_colours, draw_pattern


def test_unit_centres_have_their_device_colour_and_dummies_the_neutral_one():
    """Okabe & Ito (2008) palette: each unit's centre pixel shows its device's colour."""
    pattern = parse_pattern(". A B C A .\n. C B A B .\n")
    pitch = (1.0, 2.0)
    fig = Figure(figsize=(6, 4), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    draw_pattern(ax, pattern, pitch, None, markers=False)
    fig.canvas.draw()
    img = np.asarray(fig.canvas.buffer_rgba())[..., :3] / 255.0
    height = img.shape[0]
    colours = device_colours(3)
    for r in range(pattern.shape[0]):
        for c in range(pattern.shape[1]):
            x, y = ax.transData.transform((c * pitch[0], -r * pitch[1]))
            pixel = img[int(round(height - y)), int(round(x))]
            d = pattern.ids[r, c]
            want = None if d < 0 else to_rgb(colours[d][0])
            if d < 0:
                # white under a grey hatch: whatever the hatch, the pixel is a light grey
                assert np.ptp(pixel) < 0.02 and pixel.min() > 0.5, (r, c, pixel)
            else:
                assert np.allclose(pixel, want, atol=0.02), (r, c, pixel, want)


def test_palette_colours_are_distinct():
    cols = [to_rgb(c) for c, _ in device_colours(8)]
    assert len(set(cols)) == 8


@pytest.mark.slow
def test_compare_writes_png_and_pdf(runner, write, tmp_path):
    spec = write("s.toml", '[devices]\nA = 4\nB = 4\nC = 8\n[array]\nrows = 2\ncolumns = 8\n')
    out = tmp_path / "cmp"
    result = runner.invoke(cli, ["compare", str(spec), "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert (out / "s-compare.png").stat().st_size > 10_000
    assert (out / "s-compare.pdf").read_bytes()[:4] == b"%PDF"
    assert "optimised" in result.output


@pytest.mark.slow
@pytest.mark.parametrize("sample", ["bias_mirror.toml", "sar_cdac.toml", "ref_ladder.toml"])
def test_arrange_and_compare_work_on_every_sample_spec(runner, tmp_path, sample):
    for extra in (["arrange", "--quiet"], ["compare"]):
        result = runner.invoke(cli, [extra[0], f"samples/{sample}", "--out",
                                     str(tmp_path / extra[0]), *extra[1:]])
        assert result.exit_code == 0, result.output
    assert (tmp_path / "arrange" / "pattern.gds").exists()
    assert "Electrical budget" in runner.invoke(
        cli, ["grade", str(tmp_path / "arrange" / "pattern.txt"), "--spec",
              f"samples/{sample}"]).output


@pytest.mark.parametrize("sample", ["bias_mirror_hand.txt", "bias_mirror_hand.gds",
                                    "bias_mirror_hand.csv"])
def test_draw_works_on_every_sample_layout(runner, tmp_path, sample):
    result = runner.invoke(cli, ["draw", f"samples/{sample}", "--spec",
                                 "samples/bias_mirror.toml", "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    stem = sample.rsplit(".", 1)[0]
    for ext in ("gds", "png", "svg"):
        assert (tmp_path / f"{stem}.{ext}").stat().st_size > 0


@pytest.mark.parametrize("g, sigma", [(0.3, 0.1), (0.05, 0.2), (0.4, 0.0)])
def test_the_budget_density_is_the_modelled_distribution(g, sigma):
    """The budget picture draws the ratio error's density exactly (it sampled 20 000
    points whatever the spec said). Checked two ways: its moments against the identities
    E[c + g cos U + N] = c and Var = sigma^2 + g^2 / 2 for U uniform on [0, 2 pi), and its
    shape against an independent numpy sample of two million draws."""
    from types import SimpleNamespace

    from placer.present.plot import ratio_error_density

    line = SimpleNamespace(clm_pct=0.02, wiring_pct=-0.01, quadratic_pct=0.005,
                           gradient_pct=g, random_sigma_pct=sigma)
    x, f = ratio_error_density(line)
    dx = x[1] - x[0]
    centre = 0.02 - 0.01 + 0.005
    assert np.sum(f) * dx == pytest.approx(1.0, abs=2e-3)
    assert np.sum(x * f) * dx == pytest.approx(centre, abs=1e-4)
    s_eff = max(sigma, 2 * dx)                 # a zero sigma is smoothed to two grid steps
    var = np.sum((x - centre) ** 2 * f) * dx
    assert var == pytest.approx(s_eff ** 2 + g ** 2 / 2, rel=2e-2)
    if sigma > 0:
        rng = np.random.default_rng(7)
        n = 2_000_000
        draws = (centre + g * np.cos(rng.uniform(0, 2 * np.pi, n))
                 + rng.normal(0.0, sigma, n))
        hist, edges = np.histogram(draws, bins=60, range=(x[0], x[-1]), density=True)
        mids = 0.5 * (edges[1:] + edges[:-1])
        assert np.max(np.abs(np.interp(mids, x, f) - hist)) < 0.03 * f.max()


def test_a_shared_centroid_label_stays_inside_the_picture():
    """Sixteen devices sharing one centroid: one short label inside the figure (the list
    of sixteen names ran off the picture's right edge)."""
    from placer.jobs.load import default_spec
    from placer.model.grade import grade_pattern

    names = [f"D{i}" for i in range(16)]
    row = " ".join(names + names[::-1])
    pattern = parse_pattern(f"{row}\n{row}\n")
    spec = default_spec("many", tuple(names), (4,) * 16)
    grade = grade_pattern(pattern, spec)
    fig = Figure(figsize=(8, 4), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    draw_pattern(ax, pattern, spec.array.pitch_um, grade)
    fig.canvas.draw()
    from matplotlib.text import Annotation

    labels = [t for t in ax.texts if isinstance(t, Annotation) and t.get_text()]
    assert [t.get_text() for t in labels] == ["all 16 devices"]
    box = labels[0].get_window_extent()
    assert box.x1 <= fig.bbox.x1 and box.x0 >= fig.bbox.x0


def test_a_preview_of_many_devices_keeps_its_legend_and_array_in_the_picture(tmp_path):
    """64 devices: the three-column legend squeezed the array to nothing, matplotlib
    warned on the user's terminal ('constrained_layout not applied') and the last column
    ran off the picture. Now the picture grows to hold the legend."""
    import warnings

    import matplotlib.figure

    from placer.jobs.load import default_spec
    from placer.model.grade import grade_pattern
    from placer.present.plot import save_preview

    names = [f"D{i}" for i in range(64)]
    row = " ".join(names + names[::-1])
    pattern = parse_pattern(f"{row}\n{row}\n")
    spec = default_spec("many", tuple(names), (4,) * 64)
    grade = grade_pattern(pattern, spec)
    seen = []
    real = matplotlib.figure.Figure.savefig

    def savefig(fig, *a, **k):
        real(fig, *a, **k)
        seen.append(fig)

    with warnings.catch_warnings():
        warnings.simplefilter("error")          # any warning fails the test
        matplotlib.figure.Figure.savefig = savefig
        try:
            save_preview(pattern, spec.array.pitch_um, grade, "many", [tmp_path / "p.png"])
        finally:
            matplotlib.figure.Figure.savefig = real
    fig = seen[0]
    ax = fig.axes[0]
    FigureCanvasAgg(fig)
    fig.canvas.draw()
    texts = [t.get_window_extent() for t in ax.get_legend().get_texts()]
    assert max(t.x1 for t in texts) <= fig.bbox.x1 and min(t.y0 for t in texts) >= 0
    box = ax.get_window_extent()
    assert box.width > 50 and box.height > 50


def test_the_unit_share_picture_of_a_layout_with_no_linear_error_says_so(monkeypatch, tmp_path):
    """Its title read 'each unit's share of the no linear error error' over a blank
    array; now it says that no pair has a linear error and names the units."""
    from placer.present import plot

    figs = []
    monkeypatch.setattr(plot, "_save", lambda fig, paths: figs.append(fig))
    pattern = parse_pattern(". A B B A .\n. B A A B .\n")
    plot.save_sensitivity(pattern, (2.3, 4.0), [], "no linear error", "bal",
                          [tmp_path / "s.png"])
    title = figs[0]._suptitle.get_text()
    assert "no pair has a linear error" in title and "error error" not in title
    names = sorted(t.get_text() for t in figs[0].axes[0].texts)
    assert names == ["A"] * 4 + ["B"] * 4


def test_finger_arrows_are_one_artist_pointing_each_fingers_way():
    """Every oriented finger gets an arrow (source to drain side: common practice) in
    one artist, centred low in its unit, pointing the way its orientation says; none on
    a dummy."""
    from matplotlib.quiver import Quiver

    pattern = parse_pattern(". A> B< A< B> .\n. B> A> B< A< .\n")
    pitch = (2.0, 6.0)
    fig = Figure(figsize=(8, 6), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    draw_pattern(ax, pattern, pitch, None, markers=False)
    quivers = [c for c in ax.collections if isinstance(c, Quiver)]
    assert len(quivers) == 1
    q = quivers[0]
    rr, cc = np.nonzero(pattern.ids >= 0)
    tails = q.get_offsets()
    assert len(tails) == len(rr) == 8
    for (x, y), u, r, c in zip(tails, q.U, rr, cc, strict=True):
        o = pattern.orient[r, c]
        assert np.sign(u) == o
        assert x + u / 2 == pytest.approx(c * pitch[0])     # centred on its slot
        assert -(r + 0.5) * pitch[1] < y < -r * pitch[1]    # in the unit's lower half


def test_each_unit_carries_its_devices_name():
    """A name per unit, in the upper part of the unit and centred across it: one
    collection of the name's glyph outlines (matplotlib's TextPath of the name) per
    device, placed at that device's units and nowhere else."""
    from matplotlib.collections import PathCollection
    from matplotlib.textpath import TextPath

    pattern = parse_pattern(". A> BB< A< BB> .\n. BB> A> BB< A< .\n")
    pitch = (2.0, 6.0)
    fig = Figure(figsize=(8, 6), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    draw_pattern(ax, pattern, pitch, None, markers=False, names=True)
    glyphs = [c for c in ax.collections if isinstance(c, PathCollection)]
    assert len(glyphs) == 2
    for d, name in enumerate(pattern.devices):
        want = {(round(c * pitch[0], 6), r) for r, c in zip(*np.nonzero(pattern.ids == d),
                                                             strict=True)}
        hit = [g for g in glyphs
               if len(g.get_paths()[0].vertices) == len(TextPath((0, 0), name).vertices)]
        assert len(hit) == 1, name
        offsets = hit[0].get_offsets()
        got = {(round(x, 6), int(np.floor(-y / pitch[1] + 0.5))) for x, y in offsets}
        assert got == want, name
        for _, y in offsets:                 # the upper part: above the unit's centre
            r = round(-y / pitch[1])
            assert 0.0 < y + r * pitch[1] < 0.5 * pitch[1]
