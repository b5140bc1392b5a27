"""The grader: runs an engine over a fault selection and summarises the verdicts."""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from fractions import Fraction

from .reasons import reason_for


@dataclass(frozen=True)
class ClassRow:
    cls: str
    instances: int
    detected: int
    coverage: float
    complete_by: int | None      # element index (0-based) by which every detected one is
    reason: str                  # "" when the whole class is detected
    first_by: int | None = None  # element index where the class is first detected


@dataclass(frozen=True)
class PrimitiveRow:
    fault: str
    cls: str
    instances: int
    detected: int
    reason: str


@dataclass(frozen=True)
class Total:
    instances: int
    detected: int
    coverage: float


def _cov(d, n):
    return d / n if n else 1.0


@dataclass
class GradeResult:
    test: object
    memory: object
    faults_spec: str
    pairs_spec: str
    ops: int
    cycles: int
    seconds: float
    classes: list
    primitives: list
    total: Total
    kinds: list = field(repr=False, default_factory=list)
    engine: str = "fast"
    elapsed: float = 0.0
    empty_classes: list = field(default_factory=list)

    def missed_examples(self) -> list:
        """(class, instance text) of the undetected instances named while grading.  Cells read
        ``word 12 bit 3`` (``word 12`` in a one-bit memory): aggressor and victim are said in
        full so that nothing reads like an operation."""
        return [(r.kind.cls, instance_text(inst, self.memory)) for r in self.kinds for inst in r.missed_examples]

    def to_json(self) -> dict:
        from ..notation import format_notation

        return {
            "test": {"name": self.test.name, "notation": format_notation(self.test),
                     "ops_per_cell": self.test.ops_per_cell},
            "memory": self.memory.describe(),
            "ops": self.ops,
            "cycles": self.cycles,
            "seconds": self.seconds,
            "classes": [{"class": c.cls, "instances": c.instances, "detected": c.detected,
                         "coverage": c.coverage} for c in self.classes],
            "primitives": [{"fault": p.fault, "class": p.cls, "instances": p.instances,
                            "detected": p.detected} for p in self.primitives],
            "total": {"instances": self.total.instances, "detected": self.total.detected,
                      "coverage": self.total.coverage},
        }


def instance_text(inst, mem) -> str:
    """``CFid <↑;0> aggressor word 3 bit 1, victim word 4 bit 1``; AF: ``address 3, address 5``."""
    kind = inst.kind
    if kind.family == "af":
        return f"{kind.text} " + ", ".join(f"address {s}" for s in inst.sites)

    def cell(c):
        w, b = divmod(c, mem.bits)
        return f"word {w}" if mem.bits == 1 else f"word {w} bit {b}"

    if len(inst.sites) == 1:
        return f"{kind.text} cell {cell(inst.sites[0])}"
    return f"{kind.text} aggressor {cell(inst.sites[0])}, victim {cell(inst.sites[1])}"


def _structure(inst, mem, rank) -> str:
    """How the sites of a missed instance sit, named by its family (as the fast engine does)."""
    from ..faults import family_of

    return family_of(inst.kind).structure(inst, mem, rank)


def _reference_kinds(test, mem, selection, scope, sched, progress=None, examples=0):
    from ..engine.results import KindResult
    from ..engine.reference import reference_verdicts
    from ..faults import enumerate_instances

    from ..model import address_order, ranks

    rank = ranks(address_order(mem))
    out = []
    kinds = list(selection.kinds)
    for i, kind in enumerate(kinds):
        if progress:
            progress(kind.text, i, len(kinds))
        insts = list(enumerate_instances(kind, mem, scope))
        res = KindResult(kind)
        for inst, (det, where) in zip(insts, reference_verdicts(test, mem, insts, sched)):
            res.instances += 1
            if det:
                res.detected += 1
                res.merge_element(where.element)
            else:
                res.missed_structures.add(_structure(inst, mem, rank))
                if len(res.missed_examples) < examples:
                    res.missed_examples.append(inst)
        out.append(res)
    if progress:
        progress("done", len(kinds), len(kinds))
    return out


def grade_kinds(test, mem, selection, scope, engine="fast", sched=None, progress=None, examples=0):
    """Per-kind results (``KindResult``) of ``test`` on ``mem``; ``examples`` undetected
    instances are named per kind (``KindResult.missed_examples``)."""
    from ..model import schedule

    sched = sched or schedule(test, mem)
    if engine == "reference":
        return _reference_kinds(test, mem, selection, scope, sched, progress, examples)
    from ..engine.fast import Engine

    return Engine(test, mem, sched, examples=examples).grade(selection, scope, progress)


def grade(test, mem, faults="static", pairs="neighbours", retention=None, engine="fast", progress=None,
          examples: int = 0, thresholds=None) -> GradeResult:
    """Grade ``test`` on ``mem`` against a fault selection (text or FaultSelection).

    ``examples`` > 0 names that many undetected instances per fault kind
    (``GradeResult.missed_examples()``)."""
    from ..faults import DEFAULT_RETENTION, parse_pairs, select_faults
    from ..model import schedule
    from ..notation import ensure_consistent

    ensure_consistent(test)
    selection = (select_faults(faults, retention or DEFAULT_RETENTION, thresholds)
                 if isinstance(faults, str) else faults)
    from ..faults import FaultSelection
    from ..faults.dram import adapt_kinds

    selection = FaultSelection(adapt_kinds(selection.kinds, mem, test), selection.spec)
    scope = parse_pairs(pairs) if isinstance(pairs, str) else pairs
    from ..faults.group import check_triples

    check_triples(selection.kinds, mem, scope)        # limits before work
    sched = schedule(test, mem)
    t0 = time.perf_counter()
    kinds = grade_kinds(test, mem, selection, scope, engine, sched, progress, examples)
    elapsed = time.perf_counter() - t0
    wbg = any(b.strip().lower() == "word" for b in mem.backgrounds)
    by_class: dict[str, list] = {}
    for r in kinds:
        by_class.setdefault(r.kind.cls, []).append(r)
    classes, empty = [], []
    for cls, rs in by_class.items():
        n = sum(r.instances for r in rs)
        d = sum(r.detected for r in rs)
        if n == 0:
            empty.append(cls)
            continue
        complete = [r.complete_by for r in rs if r.complete_by is not None]
        missed = set().union(*(r.missed_structures for r in rs if r.detected < r.instances)) if d < n else set()
        firsts = [r.first_by for r in rs if r.first_by is not None]
        classes.append(ClassRow(cls, n, d, _cov(d, n), max(complete) if complete else None,
                                reason_for(cls, missed, partial=d > 0, word_backgrounds=wbg, kind=rs[0].kind)
                                if d < n else "",
                                min(firsts) if firsts else None))
    prims = [
        PrimitiveRow(r.kind.text, r.kind.cls, r.instances, r.detected,
                     reason_for(r.kind.cls, r.missed_structures, partial=r.detected > 0, word_backgrounds=wbg,
                                kind=r.kind)
                     if r.detected < r.instances else "")
        for r in kinds if r.instances
    ]
    n = sum(c.instances for c in classes)
    d = sum(c.detected for c in classes)
    spec = faults if isinstance(faults, str) else faults.spec
    return GradeResult(
        test=test, memory=mem, faults_spec=spec, pairs_spec=scope.spec, ops=sched.ops,
        cycles=sched.cycles, seconds=float(Fraction(sched.cycles) / mem.clock_hz),
        classes=classes, primitives=prims, total=Total(n, d, _cov(d, n)), kinds=kinds,
        engine=engine, elapsed=elapsed, empty_classes=empty,
    )
