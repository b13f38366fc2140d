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

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from placer.pattern import DUMMY, EMPTY, Pattern
from placer.score import Grade

__all__ = ["PALETTE", "DUMMY_COLOUR", "device_colours", "draw_pattern", "save_preview",
           "save_comparison", "direction_errors"]

#: Okabe-Ito colours [1] without black (kept for text), most distinct first.
PALETTE = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7",
           "#999999")
DUMMY_COLOUR = "#FFFFFF"
_HATCHES = ("", "//", "..", "xx", "\\\\", "oo", "++", "--")


def device_colours(n: int) -> list[tuple[str, str]]:
    """(colour, hatch) per device: the palette first, then the palette again hatched."""
    return [(PALETTE[i % len(PALETTE)], _HATCHES[(i // len(PALETTE)) % len(_HATCHES)])
            for i in range(n)]


def _figure(width_in: float, height_in: float) -> Any:
    from matplotlib.figure import Figure

    return Figure(figsize=(width_in, height_in))


def draw_pattern(ax: Any, pattern: Pattern, pitch_um: tuple[float, float],
                 grade: Grade | None = None, *, names: bool | None = None,
                 markers: bool = True, arrows: bool = True,
                 gradient: tuple[float, float] | None = None) -> None:
    """Draw every slot as a rectangle at true pitch on ``ax``.

    Units are filled in their device's colour with the device name in the upper part
    (the centre stays clear, so a test can read the fill there); dummies are white with
    a grey hatch; empty slots are left blank. Markers show each device's centroid and
    the centre of all device units; arrows show MOS finger orientation. ``gradient``
    (gx, gy) in ppm/um shades the background with that linear field.
    """
    from matplotlib.collections import PatchCollection
    from matplotlib.patches import Rectangle

    px, py = pitch_um
    rows, cols = pattern.shape
    colours = device_colours(len(pattern.devices))
    w, h = 0.92 * px, 0.92 * py
    if gradient is not None:
        xs = np.linspace(-px, cols * px, 64)
        ys = np.linspace(-rows * py, py, 64)
        gx, gy = np.meshgrid(xs, ys)
        ax.imshow(gradient[0] * gx + gradient[1] * gy, extent=(xs[0], xs[-1], ys[0], ys[-1]),
                  origin="lower", cmap="Greys", alpha=0.35, zorder=0, aspect="auto")
    by_style: dict[tuple[str, str, str], list[Any]] = {}
    for r in range(rows):
        for c in range(cols):
            d = int(pattern.ids[r, c])
            if d == EMPTY:
                continue
            x, y = c * px, -r * py
            if d == DUMMY:
                key = (DUMMY_COLOUR, "///", "#888888")
            else:
                key = (colours[d][0], colours[d][1], "#222222")
            by_style.setdefault(key, []).append(Rectangle((x - w / 2, y - h / 2), w, h))
    for (face, hatch, edge), rects in by_style.items():
        ax.add_collection(PatchCollection(rects, facecolor=face, edgecolor=edge,
                                          hatch=hatch or None, linewidth=0.6, zorder=1))
    n_slots = rows * cols
    if names is None:
        names = n_slots <= 400
    if names or arrows:
        fs = max(4.0, min(9.0, 260.0 / max(cols, rows * py / px, 1)))
        for r in range(rows):
            for c in range(cols):
                d = int(pattern.ids[r, c])
                if d < 0:
                    continue
                x, y = c * px, -r * py
                if names:
                    ax.text(x, y + 0.27 * py, pattern.devices[d], ha="center", va="center",
                            fontsize=fs, color="black", zorder=3, clip_on=True)
                o = int(pattern.orient[r, c])
                if arrows and o:
                    ax.annotate("", xy=(x + 0.3 * o * px, y - 0.27 * py),
                                xytext=(x - 0.3 * o * px, y - 0.27 * py),
                                arrowprops={"arrowstyle": "->", "lw": 0.8, "color": "black"},
                                zorder=3)
    if markers and grade is not None:
        for d, dev in enumerate(grade.devices):
            ax.plot(*dev.centroid_um, marker="o", markersize=7, markerfacecolor=colours[d][0],
                    markeredgecolor="black", zorder=4, linestyle="none")
        ax.plot(*grade.centre_um, marker="+", markersize=14, color="black", mew=2, zorder=5)
    margin = 0.3 * min(px, py)
    ax.set_xlim(-0.5 * px - margin, (cols - 0.5) * px + margin)
    ax.set_ylim(-(rows - 0.5) * py - margin, 0.5 * py + margin)
    ax.set_aspect("equal")
    ax.set_xlabel("x (um)")
    ax.set_ylabel("y (um)")


def _legend(ax: Any, pattern: Pattern, grade: Grade | None) -> None:
    from matplotlib.patches import Patch

    colours = device_colours(len(pattern.devices))
    handles = []
    counts = pattern.counts()
    for d, name in enumerate(pattern.devices):
        extra = ""
        if grade is not None:
            extra = f", offset {grade.devices[d].offset_um:.3g} um"
        handles.append(Patch(facecolor=colours[d][0], hatch=colours[d][1] or None,
                             edgecolor="#222222", label=f"{name}: {counts[d]} units{extra}"))
    if np.any(pattern.ids == DUMMY):
        handles.append(Patch(facecolor=DUMMY_COLOUR, hatch="///", edgecolor="#888888",
                             label="dummy"))
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8,
              frameon=False, title="o centroid, + centre", title_fontsize=8)


def _title(name: str, grade: Grade | None) -> str:
    if grade is None or not grade.pairs:
        return name
    lin = grade.worst("linear_ppm")
    quad = grade.worst("quadratic_ppm")
    rnd = grade.worst("random_sigma_ppm")
    assert lin and quad and rnd
    return (f"{name}: worst linear {lin.linear_ppm:.3g} ppm ({lin.a}/{lin.b}), quadratic "
            f"{quad.quadratic_ppm:.3g} ppm, correlated sigma "
            f"{max(p.correlated_sigma_ppm for p in grade.pairs):.3g} ppm")


def save_preview(pattern: Pattern, pitch_um: tuple[float, float], grade: Grade | None,
                 name: str, paths: Sequence[Path], *, dpi: int = 110,
                 gradient: tuple[float, float] | None = None) -> None:
    """Write the preview picture to each of ``paths`` (format from the suffix)."""
    from placer.output import atomic_write

    rows, cols = pattern.shape
    px, py = pitch_um
    span_x, span_y = (cols + 1) * px, (rows + 1) * py
    width = float(np.clip(span_x / max(span_x, span_y) * 7.0, 2.5, 9.0)) + 3.2
    height = float(np.clip(span_y / max(span_x, span_y) * 7.0, 1.6, 9.0)) + 1.2
    fig = _figure(width, height)
    fig.set_layout_engine("constrained")
    ax = fig.add_subplot()
    draw_pattern(ax, pattern, pitch_um, grade, gradient=gradient)
    _legend(ax, pattern, grade)
    ax.set_title(_title(name, grade), fontsize=9, loc="left")
    for path in paths:
        import io

        buf = io.BytesIO()
        fmt = path.suffix.lstrip(".")
        meta = {"Date": None} if fmt == "svg" else ({"CreationDate": None} if fmt == "pdf"
                                                      else {})
        fig.savefig(buf, format=fmt, dpi=dpi, metadata=meta)
        atomic_write(path, buf.getvalue())


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


def save_comparison(entries: Sequence[tuple[str, Pattern, Grade, float]],
                    pitch_um: tuple[float, float], g_ppm_per_um: float, title: str,
                    paths: Sequence[Path]) -> None:
    """One page: the arrangements side by side, a bar chart of their scores and the ratio
    error against gradient direction. ``entries`` holds (label, pattern, grade, routing)."""
    from placer.output import atomic_write

    n = len(entries)
    fig = _figure(4.2 * n, 10.5)
    fig.suptitle(title, fontsize=12, x=0.02, ha="left")
    gs = fig.add_gridspec(3, n, height_ratios=[1.3, 1.0, 1.0], hspace=0.45, wspace=0.3,
                          left=0.06, right=0.98, top=0.9, bottom=0.06)
    labels = [e[0] for e in entries]
    for i, (label, pattern, grade, _) in enumerate(entries):
        ax = fig.add_subplot(gs[0, i])
        draw_pattern(ax, pattern, pitch_um, grade, arrows=False)
        lin = grade.worst("linear_ppm")
        quad = grade.worst("quadratic_ppm")
        ax.set_title(f"{label}\nlinear {lin.linear_ppm if lin else 0:.3g} ppm, quad "
                     f"{quad.quadratic_ppm if quad else 0:.3g} ppm", fontsize=9)
    metrics = [
        ("worst linear (ppm)", [max((p.linear_ppm for p in e[2].pairs), default=0.0)
                                for e in entries]),
        ("worst quadratic (ppm)", [max((p.quadratic_ppm for p in e[2].pairs), default=0.0)
                                   for e in entries]),
        ("worst correlated sigma (ppm)", [max((p.correlated_sigma_ppm for p in e[2].pairs),
                                              default=0.0) for e in entries]),
        ("wiring: spanning trees (um)", [e[3] for e in entries]),
    ]
    colours = [PALETTE[i % len(PALETTE)] for i in range(n)]
    bars = gs[1, :].subgridspec(1, len(metrics), wspace=0.35)
    for j, (name, values) in enumerate(metrics):
        ax = fig.add_subplot(bars[0, j])
        ax.bar(range(n), values, color=colours, edgecolor="black")
        ax.set_xticks(range(n), labels, rotation=20, fontsize=8)
        ax.set_title(name, fontsize=9)
        for k, v in enumerate(values):
            ax.text(k, v, f"{v:.3g}", ha="center", va="bottom", fontsize=7)
    ax = fig.add_subplot(gs[2, :], projection="polar")
    theta = np.linspace(0, 2 * np.pi, 361)
    styles = ["-", "--", "-.", ":"]
    for i, (label, _, grade, _) in enumerate(entries):
        cents = {d.name: d.centroid_um for d in grade.devices}
        ax.plot(theta, direction_errors(grade.pairs, theta, g_ppm_per_um, cents),
                styles[i % len(styles)], color=colours[i], lw=2, label=label)
    ax.set_title(f"worst pair ratio error (ppm) against gradient direction, "
                 f"{g_ppm_per_um:g} ppm/um", fontsize=9)
    ax.legend(loc="upper left", bbox_to_anchor=(1.05, 1.0), fontsize=8)
    for path in paths:
        import io

        buf = io.BytesIO()
        fmt = path.suffix.lstrip(".")
        meta = {"CreationDate": None} if fmt == "pdf" else {}
        fig.savefig(buf, format=fmt, dpi=100, metadata=meta)
        atomic_write(path, buf.getvalue())
