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
           "save_comparison", "direction_errors", "save_budget", "save_sensitivity"]

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


def _write_figure(fig: Any, path: Path, dpi: int) -> None:
    """Save with no dates and fixed SVG ids, so the same input gives the same bytes."""
    import io

    import matplotlib

    from placer.output import atomic_write

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
                 cell_extent: tuple[float, float, float, float] | None = None) -> None:
    """Draw every slot as a rectangle at true pitch on ``ax``.

    Units are filled in their device's colour with the device name in the upper part
    (the centre stays clear, so a test can read the fill there); dummies are white with
    a grey hatch; empty slots are left blank. Markers show each device's centroid and
    the centre of all device units; arrows show MOS finger orientation. ``gradient``
    (gx, gy) in ppm/um shades the background with that linear field. With
    ``cell_extent`` (x0, y0, x1, y1 of the unit cell about its centre) each unit is drawn
    at its drawn size and the routing channel below each row is shaded.
    """
    from matplotlib.collections import PatchCollection
    from matplotlib.patches import Rectangle

    px, py = pitch_um
    rows, cols = pattern.shape
    colours = device_colours(len(pattern.devices))
    w, h = 0.92 * px, 0.92 * py
    ox, oy = -w / 2, -h / 2
    if cell_extent is not None:
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
            by_style.setdefault(key, []).append(Rectangle((x + ox, y + oy), w, h))
    for (face, hatch, edge), rects in by_style.items():
        ax.add_collection(PatchCollection(rects, facecolor=face, edgecolor=edge,
                                          hatch=hatch or None, linewidth=0.6, zorder=1))
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
    upright = py > 1.5 * px
    longest = max(len(n) for n in pattern.devices)
    along, across = (cell_h, cell_w) if upright else (cell_w, cell_h)
    fs = min(9.0, 0.8 * along / (0.62 * longest), 0.45 * across)
    if names is None:
        names = fs >= 3.5
    if names or arrows:
        for r in range(rows):
            for c in range(cols):
                d = int(pattern.ids[r, c])
                if d < 0:
                    continue
                x, y = c * px, -r * py
                if names:
                    ax.text(x, y + 0.22 * py, pattern.devices[d], ha="center", va="center",
                            fontsize=fs, color="black", zorder=3, clip_on=True,
                            rotation=90 if upright else 0)
                o = int(pattern.orient[r, c])
                if arrows and o:
                    ax.annotate("", xy=(x + 0.3 * o * px, y - 0.3 * py),
                                xytext=(x - 0.3 * o * px, y - 0.3 * py),
                                arrowprops={"arrowstyle": "->", "lw": 0.8, "color": "black"},
                                zorder=3)
    if markers and grade is not None:
        for d, dev in enumerate(grade.devices):
            ax.plot(*dev.centroid_um, marker="o", markersize=7, markerfacecolor=colours[d][0],
                    markeredgecolor="black", zorder=4, linestyle="none")
        ax.plot(*grade.centre_um, marker="+", markersize=14, color="black", mew=2, zorder=5)
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
                 gradient: tuple[float, float] | None = None,
                 cell_extent: tuple[float, float, float, float] | None = None) -> None:
    """Write the preview picture to each of ``paths`` (format from the suffix)."""

    rows, cols = pattern.shape
    px, py = pitch_um
    span_x, span_y = (cols + 1) * px, (rows + 1) * py
    width = float(np.clip(span_x / max(span_x, span_y) * 7.0, 2.5, 9.0)) + 3.2
    height = float(np.clip(span_y / max(span_x, span_y) * 7.0, 1.6, 9.0)) + 1.2
    fig = _figure(width, height)
    fig.set_layout_engine("constrained")
    ax = fig.add_subplot()
    draw_pattern(ax, pattern, pitch_um, grade, gradient=gradient, cell_extent=cell_extent)
    _legend(ax, pattern, grade)
    ax.set_title(_title(name, grade), fontsize=9, loc="left")
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


def save_comparison(entries: Sequence[tuple[str, Pattern, Grade, float]],
                    pitch_um: tuple[float, float], g_ppm_per_um: float, title: str,
                    paths: Sequence[Path]) -> None:
    """One page: the arrangements side by side, a bar chart of their scores and the ratio
    error against gradient direction. ``entries`` holds (label, pattern, grade, routing)."""

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
        err = direction_errors(grade.pairs, theta, g_ppm_per_um, cents)
        ax.plot(theta, err, styles[i % len(styles)], color=colours[i], lw=2,
                label=label + (" (zero in every direction)" if err.max() < 1e-9 else ""))
    ax.set_title(f"worst pair ratio error (ppm) against gradient direction, "
                 f"{g_ppm_per_um:g} ppm/um", fontsize=9)
    ax.legend(loc="upper left", bbox_to_anchor=(1.05, 1.0), fontsize=8)
    for path in paths:
        _write_figure(fig, path, 100)


def _save(fig: Any, paths: Sequence[Path], dpi: int = 100) -> None:
    for path in paths:
        _write_figure(fig, path, dpi)


def save_budget(b: Any, name: str, paths: Sequence[Path], seed: int = 0) -> None:
    """Budget picture: ratio-error histograms (mirrors, resistors) or INL/DNL by code."""
    from placer.budget import DacBudget

    if isinstance(b, DacBudget):
        fig = _figure(9.0, 6.0)
        fig.set_layout_engine("constrained")
        ax1, ax2 = fig.subplots(2, 1, sharex=True)
        codes = np.arange(len(b.gradient_inl_lsb))
        ax1.plot(codes, b.gradient_inl_lsb, color=PALETTE[4], lw=1,
                 label=f"gradient, worst direction {b.worst_direction_deg:.0f} deg")
        ax1.fill_between(codes, -np.array(b.mc_inl_p99_lsb), b.mc_inl_p99_lsb,
                         color=PALETTE[1], alpha=0.35,
                         label=f"random: 99th percentile of |INL| ({b.mc_samples} samples)")
        ax1.set_ylabel("INL (LSB)")
        ax1.legend(fontsize=8, loc="upper right")
        ax2.plot(codes[:-1], b.gradient_dnl_lsb, color=PALETTE[5], lw=1,
                 label=f"gradient, worst direction {b.worst_direction_deg:.0f} deg (step k to k+1)")
        ax2.legend(fontsize=8, loc="upper right")
        ax2.set_ylabel("DNL (LSB)")
        ax2.set_xlabel("code")
        ax1.set_title(f"{name}: INL and DNL against the {b.fit} line (model estimates)",
                      fontsize=10)
        _save(fig, paths)
        return
    n = len(b.lines)
    fig = _figure(4.0 * max(n, 1), 3.6)
    fig.set_layout_engine("constrained")
    axes = np.atleast_1d(fig.subplots(1, max(n, 1)))
    rng = np.random.default_rng(seed)
    for ax, ln, colour in zip(axes, b.lines, PALETTE, strict=False):
        m = 20000
        theta = rng.uniform(0, 2 * np.pi, m)
        sample = ln.clm_pct + ln.gradient_pct * np.cos(theta) + rng.normal(0, ln.random_sigma_pct,
                                                                           m)
        ax.hist(sample, bins=80, color=colour, edgecolor="none")
        for v in (-b.tolerance_pct, b.tolerance_pct):
            ax.axvline(v, color="black", ls="--", lw=1)
        ax.set_title(f"{ln.device} / {b.reference}: {100 * ln.within_tolerance:.1f}% within "
                     f"+-{b.tolerance_pct:g}%", fontsize=9)
        ax.set_xlabel("ratio error (%)")
    axes[0].set_ylabel("parts (Monte Carlo, random gradient direction)")
    fig.suptitle(f"{name}: electrical budget (model estimates)", fontsize=10)
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
        lim = max(float(np.abs(vals).max()), 1e-12)
        rects = [Rectangle((u.col * px - 0.46 * px, -u.row * py - 0.46 * py), 0.92 * px,
                           0.92 * py) for u in units]
        coll = PatchCollection(rects, cmap="RdBu_r", norm=TwoSlopeNorm(0.0, -lim, lim),
                               edgecolor="black", linewidth=0.5)
        coll.set_array(vals)
        ax.add_collection(coll)
        fig.colorbar(coll, ax=ax, label="contribution to the error (ppm)", shrink=0.8)
        if rows * cols <= 400:
            for u in units:
                ax.text(u.col * px, -u.row * py, u.device, ha="center", va="center",
                        fontsize=7)
    margin = 0.3 * min(px, py)
    ax.set_xlim(-0.5 * px - margin, (cols - 0.5) * px + margin)
    ax.set_ylim(-(rows - 0.5) * py - margin, 0.5 * py + margin)
    ax.set_aspect("equal")
    ax.set_title(f"{name}: units shaded by their share of the {pair} linear error "
                 "(red adds, blue cancels)", fontsize=9)
    _save(fig, paths)
