"""Figures of a comparison: coverage against test time with the Pareto front, and a heat map
of coverage per fault class × test.

matplotlib is imported here only, when a figure is asked for, and drawn on the Agg canvas
without pyplot, so nothing global changes.  Every function returns the matplotlib
``Figure`` it drew, so callers (and the tests) can look at its axes.
"""

from __future__ import annotations

import math

from .compare import Comparison
from .style import (BLUE, HEAT_MAP, INK, MUTED, TRACK, VERMILLION, new_figure, rc,
                    save_figure)

_TIME_UNITS = (("s", 1.0), ("ms", 1e-3), ("µs", 1e-6), ("ns", 1e-9))


def time_unit(seconds_max: float) -> tuple[str, float]:
    """The largest unit in which the longest time is at least 1."""
    for unit, scale in _TIME_UNITS:
        if seconds_max >= scale:
            return unit, scale
    return _TIME_UNITS[-1]


def comparison_figure(cmp: Comparison):
    """Two panels: the trade-off (left) and the class heat map (right)."""
    import matplotlib

    with matplotlib.rc_context(rc()):
        n = len(cmp.rows)
        m = len(cmp.classes) + 1  # + the total column
        heat_w = 1.5 + 0.40 * m + 0.9
        height = max(4.6, 0.30 * n + 2.0)
        fig = new_figure(6.4 + heat_w, height)
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        FigureCanvasAgg(fig)
        ax_t, ax_h = fig.subplots(1, 2, gridspec_kw={"width_ratios": [6.4, heat_w]})
        total = next(iter(cmp.rows)).instances if cmp.rows else 0
        fig.suptitle(
            f"Coverage per cycle on {cmp.memory_label}\n"
            f"faults: {cmp.faults_spec} ({total:,} instances)   pairs: {cmp.pairs_spec}",
            x=0.01, ha="left", fontsize=10, color=INK,
        )
        _tradeoff(ax_t, cmp)
        _heat(fig, ax_h, cmp)
        # fix the layout, then place the point labels where they do not collide
        fig.canvas.draw()
        fig.set_layout_engine("none")
        _place_labels(ax_t, fig.canvas.get_renderer(), cmp)
    return fig


def write_comparison_plot(cmp: Comparison, path, force: bool = False):
    """Draw :func:`comparison_figure` and write it to ``path`` (.png or .svg)."""
    from .style import plot_format

    plot_format(path)  # refuse a bad extension before drawing
    fig = comparison_figure(cmp)
    import matplotlib

    with matplotlib.rc_context(rc()):
        save_figure(fig, path, force=force)
    return fig


# ---- the trade-off panel ---------------------------------------------------------------

def _clock_hz(cmp: Comparison) -> float | None:
    for r in cmp.rows:
        if r.seconds > 0 and r.cycles > 0:
            return r.cycles / r.seconds
    return None


def _tradeoff(ax, cmp: Comparison) -> None:
    rows = list(cmp.rows)
    tmax = max((r.seconds for r in rows), default=1.0) or 1.0
    tmin = min((r.seconds for r in rows if r.seconds > 0), default=tmax)
    unit, scale = time_unit(tmax)
    log = tmax / tmin > 30
    xs = [r.seconds / scale for r in rows]
    ys = [100.0 * r.coverage for r in rows]

    if log:
        ax.set_xscale("log")
        lo, hi = min(xs) / 1.8, max(xs) * 1.8
    else:
        lo, hi = 0.0, max(xs) * 1.15 if max(xs) > 0 else 1.0
    ymin = max(0.0, 10 * math.floor((min(ys) - 6) / 10)) if ys else 0.0
    ax.set_xlim(lo, hi)
    ax.set_ylim(ymin, 104)

    # the front as a staircase: the best coverage any test reaches within a time budget
    front = sorted((r for r in rows if r.pareto), key=lambda r: (r.seconds, -r.coverage))
    if front:
        fx = [r.seconds / scale for r in front] + [hi]
        fy = [100.0 * r.coverage for r in front]
        fy = fy + [fy[-1]]
        ax.fill_between(fx, fy, ymin, step="post", color=BLUE, alpha=0.08, linewidth=0, zorder=1)
        ax.step(fx, fy, where="post", color=BLUE, linewidth=1.6, linestyle=(0, (5, 2)), zorder=2,
                label="Pareto front: best coverage within a time budget")
    ax.axhline(100, color=MUTED, linewidth=0.7, linestyle=":", zorder=1)

    on = [(x, y) for x, y, r in zip(xs, ys, rows) if r.pareto]
    off = [(x, y) for x, y, r in zip(xs, ys, rows) if not r.pareto]
    if off:
        ax.scatter(*zip(*off), marker="s", s=38, facecolor="white", edgecolor=VERMILLION,
                   linewidth=1.5, zorder=3, label="dominated: some test is faster or better, and no worse")
    if on:
        ax.scatter(*zip(*on), marker="o", s=48, facecolor=BLUE, edgecolor=INK, linewidth=0.8,
                   zorder=4, label="on the Pareto front")

    clock = _clock_hz(cmp)
    if log:
        from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

        ax.xaxis.set_major_locator(LogLocator(base=10))
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos, s=scale: _short_time(v * s)))
        ax.xaxis.set_minor_formatter(NullFormatter())
        ax.set_xlabel("test time (log scale)")
    else:
        ax.set_xlabel(f"test time ({unit})")
    ax.set_ylabel("total fault coverage (%)")
    ax.set_title("Coverage against test time")
    ax.grid(True, which="major", color=TRACK, linewidth=0.7, zorder=0)
    ax.set_axisbelow(True)
    if clock:
        sec = ax.secondary_xaxis("top", functions=(lambda t, c=clock * scale: t * c,
                                                   lambda k, c=clock * scale: k / c))
        sec.set_xlabel("clock cycles", color=MUTED)
        sec.tick_params(colors=MUTED, labelsize=7)
    ax.legend(loc="lower right", handlelength=2.2, borderaxespad=0.3)
    ax._marchkit_points = list(zip(xs, ys))


def _place_labels(ax, renderer, cmp: Comparison) -> None:
    """Label each point with its test, trying positions around it until one overlaps no
    other label, no marker, the legend, and stays inside the axes; failing that, the
    position that overlaps least, joined to its point by a thin leader."""
    import numpy as np
    from matplotlib.transforms import Bbox

    rows = list(cmp.rows)
    pts = getattr(ax, "_marchkit_points", [])
    if not pts:
        return
    disp = ax.transData.transform(np.array(pts, dtype=float))
    r = 6.0 * renderer.points_to_pixels(1.0)
    obstacles = [Bbox.from_extents(x - r, y - r, x + r, y + r) for x, y in disp]
    leg = ax.get_legend()
    if leg is not None:
        obstacles.append(leg.get_window_extent(renderer))
    frame = ax.get_window_extent(renderer)
    near = [(8, 5, "left", "bottom"), (8, -5, "left", "top"), (-8, 5, "right", "bottom"),
            (-8, -5, "right", "top"), (0, 9, "center", "bottom"), (0, -9, "center", "top"),
            (10, 0, "left", "center"), (-10, 0, "right", "center")]
    far = [(dx * k, dy * k, ha, va) for k in (2.2, 3.6) for dx, dy, ha, va in near]

    def cost(bb, own):
        c = 0.0
        for i, o in enumerate(obstacles):
            if i != own and bb.overlaps(o):
                c += _area(bb, o)
        for o in placed:
            if bb.overlaps(o):
                c += 4 * _area(bb, o)
        inside = Bbox.intersection(bb, frame)
        c += 10 * (bb.width * bb.height - (_wh(inside) if inside is not None else 0.0))
        return c

    placed = []
    order = sorted(range(len(rows)), key=lambda i: (not rows[i].pareto, pts[i][0]))
    for i in order:
        row = rows[i]
        best = None
        for cand_list, leader in ((near, False), (far, True)):
            for dx, dy, ha, va in cand_list:
                ann = ax.annotate(
                    row.label, xy=pts[i], xytext=(dx, dy), textcoords="offset points",
                    ha=ha, va=va, fontsize=7.5, color=INK,
                    fontweight="bold" if row.pareto else "normal", zorder=5,
                    arrowprops=dict(arrowstyle="-", color=MUTED, linewidth=0.6, shrinkA=0, shrinkB=4) if leader else None,
                )
                bb = ann.get_window_extent(renderer)
                c = cost(bb, i)
                if best is None or c < best[0]:
                    if best is not None:
                        best[1].remove()
                    best = (c, ann, bb)
                else:
                    ann.remove()
                if c == 0:
                    break
            if best[0] == 0:
                break
        placed.append(best[2])


def _area(a, b) -> float:
    from matplotlib.transforms import Bbox

    i = Bbox.intersection(a, b)
    return _wh(i) if i is not None else 0.0


def _wh(b) -> float:
    return max(0.0, b.width) * max(0.0, b.height)


# ---- the heat map panel ---------------------------------------------------------------

def _heat(fig, ax, cmp: Comparison) -> None:
    import numpy as np
    from matplotlib import colormaps
    from matplotlib.patches import Rectangle

    rows = list(cmp.rows)
    cols = list(cmp.classes) + ["total"]
    data = np.full((len(rows), len(cols)), np.nan)
    for i, r in enumerate(rows):
        for j, c in enumerate(cmp.classes):
            v = r.classes.get(c)
            if v is not None:
                data[i, j] = 100.0 * v
        data[i, -1] = 100.0 * r.coverage
    cmap = colormaps[HEAT_MAP].copy()
    cmap.set_bad("white")
    im = ax.imshow(np.ma.masked_invalid(data), cmap=cmap, vmin=0, vmax=100, aspect="auto",
                   interpolation="nearest")
    for i in range(len(rows)):
        for j in range(len(cols)):
            v = data[i, j]
            if np.isnan(v):
                ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, facecolor="white",
                                       edgecolor=TRACK, hatch="////", linewidth=0))
                ax.text(j, i, "n/a", ha="center", va="center", fontsize=6.5, color=MUTED)
                continue
            rgba = cmap(v / 100.0)
            lum = 0.2126 * rgba[0] + 0.7152 * rgba[1] + 0.0722 * rgba[2]
            ax.text(j, i, _pct(v), ha="center", va="center", fontsize=7,
                    color="black" if lum > 0.45 else "white",
                    fontweight="bold" if j == len(cols) - 1 else "normal")
    # white grid between cells, a wider gap before the total column
    ax.set_xticks(np.arange(-0.5, len(cols), 1), minor=True)
    ax.set_yticks(np.arange(-0.5, len(rows), 1), minor=True)
    ax.grid(which="minor", color="white", linewidth=1.2)
    ax.axvline(len(cols) - 1.5, color="white", linewidth=4)
    ax.tick_params(which="minor", length=0)
    ax.tick_params(which="major", length=0)
    for s in ax.spines.values():
        s.set_visible(False)
    ax.set_xticks(range(len(cols)), cols, rotation=45, ha="right", rotation_mode="anchor")
    ax.set_yticks(range(len(rows)), [r.label for r in rows])
    for lab, r in zip(ax.get_yticklabels(), rows):
        if r.pareto:
            lab.set_fontweight("bold")
    ax.set_xlabel("fault class")
    ax.set_ylabel("test (bold: on the Pareto front)")
    ax.set_title("Coverage per fault class (%)")
    cb = fig.colorbar(im, ax=ax, shrink=0.8, aspect=25, pad=0.02)
    cb.set_label("coverage (%)")
    cb.outline.set_visible(False)
    cb.ax.tick_params(labelsize=7)


def _short_time(seconds: float) -> str:
    """Tick text for a time: ``10 µs``, ``1 ms``, ``100 ms``."""
    for unit, scale in _TIME_UNITS:
        if seconds >= scale * 0.999:
            return f"{seconds / scale:.3g} {unit}"
    return f"{seconds / 1e-9:.3g} ns"


def _pct(v: float) -> str:
    """A coverage in % for a cell: never rounds a partial coverage up to 100 or down to 0."""
    if v >= 100.0:
        return "100"
    if v <= 0.0:
        return "0"
    t = math.floor(v * 10) / 10
    if t <= 0:
        return "<0.1"
    return f"{t:.1f}" if t < 99.95 else "99.9"
