"""Figures of a comparison: coverage against test time with the Pareto front, and a heat map
of coverage per fault class × test.

matplotlib is imported here only, when a figure is asked for, and drawn on the Agg canvas
without pyplot, so nothing global changes.  Every function returns the matplotlib
``Figure`` it drew, so callers (and the tests) can look at its axes.
"""

from __future__ import annotations

import math

from ..units import TIME_UNITS as _TIME_UNITS
from ..units import time_unit  # noqa: F401  (re-exported)
from .compare import Comparison, percent_text
from .style import (BLUE, HEAT_MAP, INK, MUTED, TRACK, VERMILLION, new_figure, rc,
                    save_figure)



# a time axis is broken in two when the tests fall into two groups this far apart (ratio of
# the neighbouring times across the gap) — typically tests with retention pauses among tests
# without; one log axis would squeeze the fast group into a corner
BREAK_RATIO = 25.0
LOG_RATIO = 30.0


def split_times(seconds) -> float | None:
    """The longest time of the fast group when the times fall into two groups more than
    :data:`BREAK_RATIO` apart (at the widest gap), else None."""
    s = sorted({float(t) for t in seconds if t > 0})
    if len(s) < 2:
        return None
    ratio, k = max((s[i + 1] / s[i], i) for i in range(len(s) - 1))
    return s[k] if ratio > BREAK_RATIO else None


def comparison_figure(cmp: Comparison):
    """The trade-off panel (coverage against test time; two panels side by side when the
    time axis is broken) and the heat map of coverage per class × test."""
    import matplotlib

    with matplotlib.rc_context(rc()):
        n = len(cmp.rows)
        m = len(cmp.classes) + 1  # + the total column
        heat_w = 1.5 + 0.40 * m + 0.9
        height = max(4.6, 0.30 * n + 2.0)
        fig = new_figure(6.6 + heat_w, height)
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        FigureCanvasAgg(fig)
        cut = split_times(r.seconds for r in cmp.rows)
        if cut is None:
            gs = fig.add_gridspec(1, 2, width_ratios=[6.6, heat_w])
            trade = [fig.add_subplot(gs[0, 0])]
            ax_h = fig.add_subplot(gs[0, 1])
        else:
            gs = fig.add_gridspec(1, 3, width_ratios=[5.0, 1.6, heat_w], wspace=0.02)
            left = fig.add_subplot(gs[0, 0])
            trade = [left, fig.add_subplot(gs[0, 1], sharey=left)]
            ax_h = fig.add_subplot(gs[0, 2])
        total = next(iter(cmp.rows)).instances if cmp.rows else 0
        fig.suptitle(
            f"Coverage per cycle on {cmp.memory_label}\n"
            f"faults: {cmp.faults_spec} ({total:,} instances)   pairs: {cmp.pairs_spec}",
            x=0.01, ha="left", fontsize=10, color=INK,
        )
        groups = _tradeoff(trade, cmp, cut)
        _heat(fig, ax_h, cmp)
        # fix the layout, then place the point labels where they do not collide
        fig.canvas.draw()
        fig.set_layout_engine("none")
        _place_labels(groups, fig.canvas.get_renderer(), cmp)
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


def _limits(ts: list[float], first: bool) -> tuple[float, float, bool]:
    """x limits (seconds) and whether to use a log scale, for the times of one panel."""
    lo_t, hi_t = min(ts), max(ts)
    if lo_t > 0 and hi_t / lo_t > LOG_RATIO:
        return lo_t / 1.8, hi_t * 1.8, True
    if first:
        return 0.0, (hi_t * 1.15 if hi_t > 0 else 1.0), False
    span = max(hi_t - lo_t, hi_t * 1e-4)
    return lo_t - 0.35 * span, hi_t + 0.35 * span, False


def _tradeoff(axes, cmp: Comparison, cut: float | None):
    """Draw the points and the front on one axes, or on two when the time axis is broken
    after ``cut`` seconds.  Returns [(axes, rows on it)] for the labels."""
    from matplotlib.ticker import FuncFormatter, LogLocator, MaxNLocator, NullFormatter

    rows = list(cmp.rows)
    if cut is None:
        parts = [(axes[0], rows)]
    else:
        parts = [(axes[0], [r for r in rows if r.seconds <= cut]),
                 (axes[1], [r for r in rows if r.seconds > cut])]
    ys_all = [100.0 * cmp.value(r) for r in rows]
    ymin = max(0.0, 10 * math.floor((min(ys_all) - 6) / 10)) if ys_all else 0.0
    front = sorted((r for r in rows if r.pareto), key=lambda r: (r.seconds, -cmp.value(r)))
    clock = _clock_hz(cmp)
    tmax = max((r.seconds for r in rows), default=1.0) or 1.0
    unit, scale = time_unit(tmax if cut is None else cut)

    groups = []
    for k, (ax, part) in enumerate(parts):
        lo, hi, log = _limits([r.seconds for r in part], first=(k == 0))
        if log:
            ax.set_xscale("log")
        ax.set_xlim(lo, hi)
        ax.set_ylim(ymin, 104)
        # the front as a staircase: the best coverage any test reaches within a time budget
        before = [r for r in front if r.seconds < lo]
        inside = [r for r in front if lo <= r.seconds <= hi]
        fx, fy = [], []
        if before:
            fx.append(lo)
            fy.append(100.0 * max(cmp.value(r) for r in before))
        for r in inside:
            fx.append(r.seconds)
            fy.append(100.0 * cmp.value(r))
        if fx:
            fx.append(hi)
            fy.append(fy[-1])
            ax.fill_between(fx, fy, ymin, step="post", color=BLUE, alpha=0.08, linewidth=0, zorder=1)
            ax.step(fx, fy, where="post", color=BLUE, linewidth=1.6, linestyle=(0, (5, 2)), zorder=2,
                    label="Pareto front (best coverage within a time budget)")
        ax.axhline(100, color=MUTED, linewidth=0.7, linestyle=":", zorder=1)
        off = [(r.seconds, 100.0 * cmp.value(r)) for r in part if not r.pareto]
        on = [(r.seconds, 100.0 * cmp.value(r)) for r in part if r.pareto]
        if off:
            ax.scatter(*zip(*off), marker="s", s=38, facecolor="white", edgecolor=VERMILLION,
                       linewidth=1.5, zorder=3, label="dominated (another test is faster or better, and no worse)")
        if on:
            ax.scatter(*zip(*on), marker="o", s=48, facecolor=BLUE, edgecolor=INK, linewidth=0.8,
                       zorder=4, label="on the Pareto front")
        ax.grid(True, which="major", color=TRACK, linewidth=0.7, zorder=0)
        ax.set_axisbelow(True)
        if log or cut is not None:
            if log:
                ax.xaxis.set_major_locator(LogLocator(base=10))
                ax.xaxis.set_minor_formatter(NullFormatter())
            else:
                ax.xaxis.set_major_locator(MaxNLocator(nbins=4 if k == 0 else 2))
            digits = 3 if k == 0 else 5
            ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _p, d=digits: _short_time(v, d)))
        else:
            ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _p, s=scale: f"{v / s:g}"))
        if clock and k == 0:
            sec = ax.secondary_xaxis("top", functions=(lambda t, c=clock: t * c, lambda n, c=clock: n / c))
            sec.set_xlabel("clock cycles", color=MUTED)
            sec.tick_params(colors=MUTED, labelsize=7)
        groups.append((ax, part))

    main_ax = axes[0]
    main_ax.set_title("Score against test time" if cmp.front_on == "score" else "Coverage against test time")
    main_ax.set_ylabel("class-weighted score (%)" if cmp.front_on == "score" else "total fault coverage (%)")
    if cut is not None:
        main_ax.set_xlabel(f"test time (axis broken after {_short_time(cut, 3)})")
        _break_marks(axes[0], axes[1])
    elif main_ax.get_xscale() == "log":
        main_ax.set_xlabel("test time (log scale)")
    else:
        main_ax.set_xlabel(f"test time ({unit})")
    handles, labels = [], []
    for ax, _ in groups:
        for h, lab in zip(*ax.get_legend_handles_labels()):
            if lab not in labels:
                handles.append(h)
                labels.append(lab)
    # under the panel, where it can hide no point
    order = sorted(range(len(labels)), key=lambda i: ("front" not in labels[i], "dominated" in labels[i]))
    main_ax.figure.legend([handles[i] for i in order], [labels[i] for i in order],
                          loc="outside lower left", ncol=2, handlelength=2.2)
    return groups


def _break_marks(left, right) -> None:
    """Two short slanted strokes on each side of the gap in a broken axis."""
    right.spines["left"].set_visible(False)
    right.tick_params(axis="y", which="both", left=False, labelleft=False)
    left.spines["right"].set_visible(False)
    kw = dict(marker=[(-1, -1.6), (1, 1.6)], markersize=9, linestyle="none", color="#444444",
              mec="#444444", mew=0.9, clip_on=False)
    left.plot([1], [0], transform=left.transAxes, **kw)
    right.plot([0], [0], transform=right.transAxes, **kw)


def _place_labels(groups, renderer, cmp: Comparison) -> None:
    """Label each point with its test, trying positions around it until one overlaps no
    other label, no marker, the legend, and stays inside its axes; failing that, the
    position that costs least, joined to its point by a thin leader."""
    import numpy as np
    from matplotlib.transforms import Bbox

    items = []          # (axes, row, data point, display point)
    for ax, part in groups:
        for r in part:
            xy = (r.seconds, 100.0 * cmp.value(r))
            items.append((ax, r, xy, ax.transData.transform(np.array([xy], dtype=float))[0]))
    if not items:
        return
    r_px = 6.0 * renderer.points_to_pixels(1.0)
    obstacles = [Bbox.from_extents(x - r_px, y - r_px, x + r_px, y + r_px) for *_, (x, y) in items]
    for ax, _ in groups:
        leg = ax.get_legend()
        if leg is not None:
            obstacles.append(leg.get_window_extent(renderer))
    near = [(8, 5, "left", "bottom"), (8, -5, "left", "top"), (-8, 5, "right", "bottom"),
            (-8, -5, "right", "top"), (0, 9, "center", "bottom"), (0, -9, "center", "top"),
            (10, 0, "left", "center"), (-10, 0, "right", "center")]
    far = [(dx * k, dy * k, ha, va) for k in (2.2, 3.6) for dx, dy, ha, va in near]

    def gap(bb, x, y):
        dx = max(bb.x0 - x, 0.0, x - bb.x1)
        dy = max(bb.y0 - y, 0.0, y - bb.y1)
        return math.hypot(dx, dy)

    def cost(bb, own, frame, leader):
        c = 0.0
        if not leader:
            # a label without a leader must sit nearer its own point than any other point
            mine = gap(bb, *items[own][3])
            if any(gap(bb, *it[3]) < mine + 2 for j, it in enumerate(items) if j != own):
                c += 2000.0
        # in order of badness: two labels on top of each other, a label leaving the axes,
        # a label over a marker or the legend, a label nearer some other point
        for o in placed:
            if bb.overlaps(o):
                c += 20000.0 + 10 * _area(bb, o)
        inside = Bbox.intersection(bb, frame)
        outside = bb.width * bb.height - (_wh(inside) if inside is not None else 0.0)
        if outside > 0.5:
            c += 10000.0 + 10 * outside
        for i, o in enumerate(obstacles):
            if i != own and bb.overlaps(o):
                c += 3000.0 + _area(bb, o)
        return c

    placed = []
    order = sorted(range(len(items)), key=lambda i: (not items[i][1].pareto, items[i][3][0]))
    for i in order:
        ax, row, xy, _ = items[i]
        frame = ax.get_window_extent(renderer)
        best = None
        for cand_list, leader in ((near, False), (far, True)):
            for dx, dy, ha, va in cand_list:
                ann = ax.annotate(
                    row.label, xy=xy, xytext=(dx, dy), textcoords="offset points",
                    ha=ha, va=va, fontsize=7.5, color=INK,
                    fontweight="bold" if row.pareto else "normal", zorder=5,
                    arrowprops=dict(arrowstyle="-", color=MUTED, linewidth=0.6, shrinkA=0, shrinkB=4) if leader else None,
                )
                bb = ann.get_window_extent(renderer)
                c = cost(bb, i, frame, leader)
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
    cols = list(cmp.classes) + ["score"]
    data = np.full((len(rows), len(cols)), np.nan)
    for i, r in enumerate(rows):
        for j, c in enumerate(cmp.classes):
            v = r.classes.get(c)
            if v is not None:
                data[i, j] = 100.0 * v
        data[i, -1] = 100.0 * r.score
    cmap = colormaps[HEAT_MAP].with_extremes(bad="white")
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


def _short_time(seconds: float, digits: int = 3) -> str:
    """Tick text for a time: ``10 µs``, ``1 ms``, ``200.01 ms``."""
    if seconds == 0:
        return "0"
    for unit, scale in _TIME_UNITS:
        if seconds >= scale * 0.999:
            return f"{seconds / scale:.{digits}g} {unit}"
    return f"{seconds / 1e-9:.{digits}g} ns"


def _pct(v: float) -> str:
    return percent_text(v / 100.0)
