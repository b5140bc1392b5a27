"""From a fail log to ranked fault candidates, grouped into equivalence classes.

Method (single-fault assumption, the usual one of march-test diagnosis):

1. The failing cells are the bits where ``observed`` differs from ``expected``.
2. Candidates are the fault instances that could make those cells fail: every single-cell
   kind on each failing cell (static and dynamic primitives, SAF, TF, SOF, DRF), every
   two-cell kind with the failing cell as victim and an aggressor from the pair scope
   (physical neighbours, the same word, all cells or a sample), and the kinds of families on
   words (address decoder) on each failing word with a partner word from the scope.  Families
   come from the registry (:mod:`marchkit.faults.registry`); kinds with more than two sites are
   not diagnosed yet (a note says so).
3. Each candidate is simulated (:class:`marchkit.engine.trace.Tracer`: the oracle semantics,
   every failing compare, on the projected words) for each initial value of its cells, with
   every ⇕ element ascending as the exported stimulus runs it.  A real chip has one initial
   value, so a candidate's score is its best scenario's number of mismatches: compares the
   log has and the candidate does not predict, predicted definite fails the log lacks, and
   compares whose observed bits disagree (unknown predicted bits never count).
4. Candidates with the same predicted fails in every scenario cannot be told apart by this
   test: they form one *equivalence class*.  Classes are ranked by mismatches (exact syndrome
   match, 0, first; then nearest); ties share a rank.

Aggressors (and address-decoder partners) that sit in the same relation to the victim — not
in its word, on the same side of it in the address order, the same background bits in every
run — behave identically (the key of the fast paths of the primitives and decoder families,
DEVELOPERS.md; a new two-site family must behave the same way to be diagnosed by this
grouping), so one representative is simulated per such group and the group joins its class
whole.  That makes ``--pairs all``
affordable on large arrays, and it is exact.

The hint for splitting the largest class appends one candidate march element (after the
test's last element, so the logged cycles stay where they are) and re-simulates the class's
members: the element that splits them into the most classes is proposed.  Extending a test
with elements chosen to separate fault candidates follows the diagnostic march tests of
Li, Cheng, Huang and Wu, "March-based RAM diagnosis algorithms for stuck-at and coupling
faults", ITC 2001.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..faults import Instance, parse_pairs, select_faults
from .bitmap import bitmap_from_cells

MAX_CELLS = 64          # failing cells for which candidates are generated
MAX_CELLS_SPREAD = 16   # … when they spread over more words than one instance can touch
MAX_HINT_REPS = 24      # members simulated per candidate element when looking for a split
AF_SPLIT_LIMIT = 32     # an AF partner group that the test itself would tell apart is expanded up to this


@dataclass
class Group:
    """Candidates with one behaviour: ``kind`` at ``sites`` (one row per member)."""

    kind: object
    sites: np.ndarray                 # (members, arity) int64
    syndromes: list = field(default_factory=list)   # [(scenario, compares)]
    signature: frozenset = frozenset()
    mismatches: int = 0
    best: tuple = ()                  # compares of the best scenario
    best_scenario: tuple = ()
    diffs: dict = field(default_factory=dict)

    @property
    def size(self) -> int:
        return int(self.sites.shape[0])

    @property
    def rep(self) -> Instance:
        return Instance(self.kind, tuple(int(s) for s in self.sites[0]))


@dataclass
class Candidate:
    """One equivalence class."""

    rank: int
    mismatches: int
    groups: list
    best: tuple
    diffs: dict

    @property
    def size(self) -> int:
        return sum(g.size for g in self.groups)

    def members(self, limit=None):
        n = 0
        for g in self.groups:
            for row in g.sites:
                if limit is not None and n >= limit:
                    return
                n += 1
                yield g.kind, tuple(int(s) for s in row)


@dataclass
class Diagnosis:
    test: object
    memory: object
    log: object
    bitmap: object
    candidates: list
    faults_spec: str
    pairs_spec: str
    notes: list = field(default_factory=list)
    hint: dict | None = None
    total_candidates: int = 0

    @property
    def consistent(self) -> list:
        """The classes at rank 1."""
        return [c for c in self.candidates if c.rank == 1]

    @property
    def exact(self) -> bool:
        return bool(self.candidates) and self.candidates[0].mismatches == 0

    def to_json(self, top: int = 10, members: int = 50) -> dict:
        return diagnosis_json(self, top, members)


# ---------------------------------------------------------------------------------------
# matching


def compare_log(log_map: dict, compares) -> tuple[int, dict]:
    """(mismatches, {'missing': [...], 'unexpected': [...], 'different': [...]}) between
    the log (cycle → Fail) and a predicted list of compares (cycles listed)."""
    missing, different = [], []
    seen = set()
    for c in compares:
        seen.add(c.cycle)
        f = log_map.get(c.cycle)
        if f is None:
            if c.definite:
                missing.append(c.cycle)
        elif (f.observed ^ c.observed) & c.known or f.address != c.address:
            different.append(c.cycle)
    unexpected = [cy for cy in log_map if cy not in seen]
    return len(missing) + len(unexpected) + len(different), {
        "missing": missing, "unexpected": sorted(unexpected), "different": different}


# ---------------------------------------------------------------------------------------
# candidates


def _cell_keys(tr, cells):
    """Background bits of each cell in every run, as one integer per cell."""
    bits = tr.mem.bits
    w, b = cells // bits, cells % bits
    vals = tr.bg[:, w, b].astype(np.int64)              # (runs, m)
    if vals.shape[0] <= 62:
        return (vals << np.arange(vals.shape[0], dtype=np.int64)[:, None]).sum(axis=0)
    _, inv = np.unique(vals.T, axis=0, return_inverse=True)
    return inv.ravel().astype(np.int64)


def _word_keys(tr, words):
    bg = tr.bg[:, words, :]                             # (runs, m, bits)
    flat = np.ascontiguousarray(bg.transpose(1, 0, 2).reshape(words.size, -1))
    _, inv = np.unique(flat, axis=0, return_inverse=True)
    return inv.ravel().astype(np.int64)


def _neighbour_cells(mem, cell):
    from ..model.geometry import DIRECTIONS_4, DIRECTIONS_8

    w, b = divmod(int(cell), mem.bits)
    r, c = (int(x) for x in mem.place(w, b))
    out = []
    for dr, dc in (DIRECTIONS_8 if mem.neighbours == 8 else DIRECTIONS_4):
        rr, cc = r + dr, c + dc
        if 0 <= rr < mem.rows and 0 <= cc < mem.columns:
            ww, bb = mem.cell_at(rr, cc)
            out.append(int(ww) * mem.bits + int(bb))
    return out


def _aggressors(mem, scope, victim, sample_cache):
    """Aggressor cells of ``victim`` in the pair scope (int64 array, no repeats)."""
    from ..faults import cell_pairs
    from ..faults.catalogue import PairScope

    if scope.is_all:
        a = np.arange(mem.cells, dtype=np.int64)
        return a[a != victim]
    parts = []
    for p in scope.parts:
        if p[0] == "neighbours":
            parts.append(np.array(_neighbour_cells(mem, victim), dtype=np.int64))
        elif p[0] == "word":
            w = victim // mem.bits
            a = w * mem.bits + np.arange(mem.bits, dtype=np.int64)
            parts.append(a[a != victim])
        else:
            key = ("cells",) + tuple(p)
            if key not in sample_cache:
                sample_cache[key] = cell_pairs(mem, PairScope((p,), "sample"))
            a, v = sample_cache[key]
            parts.append(a[v == victim])
    return np.unique(np.concatenate(parts)) if parts else np.empty(0, np.int64)


def _partner_words(mem, scope, word, sample_cache):
    from ..faults import word_pairs
    from ..faults.catalogue import PairScope

    if scope.is_all:
        a = np.arange(mem.words, dtype=np.int64)
        return a[a != word]
    parts = []
    for p in scope.parts:
        if p[0] == "neighbours":
            ws = set()
            for b in range(mem.bits):
                for c in _neighbour_cells(mem, word * mem.bits + b):
                    ws.add(c // mem.bits)
            ws.discard(word)
            parts.append(np.array(sorted(ws), dtype=np.int64))
        elif p[0] == "sample":
            key = ("words",) + tuple(p)
            if key not in sample_cache:
                sample_cache[key] = word_pairs(mem, PairScope((p,), "sample"))
            a, b = sample_cache[key]
            parts.append(np.concatenate([b[a == word], a[b == word]]))
    return np.unique(np.concatenate(parts)) if parts else np.empty(0, np.int64)


def _groups_by_key(keys, others):
    """Split ``others`` into groups with equal keys: list of arrays."""
    if others.size == 0:
        return []
    uk, inv = np.unique(keys, return_inverse=True)
    inv = inv.ravel()
    order = np.argsort(inv, kind="stable")
    bounds = np.searchsorted(inv[order], np.arange(uk.size + 1))
    return [others[order[bounds[i]:bounds[i + 1]]] for i in range(uk.size)]


def _on_words(kind) -> bool:
    """True for families whose sites are words (address decoder), False for cells."""
    from ..faults import family_of

    return family_of(kind).site == "words"


def candidate_groups(tr, kinds, scope, cells, words, notes):
    """The candidate groups (not yet simulated) for failing ``cells`` (flat indices) and
    failing ``words``."""
    mem = tr.mem
    bits = mem.bits
    groups: list[Group] = []
    sample_cache: dict = {}
    single = [k for k in kinds if not _on_words(k) and k.arity == 1]
    pair = [k for k in kinds if not _on_words(k) and k.arity == 2]
    af1 = [k for k in kinds if _on_words(k) and k.arity == 1]
    af2 = [k for k in kinds if _on_words(k) and k.arity == 2]
    more = sorted({k.cls for k in kinds if k.arity > 2})
    if more:
        notes.append(f"faults of three or more cells are not diagnosed yet (classes {', '.join(more)})")
    for v in cells:
        for k in single:
            groups.append(Group(k, np.array([[v]], dtype=np.int64)))
        if pair:
            aggs = _aggressors(mem, scope, v, sample_cache)
            vw = v // bits
            aw = aggs // bits
            same = aw == vw
            keys = np.where(same, -1 - aggs,
                            (tr.rank[aw] < tr.rank[vw]).astype(np.int64) + 2 * _cell_keys(tr, aggs))
            for ag in _groups_by_key(keys, aggs):
                sites = np.stack([ag, np.full_like(ag, v)], axis=1)
                for k in pair:
                    groups.append(Group(k, sites))
    failing = np.array(sorted(words), dtype=np.int64)
    for f in failing:
        for k in af1:
            groups.append(Group(k, np.array([[f]], dtype=np.int64)))
        if not af2:
            continue
        partners = _partner_words(mem, scope, int(f), sample_cache)
        if partners.size == 0:
            continue
        is_failing = np.isin(partners, failing)
        partners = partners[~is_failing | (partners > f)]     # a pair of failing words once
        is_failing = np.isin(partners, failing)
        if partners.size == 0:
            continue
        keys = np.where(is_failing, -1 - partners,
                        (tr.rank[partners] < tr.rank[f]).astype(np.int64) + 2 * _word_keys(tr, partners))
        for pg in _groups_by_key(keys, partners):
            for k in af2:
                for first in (True, False):
                    col_f = np.full_like(pg, f)
                    sites = np.stack([col_f, pg] if first else [pg, col_f], axis=1)
                    groups.append(Group(k, sites))
    return groups


# ---------------------------------------------------------------------------------------
# the diagnosis


def _behaviour(kind, sites):
    """Kinds with the same rules (SA1 and <0/1/->, CFid<↑;1> and <0w1;0/1/->) at the same
    sites behave alike under every test."""
    return (kind.family, kind.rules, kind.af, kind.drf_value, kind.tau, kind.params,
            tuple(int(s) for s in sites))


def _simulate(tr, g: Group, log_map, cache=None):
    key = _behaviour(g.kind, g.sites[0])
    if cache is not None and key in cache:
        g.syndromes = cache[key]
    else:
        g.syndromes = tr.syndromes(g.rep)
        if cache is not None:
            cache[key] = g.syndromes
    g.signature = frozenset(c for _, c in g.syndromes)
    best = None
    for scen, comps in g.syndromes:
        m, d = compare_log(log_map, comps)
        if best is None or m < best[0]:
            best = (m, d, scen, comps)
    g.mismatches, g.diffs, g.best_scenario, g.best = best


def _af_partner_fails(g: Group, partner_col: int) -> bool:
    p = int(g.sites[0, partner_col])
    return any(c.address == p for _, comps in g.syndromes for c in comps)


def diagnose(test, mem, log, faults: str = "static,classic,dynamic,retention", pairs: str = "neighbours", retention=None,
             hint: bool = True, progress=None) -> Diagnosis:
    """Rank the fault candidates for ``log`` (a :class:`~.faillog.FailLog` checked against
    ``test`` on ``mem``)."""
    from ..engine.trace import Tracer
    from ..faults import DEFAULT_RETENTION

    selection = select_faults(faults, retention or DEFAULT_RETENTION) if isinstance(faults, str) else faults
    scope = parse_pairs(pairs) if isinstance(pairs, str) else pairs
    tr = Tracer(test, mem)
    cells_wb = log.cells(mem.bits)
    words = log.words()
    bm = bitmap_from_cells(mem, cells_wb)
    notes = []
    cells = [w * mem.bits + b for w, b in cells_wb]
    if len(words) > 2:
        notes.append(f"the log fails in {len(words)} words; one fault instance of the listed kinds "
                     "touches at most two words, so no single candidate can explain every fail "
                     "(several defects, or a defect outside the fault models: see the bitmap class)")
    limit = MAX_CELLS if len(words) <= 2 else MAX_CELLS_SPREAD
    if len(cells) > limit:
        notes.append(f"{len(cells)} failing cells: candidates were generated for the first {limit} only")
        cells = cells[:limit]
        words = sorted({c // mem.bits for c in cells})
    log_map = {f.cycle: f for f in log.fails}
    groups = candidate_groups(tr, selection.kinds, scope, cells, words, notes)
    kept: list[Group] = []
    dropped = 0
    cache: dict = {}
    for i, g in enumerate(groups):
        if progress:
            progress(i, len(groups))
        _simulate(tr, g, log_map, cache)
        if _on_words(g.kind) and g.size > 1:
            # the partner word is the non-failing one; if the test would see it fail, the
            # members are not one class (each fails at its own address)
            col = 1 if int(g.sites[0, 0]) in words else 0
            if _af_partner_fails(g, col):
                if g.size <= AF_SPLIT_LIMIT:
                    for row in g.sites:
                        h = Group(g.kind, row[None, :].copy())
                        _simulate(tr, h, log_map, cache)
                        kept.append(h)
                else:
                    dropped += g.size
                continue
        kept.append(g)
    if dropped:
        notes.append(f"{dropped} address-decoder candidates were left out: each would make its own "
                     "partner address fail, which the log does not show")
    classes: dict[frozenset, list[Group]] = {}
    for g in kept:
        classes.setdefault(g.signature, []).append(g)
    cands = []
    for sig, gs in classes.items():
        gs.sort(key=lambda g: (g.kind.arity, _kind_order(g.kind), g.sites[0].tolist()))
        b = min(gs, key=lambda g: g.mismatches)
        cands.append(Candidate(0, b.mismatches, gs, b.best, b.diffs))
    cands.sort(key=lambda c: (c.mismatches, min(g.kind.arity for g in c.groups), -c.size,
                              _kind_order(c.groups[0].kind)))
    for i, c in enumerate(cands):
        c.rank = 1 + sum(1 for d in cands[:i] if d.mismatches < c.mismatches) if i else 1
    diag = Diagnosis(test, mem, log, bm, cands, selection.spec, scope.spec, notes,
                     total_candidates=sum(g.size for g in kept))
    if hint and cands:
        diag.hint = split_hint(tr, diag, log_map, retention or DEFAULT_RETENTION)
    return diag


_FAMILY_ORDER = {"rules": 0, "sof": 1, "drf": 2, "af": 3}


def _kind_order(kind):
    return (_FAMILY_ORDER.get(kind.family, 9), len(kind.rules) == 1 and kind.cls in ("SF",), kind.text)


# ---------------------------------------------------------------------------------------
# the hint: one more element to split the largest class


def extra_elements(retention) -> list[str]:
    """Candidate elements (ASCII notation) to append, both start values (the consistency
    check drops those a fault-free memory would fail)."""
    from ..faults import format_seconds

    bodies = ["r{s}", "r{s},w{t}", "r{s},w{t},r{t}", "w{t},r{t}", "r{s},r{s}", "w{s},r{s}",
              "r{s},w{t},r{t},w{s},r{s}", "w{t},w{t},r{t}", "r{s},w{s},r{s}", "r{s},w{t},w{s},r{s}"]
    out = []
    for s in (0, 1):
        t = 1 - s
        for order in ("up", "down"):
            for b in bodies:
                out.append(f"{order}({b.format(s=s, t=t)})")
        for tau in retention:
            out.append(f"del({format_seconds(tau)}); up(r{s})")
    return list(dict.fromkeys(out))


def _extended(test, extra):
    from ..errors import MarchkitError
    from ..notation import ensure_consistent, format_notation, parse_notation

    text = format_notation(test, ascii=True)
    try:
        t2 = parse_notation(text[:-1] + "; " + extra + "}", name=f"{test.display_name} + {extra}")
        return ensure_consistent(t2)
    except MarchkitError:
        return None


def split_hint(tr, diag: Diagnosis, log_map, retention) -> dict | None:
    """Which appended element splits the largest consistent class (None if there is
    nothing to split)."""
    from ..engine.trace import Tracer

    def behaviours(c):
        return {_behaviour(g.kind, g.sites[0]) for g in c.groups[:MAX_HINT_REPS]}

    # the largest class left that has members of different behaviour (else the largest)
    left = sorted(diag.consistent, key=lambda c: -c.size)
    target = next((c for c in left if len(behaviours(c)) > 1), left[0] if left else None)
    if target is None or target.size < 2:
        return None
    reps = target.groups[:MAX_HINT_REPS]
    base = {"class_rank": target.rank, "class_size": target.size}
    if len(reps) < 2 or len(behaviours(target)) < 2:
        return dict(base, element=None, split=[],
                    text="no march element can split it: its members behave the same under every test "
                         "on this memory (same data backgrounds and the same address-order relation)")
    tried = []
    for extra in extra_elements(retention):
        t2 = _extended(tr.test, extra)
        if t2 is None:
            continue
        tr2 = Tracer(t2, tr.mem)
        parts: dict[frozenset, int] = {}
        for g in reps:
            sig = frozenset(c for _, c in tr2.syndromes(g.rep))
            parts[sig] = parts.get(sig, 0) + g.size
        sizes = sorted(parts.values(), reverse=True)
        tried.append(((len(sizes), -sizes[0], -len(extra)), extra, sizes))
    tried.sort(key=lambda x: x[0], reverse=True)
    splitting = [x for x in tried if len(x[2]) > 1]
    if not splitting:
        return dict(base, element=None, split=[], alternatives=[], tried=len(tried),
                    text=f"none of the {len(tried)} elements tried splits it; a different data background "
                         "or address order may")
    from ..notation import parse_notation
    from ..notation.printer import format_item

    def pretty(extra):
        return "; ".join(format_item(i) for i in parse_notation("{" + extra + "}").items)

    best = splitting[0]
    alts = [{"element": pretty(x[1]), "split": x[2]} for x in splitting[1:4]]
    part_note = (f" (simulated for the first {len(reps)} of its {len(target.groups)} candidate groups)"
                 if len(target.groups) > len(reps) else "")
    return dict(base, element=pretty(best[1]), split=best[2], alternatives=alts, tried=len(tried),
                text=f"appending {pretty(best[1])} splits it into {len(best[2])} classes of "
                     f"{', '.join(map(str, best[2]))}{part_note}")


# ---------------------------------------------------------------------------------------
# JSON


def member_json(kind, sites, bits) -> dict:
    """``{"kind": …, "cells": [[word, bit], …]}``, aggressor first, victim last; an
    address-decoder fault names words (bit ``null``: the whole word) in the order a, b."""
    if _on_words(kind):
        cells = [[int(s), None] for s in sites]
    else:
        cells = [[int(s) // bits, int(s) % bits] for s in sites]
    return {"kind": kind.text, "cells": cells}


def member_text(kind, sites, bits) -> str:
    if _on_words(kind):
        return f"{kind.text} " + " ".join(f"{n}=w{s}" for n, s in zip("ab", sites))

    def cell(s):
        w, b = divmod(int(s), bits)
        return f"w{w}" if bits == 1 else f"w{w}.b{b}"

    if len(sites) == 1:
        return f"{kind.text} {cell(sites[0])}"
    return f"{kind.text} a={cell(sites[0])} v={cell(sites[1])}"


def compare_json(c, ha, hd, bits) -> dict:
    """A predicted compare as the log would hold it; ``unknown`` (when some bits are) marks
    the bits a real chip may return either way (0 in ``observed``)."""
    out = {"cycle": c.cycle, "address": f"{c.address:0{ha}x}", "expected": f"{c.expected:0{hd}x}",
           "observed": f"{c.observed:0{hd}x}"}
    unknown = ~c.known & ((1 << bits) - 1)
    if unknown:
        out["unknown"] = f"{unknown:0{hd}x}"
    return out


def diagnosis_json(d: Diagnosis, top: int = 10, members: int = 50, predicted: int = 1000) -> dict:
    from ..notation import format_notation

    mem = d.memory
    ha = max(1, (mem.address_bits + 3) // 4)
    hd = max(1, (mem.bits + 3) // 4)
    cands = []
    for c in d.candidates[:top]:
        ms = [member_json(k, s, mem.bits) for k, s in c.members(members)]
        b = min(c.groups, key=lambda g: g.mismatches)
        entry = {"rank": c.rank, "mismatches": c.mismatches, "size": c.size, "members": ms,
                 "predicted": [compare_json(x, ha, hd, mem.bits) for x in c.best[:predicted]],
                 "differences": c.diffs,
                 "initial_values": list(b.best_scenario[0]) if b.best_scenario else []}
        if len(ms) < c.size:
            entry["members_listed"] = len(ms)
        if len(c.best) > predicted:
            entry["predicted_listed"] = predicted
        cands.append(entry)
    cons = d.consistent
    return {
        "test": {"name": d.test.name, "notation": format_notation(d.test)},
        "memory": mem.describe(),
        "log": {"file": d.log.name, "failing_compares": len(d.log.fails),
                "failing_cells": len(d.log.cells(mem.bits)), "failing_words": len(d.log.words())},
        "faults": d.faults_spec,
        "pairs": d.pairs_spec,
        "candidates": cands,
        "resolution": {
            "classes": len(d.candidates),
            "candidates": d.total_candidates,
            "best_mismatches": d.candidates[0].mismatches if d.candidates else None,
            "exact": d.exact,
            "classes_left": len(cons),
            "sizes": [c.size for c in cons],
        },
        "hint": d.hint,
        "bitmap": d.bitmap.to_json(),
        "notes": d.notes,
    }
