"""Scheduling the memory tests of an SoC under a power budget.

What is modelled: each memory instance is one non-preemptive task of known length (its
chosen test's time) drawing a constant power while it runs.  The memories behind one BIST
controller (a *group*) are tested one after the other — the controller drives one memory at
a time — and the memories under test at any moment may together draw at most the budget.
The goal is the shortest total test time (makespan).

This is the power-constrained test scheduling problem of Chou, Saluja & Agrawal ("Scheduling
tests for VLSI systems under power constraints", IEEE Trans. VLSI Systems 5(2), 1997), here
without their session restriction, written as a resource-constrained project scheduling
problem: one cumulative resource (power, capacity = the budget) and one disjunctive resource
per group (a no-overlap constraint).  It is solved with the CP-SAT solver of Google OR-Tools
(interval variables, ``AddNoOverlap``, ``AddCumulative``), which proves optimality or, when
the time limit stops it, reports a lower bound; the gap between the two is printed.

Integer model: times are whole picoseconds (lengths rounded up) and powers whole microwatts
(task powers rounded up, the budget rounded down), so every schedule of the integer model
meets the real budget.  A serial list schedule (the serial schedule-generation scheme of
Kolisch, EJOR 90(2), 1996) gives a first solution and the horizon.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from fractions import Fraction

from ..errors import InputError

TICKS_PER_S = 10**12        # picoseconds
POWER_UNITS_PER_W = 10**6   # microwatts


@dataclass(frozen=True)
class Task:
    """One memory's test.  ``active``: the (offset, length) spans, in seconds from the
    task's start, during which it accesses the memory and draws ``watts``; between them (a
    retention pause) it draws nothing.  None: active for its whole length."""

    name: str
    group: str
    seconds: Fraction
    watts: Fraction
    active: tuple | None = None


def active_ticks(task: Task, length: int) -> list:
    """The task's active spans in whole ticks, (offset, length), widened outwards to whole
    ticks (so the integer model never under-counts power) and merged."""
    if task.active is None:
        return [(0, length)]
    spans = []
    for off, ln in task.active:
        a = math.floor(Fraction(off) * TICKS_PER_S)
        b = min(length, math.ceil((Fraction(off) + Fraction(ln)) * TICKS_PER_S))
        if b <= a:
            continue
        if spans and a <= spans[-1][1]:
            spans[-1] = (spans[-1][0], max(spans[-1][1], b))
        else:
            spans.append((a, b))
    return [(a, b - a) for a, b in spans] or [(0, length)]


@dataclass
class Schedule:
    starts: dict            # task name -> start (ticks)
    ends: dict              # task name -> end (ticks)
    makespan: int           # ticks
    bound: int              # proven lower bound on the makespan (ticks)
    status: str             # "optimal" | "feasible" | "trivial"
    solve_seconds: float
    solver: str

    @property
    def gap(self) -> float:
        return 0.0 if self.makespan == 0 else max(0.0, (self.makespan - self.bound) / self.makespan)

    @property
    def makespan_s(self) -> Fraction:
        return Fraction(self.makespan, TICKS_PER_S)


def ticks(seconds: Fraction) -> int:
    return math.ceil(Fraction(seconds) * TICKS_PER_S)


def power_units(watts: Fraction, up: bool = True) -> int:
    v = Fraction(watts) * POWER_UNITS_PER_W
    return math.ceil(v) if up else math.floor(v)


def lower_bound(durations, powers, groups, budget: int, active=None) -> int:
    """max(longest task, busiest group, total energy / budget) — each a bound every
    schedule obeys (energy counted over the active spans only)."""
    if not durations:
        return 0
    load: dict = {}
    for d, g in zip(durations, groups):
        load[g] = load.get(g, 0) + d
    if active is None:
        active = [[(0, d)] for d in durations]
    energy = sum(sum(ln for _, ln in a) * p for a, p in zip(active, powers))
    return max(max(durations), max(load.values()), -(-energy // budget) if budget else 0)


def list_schedule(durations, powers, groups, budget: int, order=None, active=None) -> list[int]:
    """Serial schedule-generation: each task, in priority order, at the earliest time after
    its group's previous task at which the power stays within the budget over all its
    active spans (``active[i]``: (offset, length) pairs; default the whole task).  Returns
    start times."""
    n = len(durations)
    if active is None:
        active = [[(0, d)] for d in durations]
    if order is None:
        load: dict = {}
        for d, g in zip(durations, groups):
            load[g] = load.get(g, 0) + d
        order = sorted(range(n), key=lambda i: (-load[groups[i]], groups[i], -durations[i] * powers[i], i))
    import bisect

    bp = [0]                          # power profile: level[k] on [bp[k], bp[k+1]); last to ∞
    level = [0]
    group_free: dict = {}
    starts = [0] * n

    def split(x):
        k = bisect.bisect_right(bp, x) - 1
        if bp[k] != x:
            bp.insert(k + 1, x)
            level.insert(k + 1, level[k])
            return k + 1
        return k

    def blocked(t, off, ln, p):
        """None if [t+off, t+off+ln) fits, else the first start after the blocking piece."""
        x0, x1 = t + off, t + off + ln
        j = bisect.bisect_right(bp, x0) - 1
        while j < len(bp) and bp[j] < x1:
            if level[j] + p > budget:
                return bp[j + 1] - off      # the last piece is 0 W: j + 1 exists
            j += 1
        return None

    for i in order:
        d, p = durations[i], powers[i]
        t = group_free.get(groups[i], 0)
        while True:
            for off, ln in active[i]:
                nxt = blocked(t, off, ln, p)
                if nxt is not None:
                    t = max(nxt, t + 1)
                    break
            else:
                break
        starts[i] = t
        for off, ln in active[i]:
            a, b = split(t + off), split(t + off + ln)
            for j in range(a, b):
                level[j] += p
        group_free[groups[i]] = t + d
    return starts


def solve(tasks: list[Task], budget_w: Fraction, time_limit_s: float = 10.0, threads: int = 2,
          seed: int = 0) -> Schedule:
    """The shortest schedule of ``tasks`` under ``budget_w`` (see the module docstring)."""
    budget = power_units(budget_w, up=False)
    dur = [max(1, ticks(t.seconds)) for t in tasks]
    act = [active_ticks(t, d) for t, d in zip(tasks, dur)]
    pw = [power_units(t.watts) for t in tasks]
    grp = [t.group for t in tasks]
    over = [t.name for t, p in zip(tasks, pw) if p > budget]
    if over:
        raise InputError(f"{len(over)} memor{'y draws' if len(over) == 1 else 'ies draw'} more than the "
                         f"whole power budget on its own: {', '.join(over[:5])}"
                         + (" …" if len(over) > 5 else "") + "; raise [power] budget")
    lb = lower_bound(dur, pw, grp, budget, act)
    greedy = list_schedule(dur, pw, grp, budget, active=act)
    g_make = max((s + d for s, d in zip(greedy, dur)), default=0)
    t0 = time.perf_counter()
    if g_make == lb:          # the list schedule meets a lower bound: optimal already
        return _result(tasks, greedy, dur, g_make, lb, "optimal", time.perf_counter() - t0, "list schedule")

    # work in units of the greatest common divisor of the lengths: the same problem (an
    # optimal schedule can be left-justified, so its start times are sums of lengths), with
    # domains small enough for the solver to prove bounds quickly
    unit = 0
    for d, a in zip(dur, act):
        unit = math.gcd(unit, d)
        for off, ln in a:
            unit = math.gcd(math.gcd(unit, off), ln)
    dur_t, greedy_t, lb_t, act_t = dur, greedy, lb, act
    dur = [d // unit for d in dur_t]
    act = [[(o // unit, n // unit) for o, n in a] for a in act_t]
    greedy = [s // unit if s % unit == 0 else None for s in greedy_t]
    lb = -(-lb_t // unit)

    from ortools.sat.python import cp_model

    m = cp_model.CpModel()
    horizon = -(-g_make // unit)
    starts, ivs, power_ivs, power_dem = [], [], [], []
    for i, d in enumerate(dur):
        s = m.NewIntVar(0, horizon - d, f"s{i}")
        starts.append(s)
        ivs.append(m.NewIntervalVar(s, d, s + d, f"i{i}"))
        if act[i] == [(0, d)]:
            power_ivs.append(ivs[-1])
            power_dem.append(pw[i])
        else:
            for k, (off, ln) in enumerate(act[i]):
                power_ivs.append(m.NewIntervalVar(s + off, ln, s + off + ln, f"a{i}_{k}"))
                power_dem.append(pw[i])
        if greedy[i] is not None:
            m.AddHint(s, greedy[i])
    by_group: dict = {}
    for i, g in enumerate(grp):
        by_group.setdefault(g, []).append(i)
    for members in by_group.values():
        if len(members) > 1:
            m.AddNoOverlap([ivs[i] for i in members])
        # identical tasks of one group are interchangeable: fix their order
        same: dict = {}
        for i in members:
            same.setdefault((dur[i], pw[i], tuple(act[i])), []).append(i)
        for eq in same.values():
            for a, b in zip(eq, eq[1:]):
                m.Add(starts[a] + dur[a] <= starts[b])
    m.AddCumulative(power_ivs, power_dem, budget)
    mk = m.NewIntVar(lb, horizon, "makespan")
    for i, d in enumerate(dur):
        m.Add(mk >= starts[i] + d)
    m.Minimize(mk)
    solver = cp_model.CpSolver()
    solver.parameters.max_time_in_seconds = float(time_limit_s)
    solver.parameters.num_workers = int(threads)
    solver.parameters.random_seed = int(seed)
    st = solver.Solve(m)
    elapsed = time.perf_counter() - t0
    if st in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        got = [solver.Value(s) * unit for s in starts]
        dur, act = dur_t, act_t
        make = max(g + d for g, d in zip(got, dur))
        bound = max(lb_t, int(math.ceil(solver.BestObjectiveBound())) * unit)
        if st == cp_model.OPTIMAL:
            bound = make
        # left-justify: the serial scheme in order of the solver's start times moves every
        # task as early as the tasks before it allow, never later (Kolisch 1996)
        shifted = list_schedule(dur, pw, grp, budget, order=sorted(range(len(dur)), key=lambda i: (got[i], i)),
                                active=act)
        if max(a + d for a, d in zip(shifted, dur)) <= make:
            got = shifted
            make = max(a + d for a, d in zip(got, dur))
        if make > g_make:     # pragma: no cover - the hint is feasible, CP-SAT never does worse
            got, make = greedy_t, g_make
        return _result(tasks, got, dur, make, min(bound, make), "optimal" if bound >= make else "feasible",
                       elapsed, "CP-SAT")
    return _result(tasks, greedy_t, dur_t, g_make, lb_t, "optimal" if lb_t >= g_make else "feasible", elapsed,
                   "list schedule (CP-SAT found nothing better in the time limit)")


def problem_key(tasks: list[Task], budget_w: Fraction, time_limit_s: float, threads: int) -> str:
    """Content hash of a scheduling problem (with the marchkit version and solver settings)."""
    import hashlib
    import json

    from .. import __version__

    blob = json.dumps({"marchkit": __version__, "what": "schedule", "budget": power_units(budget_w, up=False),
                       "limit": float(time_limit_s), "threads": int(threads),
                       "tasks": [[t.name, t.group, max(1, ticks(t.seconds)), power_units(t.watts),
                                  active_ticks(t, max(1, ticks(t.seconds)))] for t in tasks]},
                      sort_keys=True)
    return hashlib.sha256(blob.encode()).hexdigest()


def to_record(key: str, s: Schedule) -> dict:
    return {"key": key, "starts": s.starts, "makespan": s.makespan, "bound": s.bound, "status": s.status,
            "solve_seconds": s.solve_seconds, "solver": s.solver}


def from_record(rec: dict, tasks: list[Task], budget_w: Fraction) -> Schedule | None:
    """A cached schedule, if it is complete and valid for ``tasks`` (checked again)."""
    try:
        starts = {t.name: int(rec["starts"][t.name]) for t in tasks}
        dur = {t.name: max(1, ticks(t.seconds)) for t in tasks}
        s = Schedule(starts, {n: starts[n] + dur[n] for n in starts}, int(rec["makespan"]), int(rec["bound"]),
                     str(rec["status"]), float(rec["solve_seconds"]), str(rec["solver"]) + ", from the cache")
    except (KeyError, TypeError, ValueError):
        return None
    if s.makespan != max(s.ends.values(), default=0) or check_schedule(tasks, s, budget_w):
        return None
    return s


def _result(tasks, starts, dur, make, bound, status, elapsed, solver) -> Schedule:
    return Schedule({t.name: s for t, s in zip(tasks, starts)},
                    {t.name: s + d for t, s, d in zip(tasks, starts, dur)},
                    make, bound, status, elapsed, solver)


def check_schedule(tasks: list[Task], sched: Schedule, budget_w: Fraction) -> list[str]:
    """Independent check of a schedule: every task placed with its length, the tasks of a
    group never overlap, and the power at every start time stays within the budget.
    Returns the problems found (empty when the schedule is valid)."""
    problems = []
    for t in tasks:
        if sched.ends[t.name] - sched.starts[t.name] < Fraction(t.seconds) * TICKS_PER_S:
            problems.append(f"{t.name} is shorter than its test")
        if sched.starts[t.name] < 0:
            problems.append(f"{t.name} starts before 0")
    by_group: dict = {}
    for t in tasks:
        by_group.setdefault(t.group, []).append((sched.starts[t.name], sched.ends[t.name], t.name))
    for g, items in by_group.items():
        items.sort()
        for (s1, e1, a), (s2, e2, b) in zip(items, items[1:]):
            if s2 < e1:
                problems.append(f"{a} and {b} overlap in group {g}")
    spans = []                         # (start, end, watts) of every active span, in ticks
    for t in tasks:
        s0 = sched.starts[t.name]
        for off, ln in active_ticks(t, sched.ends[t.name] - s0):
            spans.append((s0 + off, s0 + off + ln, Fraction(t.watts)))
    for x, _, _ in spans:
        load = sum((w for a, b, w in spans if a <= x < b), Fraction(0))
        if load > budget_w:
            problems.append(f"{float(load):.4g} W at {x} ps exceeds the budget")
    return problems
