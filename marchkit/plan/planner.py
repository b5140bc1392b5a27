"""From an SoC file to a plan: grade every candidate test once per memory type (per clock,
when one type runs in several clock domains), choose per type the cheapest test meeting the
required coverage, and schedule the instances under the power budget.

Choosing per type the shortest sufficient test, then scheduling, gives the shortest plan over
all choices as well: a memory's power does not depend on the test, and shortening any task
never lengthens the optimal schedule.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from fractions import Fraction

from ..errors import InputError
from .grading import Cache, default_cache_dir, grade_jobs, make_job
from .schedule import TICKS_PER_S, Task, solve
from .soc import Soc, read_soc


@dataclass
class Option:
    """One candidate test on one memory variant, graded."""

    test: object
    spec: str
    cycles: int
    ops: int
    seconds: Fraction
    coverage: dict         # class -> (detected, instances)
    meets: bool
    short: list            # classes below the requirement


@dataclass
class Variant:
    """A memory type at one clock: what is graded and chosen for."""

    type: object           # MemoryType
    clock_hz: Fraction
    memory: object         # Memory
    watts: Fraction
    options: list = field(default_factory=list)
    chosen: Option | None = None
    unmet: list = field(default_factory=list)   # (class, required %, best %, best test)

    @property
    def label(self) -> str:
        return self.type.name


@dataclass
class Plan:
    soc: Soc
    variants: dict           # (type, clock) -> Variant
    rows: list               # one dict per instance, in file order
    schedule: object         # schedule.Schedule
    graded: int
    cached: int
    grade_seconds: float
    classes: tuple
    workers: str = "serial"

    @property
    def total_seconds(self) -> Fraction:
        return self.schedule.makespan_s

    @property
    def short_types(self) -> list:
        return [v for v in self.variants.values() if v.chosen is not None and not v.chosen.meets]

    def to_json(self) -> dict:
        """Plain values: the SoC, every type's choice, every instance with its test and place
        in the schedule, and the total test time (seconds)."""
        s = self.schedule
        return {
            "soc": self.soc.name,
            "file": self.soc.path,
            "total_test_time_s": float(self.total_seconds),
            "schedule": {"status": s.status, "lower_bound_s": s.bound / TICKS_PER_S, "gap": s.gap,
                         "solver": s.solver, "solve_seconds": round(s.solve_seconds, 3),
                         "budget_w": float(self.soc.budget_w),
                         "peak_w": float(peak_power(self))},
            "faults": self.soc.faults,
            "pairs": self.soc.pairs,
            "requirements_met": not self.short_types,
            "types": [
                {"type": v.type.name, "kind": v.type.kind, "clock_hz": float(v.clock_hz),
                 "memory": v.memory.describe(),
                 "instances": sum(1 for r in self.rows if r["variant"] == k),
                 "test": v.chosen.test.name if v.chosen else None,
                 "notation": _notation(v.chosen.test) if v.chosen else None,
                 "seconds": float(v.chosen.seconds) if v.chosen else None,
                 "cycles": v.chosen.cycles if v.chosen else None,
                 "power_w": float(v.watts),
                 "meets": bool(v.chosen and v.chosen.meets),
                 "required": {c: float(p) for c, p in v.type.require.items()},
                 "unmet": [{"class": c, "required": float(req), "best": best, "best_test": bt}
                           for c, req, best, bt in v.unmet],
                 "candidates": [
                     {"test": o.test.name or o.spec, "seconds": float(o.seconds), "cycles": o.cycles,
                      "meets": o.meets, "short": o.short,
                      "coverage": {c: (d / n if n else 1.0) for c, (d, n) in o.coverage.items()}}
                     for o in v.options]}
                for k, v in self.variants.items()],
            "groups": group_summary(self),
            "instances": [dict({k: r[k] for k in ("name", "type", "domain", "group", "test", "start_s", "end_s",
                                                    "seconds", "power_w", "meets")},
                               active_s=[[float(a), float(b)] for a, b in r["active"]]) for r in self.rows],
            "graded": {"jobs": self.graded + self.cached, "computed": self.graded, "cached": self.cached,
                       "seconds": round(self.grade_seconds, 3), "workers": self.workers},
        }


def _notation(test) -> str:
    from ..notation import format_notation

    return format_notation(test)


def peak_power(plan: Plan) -> Fraction:
    """The most power drawn at once (over the memories' active spans)."""
    spans = [(a, b, r["watts"]) for r in plan.rows for a, b in r["active"]]
    best = Fraction(0)
    for x, _, _ in spans:
        best = max(best, sum((w for a, b, w in spans if a <= x < b), Fraction(0)))
    return best


def active_spans(test, mem) -> tuple | None:
    """(offset, length) in seconds of the runs of march elements of ``test`` on ``mem``
    between its pauses; None when the test has no pause (active throughout)."""
    from ..model import schedule

    if not test.delays:
        return None
    spans: list = []
    for seg in schedule(test, mem).segments:
        if seg.is_delay or seg.cycles == 0:
            continue
        a, b = seg.start, seg.start + seg.cycles
        if spans and spans[-1][1] == a:
            spans[-1] = (spans[-1][0], b)
        else:
            spans.append((a, b))
    return tuple((Fraction(a) / mem.clock_hz, Fraction(b - a) / mem.clock_hz) for a, b in spans)


def group_summary(plan: Plan) -> list:
    out: dict = {}
    for r in plan.rows:
        g = out.setdefault(r["group"], {"group": r["group"], "domain": r["domain"], "instances": 0,
                                        "busy_s": 0.0, "start_s": r["start_s"], "end_s": r["end_s"]})
        g["instances"] += 1
        g["busy_s"] += r["seconds"]
        g["start_s"] = min(g["start_s"], r["start_s"])
        g["end_s"] = max(g["end_s"], r["end_s"])
    return list(out.values())


def variants_of(soc: Soc) -> dict:
    """(type name, clock) → Variant for every pair some instance uses, in file order."""
    out: dict = {}
    for inst in soc.instances:
        clock = soc.domains[inst.domain]
        key = (inst.type, clock)
        if key not in out:
            t = soc.types[inst.type]
            mem = t.memory(clock)
            out[key] = Variant(t, clock, mem, t.power(mem))
    return out


def candidate_tests(soc: Soc, t, generated=None) -> list:
    """(spec, test) pairs for memory type ``t``; ``generated`` maps a type name to the tests
    the generator produced for it (when the command line has a generator)."""
    out = []
    for spec in soc.type_tests(t):
        c = soc.candidates[spec]
        if c.is_generate:
            for test in (generated or {}).get(t.name, ()):
                out.append((spec, test))
            continue
        out.extend((spec, test) for test in c.tests)
    return out


def check_generate(soc: Soc, generator) -> None:
    """Refuse "generate" candidates when no generator is wired in."""
    if generator is not None:
        return
    for spec, c in soc.candidates.items():
        if c.is_generate:
            raise soc.error("\"generate\" needs the test generator, which the caller did not pass "
                            "(make_plan(generator=...); `marchkit plan` passes `marchkit generate`)",
                            c.pos)


def meets(coverage: dict, require: dict) -> list:
    """Classes whose required percentage is not reached (exactly: 100·detected ≥ p·instances).
    A class with no instance in the pair scope has nothing to miss."""
    short = []
    for cls, p in require.items():
        d, n = coverage.get(cls, (0, 0))
        if n and 100 * d < p * n:
            short.append(cls)
    return short


def choose(variant: Variant) -> None:
    """The cheapest option that meets every requirement (fewest cycles, then operations, then
    the order given); if none does, the one missing the fewest requirements, and for each
    requirement no option meets, the best coverage reached and by which test."""
    opts = variant.options
    if not opts:
        return
    ok = [o for o in opts if o.meets]
    if ok:
        variant.chosen = min(ok, key=lambda o: (o.seconds, o.ops, opts.index(o)))
        return
    req = variant.type.require

    def shortfall(o):
        worst = min((Fraction(d, n) * 100 / p if n and p else Fraction(1)
                     for c, p in req.items() for d, n in [o.coverage.get(c, (0, 0))]), default=Fraction(1))
        return (len(o.short), -worst, o.seconds, opts.index(o))

    variant.chosen = min(opts, key=shortfall)
    for cls, p in req.items():
        if all(cls in o.short for o in opts):
            best = max(opts, key=lambda o: (Fraction(*o.coverage[cls]) if o.coverage.get(cls, (0, 0))[1] else 1,
                                            -o.seconds))
            d, n = best.coverage.get(cls, (0, 0))
            variant.unmet.append((cls, p, (d / n) if n else 1.0, best.test.name or best.spec))


def make_plan(soc: Soc | str, client=None, cache_dir="default", progress=None, generator=None,
              connect=None) -> Plan:
    """Grade (on ``client`` if given, else here), choose and schedule.

    ``cache_dir``: ``"default"`` (``$MARCHKIT_CACHE`` or the user's cache directory), a
    directory, or None (no cache).  ``generator(soc, variants, client)`` → {type name: tests}
    answers the "generate" candidates; without it they are refused.
    ``connect()``: a context manager yielding a client, opened only when the cache leaves
    something to grade (the command line passes :func:`marchkit.plan.cluster.open_client`).
    ``progress(done, total)`` follows the grading.
    """
    if not isinstance(soc, Soc):
        soc = read_soc(soc)
    check_generate(soc, generator)
    variants = variants_of(soc)
    if generator is not None and any(c.is_generate for c in soc.candidates.values()):
        if client is None and connect is not None:
            with connect() as c:
                return _plan(soc, variants, generator(soc, variants, c), c, cache_dir, progress, None)
        return _plan(soc, variants, generator(soc, variants, client), client, cache_dir, progress, connect)
    return _plan(soc, variants, None, client, cache_dir, progress, connect)


def _plan(soc, variants, generated, client, cache_dir, progress, connect) -> Plan:
    cache = Cache(default_cache_dir() if cache_dir == "default" else cache_dir)
    jobs = {}
    per_variant = {}
    for key, v in variants.items():
        pairs = []
        for spec, test in candidate_tests(soc, v.type, generated):
            job = make_job(test, v.memory, soc.faults, soc.retention, soc.pairs)
            jobs[job.key] = job
            pairs.append((spec, test, job.key))
        per_variant[key] = pairs
    t0 = time.perf_counter()
    run = grade_jobs(list(jobs.values()), client=client, cache=cache, progress=progress, connect=connect)
    grade_s = time.perf_counter() - t0
    classes: dict = {}
    for key, v in variants.items():
        for spec, test, jk in per_variant[key]:
            res = run.results[jk]
            cov = {c: (d, n) for c, n, d in res["classes"]}
            for c in cov:
                classes.setdefault(c, None)
            short = meets(cov, v.type.require)
            v.options.append(Option(test, spec, res["cycles"], res["ops"],
                                    Fraction(res["cycles"]) / v.clock_hz, cov, not short, short))
        choose(v)
        if v.chosen is None:
            raise InputError(f"memory type {v.type.name!r} has no candidate test to grade")
    tasks = []
    for inst in soc.instances:
        v = variants[(inst.type, soc.domains[inst.domain])]
        tasks.append(Task(inst.name, inst.group, v.chosen.seconds, v.watts, active_spans(v.chosen.test, v.memory)))
    sched = _solve_cached(tasks, soc, cache)
    rows = []
    for inst, task in zip(soc.instances, tasks):
        key = (inst.type, soc.domains[inst.domain])
        v = variants[key]
        s, e = sched.starts[inst.name], sched.ends[inst.name]
        spans = task.active or ((Fraction(0), task.seconds),)
        rows.append({"name": inst.name, "type": inst.type, "domain": inst.domain, "group": inst.group,
                     "test": v.chosen.test.name or v.chosen.spec, "variant": key,
                     "start": s, "end": e, "start_s": s / TICKS_PER_S, "end_s": e / TICKS_PER_S,
                     "active": [(Fraction(s, TICKS_PER_S) + o, Fraction(s, TICKS_PER_S) + o + n) for o, n in spans],
                     "seconds": float(v.chosen.seconds), "watts": v.watts, "power_w": float(v.watts),
                     "meets": v.chosen.meets})
    return Plan(soc, variants, rows, sched, run.computed, run.cached, grade_s, tuple(classes),
                workers=run.where)


def _solve_cached(tasks, soc, cache):
    """Solve, or take the stored answer to the very same problem (re-checked on loading)."""
    from .schedule import from_record, problem_key, to_record

    key = problem_key(tasks, soc.budget_w, float(soc.time_limit), soc.solver_threads)
    rec = cache.get_raw(key)
    if rec is not None:
        got = from_record(rec, tasks, soc.budget_w)
        if got is not None:
            return got
    sched = solve(tasks, soc.budget_w, float(soc.time_limit), soc.solver_threads)
    cache.put_raw(key, to_record(key, sched))
    return sched
