"""The fail bitmap picture: the physical array (rows × columns, with the column mux), failing
cells marked, and optionally the rows and columns a repair plan replaces.

Row 0 is at the top, column 0 on the left, as on a die photo's bitmap.  With a column mux
``M`` the columns of bit ``b`` are ``b·M … b·M+M−1`` (DEVELOPERS.md, placement); thin lines
separate the bits and the axis above names them.  Large arrays are drawn binned (each pixel
shows whether any cell in it fails) and every failing cell is also circled when there are
few, so a single failing cell stays visible in a million.  matplotlib is imported here only,
on the Agg canvas without pyplot.
"""

from __future__ import annotations

import numpy as np

from .style import BLUE, INK, MUTED, TRACK, VERMILLION, new_figure, rc, save_figure

MAX_PIXELS = 512        # bins along each axis
MARK_LIMIT = 400        # circle each failing cell up to this many


def _bins(n: int) -> tuple[int, int]:
    """(number of bins, cells per bin) along an axis of ``n`` cells."""
    per = max(1, -(-n // MAX_PIXELS))
    return -(-n // per), per


def bitmap_figure(bm, title: str = "", plan=None):
    """A matplotlib Figure of the :class:`marchkit.diagnose.Bitmap` ``bm``; ``plan`` (a
    :class:`marchkit.diagnose.repair.RepairPlan`) shades the replaced rows and columns."""
    import matplotlib
    from matplotlib.colors import ListedColormap
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    rows, cols = bm.rows, bm.cols
    nr, pr = _bins(rows)
    nc, pc = _bins(cols)
    img = np.zeros((nr, nc), dtype=np.int8)
    if plan is not None and plan.repairable:
        for x in plan.rows:
            img[x // pr, :] = 1
        for x in plan.cols:
            img[:, x // pc] = 1
    if bm.count:
        img[bm.r // pr, bm.c // pc] = 2
    with matplotlib.rc_context(_rc()):
        aspect = rows / max(1, cols)
        w = 7.2
        h = min(9.0, max(2.8, w * aspect * 0.9 + 1.2))
        fig = new_figure(w, h)
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        FigureCanvasAgg(fig)
        ax = fig.add_subplot(1, 1, 1)
        cmap = ListedColormap(["#f4f4f4", "#cfe3f3", VERMILLION])
        ax.imshow(img, cmap=cmap, vmin=0, vmax=2, interpolation="nearest", aspect="auto",
                  extent=(-0.5, cols - 0.5, rows - 0.5, -0.5))
        handles = [Patch(facecolor=VERMILLION, label=f"failing cell ({bm.count})")]
        if plan is not None and plan.repairable and plan.spares_used:
            handles.append(Patch(facecolor="#cfe3f3", edgecolor=BLUE,
                                 label=f"replaced: {len(plan.rows)} row(s), {len(plan.cols)} column(s)"))
        if 0 < bm.count <= MARK_LIMIT:
            d = max(4.0, min(9.0, 380.0 / max(nr, nc)))     # marker diameter, points
            ax.scatter(bm.c, bm.r, s=d * d, facecolors="none", edgecolors=INK, linewidths=0.9, zorder=3)
            handles[0] = Line2D([], [], marker="o", linestyle="", markerfacecolor=VERMILLION,
                                markeredgecolor=INK, label=f"failing cell ({bm.count})")
        elif bm.count > MARK_LIMIT:
            # too many to circle all: circle the isolated ones, a pixel each in a binned picture
            lone = [p for p in getattr(bm, "parts", []) if p.kind == "single cell"][:MARK_LIMIT]
            if lone:
                ax.scatter([p.cols[0] for p in lone], [p.rows[0] for p in lone], s=36, facecolors="none",
                           edgecolors=INK, linewidths=0.9, zorder=3)
                handles.append(Line2D([], [], marker="o", linestyle="", markerfacecolor="none",
                                      markeredgecolor=INK, label=f"single failing cell ({len(lone)})"))
        mux = getattr(bm, "mux", 1) or 1
        bits = cols // mux if mux > 1 else 0
        if mux > 1 and bits <= 128:
            for b in range(1, bits):
                ax.axvline(b * mux - 0.5, color=MUTED, linewidth=0.4, alpha=0.6, zorder=2)
            if bits <= 32:
                top = ax.secondary_xaxis("top")
                step = max(1, bits // 16)
                top.set_xticks([b * mux + (mux - 1) / 2 for b in range(0, bits, step)])
                top.set_xticklabels([str(b) for b in range(0, bits, step)])
                top.set_xlabel(f"bit (column mux {mux}: bit b in columns b·{mux} … b·{mux}+{mux - 1})")
        ax.set_xlabel("physical column")
        ax.set_ylabel("physical row")
        for side in ("top", "right"):
            ax.spines[side].set_visible(True)
        ax.set_facecolor(TRACK)
        ttl = title or "fail bitmap"
        import textwrap

        binned = f"; each pixel {pr:,} row(s) × {pc:,} column(s)" if pr > 1 or pc > 1 else ""
        sub = textwrap.fill(f"{rows:,} rows × {cols:,} columns{binned} — {bm.kind}: {bm.detail}", 80)
        ax.set_title(f"{textwrap.fill(ttl, 80, max_lines=2, placeholder=' …')}\n{sub}", loc="left")
        from matplotlib.ticker import FuncFormatter

        whole = FuncFormatter(lambda v, _pos: f"{int(round(v)):,}")     # 2,000,000, never an offset 1e6
        ax.xaxis.set_major_formatter(whole)
        ax.yaxis.set_major_formatter(whole)
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return fig


def write_bitmap_picture(bm, path, title: str = "", plan=None, force: bool = False):
    """Draw :func:`bitmap_figure` and write it to ``path`` (.png or .svg), atomically."""
    import matplotlib

    from .style import plot_format

    plot_format(path)
    fig = bitmap_figure(bm, title, plan)
    with matplotlib.rc_context(_rc()):
        save_figure(fig, path, force=force)
    return fig


def _rc() -> dict:
    """The house style, with ``$`` taken literally: names come from the user's files, and a
    name such as ``d$\\frac$.csv`` must not be read as a TeX formula (it used to crash)."""
    return {**rc(), "text.parse_math": False}
