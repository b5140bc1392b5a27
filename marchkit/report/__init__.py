"""Layer 6: reports — comparing tests on coverage per cycle (rows, Pareto front, CSV and
JSON), plots of a comparison, and the HTML page of one grade result.

Importing this package does not import matplotlib; the plotting functions do, when called.
"""

from .compare import (DEFAULT_SORT, SORT_KEYS, Comparison, Row, check_sort_key, compare_results,
                      compare_tests, dominates, pareto_flags, sort_rows, unique_labels)


def comparison_figure(cmp):
    """The comparison plot as a matplotlib Figure (see :mod:`marchkit.report.plots`)."""
    from .plots import comparison_figure as f

    return f(cmp)


def write_comparison_plot(cmp, path, force: bool = False):
    from .plots import write_comparison_plot as f

    return f(cmp, path, force=force)


def html_report(result, score=None, weights=None) -> str:
    from .html import html_report as f

    return f(result, score=score, weights=weights)


def write_html_report(result, path, force: bool = False, score=None, weights=None) -> None:
    """A self-contained HTML page of a grade result, written atomically (see
    :mod:`marchkit.report.html`)."""
    from .html import write_html_report as f

    return f(result, path, force=force, score=score, weights=weights)


def plan_figure(data):
    """The Gantt chart and power profile of an SoC plan (``Plan.to_json()``), a Figure."""
    from .gantt import plan_figure as f

    return f(data)


def write_plan_gantt(data, path, force: bool = False):
    from .gantt import write_plan_gantt as f

    return f(data, path, force=force)


def write_plan_report(data, path, force: bool = False) -> None:
    """A self-contained HTML page of an SoC plan (``Plan.to_json()``), written atomically."""
    from .plan_html import write_plan_report as f

    return f(data, path, force=force)


__all__ = [
    "DEFAULT_SORT", "SORT_KEYS", "Comparison", "Row", "check_sort_key", "compare_results",
    "compare_tests", "dominates", "pareto_flags", "sort_rows", "unique_labels",
    "comparison_figure", "write_comparison_plot", "html_report", "write_html_report",
    "plan_figure", "write_plan_gantt", "write_plan_report",
]
