"""Preview pictures and the comparison sheet (the only module that imports matplotlib).

Colours follow the Okabe-Ito palette, chosen to stay distinguishable with the common
colour-vision deficiencies; every unit also carries its device name, so a picture reads
in grey print too.

References
----------
[1] M. Okabe, K. Ito, "Color Universal Design (CUD): how to make figures and presentations
    that are friendly to colorblind people", 2008. https://jfly.uni-koeln.de/color/
"""

from __future__ import annotations

import textwrap
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from placer.io.pattern import DUMMY, EMPTY, Pattern
from placer.model.grade import Grade

__all__ = ["PALETTE", "DUMMY_COLOUR", "device_colours", "draw_pattern", "save_preview",
           "save_comparison", "direction_errors", "save_budget", "save_sensitivity",
           "save_sequence"]

#: Okabe-Ito colours [1] without black (kept for text), most distinct first.
PALETTE = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7",
           "#999999")
DUMMY_COLOUR = "#FFFFFF"
DUMMY_HATCH = "///"
#: Entries in one column of a preview's legend (more go into further columns).
LEGEND_ROWS = 30
#: Outline of an empty slot (keep-out, or outside a masked footprint): faint, no fill.
EMPTY_EDGE = "#C8C8C8"
#: Hatches for devices past the 24 plain colours; slanted lines stay the dummies' own.
_HATCHES = ("", "..", "oo", "++", "xx", "--", "||", "**", "O.", "+o", "x.")
#: Patterns of more slots than this are drawn as one image (one pixel block a slot)...
RASTER_SLOTS = 20_000
#: ... and so are those of more than this whose devices need no hatch to tell them apart
#: (a slot is then a few pixels wide, its outline and drawn size no longer show, and a
#: rectangle per slot only costs time: 0.5 s of a 4096-unit run's pictures)
RASTER_PLAIN_SLOTS = 2048
DUMMY_RASTER = "#E4E4E4"       # dummies of a pattern drawn as an image (no hatch there)


def _mix(colour: str, other: tuple[float, float, float], t: float) -> str:
    rgb = [int(colour[i:i + 2], 16) / 255 for i in (1, 3, 5)]
    out = [(1 - t) * a + t * b for a, b in zip(rgb, other, strict=True)]
    return "#" + "".join(f"{round(255 * v):02X}" for v in out)


#: 24 plain colours: the palette, then its tints (half white), then its shades (40 % black).
COLOURS = (PALETTE + tuple(_mix(c, (1.0, 1.0, 1.0), 0.5) for c in PALETTE)
           + tuple(_mix(c, (0.0, 0.0, 0.0), 0.4) for c in PALETTE))


def device_colours(n: int) -> list[tuple[str, str]]:
    """(colour, hatch) per device, the same in every picture: 24 plain colours (the
    palette, its tints, its shades), then the same colours with dots, circles, crosses
    ... -- never the dummies' slanted hatch.

    Examples
    --------
    >>> device_colours(9)[8]
    ('#F2CF80', '')
    >>> len(set(device_colours(256))) == 256
    True
    """
    return [(COLOURS[i % len(COLOURS)], _HATCHES[(i // len(COLOURS)) % len(_HATCHES)])
            for i in range(n)]


def _figure(width_in: float, height_in: float) -> Any:
    from matplotlib.figure import Figure

    return Figure(figsize=(width_in, height_in))


def _write_figure(fig: Any, path: Path, dpi: int) -> None:
    """Save with no dates and fixed SVG ids, so the same input gives the same bytes."""
    import io

    import matplotlib

    from placer.io.staging import atomic_write

    buf = io.BytesIO()
    fmt = path.suffix.lstrip(".")
    meta = {"CreationDate": None} if fmt == "pdf" else ({"Date": None} if fmt == "svg"
                                                       else {})
    with matplotlib.rc_context({"svg.hashsalt": "placer"}):
        fig.savefig(buf, format=fmt, dpi=dpi, metadata=meta)
    atomic_write(path, buf.getvalue())


def draw_pattern(ax: Any, pattern: Pattern, pitch_um: tuple[float, float],
                 grade: Grade | None = None, *, names: bool | None = None,
                 markers: bool = True, arrows: bool = True,
                 gradient: tuple[float, float] | None = None,
                 cell_extent: tuple[float, float, float, float] | None = None,
                 moved: Sequence[tuple[int, int]] = (),
                 centroid_names: bool = True) -> None:
    """Draw every slot as a rectangle at true pitch on ``ax``.

    Units are filled in their device's colour with the device name in the upper part
    (the centre stays clear, so a test can read the fill there); dummies are white with
    a grey hatch; empty slots are left blank. Markers show each device's centroid and
    the centre of all device units; arrows show MOS finger orientation. ``gradient``
    (gx, gy) in ppm/um shades the background with that linear field. With
    ``cell_extent`` (x0, y0, x1, y1 of the unit cell about its centre) each unit is drawn
    at its drawn size and the routing channel below each row is shaded. ``moved`` slots
    (row, column) get a thick outline: the units a repair moved.
    """
    from matplotlib.collections import PatchCollection
    from matplotlib.patches import Rectangle

    px, py = pitch_um
    rows, cols = pattern.shape
    colours = device_colours(len(pattern.devices))
    w, h = 0.92 * px, 0.92 * py
    ox, oy = -w / 2, -h / 2
    raster = _as_image(pattern)
    if cell_extent is not None and not raster:
        ex0, ey0, ex1, ey1 = cell_extent
        w, h, ox, oy = ex1 - ex0, ey1 - ey0, ex0, ey0
        from matplotlib.patches import Rectangle as _R

        for r in range(rows):
            top = -r * py + ey0
            ax.add_patch(_R((-0.5 * px, top - (py - h)), cols * px, py - h,
                            facecolor="#f2f2f2", edgecolor="none", zorder=0.5))
    if gradient is not None:
        xs = np.linspace(-px, cols * px, 64)
        ys = np.linspace(-rows * py, py, 64)
        gx, gy = np.meshgrid(xs, ys)
        shade = ax.imshow(gradient[0] * gx + gradient[1] * gy,
                          extent=(xs[0], xs[-1], ys[0], ys[-1]), origin="lower", cmap="Greys",
                          alpha=0.35, zorder=0, aspect="auto")
        ax.get_figure().colorbar(shade, ax=ax, orientation="horizontal", fraction=0.04,
                                 pad=0.1, label="shading: the linear field, ppm from the "
                                                "top-left slot (darker: higher)")
    by_style: dict[tuple[str, str, str], list[Any]] = {}
    if raster:
        _raster(ax, pattern, pitch_um, colours)
    for r in range(0 if raster else rows):
        for c in range(cols):
            d = int(pattern.ids[r, c])
            x, y = c * px, -r * py
            if d == EMPTY:
                # an empty slot (keep-out, or outside a masked footprint): a faint outline
                by_style.setdefault(("none", "", EMPTY_EDGE), []).append(
                    Rectangle((x + ox, y + oy), w, h))
                continue
            if d == DUMMY:
                key = (DUMMY_COLOUR, DUMMY_HATCH, "#888888")
            else:
                key = (colours[d][0], colours[d][1], "#222222")
            by_style.setdefault(key, []).append(Rectangle((x + ox, y + oy), w, h))
    # outlines thin out as slots get many (else they swamp the fill in a small panel)
    lw = 0.6 if rows * cols <= 256 else 0.25 if rows * cols <= 1500 else 0.0
    for (face, hatch, edge), rects in by_style.items():
        ax.add_collection(PatchCollection(rects, facecolor=face, edgecolor=edge,
                                          hatch=hatch or None, linewidth=lw, zorder=1))
    margin = 0.3 * min(px, py)
    ax.set_xlim(-0.5 * px - margin, (cols - 0.5) * px + margin)
    ax.set_ylim(-(rows - 0.5) * py - margin, 0.5 * py + margin)
    ax.set_aspect("equal")
    # font size from the slot's size on the page; tall slots (MOS fingers) get upright names
    fig = ax.get_figure()
    bbox = ax.get_position()
    fw, fh = fig.get_size_inches()
    span = max((cols * px + 2 * margin) / (bbox.width * fw),
               (rows * py + 2 * margin) / (bbox.height * fh))     # um per inch
    cell_w, cell_h = 72 * px / span, 72 * py / span                # points
    box_w, box_h = 72 * w / span, 72 * h / span                    # the drawn unit
    upright = h > 1.5 * w
    longest = max(len(n) for n in pattern.devices)
    # the name sits in the top part of the drawn unit (0.55 to 0.95 of its height), the
    # finger arrow low in it: the centre stays clear
    along, across = (0.4 * box_h, box_w) if upright else (box_w, 0.4 * box_h)
    fs = min(9.0, 0.9 * along / (0.62 * longest), 0.75 * across)
    if names is None:
        names = fs >= 3.5
    arrows = arrows and min(cell_w, cell_h) >= 6.0     # smaller arrows are noise (and slow)
    if names:
        rr, cc = np.nonzero(pattern.ids >= 0)
        _names(ax, cc * px + ox + w / 2, -rr * py + oy + 0.75 * h,
               [pattern.devices[d] for d in pattern.ids[rr, cc]], fs, upright)
    if arrows:
        # every finger's arrow in one artist (one per unit would cost a draw each)
        rr, cc = np.nonzero((pattern.ids >= 0) & (pattern.orient != 0))
        if len(rr):
            o = pattern.orient[rr, cc].astype(float)
            ax.quiver(cc * px + ox + w / 2 - 0.3 * o * w, -rr * py + oy + 0.2 * h,
                      0.6 * o * w, np.zeros_like(o), angles="xy", scale_units="xy", scale=1,
                      units="xy", width=0.05 * min(w, h), headwidth=3.5, headlength=4,
                      headaxislength=3.5, color="black", zorder=3)
    if moved:
        pad = 0.04 * min(px, py)
        ax.add_collection(PatchCollection(
            [Rectangle((c * px + ox - pad, -r * py + oy - pad), w + 2 * pad, h + 2 * pad)
             for r, c in moved],
            facecolor="none", edgecolor="#D00000", linewidth=2.2, zorder=3.5))
    if markers and grade is not None:
        ax.plot(*grade.centre_um, marker="+", markersize=14, color="black", mew=2, zorder=4)
        # centroids above the centre mark; a name beside each, fanned out where several
        # centroids coincide (a common centroid puts them all on the centre)
        spots: dict[tuple[int, int], list[int]] = {}
        step = 0.25 * min(px, py)
        for d, dev in enumerate(grade.devices):
            x, y = dev.centroid_um
            ax.plot(x, y, marker="o", markersize=7, markerfacecolor=colours[d][0],
                    markeredgecolor="black", zorder=5, linestyle="none")
            spots.setdefault((round(x / step), round(y / step)), []).append(d)
        if centroid_names and len(spots) <= 4:
            # one label per place: centroids that coincide (a common centroid) share it;
            # more places than a few would crowd the centre (the legend has the offsets)
            for k, ds in enumerate(spots.values()):
                x, y = grade.devices[ds[0]].centroid_um
                angle = np.radians(40 + 70 * (k % 5))
                here = [grade.devices[d].name for d in ds]
                # many names at one place: a count (every device) or a short wrapped list,
                # so that the label stays inside the figure
                text = (f"all {len(here)} devices" if len(here) == len(grade.devices)
                        and len(here) > 4 else
                        textwrap.fill(", ".join(here[:12]) + (f" (+{len(here) - 12})"
                                                              if len(here) > 12 else ""), 28))
                ax.annotate(text, (x, y), xytext=(16 * np.cos(angle), 16 * np.sin(angle)),
                            textcoords="offset points", fontsize=7, zorder=6,
                            ha="left" if np.cos(angle) >= 0 else "right", va="center",
                            bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none",
                                  "alpha": 0.85},
                            arrowprops={"arrowstyle": "-", "lw": 0.5, "color": "black"})
    ax.set_xlabel("x (um)")
    ax.set_ylabel("y (um)")


def _names(ax: Any, xs: NDArray[np.floating[Any]], ys: NDArray[np.floating[Any]],
           labels: list[str], size_pt: float, upright: bool) -> None:
    """Each label centred at its (x, y) in data units, ``size_pt`` high: one collection of
    glyph outlines per distinct label (a text artist per unit would cost a layout and a
    draw each; the outlines are drawn once and placed at every offset)."""
    from matplotlib.collections import PathCollection
    from matplotlib.font_manager import FontProperties
    from matplotlib.path import Path as MPath
    from matplotlib.textpath import TextPath
    from matplotlib.transforms import Affine2D

    fig = ax.get_figure()
    points = Affine2D().scale(1 / 72) + fig.dpi_scale_trans     # path units: points
    font = FontProperties(family="DejaVu Sans")
    where: dict[str, list[int]] = {}
    for k, label in enumerate(labels):
        where.setdefault(label, []).append(k)
    for label, ks in where.items():
        glyphs = TextPath((0, 0), label, size=size_pt, prop=font)
        v = glyphs.vertices
        (x0, y0), (x1, y1) = v.min(axis=0), v.max(axis=0)
        v = v - [(x0 + x1) / 2, (y0 + y1) / 2]
        if upright:
            v = v @ np.array([[0.0, 1.0], [-1.0, 0.0]])        # a quarter turn left
        path = MPath(v, glyphs.codes)
        ax.add_collection(PathCollection(
            [path], offsets=np.column_stack([xs[ks], ys[ks]]), offset_transform=ax.transData,
            transform=points, facecolors="black", edgecolors="none", zorder=3))


def _as_image(pattern: Pattern) -> bool:
    """Whether the pattern is drawn as one image (:data:`RASTER_SLOTS`)."""
    n = pattern.ids.size
    return n > RASTER_SLOTS or (n > RASTER_PLAIN_SLOTS
                                and all(not h for _, h in device_colours(len(pattern.devices))))


def _raster(ax: Any, pattern: Pattern, pitch_um: tuple[float, float],
            colours: list[tuple[str, str]]) -> None:
    """A large pattern as one image, a block of pixels per slot (hatches cannot show)."""
    from matplotlib.colors import to_rgba

    px, py = pitch_um
    rows, cols = pattern.shape
    table = np.array([to_rgba(c) for c, _ in colours] + [to_rgba(DUMMY_RASTER),
                                                          (1.0, 1.0, 1.0, 0.0)])
    ids = np.where(pattern.ids >= 0, pattern.ids,
                   np.where(pattern.ids == DUMMY, len(colours), len(colours) + 1))
    ax.imshow(table[ids], extent=(-0.5 * px, (cols - 0.5) * px, -(rows - 0.5) * py, 0.5 * py),
              interpolation="nearest", zorder=1, aspect="auto")


def _units(n: int) -> str:
    """'1 unit', '3 units'."""
    return f"{n} unit" if n == 1 else f"{n} units"


def _legend(ax: Any, pattern: Pattern, grade: Grade | None, moved: bool = False) -> None:
    from matplotlib.patches import Patch

    colours = device_colours(len(pattern.devices))
    handles = []
    counts = pattern.counts()
    for d, name in enumerate(pattern.devices):
        extra = ""
        if grade is not None:
            off = grade.devices[d].offset_um
            extra = f", offset {0.0 if abs(off) < 1e-9 else off:.3g} um"
        handles.append(Patch(facecolor=colours[d][0], hatch=colours[d][1] or None,
                             edgecolor="#222222",
                             label=f"{name}: {_units(counts[d])}{extra}"))
    if np.any(pattern.ids == DUMMY):
        if _as_image(pattern):
            handles.append(Patch(facecolor=DUMMY_RASTER, edgecolor="#888888", label="dummy"))
        else:
            handles.append(Patch(facecolor=DUMMY_COLOUR, hatch=DUMMY_HATCH,
                                 edgecolor="#888888", label="dummy"))
    if np.any(pattern.ids == EMPTY) and not _as_image(pattern):
        handles.append(Patch(facecolor="none", edgecolor=EMPTY_EDGE,
                             label="empty slot"))
    if moved:
        handles.append(Patch(facecolor="none", edgecolor="#D00000", linewidth=2.2,
                             label="moved by the repair"))
    # a long legend goes into columns so it never runs off the page
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8,
              frameon=False, title="o centroid, + centre", title_fontsize=8,
              ncols=max(1, -(-len(handles) // LEGEND_ROWS)))


def _title(name: str, grade: Grade | None) -> str:
    if grade is None or not grade.pairs:
        return name
    lin = grade.worst("linear_ppm")
    quad = grade.worst("quadratic_ppm")
    rnd = grade.worst("random_sigma_ppm")
    assert lin and quad and rnd
    return (f"{name}\nworst linear {lin.linear_ppm:.3g} ppm ({lin.a}/{lin.b}), quadratic "
            f"{quad.quadratic_ppm:.3g} ppm,\ncorrelated sigma "
            f"{max(p.correlated_sigma_ppm for p in grade.pairs):.3g} ppm (model estimates)")


def save_preview(pattern: Pattern, pitch_um: tuple[float, float], grade: Grade | None,
                 name: str, paths: Sequence[Path], *, dpi: int = 110,
                 gradient: tuple[float, float] | None = None,
                 cell_extent: tuple[float, float, float, float] | None = None,
                 moved: Sequence[tuple[int, int]] = ()) -> None:
    """Write the preview picture to each of ``paths`` (format from the suffix)."""
    rows, cols = pattern.shape
    px, py = pitch_um
    span_x, span_y = (cols + 1) * px, (rows + 1) * py
    width = float(np.clip(span_x / max(span_x, span_y) * 7.0, 2.5, 9.0)) + 3.2
    height = float(np.clip(span_y / max(span_x, span_y) * 7.0, 1.6, 9.0)) + 1.2
    # room for the legend: a column of up to LEGEND_ROWS entries each, side by side, so
    # that many devices never squeeze the array or run off the picture
    entries = len(pattern.devices) + 3
    width += 2.9 * (-(-entries // LEGEND_ROWS) - 1)
    height = max(height, 0.19 * min(entries, LEGEND_ROWS) + 1.9)
    fig = _figure(width, height)
    fig.set_layout_engine("constrained")
    ax = fig.add_subplot()
    draw_pattern(ax, pattern, pitch_um, grade, gradient=gradient, cell_extent=cell_extent,
                 moved=moved)
    _legend(ax, pattern, grade, moved=bool(moved))
    fig.suptitle(_title(name, grade), fontsize=9, x=0.01, ha="left")
    for path in paths:
        _write_figure(fig, path, dpi)


def direction_errors(grade_pairs: Sequence[Any], theta: np.ndarray, g_ppm_per_um: float,
                     centroids: dict[str, tuple[float, float]]) -> np.ndarray:
    """Worst pair's ratio error (ppm) under a linear gradient pointing at each angle."""
    worst = np.zeros_like(theta)
    for p in grade_pairs:
        ca, cb = np.array(centroids[p.a]), np.array(centroids[p.b])
        d = ca - cb
        worst = np.maximum(worst, np.abs(g_ppm_per_um * (np.cos(theta) * d[0]
                                                         + np.sin(theta) * d[1])))
    return worst


#: Landscape page sizes (inches) of the comparison sheet.
PAPER = {"a4": (11.69, 8.27), "letter": (11.0, 8.5)}
#: Arrangement colours of the comparison sheet: greys for the baselines, black for the
#: search's result (never a device colour: the patterns above use those).
_ENTRY_COLOURS = ("#C8C8C8", "#9A9A9A", "#6A6A6A", "#000000")
_ENTRY_HATCHES = ("", "..", "//", "")


def save_comparison(entries: Sequence[tuple[str, Pattern, Grade, float]],
                    pitch_um: tuple[float, float], g_ppm_per_um: float, title: str,
                    paths: Sequence[Path], paper: str = "a4") -> None:
    """One landscape page (``paper``: a4 or letter): the arrangements side by side, a bar
    chart of their scores and the ratio error against gradient direction. ``entries``
    holds (label, pattern, grade, routing), the search's result last."""
    n = len(entries)
    fig = _figure(*PAPER[paper])
    fig.suptitle(title, fontsize=10, x=0.02, ha="left")
    gs = fig.add_gridspec(3, n, height_ratios=[0.9, 1.0, 1.15], hspace=0.65, wspace=0.3,
                          left=0.06, right=0.8, top=0.88, bottom=0.06)
    labels = [e[0] for e in entries]
    for i, (label, pattern, grade, _) in enumerate(entries):
        ax = fig.add_subplot(gs[0, i])
        draw_pattern(ax, pattern, pitch_um, grade, arrows=False, centroid_names=False)
        lin = grade.worst("linear_ppm")
        quad = grade.worst("quadratic_ppm")
        ax.set_title(f"{label}\nlinear {lin.linear_ppm if lin else 0:.3g} ppm, quad "
                     f"{quad.quadratic_ppm if quad else 0:.3g} ppm", fontsize=8)
        ax.tick_params(labelsize=6)
        ax.xaxis.label.set_size(7)
        ax.yaxis.label.set_size(7)
    from matplotlib.patches import Patch

    first = entries[0][1]
    colours_d = device_colours(len(first.devices))
    handles = [Patch(facecolor=colours_d[d][0], hatch=colours_d[d][1] or None,
                     edgecolor="#222222", label=f"{name} ({_units(int(c))})")
               for d, (name, c) in enumerate(zip(first.devices, first.counts(), strict=True))]
    handles.append(Patch(facecolor=DUMMY_COLOUR, hatch=DUMMY_HATCH, edgecolor="#888888",
                         label="dummy"))
    fig.legend(handles=handles, loc="upper left", bbox_to_anchor=(0.82, 0.88), fontsize=7,
               frameon=False, title="devices (o centroid, + centre)", title_fontsize=7,
               ncols=max(1, -(-len(handles) // 16)))
    metrics = [
        ("worst linear (ppm)", [max((p.linear_ppm for p in e[2].pairs), default=0.0)
                                for e in entries]),
        ("worst quadratic (ppm)", [max((p.quadratic_ppm for p in e[2].pairs), default=0.0)
                                   for e in entries]),
        ("worst correlated sigma (ppm)", [max((p.correlated_sigma_ppm for p in e[2].pairs),
                                              default=0.0) for e in entries]),
        ("wiring: spanning trees (um)", [e[3] for e in entries]),
    ]
    colours = [_ENTRY_COLOURS[-1] if i == n - 1 else _ENTRY_COLOURS[i % 3] for i in range(n)]
    hatches = [_ENTRY_HATCHES[-1] if i == n - 1 else _ENTRY_HATCHES[i % 3] for i in range(n)]
    bars = gs[1, :].subgridspec(1, len(metrics), wspace=0.45)
    for j, (name, values) in enumerate(metrics):
        ax = fig.add_subplot(bars[0, j])
        ax.bar(range(n), values, color=colours, edgecolor="black", hatch=hatches)
        ax.set_xticks(range(n), labels, rotation=25, fontsize=7, ha="right")
        ax.tick_params(axis="y", labelsize=7)
        ax.set_title(name, fontsize=8)
        top = max(max(values, default=0.0), 1e-12)
        ax.set_ylim(0, 1.18 * top)
        for k, v in enumerate(values):
            ax.text(k, v, f"{v:.0f}" if abs(v) >= 1000 else f"{v:.3g}", ha="center",
                    va="bottom", fontsize=6)
    ax = fig.add_subplot(gs[2, :], projection="polar")
    theta = np.linspace(0, 2 * np.pi, 361)
    styles = ["--", "-.", ":"]
    for i, (label, _, grade, _) in enumerate(entries):
        cents = {d.name: d.centroid_um for d in grade.devices}
        err = direction_errors(grade.pairs, theta, g_ppm_per_um, cents)
        last = i == n - 1
        ax.plot(theta, err, "-" if last else styles[i % 3], color=colours[i],
                lw=2.6 if last else 1.6, zorder=3 if last else 2,
                label=label + (" (zero in every direction)" if err.max() < 1e-9 else ""))
    ax.tick_params(labelsize=7)
    from matplotlib.ticker import MaxNLocator

    ax.yaxis.set_major_locator(MaxNLocator(3))
    ax.set_title(f"worst pair ratio error (ppm) against gradient direction, "
                 f"{g_ppm_per_um:g} ppm/um", fontsize=8)
    ax.legend(loc="upper left", bbox_to_anchor=(1.1, 1.0), fontsize=8)
    for path in paths:
        _write_figure(fig, path, 100)


def _save(fig: Any, paths: Sequence[Path], dpi: int = 100) -> None:
    for path in paths:
        _write_figure(fig, path, dpi)


def ratio_error_density(ln: Any, points: int = 801, directions: int = 720
                        ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """The probability density of one output's ratio error (%), exactly as the budget
    models it: fixed parts (channel-length modulation, the wiring, the curvature at its
    worst sign) plus the linear part turning with a gradient of uniformly random direction
    (``g cos theta``) plus normal random mismatch -- the average over the direction of a
    normal density (no sampling). Returns (x, density) on ``points`` abscissae.

    >>> from types import SimpleNamespace as L
    >>> x, f = ratio_error_density(L(clm_pct=0.1, wiring_pct=None, quadratic_pct=0.0,
    ...                              gradient_pct=0.0, random_sigma_pct=0.5))
    >>> round(float(np.sum(f) * (x[1] - x[0])), 4), round(float(x[np.argmax(f)]), 3)
    (1.0, 0.1)
    """
    centre = ln.clm_pct + (ln.wiring_pct or 0.0) + ln.quadratic_pct
    g = abs(ln.gradient_pct)
    sigma = abs(ln.random_sigma_pct)
    half = g + 5.0 * max(sigma, 0.02 * g) if g + sigma > 0 else 1e-6
    x = np.linspace(centre - half, centre + half, points)
    # a tiny sigma against the gradient: smooth to two grid steps (the arcsine peaks)
    s = max(sigma, 2.0 * (x[1] - x[0]))
    theta = (np.arange(directions) + 0.5) * (2.0 * np.pi / directions)
    z = (x[:, None] - centre - g * np.cos(theta)[None, :]) / s
    density = np.exp(-0.5 * z * z).mean(axis=1) / (s * np.sqrt(2.0 * np.pi))
    return x, density


def save_budget(b: Any, name: str, paths: Sequence[Path],
                devices: Sequence[str] = ()) -> None:
    """Budget picture: the ratio error's exact density (mirrors, resistors; see
    :func:`ratio_error_density`), one panel per output wrapped into rows of three, in
    each device's colour (``devices``: the spec's order,
    which fixes the colours); or INL and DNL by code for a capacitor array, the gradient
    curve with the random 99th-percentile band."""
    from placer.model.budget import DacBudget

    if isinstance(b, DacBudget):
        fig = _figure(9.0, 6.4)
        fig.set_layout_engine("constrained")
        ax1, ax2 = fig.subplots(2, 1, sharex=True)
        codes = np.arange(len(b.gradient_inl_lsb))
        inl = np.array(b.gradient_inl_lsb)
        dnl = np.array(b.gradient_dnl_lsb)
        band_i = np.array(b.mc_inl_p99_lsb)
        band_d = np.array(b.mc_dnl_p99_lsb)
        quad_i = np.array(b.quadratic_inl_curve_lsb)
        quad_d = np.array(b.quadratic_dnl_curve_lsb)
        for ax, band, curve, quad, x, what in ((ax1, band_i, inl, quad_i, codes, "INL"),
                                               (ax2, band_d, dnl, quad_d, codes[:-1], "DNL")):
            ax.fill_between(x, -band, band, color=PALETTE[1], alpha=0.4, lw=0,
                            label=f"random: 99th percentile of |{what}| ({b.mc_samples} "
                                  f"samples), up to {band.max(initial=0.0):.3g} LSB")
            ax.plot(x, curve, color="black", lw=1.2,
                    label=f"linear gradient, worst direction {b.worst_direction_deg:.0f} "
                          f"deg: up to {np.abs(curve).max(initial=0.0):.3g} LSB")
            if len(quad) == len(x) and np.any(quad):
                ax.plot(x, quad, color=PALETTE[5], lw=1.2, ls="--",
                        label=f"curvature, the Hessian worst for INL: up to "
                              f"{np.abs(quad).max(initial=0.0):.3g} LSB")
            ax.axhline(0.0, color="#888888", lw=0.5)
            ax.set_ylabel(f"{what} (LSB)")
            ax.legend(fontsize=8, loc="best", framealpha=0.85)
        ax2.set_xlabel("code (DNL: the step from code k to k + 1)")
        ax1.set_title(f"{name}: INL and DNL against the {b.fit} line (model estimates)",
                      fontsize=10, loc="left", wrap=True)
        _save(fig, paths)
        return
    n = max(len(b.lines), 1)
    ncols = min(n, 3)
    nrows = -(-n // ncols)
    width_in = 4.0 * ncols
    fig = _figure(width_in, 3.3 * nrows + 0.5)
    fig.set_layout_engine("constrained")
    axes = np.atleast_1d(fig.subplots(nrows, ncols, squeeze=False)).ravel()
    index = {d: i for i, d in enumerate(devices)}
    colours = device_colours(max(len(devices), 1))
    for k, ln in enumerate(b.lines):
        ax = axes[k]
        colour = colours[index[ln.device]][0] if ln.device in index else PALETTE[k % 8]
        err, density = ratio_error_density(ln)
        ax.fill_between(err, 0.0, density, color=colour, lw=0)
        for v in (-b.tolerance_pct, b.tolerance_pct):
            ax.axvline(v, color="black", ls="--", lw=1)
        ax.set_title(f"{ln.device} / {b.reference}: {100 * ln.within_tolerance:.1f}% within "
                     f"+-{b.tolerance_pct:g}%\n(gradient at its worst)", fontsize=9)
        ax.set_xlabel("ratio error (%)")
        ax.set_ylim(bottom=0.0)
        if k % ncols == 0:
            ax.set_ylabel("probability density (1/%)")
    for ax in axes[len(b.lines):]:
        ax.set_axis_off()
    if not b.lines:
        axes[0].text(0.5, 0.5, "one device: no ratio to budget", ha="center", va="center",
                     transform=axes[0].transAxes)
    # wrapped to the figure's width (about 13 characters an inch at 10 pt)
    fig.suptitle(textwrap.fill(f"{name}: electrical budget (model estimates; the exact "
                               "distribution over a gradient of random direction and the "
                               "random mismatch, dashed: the tolerance)",
                               int(width_in * 13)), fontsize=10)
    _save(fig, paths)


def save_sensitivity(pattern: Pattern, pitch_um: tuple[float, float], units: Sequence[Any],
                     pair: str, name: str, paths: Sequence[Path]) -> None:
    """Shade every unit of the worst pair by its share of that pair's linear error."""
    from matplotlib.collections import PatchCollection
    from matplotlib.colors import TwoSlopeNorm
    from matplotlib.patches import Rectangle

    px, py = pitch_um
    rows, cols = pattern.shape
    fig = _figure(float(np.clip(cols * px / max(cols * px, rows * py) * 7, 3, 9)) + 2.0,
                  float(np.clip(rows * py / max(cols * px, rows * py) * 7, 2, 9)) + 1.2)
    fig.set_layout_engine("constrained")
    ax = fig.add_subplot()
    grey = []
    for r in range(rows):
        for c in range(cols):
            if pattern.ids[r, c] != EMPTY:
                grey.append(Rectangle((c * px - 0.46 * px, -r * py - 0.46 * py), 0.92 * px,
                                      0.92 * py))
    ax.add_collection(PatchCollection(grey, facecolor="#eeeeee", edgecolor="#bbbbbb",
                                      linewidth=0.5))
    if units:
        vals = np.array([u.contribution_ppm for u in units])
        # a scale set by the bulk of the units, not the one largest: the few beyond it
        # show at full colour and the bar says so
        big = float(np.abs(vals).max())
        lim = max(float(np.percentile(np.abs(vals), 95)), big / 20, 1e-12)
        rects = [Rectangle((u.col * px - 0.46 * px, -u.row * py - 0.46 * py), 0.92 * px,
                           0.92 * py) for u in units]
        coll = PatchCollection(rects, cmap="RdBu_r", norm=TwoSlopeNorm(0.0, -lim, lim),
                               edgecolor="black", linewidth=0.5)
        coll.set_array(vals)
        ax.add_collection(coll)
        fig.colorbar(coll, ax=ax, shrink=0.8, extend="both" if big > lim * 1.0001 else
                     "neither",
                     label="contribution to the error (ppm)"
                           + (f"; largest {big:.3g}" if big > lim * 1.0001 else ""))
        if rows * cols <= 400:
            # white names on the darkest shades (beyond 60 % of the scale), black elsewhere
            for u, v in zip(units, vals, strict=True):
                ax.text(u.col * px, -u.row * py, u.device, ha="center", va="center",
                        fontsize=7, color="white" if abs(v) > 0.6 * lim else "black")
    margin = 0.3 * min(px, py)
    ax.set_xlim(-0.5 * px - margin, (cols - 0.5) * px + margin)
    ax.set_ylim(-(rows - 0.5) * py - margin, 0.5 * py + margin)
    ax.set_aspect("equal")
    ax.set_xlabel("x (um)")
    ax.set_ylabel("y (um)")

    width_chars = int(fig.get_size_inches()[0] * 13)
    if not units:
        # no pair has a linear error: every unit's share is zero, nothing to shade
        if rows * cols <= 400:
            for r in range(rows):
                for c in range(cols):
                    d = pattern.ids[r, c]
                    if d >= 0:
                        ax.text(c * px, -r * py, pattern.devices[d], ha="center",
                                va="center", fontsize=7, color="black")
        fig.suptitle(textwrap.fill(f"{name}: no pair has a linear error (every device's "
                                   "centroid on the common centre): no unit adds to one",
                                   width_chars), fontsize=9, x=0.02, ha="left")
        _save(fig, paths)
        return
    what = pair.replace(" under the ", " error under the ", 1) if " under the " in pair \
        else f"{pair} error"
    fig.suptitle(textwrap.fill(f"{name}: each unit's share of the {what}", width_chars)
                 + "\n" + textwrap.fill("(red adds, blue cancels; grey: units of other "
                                         "devices, not in this pair)", width_chars),
                 fontsize=9, x=0.02, ha="left")
    _save(fig, paths)


def save_sequence(rep: Any, paths: Sequence[Path]) -> None:
    """A unary array's picture: the core with each slot's sequence number (shaded from the
    first cell on to the last), and INL against code -- in the gradient's worst
    direction, its linear and bowl parts, and the random and correlated 3-sigma bands."""
    spec, lay = rep.spec, rep.layout
    grid = lay.grid()
    rows, cols = grid.shape
    fig = _figure(12.0, 5.6)
    fig.set_layout_engine("constrained")
    axes = fig.subplot_mosaic([["grid", "inl"], ["grid", "dnl"]], width_ratios=[1.0, 1.3],
                              height_ratios=[3.0, 1.0])
    ax1, ax2, ax3 = axes["grid"], axes["inl"], axes["dnl"]
    shade = np.where(grid > 0, grid, np.nan).astype(float)
    px, py = spec.pitch_um
    extent = (-0.5 * px, (cols - 0.5) * px, -(rows - 0.5) * py, 0.5 * py)
    img = ax1.imshow(shade, cmap="viridis", interpolation="nearest", extent=extent)
    fig.colorbar(img, ax=ax1, fraction=0.046, pad=0.02,
                 label="unary cell's sequence number" if lay.bits else
                 "sequence number (code)")
    if lay.bits:
        # the binary cells in greys, the LSB lightest
        nb = len(lay.bits)
        low = np.where(grid < 0, -grid, np.nan).astype(float)
        ax1.imshow(low, cmap="Greys", vmin=-1.0, vmax=nb + 1.0, interpolation="nearest",
                   extent=extent)
    # the numbers, where a slot is big enough on the page to hold them
    width = max(len(str(lay.n_cells)), 2 if lay.bits else 1)
    size = min(9.0, 260.0 / max(rows, cols) / width * 1.6)
    if size >= 4.0:
        from placer.io.unaryspec import grid_token

        for r in range(rows):
            for c in range(cols):
                v = int(grid[r, c])
                light = (0 < v < 0.6 * lay.n_cells) or (v < 0 and -v > len(lay.bits) / 2)
                ax1.text(c * px, -r * py, grid_token(v), ha="center", va="center",
                         fontsize=size, color="white" if light else "black")
    ax1.set_xlabel("x (um)")
    ax1.set_ylabel("y (um)")
    bits = (f" + binary b0..b{len(lay.bits) - 1} (greys)" if lay.bits else "")
    ax1.set_title(f"{spec.name}: {lay.n_cells} cells x {spec.sub_units} sub-unit"
                  f"{'s' if spec.sub_units > 1 else ''}{bits} on {rows} x {cols}", fontsize=9)
    codes = np.arange(len(rep.inl_lsb))
    ax2.fill_between(codes, -3 * rep.random_sigma_lsb, 3 * rep.random_sigma_lsb,
                     color=PALETTE[1], alpha=0.35, lw=0,
                     label=f"random, 3 sigma (area law): up to "
                           f"{3 * rep.random_sigma_lsb.max():.3g} LSB (may run off the axis)")
    if np.any(rep.correlated_sigma_lsb):
        ax2.plot(codes, 3 * rep.correlated_sigma_lsb, color=PALETTE[4], lw=1.0, ls="-.",
                 label=f"correlated field, 3 sigma: up to "
                       f"{3 * rep.correlated_sigma_lsb.max():.3g} LSB")
    ax2.plot(codes, rep.inl_lsb, color="black", lw=1.4,
             label=f"gradient + bowl, worst direction {rep.worst_direction_deg:.0f} deg: "
                   f"worst {rep.worst_inl_lsb:.3g} LSB at code {rep.worst_code}")
    ax2.plot(codes, rep.linear_part_lsb, color=PALETTE[0], lw=1.0, ls="--",
             label="linear part, each code in its own worst direction")
    ax2.plot(codes, rep.bowl_part_lsb, color=PALETTE[5], lw=1.0, ls=":",
             label="bowl and hot-spot part" if spec.fields.hot_spot else "bowl part")
    if rep.given_inl_lsb is not None:
        ax2.plot(codes, rep.given_inl_lsb, color="#777777", lw=1.0,
                 label=f"at the given direction, {spec.fields.direction_deg:g} deg: worst "
                       f"{abs(rep.given_inl_lsb).max():.3g} LSB")
    ax2.axhline(0, color="#888888", lw=0.5)
    # the scale of the systematic curves: a random band many times wider runs off it
    # (its size is in the legend)
    top = 1.3 * max(float(np.abs(rep.inl_lsb).max()), float(rep.linear_part_lsb.max()),
                    float(3 * rep.correlated_sigma_lsb.max()), 1e-12)
    if 3 * rep.random_sigma_lsb.max() > top:
        ax2.set_ylim(-top, 1.6 * top)
    ax2.set_ylabel("INL (LSB, end points fitted)")
    ax2.legend(fontsize=7, loc="upper left", frameon=False)
    ax2.set_title(f"{rep.method} (model estimates)", fontsize=9)
    ax2.sharex(ax3)
    ax2.tick_params(labelbottom=False)
    ax3.plot(codes[1:], rep.dnl_lsb, color="black", lw=0.8)
    ax3.axhline(0, color="#888888", lw=0.5)
    worst = int(np.argmax(np.abs(rep.dnl_lsb)))
    ax3.plot([worst + 1], [rep.dnl_lsb[worst]], "o", color=PALETTE[4], ms=4,
             label=f"worst |DNL| {abs(rep.dnl_lsb[worst]):.3g} LSB at step {worst + 1}")
    ax3.legend(fontsize=7, loc="upper left", frameon=False)
    ax3.set_xlabel("code")
    ax3.set_ylabel("DNL (LSB)")
    for path in paths:
        _write_figure(fig, path, 110)
