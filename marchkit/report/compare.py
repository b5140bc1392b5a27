"""Comparing march tests on one memory and one fault list: rows, the Pareto front, sorting,
and the comparison as JSON or CSV.

A row is one graded test.  Its **score** is the class-weighted mean of its per-class
coverages (:mod:`marchkit.grade.score`: every class counts with its weight, equal by default,
however many instances it has); its *total coverage* counts every instance once, so the
classes with the most instances (coupling faults) dominate it.  The Pareto front is taken on
the figure chosen (``front_on``: ``score`` by default, or ``coverage``): test B *dominates*
test A when B takes no more cycles and reaches at least A's figure, and is strictly better in
one of the two.  A test is on the front when no other test dominates it (two tests with equal
cycles and equal figures are both on it).

(There is no "detected faults per 1 000 cycles": the number of instances grows with the
memory and the pair scope faster than the cycles do, so such a rate grows with the memory
size and says nothing about the test.)

Nothing here imports matplotlib; the plots live in :mod:`marchkit.report.plots`.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Callable, Sequence

from ..errors import InputError
from ..units import format_frequency, format_time, percent_text  # noqa: F401  (re-exported)

# sort keys: name -> (what it sorts by, how the rows go)
SORT_KEYS = {
    "given": "the order the tests were given in",
    "name": "test name, A to Z",
    "length": "operations per cell (k of k·n), shortest first",
    "cycles": "clock cycles (test time), fewest first",
    "coverage": "total coverage, highest first",
    "score": "class-weighted score, highest first",
}
FRONT_ON = ("score", "coverage")
DEFAULT_SORT = "cycles"


@dataclass(frozen=True)
class Row:
    """One test in a comparison."""

    label: str                  # the name shown (unique within the comparison)
    length: str                 # e.g. "10n" or "12n + 2 Del"
    ops_per_cell: int
    ops: int
    cycles: int
    seconds: float
    instances: int
    detected: int
    coverage: float
    classes: dict[str, float | None]   # class -> coverage (None: no instances on this memory)
    pareto: bool
    position: int               # index in the order given
    result: object = field(default=None, compare=False, repr=False)   # the GradeResult
    exact_score: Fraction = Fraction(0)   # class-weighted mean of the class coverages

    @property
    def score(self) -> float:
        return float(self.exact_score)

    @property
    def exact_coverage(self) -> Fraction:
        return Fraction(self.detected, self.instances) if self.instances else Fraction(0)


@dataclass(frozen=True)
class Comparison:
    """Rows (in the chosen order) plus what they were graded on."""

    rows: tuple[Row, ...]
    memory: dict                # the memory as the grade JSON gives it
    classes: tuple[str, ...]    # fault classes graded, in catalogue order
    class_instances: dict[str, int]
    faults_spec: str
    pairs_spec: str
    memory_label: str = ""
    weights: dict = field(default_factory=dict)     # class -> weight of the score
    front_on: str = "score"

    def exact_value(self, r: Row) -> Fraction:
        """The figure the front is taken on, exactly."""
        return r.exact_score if self.front_on == "score" else r.exact_coverage

    def value(self, r: Row) -> float:
        return float(self.exact_value(r))

    @property
    def value_name(self) -> str:
        return "score" if self.front_on == "score" else "total coverage"

    @property
    def front(self) -> tuple[Row, ...]:
        """The rows on the Pareto front, fewest cycles first."""
        return tuple(sorted((r for r in self.rows if r.pareto), key=lambda r: (r.cycles, -self.exact_value(r), r.position)))

    def sorted(self, key: str = DEFAULT_SORT) -> "Comparison":
        return Comparison(sort_rows(self.rows, key), self.memory, self.classes, self.class_instances,
                          self.faults_spec, self.pairs_spec, self.memory_label, self.weights, self.front_on)

    # ---- output -------------------------------------------------------------------------
    def to_json(self) -> dict:
        """``{"memory", "faults", "weights", "front_on", "tests": [{"name", "ops", "cycles",
        "seconds", "coverage", "score", "classes", "pareto", ...}]}``; each test also carries
        its length, detected and instance counts."""
        return {
            "memory": self.memory,
            "faults": list(self.classes),
            "weights": dict(self.weights),
            "front_on": self.front_on,
            "tests": [
                {
                    "name": r.label,
                    "length": r.length,
                    "ops_per_cell": r.ops_per_cell,
                    "ops": r.ops,
                    "cycles": r.cycles,
                    "seconds": r.seconds,
                    "instances": r.instances,
                    "detected": r.detected,
                    "coverage": r.coverage,
                    "score": r.score,
                    "classes": dict(r.classes),
                    "pareto": r.pareto,
                }
                for r in self.rows
            ],
        }

    def to_csv(self) -> str:
        """One line per test; per-class coverage columns are named ``coverage:CLASS``."""
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(["test", "length", "ops_per_cell", "ops", "cycles", "seconds", "instances",
                    "detected", "coverage", "score", "pareto"]
                   + [f"coverage:{c}" for c in self.classes])
        for r in self.rows:
            w.writerow([r.label, r.length, r.ops_per_cell, r.ops, r.cycles, repr(float(r.seconds)),
                        r.instances, r.detected, f"{r.coverage:.6f}", f"{r.score:.6f}",
                        "yes" if r.pareto else "no"]
                       + ["" if r.classes.get(c) is None else f"{r.classes[c]:.6f}" for c in self.classes])
        return buf.getvalue()


# ---- the Pareto front -----------------------------------------------------------------

def dominates(a: tuple[int, Fraction], b: tuple[int, Fraction]) -> bool:
    """True when point ``a`` = (cycles, coverage) dominates ``b``."""
    return a[0] <= b[0] and a[1] >= b[1] and (a[0] < b[0] or a[1] > b[1])


def pareto_flags(points: Sequence[tuple[int, object]]) -> list[bool]:
    """For each (cycles, coverage) point: is it on the Pareto front?

    Coverage may be a float or an exact fraction; compare like with like.
    """
    pts = list(points)
    return [not any(dominates(q, p) for j, q in enumerate(pts) if j != i) for i, p in enumerate(pts)]


# ---- rows from grade results ----------------------------------------------------------

def memory_label(mem) -> str:
    """A short description of a memory: ``kestrel_l1_sram (1024×16, mux 4, 200 MHz)``; an
    unnamed one is ``memory (64×1, 100 MHz)``."""
    parts = [f"{mem.words}×{mem.bits}"]
    if getattr(mem, "mux", 1) != 1:
        parts.append(f"mux {mem.mux}")
    parts.append(format_frequency(mem.clock_hz))
    return f"{getattr(mem, 'name', '') or 'memory'} ({', '.join(parts)})"


def unique_labels(names: Sequence[str]) -> list[str]:
    """Names made unique for display: unnamed tests become ``test 1``, ``test 2`` …; a name
    used twice gets `` (2)``, `` (3)`` …"""
    out: list[str] = []
    seen: dict[str, int] = {}
    unnamed = 0
    for n in names:
        if not n:
            unnamed += 1
            n = f"test {unnamed}"
        k = seen.get(n, 0) + 1
        seen[n] = k
        out.append(n if k == 1 else f"{n} ({k})")
    return out


def compare_results(results: Sequence, labels: Sequence[str] | None = None, weights: dict | None = None,
                    front_on: str = "score") -> Comparison:
    """A comparison from grade results (one per test, all on one memory and one fault list).
    ``weights``: class -> weight of the score (1 each by default); ``front_on``: ``score`` or
    ``coverage``, the figure of the Pareto front."""
    from ..grade.score import class_score

    if front_on not in FRONT_ON:
        raise InputError(f"the front is taken on {' or '.join(FRONT_ON)}, not {front_on!r}")
    results = list(results)
    if not results:
        raise InputError("nothing to compare: give at least one test")
    first = results[0]
    classes = tuple(c.cls for c in first.classes)
    counts = {c.cls: c.instances for c in first.classes}
    for res in results[1:]:
        if res.memory != first.memory:
            raise InputError("the tests to compare were graded on different memories")
        if (res.faults_spec, res.pairs_spec) != (first.faults_spec, first.pairs_spec) or \
                {c.cls: c.instances for c in res.classes} != counts:
            raise InputError("the tests to compare were graded on different fault lists")
    if labels is None:
        labels = unique_labels([r.test.name for r in results])
    elif len(labels) != len(results):
        raise ValueError("one label per result")
    weights = {c: float((weights or {}).get(c, 1.0)) for c in classes}
    scores = [class_score(r.classes, weights) for r in results]
    measure = scores if front_on == "score" else [_exact(r.total) for r in results]
    flags = pareto_flags([(r.cycles, m) for r, m in zip(results, measure)])
    rows = []
    for i, (res, label, on_front, sc) in enumerate(zip(results, labels, flags, scores)):
        t = res.test
        rows.append(Row(
            label=label,
            length=getattr(t, "length_text", f"{t.ops_per_cell}n"),
            ops_per_cell=t.ops_per_cell,
            ops=int(res.ops),
            cycles=int(res.cycles),
            seconds=float(res.seconds),
            instances=int(res.total.instances),
            detected=int(res.total.detected),
            coverage=float(res.total.coverage),
            classes={c.cls: (float(c.coverage) if c.instances else None) for c in res.classes},
            pareto=on_front,
            position=i,
            result=res,
            exact_score=sc,
        ))
    js = first.to_json()
    return Comparison(tuple(rows), js.get("memory", {}), classes, counts, first.faults_spec,
                      first.pairs_spec, memory_label(first.memory), weights, front_on)


def _exact(total) -> Fraction:
    return Fraction(total.detected, total.instances) if total.instances else Fraction(0)


def compare_tests(tests: Sequence, mem, faults: str = "static", pairs: str = "neighbours",
                  retention=None, engine: str = "fast",
                  progress: Callable[[int, int, str], None] | None = None,
                  labels: Sequence[str] | None = None, sort: str = "given", weights: dict | None = None,
                  front_on: str = "score", thresholds=None) -> Comparison:
    """Grade every test on ``mem`` and compare them.

    ``progress(done, n, label)`` reports how far the run is: ``done`` goes from 0 to ``n``
    (the number of tests; fractions while a test is being graded), ``label`` names the test
    being graded ("" at the end).
    """
    from ..grade import grade

    tests = list(tests)
    if not tests:
        raise InputError("nothing to compare: give at least one test")
    labels = list(labels) if labels is not None else unique_labels([t.name for t in tests])
    kw = {} if retention is None else {"retention": tuple(retention)}
    if thresholds:
        kw["thresholds"] = tuple(thresholds)          # disturb thresholds (activations)
    results = []
    for i, (t, label) in enumerate(zip(tests, labels)):
        step = None
        if progress:
            progress(i, len(tests), label)

            def step(what, done, total, i=i, label=label):
                progress(i + (min(done, total) / total if total else 0.0), len(tests), label)
        results.append(grade(t, mem, faults=faults, pairs=pairs, engine=engine, progress=step, **kw))
    if progress:
        progress(len(tests), len(tests), "")
    return compare_results(results, labels, weights, front_on).sorted(sort)


# ---- sorting --------------------------------------------------------------------------

def sort_rows(rows: Sequence[Row], key: str = DEFAULT_SORT) -> tuple[Row, ...]:
    """Rows sorted by one of :data:`SORT_KEYS` or by a class name (that class's coverage,
    highest first).  Ties go to fewer cycles, then to the order given."""
    rows = list(rows)
    tie = lambda r: (r.cycles, r.position)  # noqa: E731
    k = key.strip().lower()
    if k == "given":
        out = sorted(rows, key=lambda r: r.position)
    elif k == "name":
        out = sorted(rows, key=lambda r: (r.label.casefold(), r.position))
    elif k == "length":
        out = sorted(rows, key=lambda r: (r.ops_per_cell, *tie(r)))
    elif k in ("cycles", "time"):
        out = sorted(rows, key=lambda r: (r.cycles, -r.exact_coverage, r.position))
    elif k == "coverage":
        out = sorted(rows, key=lambda r: (-r.exact_coverage, *tie(r)))
    elif k == "score":
        out = sorted(rows, key=lambda r: (-r.exact_score, *tie(r)))
    else:
        classes = {c.lower(): c for r in rows for c in r.classes}
        if k not in classes:
            raise InputError(f"cannot sort by {key!r}; sort keys: " + ", ".join(SORT_KEYS)
                             + (", or a class graded: " + ", ".join(dict.fromkeys(c for r in rows for c in r.classes)) if rows else ""))
        c = classes[k]
        out = sorted(rows, key=lambda r: (-(r.classes.get(c) or 0.0), *tie(r)))
    return tuple(out)


def check_sort_key(key: str, classes: Sequence[str]) -> str:
    """Validate a sort key before any grading; return it normalised."""
    k = key.strip().lower()
    if k in SORT_KEYS or k == "time":
        return k
    for c in classes:
        if c.lower() == k:
            return k
    raise InputError(f"cannot sort by {key!r}; sort keys: " + ", ".join(SORT_KEYS)
                     + (", or a class graded: " + ", ".join(classes) if classes else ""))
