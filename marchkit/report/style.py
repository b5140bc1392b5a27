"""The look shared by every marchkit figure.

Colours are from the Okabe & Ito palette ("Color Universal Design", 2008), chosen to stay
apart for the common colour-vision deficiencies; every distinction a figure makes is also
carried by marker shape, fill or line style, so the figures read in grey scale as well.
The heat maps use matplotlib's ``cividis`` colour map, whose lightness rises steadily from
0 to 1 (Nuñez, Anderton & Renslow, PLOS ONE 2018).
"""

from __future__ import annotations

from pathlib import Path

from ..errors import OutputError
from ..files import write_file  # noqa: F401  (re-exported for the report layer)

BLUE = "#0072B2"
VERMILLION = "#D55E00"
ORANGE = "#E69F00"
SKY = "#56B4E9"
GREEN = "#009E73"
INK = "#222222"
MUTED = "#6b6b6b"
TRACK = "#e4e4e4"
HEAT_MAP = "cividis"

FORMATS = {".png": "png", ".svg": "svg"}


def plot_format(path) -> str:
    """``png`` or ``svg`` from a file name; anything else is an error."""
    suffix = Path(path).suffix.lower()
    if suffix not in FORMATS:
        raise OutputError(f"{path}: a plot is written as .png or .svg (got {suffix or 'no extension'!r})")
    return FORMATS[suffix]


def rc() -> dict:
    """matplotlib settings used while a marchkit figure is drawn."""
    return {
        "font.size": 9,
        "axes.titlesize": 10,
        "axes.titleweight": "bold",
        "axes.titlelocation": "left",
        "axes.labelsize": 9,
        "axes.edgecolor": "#444444",
        "axes.linewidth": 0.8,
        "axes.spines.top": False,
        "axes.spines.right": False,
        "xtick.labelsize": 8,
        "ytick.labelsize": 8,
        "legend.fontsize": 8,
        "legend.frameon": False,
        "svg.fonttype": "none",
        "svg.hashsalt": "marchkit",
        "figure.dpi": 100,
        # names are the user's text: a '$' in a test or memory name must not start math
        # (mathtext would fail on "a$\\frac{$ b" after all the grading)
        "text.parse_math": False,
        "text.usetex": False,
    }


def new_figure(width: float, height: float):
    """A figure bound to the Agg canvas; pyplot (and its global state) is never used."""
    from matplotlib.figure import Figure

    return Figure(figsize=(width, height), layout="constrained")


def figure_bytes(fig, fmt: str, dpi: int = 130) -> bytes:
    import io

    buf = io.BytesIO()
    meta = {"Software": None} if fmt == "png" else {"Date": None, "Creator": "marchkit"}
    fig.savefig(buf, format=fmt, dpi=dpi, metadata=meta, facecolor="white")
    return buf.getvalue()


def save_figure(fig, path, force: bool = False, dpi: int = 130) -> None:
    """Write ``fig`` to ``path`` (format from the extension) under a temporary name, then
    rename it into place; an existing file is kept unless ``force``."""
    fmt = plot_format(path)
    write_file(path, figure_bytes(fig, fmt, dpi=dpi), force=force)


