"""The picture of an SoC test plan: one row per BIST group with a bar per memory test (its
colour says which test, a hatch marks a memory whose requirement no candidate meets; a test
with retention pauses is grey where it pauses), and below it the power drawn over time
against the budget.

Works on the plan's plain data (``Plan.to_json()``), so the report layer needs nothing from
the planner.  matplotlib is imported here only, when a figure is asked for, and drawn on the
Agg canvas without pyplot.
"""

from __future__ import annotations

from .style import (BLUE, GREEN, INK, MUTED, ORANGE, SKY, TRACK, VERMILLION, new_figure, rc,
                    save_figure)

# Okabe & Ito colours, then the same with a lighter tone: tests are told apart by colour
TEST_COLOURS = (BLUE, ORANGE, GREEN, SKY, VERMILLION, "#CC79A7", "#F0E442", "#7f7f7f")
PAUSE = "#d0d0d0"     # a retention pause: the memory is not accessed
_UNITS = (("s", 1.0), ("ms", 1e-3), ("µs", 1e-6), ("ns", 1e-9))


def _unit(seconds: float) -> tuple[str, float]:
    for unit, scale in _UNITS:
        if seconds >= scale:
            return unit, scale
    return _UNITS[-1]


def power_profile(instances) -> tuple[list, list]:
    """(times, watts) of the power drawn: ``watts[k]`` holds from ``times[k]`` to
    ``times[k+1]``.  A memory draws power over its active spans (``active_s``; a retention
    pause draws none), or over its whole test when they are not given."""
    spans = [(a, b, r["power_w"]) for r in instances
             for a, b in (r.get("active_s") or [(r["start_s"], r["end_s"])])]
    points = sorted({a for a, _, _ in spans} | {b for _, b, _ in spans})
    watts = [sum(w for a, b, w in spans if a <= t < b) for t in points]
    return points, watts


def group_order(data: dict) -> list:
    """Groups top to bottom: the one that ends last first."""
    return [g["group"] for g in sorted(data["groups"], key=lambda g: (-g["end_s"], g["group"]))]


def plan_figure(data: dict):
    """The Gantt chart and power profile of a plan (``Plan.to_json()``); returns the Figure."""
    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.patches import Patch

    inst = data["instances"]
    groups = group_order(data)
    total = max(data["total_test_time_s"], 1e-12)
    unit, scale = _unit(total)
    tests = list(dict.fromkeys(r["test"] for r in sorted(inst, key=lambda r: r["test"])))
    colour = {t: TEST_COLOURS[i % len(TEST_COLOURS)] for i, t in enumerate(tests)}
    hatch = {t: ("" if i < len(TEST_COLOURS) else "..") for i, t in enumerate(tests)}
    with matplotlib.rc_context(_rc()):
        rows = len(groups)
        fig = new_figure(10.5, min(3.2 + 0.21 * rows, 40))
        FigureCanvasAgg(fig)
        gs = fig.add_gridspec(2, 1, height_ratios=[max(2.0, 0.21 * rows), 1.6])
        ax = fig.add_subplot(gs[0])
        axp = fig.add_subplot(gs[1], sharex=ax)
        y = {g: i for i, g in enumerate(groups)}
        # one bar call per (test, requirement met): a few artists, not one per memory
        batches: dict = {}
        for r in inst:
            batches.setdefault((r["test"], r["meets"]), []).append(r)
        for (test, ok), rs in batches.items():
            paused = [r for r in rs if len(r.get("active_s") or []) > 1]
            whole = [r for r in rs if r not in paused]
            for part, face in ((whole, colour[test]), (paused, PAUSE)):
                if part:
                    ax.barh([y[r["group"]] for r in part], [(r["end_s"] - r["start_s"]) / scale for r in part],
                            left=[r["start_s"] / scale for r in part], height=0.72, color=face,
                            edgecolor="white" if ok else VERMILLION, linewidth=0.6,
                            hatch=(hatch[test] if ok else "////") or None)
            # a test with retention pauses: its accessing spans in colour over the grey bar
            spans = [(y[r["group"]], a, b) for r in paused for a, b in r["active_s"]]
            if spans:
                ax.barh([g for g, _, _ in spans], [(b - a) / scale for _, a, b in spans],
                        left=[a / scale for _, a, _ in spans], height=0.72, color=colour[test], linewidth=0)
        ax.set_yticks(range(rows), groups)
        ax.set_ylim(rows - 0.5, -0.5)
        ax.tick_params(axis="y", length=0, labelsize=7 if rows > 25 else 8)
        ax.grid(axis="x", color=TRACK, linewidth=0.6)
        ax.set_axisbelow(True)
        ax.tick_params(axis="x", labelbottom=False)
        s = data["schedule"]
        how = "optimal" if s["status"] == "optimal" else f"feasible, gap {100 * s['gap']:.1f} %"
        ax.set_title(f"{data['soc']}: {len(inst)} memor{'y' if len(inst) == 1 else 'ies'} in {rows} BIST "
                     f"group{'' if rows == 1 else 's'} — total test time "
                     f"{total / scale:.4g} {unit} ({how})", color=INK)
        handles = [Patch(facecolor=colour[t], edgecolor="white", hatch=hatch[t], label=t) for t in tests]
        if any(len(r.get("active_s") or []) > 1 for r in inst):
            handles.append(Patch(facecolor=PAUSE, edgecolor="white", label="pause (no access)"))
        if any(not r["meets"] for r in inst):
            handles.append(Patch(facecolor="white", edgecolor=VERMILLION, hatch="////",
                                 label="requirement not met"))
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.005, 1.0), title="test",
                  title_fontsize=8, borderaxespad=0)

        t, w = power_profile(inst)
        budget = s["budget_w"]
        pu, ps = ("W", 1.0) if budget >= 1 else ("mW", 1e-3)
        xs = [x / scale for x in t]
        ys = [v / ps for v in w]
        axp.fill_between(xs, ys, step="post", color=SKY, alpha=0.45, linewidth=0)
        axp.step(xs, ys, where="post", color=BLUE, linewidth=1.0, label="power drawn")
        axp.axhline(budget / ps, color=VERMILLION, linestyle="--", linewidth=1.0, label="budget")
        axp.set_ylim(0, budget / ps * 1.12)
        axp.set_xlim(0, total / scale * 1.01)
        axp.set_xlabel(f"time ({unit})")
        axp.set_ylabel(f"power ({pu})")
        axp.grid(axis="both", color=TRACK, linewidth=0.6)
        axp.set_axisbelow(True)
        axp.legend(loc="upper left", bbox_to_anchor=(1.005, 1.0), borderaxespad=0)
        axp.set_title(f"power drawn: peak {s['peak_w'] / ps:.4g} {pu} of a {budget / ps:.4g} {pu} budget",
                      fontsize=9, color=MUTED, fontweight="normal")
    return fig


def write_plan_gantt(data: dict, path, force: bool = False):
    """Draw the plan and write it (``.png`` or ``.svg``) atomically; returns the Figure."""
    import matplotlib

    fig = plan_figure(data)
    with matplotlib.rc_context(_rc()):      # tick labels are made while saving
        save_figure(fig, path, force=force)
    return fig


def _rc() -> dict:
    """The house style, with ``$`` taken literally: names come from the user's files, and a
    name such as ``d$\\frac$.csv`` must not be read as a TeX formula (it used to crash)."""
    return {**rc(), "text.parse_math": False}
