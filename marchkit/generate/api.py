"""Public entry points: :func:`generate` and :func:`shorten`."""

from __future__ import annotations

import datetime as _dt
import hashlib
import time
from dataclasses import dataclass, field

from ..errors import InputError, MarchkitError

MAX_ELEMENT_LIMIT = 8


class GenerateError(InputError):
    """A selection no test can cover, or limits no test can meet (exit status 2)."""


class ConfirmationError(MarchkitError):
    """The engine disagrees with the search: a bug, reported rather than hidden."""


@dataclass
class Generated:
    test: object                    # MarchTest
    length: int                     # operations per address
    proven_minimal: bool
    lower_bound: int
    grade: object                   # GradeResult on the user's memory
    excluded: list = field(default_factory=list)      # (fault, where, reason)
    unsupported: list = field(default_factory=list)   # (fault, reason)
    nodes: int = 0
    seconds: float = 0.0
    first_solution_seconds: float = 0.0
    stopped: str = ""
    keys: int = 0
    max_element: int = 6
    origin: str = "search"          # "search" | "like"
    remote_levels: int = 0          # bounds of the exact search run on the executor

    def to_json(self) -> dict:
        from ..notation import format_notation

        return {
            "test": format_notation(self.test),
            "length": self.length,
            "proven_minimal": self.proven_minimal,
            "lower_bound": self.lower_bound,
            "grade": self.grade.to_json(),
            "name": self.test.name,
            "excluded": [{"fault": f, "where": w, "reason": r} for f, w, r in self.excluded],
            "not_searched": [{"fault": f, "reason": r} for f, r in self.unsupported],
            "keys": self.keys,
            "nodes": self.nodes,
            "seconds": round(self.seconds, 3),
            "first_solution_seconds": round(self.first_solution_seconds, 3),
            "stopped": self.stopped or None,
            "max_element": self.max_element,
            "distributed_bounds": self.remote_levels,
        }


UNSUPPORTED_REASON = {
    "sof": "stuck-open faults are not searched by generate yet (their verdict depends on the sense "
           "amplifier's history); grade the result to see their coverage",
    "drf": "retention faults are not searched by generate yet (the search space has no delay "
           "elements); add a retention test or grade the result with delays",
}


def _check_limits(max_length, time_limit, max_element):
    if max_length is not None and int(max_length) < 1:
        raise GenerateError(f"--max-length must be 1 or more operations per address (got {max_length})")
    if time_limit is not None and not float(time_limit) > 0:
        raise GenerateError(f"--time-limit must be a positive number of seconds (got {time_limit})")
    if not 1 <= int(max_element) <= MAX_ELEMENT_LIMIT:
        raise GenerateError(f"--max-element must be between 1 and {MAX_ELEMENT_LIMIT} (got {max_element})")


def _undetectable_reason(g, max_element) -> str:
    if len(g.subs) > 1:
        why = "under every data background of this memory"
    else:
        why = "on this memory"
    return (f"no march test (elements of up to {max_element} operations) detects it {why}: "
            "with an unknown start some initial state is never told apart from the fault-free one")


def _items_detect_all(groups, items) -> bool:
    from .tables import evaluate_masks

    for g in groups:
        if not any(evaluate_masks(g.subs, items)):
            return False
    return True


def _relax_any(groups, items):
    """Write ⇕ for every element whose order does not matter to any key."""
    out = list(items)
    for i, (order, ops) in enumerate(out):
        trial = out[:i] + [("any", ops)] + out[i + 1:]
        if _items_detect_all(groups, trial):
            out = trial
    return out


def _concretize(pats):
    from .tables import concrete_ops

    out, f = [], 0
    for order, pat in pats:
        ops = concrete_ops(pat, f)
        out.append((order, ops))
        for k, v in ops:
            if k == "w":
                f = v
    return out


def _trim(groups, items, deadline=None):
    """Drop operations (then whole elements) while every key stays detected; reads keep
    expecting the fault-free value.  Only used on tests not proven minimal."""
    from .tables import R_

    pats = [(o, tuple(R_ if k == "r" else 1 + v for k, v in ops)) for o, ops in items]
    improved = True
    while improved:
        improved = False
        cands = []
        for i in range(len(pats)):
            cands.append(pats[:i] + pats[i + 1:])
        for i, (o, p) in enumerate(pats):
            for j in range(len(p)):
                if len(p) > 1:
                    cands.append(pats[:i] + [(o, p[:j] + p[j + 1:])] + pats[i + 1:])
        for c in cands:
            if deadline is not None and time.time() > deadline:
                return _concretize(pats)
            if not c or c[0][1][0] == R_:
                continue
            if _items_detect_all(groups, _concretize(c)):
                pats = c
                improved = True
                break
    return _concretize(pats)


def _to_test(items, name, source, targets, length, note):
    from ..notation import Element, MarchTest, Op

    els = tuple(Element(order, tuple(Op(k, v) for k, v in ops)) for order, ops in items)
    return MarchTest(els, name=name, source=source, targets=tuple(targets), length=length, note=note)


def _name_for(test_text: str, length: int) -> str:
    return f"Generated {length}n-" + hashlib.sha1(test_text.encode()).hexdigest()[:6]


def _targets(selection, unsupported):
    skip = {k.cls for k in unsupported}
    return [c for c in selection.classes if c not in skip] or list(selection.classes)


def _confirm(res, kinds_full, what="generated test"):
    """Every kind whose keys were all searched must be detected 100 % by the engine."""
    for r in res.kinds:
        if r.kind.text in kinds_full and r.detected < r.instances:
            raise ConfirmationError(
                f"internal error: the engine finds the {what} misses {r.instances - r.detected} "
                f"instance(s) of {r.kind.text} the search counted as detected; please report it")


def generate(faults="static", mem=None, pairs="neighbours", retention=None, *, max_length=None,
             time_limit=None, executor=None, max_element=6, progress=None, options="",
             beam_width=50, now=None, local_nodes=20_000, exact=True) -> Generated:
    """The shortest march test detecting ``faults`` on ``mem`` (see the package docstring).

    ``executor``: None (serial), an object with ``submit``/``gather``, or a callable returning
    a context manager that yields one (opened only if the exact search has work to do).
    ``progress(dict)``: called with phase, lower_bound, best, nodes, elapsed.
    """
    from ..faults import DEFAULT_RETENTION, parse_pairs, select_faults
    from ..grade import grade
    from ..notation import format_notation
    import numpy as np

    from .keys import discover, group_canon
    from .search import build_problem, group_distances, path_items, search

    t0 = time.time()
    _check_limits(max_length, time_limit, max_element)
    retention = retention or DEFAULT_RETENTION
    selection = select_faults(faults, retention) if isinstance(faults, str) else faults
    scope = parse_pairs(pairs) if isinstance(pairs, str) else pairs
    groups, unsupported_kinds = discover(selection, mem, scope)
    unsupported = [(k.text, UNSUPPORTED_REASON[k.family]) for k in unsupported_kinds]
    if not groups:
        if unsupported_kinds:
            raise GenerateError("nothing to search: " + "; ".join(f"{f}: {r}" for f, r in unsupported[:2]))
        raise GenerateError(f"the selection {selection.spec!r} has no instances on this memory with pairs {scope.spec!r}")
    uniq, seen = [], {}
    for g in groups:
        c = group_canon(g.subs)
        if c not in seen:
            seen[c] = len(uniq)
            uniq.append(g)
    if progress:
        progress({"phase": "tables", "keys": len(uniq)})
    prob, ok, reps = build_problem(uniq, max_element)
    excluded = []
    bad_canon = {group_canon(g.subs) for g, good in zip(uniq, ok) if not good}
    for g in groups:
        if group_canon(g.subs) in bad_canon:
            item = (g.kind.text, g.structure, _undetectable_reason(g, max_element))
            if item not in excluded:
                excluded.append(item)
    kept = [g for g, good in zip(uniq, ok) if good]
    if not kept:
        raise GenerateError("no march test detects any of the selected faults on this memory: "
                            + "; ".join(f"{f} ({w})" for f, w, _ in excluded[:4]))
    sub = prob
    root = sub.root_bound()
    if max_length is not None and int(max_length) < root:
        gd = group_distances(sub)
        hard = reps[int(np.argmax(gd))]
        raise GenerateError(
            f"no test of {max_length} operations per address can detect the selection: "
            f"{hard.describe()} alone needs {root}")
    out = search(sub, max_length=max_length, time_limit=time_limit, executor=executor,
                 progress=progress, beam_width=beam_width, local_nodes=local_nodes, exact=exact)
    if max_length is not None and out.length > int(max_length):
        if out.lower_bound > int(max_length) or out.proven:
            raise GenerateError(f"no test of at most {max_length} operations per address detects the "
                                f"selection (at least {out.lower_bound} are needed)")
        raise GenerateError(f"no test of at most {max_length} operations per address was found "
                            f"before the search stopped ({out.stopped or 'limit'}); the best has {out.length}")
    items = path_items(sub, out.path)
    if not out.proven:
        items = _trim(reps, items, None if time_limit is None else t0 + 2 * float(time_limit))
    items = _relax_any(reps, items)
    length = sum(len(ops) for _, ops in items)
    if not _items_detect_all(kept, items):   # pragma: no cover - the tables and the direct simulation agree
        raise ConfirmationError("internal error: the search's test does not detect every key")
    stamp = (now or _dt.datetime.now(_dt.timezone.utc)).strftime("%Y-%m-%d %H:%M UTC")
    draft = _to_test(items, "", "", (), "", "")
    text = format_notation(draft)
    proven = out.proven
    note = (f"proven minimal: no test of fewer operations per address in the search space "
            f"(elements of at most {max_element} operations; ⇑, ⇓, ⇕; reads and writes of 0 and 1) "
            "detects the selection" if proven else
            f"not proven minimal: lower bound {out.lower_bound}n reached"
            + (f" ({out.stopped})" if out.stopped else ""))
    if unsupported:
        note += "; not searched: " + ", ".join(f for f, _ in unsupported)
    test = _to_test(items, _name_for(text, length),
                    f"generated by marchkit on {stamp}" + (f" with {options}" if options else ""),
                    _targets(selection, unsupported_kinds), f"{length}n", note)
    res = grade(test, mem, selection, scope, retention)
    bad_kinds = {f for f, _, _ in excluded} | {f for f, _ in unsupported}
    _confirm(res, {k.text for k in selection.kinds} - bad_kinds)
    return Generated(test, length, proven, out.lower_bound, res, excluded, unsupported, out.nodes,
                     time.time() - t0, out.first_solution_s, out.stopped, len(reps), max_element,
                     remote_levels=out.remote_levels)


# ---------------------------------------------------------------------------------------
# --like: shorten a given test


def _consistent(items) -> bool:
    from ..notation import check_test

    t = _like_test(items)
    return not any(d.severity == "error" for d in check_test(t)) and bool(t.elements)


def _like_test(items, **kw):
    from ..notation import Delay, Element, MarchTest, Op

    out = []
    for it in items:
        if it[0] == "delay":
            out.append(it[1])
        else:
            out.append(Element(it[0], tuple(Op(k, v) for k, v in it[1])))
    return MarchTest(tuple(out), **kw)


def _detected(res):
    return {r.kind.text: r.detected for r in res.kinds}


def shorten(test, mem, faults="static", pairs="neighbours", retention=None, *, progress=None,
            options="", time_limit=None, now=None) -> Generated:
    """Remove operations from ``test`` (and merge neighbouring elements of the same order)
    while, instance by instance count, it detects at least what it detected — judged by the
    engine on ``mem``, so every fault family (delays and retention faults included) counts.
    Greedy descent: the result is no longer than ``test`` but not proven minimal."""
    from ..faults import DEFAULT_RETENTION, parse_pairs, select_faults
    from ..grade import grade
    from ..notation import Delay, ensure_consistent, format_notation

    t0 = time.time()
    _check_limits(None, time_limit, 1)
    if test.hammers:
        raise GenerateError("shortening keeps elements and delays only: remove the hammer item from the test "
                            "first (grade the hammer part on its own)")
    ensure_consistent(test)
    retention = retention or DEFAULT_RETENTION
    selection = select_faults(faults, retention) if isinstance(faults, str) else faults
    scope = parse_pairs(pairs) if isinstance(pairs, str) else pairs
    base = grade(test, mem, selection, scope, retention)
    want = _detected(base)
    items = []
    for it in test.items:
        if isinstance(it, Delay):
            items.append(("delay", it))
        else:
            items.append((it.order, tuple((op.kind, op.value) for op in it.expanded())))
    evals = 0

    def keeps(cand) -> bool:
        nonlocal evals
        if not _consistent(cand):
            return False
        evals += 1
        res = grade(_like_test(cand), mem, selection, scope, retention)
        got = _detected(res)
        return all(got[k] >= v for k, v in want.items())

    def candidates(cur):
        els = [i for i, it in enumerate(cur) if it[0] != "delay"]
        for i in els:                                         # drop a whole element
            yield cur[:i] + cur[i + 1:]
        for i in els:                                         # drop one operation
            ops = cur[i][1]
            for j in range(len(ops)):
                if len(ops) > 1:
                    yield cur[:i] + [(cur[i][0], ops[:j] + ops[j + 1:])] + cur[i + 1:]
        for a, b in zip(els, els[1:]):                        # merge two neighbours, dropping one op
            if b != a + 1:
                continue
            oa, ob = cur[a][0], cur[b][0]
            if oa != ob and "any" not in (oa, ob):
                continue
            order = oa if oa != "any" else ob
            ops = cur[a][1] + cur[b][1]
            for j in range(len(ops)):
                yield cur[:a] + [(order, ops[:j] + ops[j + 1:])] + cur[b + 1:]

    deadline = t0 + time_limit if time_limit else None
    stopped = ""
    cur = items
    try:
        improved = True
        while improved:
            improved = False
            for cand in candidates(cur):
                if deadline is not None and time.time() > deadline:
                    stopped = "time limit"
                    break
                if keeps(cand):
                    cur = cand
                    improved = True
                    if progress:
                        progress({"phase": "shortening", "best": _like_test(cur).ops_per_cell,
                                  "nodes": evals, "lower_bound": 0, "elapsed": time.time() - t0})
                    break
            if stopped:
                break
    except KeyboardInterrupt:
        stopped = "interrupted"
    draft = _like_test(cur)
    length = draft.ops_per_cell
    stamp = (now or _dt.datetime.now(_dt.timezone.utc)).strftime("%Y-%m-%d %H:%M UTC")
    name = _name_for(format_notation(draft), length)
    note = (f"shortened from {test.display_name} ({test.ops_per_cell}n) by removing and merging "
            f"operations; detects every instance it detected; not proven minimal")
    final = _like_test(cur, name=name, source=f"generated by marchkit on {stamp}" + (f" with {options}" if options else ""),
                       targets=tuple(test.targets) or tuple(selection.classes),
                       length=draft.length_text, note=note)
    res = grade(final, mem, selection, scope, retention)
    got = _detected(res)
    if any(got[k] < v for k, v in want.items()):   # pragma: no cover - every step was graded
        raise ConfirmationError("internal error: the shortened test lost a detection")
    return Generated(final, length, False, 0, res, [], [], evals, time.time() - t0, 0.0, stopped, 0, 0, "like")
