"""The words of the results, in one place: the terminal tables of ``grade`` and ``compare``
(``marchkit/cli``) and the HTML reports (``report/html.py``, ``report/compare_html.py``) take
their column labels, section titles and summary lines from here, so a label reads the same on
the screen and in the page (issue 16).

A few columns have a narrow form (:data:`NARROW`), used only on consoles too narrow for the
full label; a legend under the table spells them out.  The HTML reports capitalise a
section title's first letter by CSS only: the text is the same.
"""

from __future__ import annotations

# ---- grade: the table of classes and the table of kinds --------------------------------------
CLASS = "class"
INSTANCES = "instances"
DETECTED = "detected"
COVERAGE = "coverage"
FIRST = "first found in"            # the element of the first detection of an instance
ALL = "all found by"                 # the element by which every detected instance is
WHY = "why some are missed"
KIND = "kind"
TOTAL = "total"

# ---- compare: the table of tests -------------------------------------------------------------
TEST = "test"
LENGTH = "length"
OPERATIONS = "operations"
CYCLES = "cycles"
TIME = "time"
SCORE_PCT = "score %"
COVERAGE_PCT = "coverage %"
FRONT = "Pareto front"
WEIGHT = "weight"

# narrow consoles only (with a legend)
NARROW = {FIRST: "first", ALL: "all by", COVERAGE_PCT: "cov %", FRONT: "front"}
NARROW_LEGEND = "score % = class-weighted score; cov % = total instance coverage; front = Pareto front"

# ---- section titles --------------------------------------------------------------------------
SECTIONS = {
    "classes": "coverage per class",
    "elements": "elements",
    "kinds": "fault kinds",
    "missed": "what the test misses",
    "retention": "retention per τ",
    "tests": "cost, score and coverage",
    "per_class": "coverage per class (%)",
    "steps": "what each step along the front buys",
}

# ---- summary lines (terminal: "label  text"; HTML: a definition list) -------------------------
FACTS = ("length", "memory", "faults", "pairs", "engine", "score", "total", "cost")

GRADE_CLASS_COLUMNS = (CLASS, INSTANCES, DETECTED, COVERAGE, FIRST, ALL, WHY)
GRADE_KIND_COLUMNS = (KIND, CLASS, INSTANCES, DETECTED, COVERAGE, WHY)
ELEMENT_COLUMNS = ("element", "notation", "operations per address", "classes complete here")   # HTML only
COMPARE_COLUMNS = (TEST, LENGTH, OPERATIONS, CYCLES, TIME, DETECTED, SCORE_PCT, COVERAGE_PCT, FRONT)


def narrow(label: str) -> str:
    """The narrow form of a column label (the label itself when it has none)."""
    return NARROW.get(label, label)


# ---- texts both views print --------------------------------------------------------------------

def memory_text(mem) -> str:
    """``kestrel: 1024 × 16 bits, mux 4 (256 rows × 64 columns), order linear, background
    solid, 200 MHz`` and, when they apply, cycles per operation, the read latency and the DRAM
    settings."""
    from ..model import background_names
    from ..units import format_frequency

    name = f"{mem.name}: " if mem.name else ""
    scr = ", scrambled" if mem.scramble_bits is not None or mem.scramble_xor else ""
    bgs = background_names(mem)
    return (f"{name}{mem.words} × {mem.bits} bit{'s' if mem.bits > 1 else ''}, mux {mem.mux} "
            f"({mem.rows} row{'s' * (mem.rows != 1)} × {mem.columns} column{'s' * (mem.columns != 1)}{scr}), order {mem.order}, "
            f"background{'s' if len(bgs) > 1 else ''} {', '.join(bgs)}, {format_frequency(mem.clock_hz)}"
            + cycles_text(mem) + latency_text(mem) + dram_text(mem))


def cycles_text(mem) -> str:
    if mem.read_cycles == 1 and mem.write_cycles == 1:
        return ""
    return f", read {mem.read_cycles}, write {mem.write_cycles} cycle{'s' if mem.write_cycles > 1 else ''}"


def latency_text(mem) -> str:
    lat = getattr(mem, "read_latency", 0)
    return f", reads pipelined, data {lat} cycle{'s' if lat > 1 else ''} later" if lat else ""


def dram_text(mem) -> str:
    if not getattr(mem, "dram", False):
        return ""
    from ..units import format_seconds

    return (f", DRAM: refresh {format_seconds(mem.refresh)} {mem.refresh_scheme}"
            f"{', running during delays' if mem.refresh_during_delays else ', suspended during delays'}, "
            f"{mem.page} page")


def drain_text(test, mem) -> str:
    """`` (N waiting for the last read's data)`` when a pipelined memory makes the test wait."""
    if not getattr(mem, "read_latency", 0):
        return ""
    from ..model import schedule

    d = schedule(test, mem).drain
    return f" ({d} waiting for the last read's data)" if d else ""


def cost_text(test, mem, ops: int, cycles: int, seconds) -> str:
    """``5 ops per address per run · 80 operations · 82 cycles · 820 ns at 100 MHz``."""
    from ..units import format_frequency, format_time

    delays = len(test.delays)
    acts = 0
    if test.hammers:
        from ..model import schedule

        acts = sum(s.cycles // s.row_cycle for s in schedule(test, mem).segments if s.hammer is not None)
    return (f"{test.ops_per_cell} ops per address per run · {ops:,} operations"
            + (f" · {acts:,} hammer activations" if acts else "") + f" · {cycles:,} cycles"
            f"{drain_text(test, mem)} · {format_time(seconds)} at {format_frequency(mem.clock_hz)}"
            + (f" (delays included: {delays} per run)" if delays else ""))


def score_text(score, weights, classes) -> str:
    """``97.50 % (mean of the per-class coverages over 3 classes, equal weights)``."""
    from ..grade.score import _pct

    weights = weights or {}
    graded = [c for c in classes if c.instances]
    equal = len({weights.get(c.cls, 1.0) for c in graded}) <= 1
    how = "equal weights" if equal else "weights " + ", ".join(f"{c.cls}={weights.get(c.cls, 1.0):g}" for c in graded)
    n = len(graded)
    return f"{_pct(score)} % (mean of the per-class coverages over {n} class{'es' if n != 1 else ''}, {how})"


def total_text(total) -> str:
    """``99.90 % (1,234 of 1,235 fault instances detected)``: the share of every instance."""
    from ..units import percent_text

    return (f"{percent_text(total.coverage, 2, total.detected, total.instances)} % "
            f"({total.detected:,} of {total.instances:,} fault instances detected)")
