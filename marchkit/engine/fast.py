"""The fast engine: the same verdict as the reference simulator for every instance, at a
cost close to counting.

Why it is exact:

* A fault's verdict depends only on the operations applied to the words it involves, their
  interleaving and the data written there.  Under an address order (the same permutation for
  every ⇑ element, reversed for ⇓), the interleaving of two words is fixed by which comes
  first.  So a two-cell instance's verdict is a function of its *key*: (kind, whether both
  cells are in one word, which word comes first in ⇑, the background bit of each cell in
  every run).  Instances with equal keys are simulated once and counted.
* A stuck-open cell reads the sense amplifier's last value, which comes from the word read
  just before it: its key adds the background of the words before and after it in the order
  and of the first and last word (all a read-to-read chain can reach), and where it sits.
* Retention faults depend on real time, i.e. on each word's place in each element: they are
  simulated for all cells at once with numpy.

Keys of the rules family (primitives and classic models) are simulated in one vectorised
batch; the few keys of AF and SOF go through the same per-scenario code as the reference,
on the projected words only.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field

import numpy as np

from ..faults import Instance, cell_pairs, word_pairs
from .core import Context, determined_reads, verdict
from .reference import Detection

# ---------------------------------------------------------------------------------------
# preparation shared by every kind


class Prepared:
    def __init__(self, test, mem, sched=None):
        from ..model import address_order, background_stack, ranks, schedule

        self.test = test
        self.mem = mem
        self.sched = sched or schedule(test, mem)
        self.order = address_order(mem)
        self.rank = ranks(self.order)
        self.bg = background_stack(mem)          # (R, n, B) uint8
        self.R = self.bg.shape[0]
        self.n = mem.words
        self.B = mem.bits
        self.determined = determined_reads(self.sched)
        self.any_elems = [i for i, e in enumerate(test.elements) if e.order == "any"]
        self.scenarios = list(itertools.product((True, False), repeat=len(self.any_elems)))
        # key of each cell: its background bit in every run
        w = np.arange(self.R, dtype=np.int64)
        # key of each cell: the index of its background bits (one per run) among the distinct
        # bit patterns present; key_bits[k] gives them back
        bits = self.bg.reshape(self.R, -1).T                       # (n*B, R)
        if self.R <= 62:
            raw = (bits.astype(np.int64) << w[None, :]).sum(axis=1)
            uniq, inv = np.unique(raw, return_inverse=True)
            self.key_bits = ((uniq[:, None] >> w[None, :]) & 1).astype(np.int8)
        else:
            uniq_rows, inv = np.unique(bits, axis=0, return_inverse=True)
            self.key_bits = uniq_rows.astype(np.int8)
        self.cell_key = inv.ravel().astype(np.int64)               # (n*B,)
        self.K = self.key_bits.shape[0]
        self._word_key = None

    def seg_up(self, si, any_up) -> bool:
        seg = self.sched.segments[si]
        if seg.order == "up":
            return True
        if seg.order == "down":
            return False
        return any_up[self.any_elems.index(seg.element)]

    def word_keys(self):
        """(key per word, representative word per key): words with the same data in every run."""
        if self._word_key is None:
            flat = np.ascontiguousarray(self.bg.transpose(1, 0, 2).reshape(self.n, -1))
            _, first, inv = np.unique(flat, axis=0, return_index=True, return_inverse=True)
            self._word_key = (inv.ravel().astype(np.int64), first.astype(np.int64))
        return self._word_key

    def cycle_of(self, si, k, word: np.ndarray) -> np.ndarray:
        seg = self.sched.segments[si]
        r = self.rank[word]
        pos = self.n - 1 - r if seg.order == "down" else r
        return seg.start + pos * seg.per_address + seg.op_offsets[k]


# ---------------------------------------------------------------------------------------
# the rules family, vectorised over keys

_OPCODE = {None: 0, "w": 1, "r": 2}
SINGLE, AFIRST, VFIRST, SAME = 0, 1, 2, 3
STRUCTURES = {SINGLE: "single", AFIRST: "aggressor first", VFIRST: "victim first", SAME: "same word"}


def _rule_params(kinds):
    """Parameter arrays (slots × kinds) describing each kind's rules."""
    S = max(len(k.rules) for k in kinds)
    M = len(kinds)
    P = {name: np.zeros((S, M), dtype=np.int8) for name in
         ("rt", "a_pre", "a_op", "a_val", "v_pre", "v_op", "v_val", "f", "r", "t_pre", "t_op", "t_val")}
    for j, k in enumerate(kinds):
        for s, rule in enumerate(k.rules):
            a, v = rule.agg, rule.vic
            if rule.then is not None:
                rt = 6
                P["t_pre"][s, j] = rule.then.pre
                P["t_op"][s, j] = _OPCODE[rule.then.op]
                P["t_val"][s, j] = rule.then.val
            elif a is None:
                rt = 1 if v.op is None else 2
            elif a.op is not None:
                rt = 3
            elif v.op is not None:
                rt = 4
            else:
                rt = 5
            P["rt"][s, j] = rt
            if a is not None:
                P["a_pre"][s, j] = a.pre
                P["a_op"][s, j] = _OPCODE[a.op]
                P["a_val"][s, j] = a.val if a.val is not None else 0
            P["v_pre"][s, j] = v.pre
            P["v_op"][s, j] = _OPCODE[v.op]
            P["v_val"][s, j] = v.val if v.val is not None else 0
            P["f"][s, j] = rule.f
            P["r"][s, j] = rule.r if rule.r is not None else 0
    return P


def _events(prep, structure, any_up):
    """(segment, role, op) in time order; role 1 aggressor, 2 victim, 3 both."""
    out = []
    for si, seg in enumerate(prep.sched.segments):
        if seg.element is None:
            continue
        if structure == SINGLE:
            roles = (2,)
        elif structure == SAME:
            roles = (3,)
        else:
            first_a = structure == AFIRST
            if not prep.seg_up(si, any_up):
                first_a = not first_a
            roles = (1, 2) if first_a else (2, 1)
        for role in roles:
            for k in range(len(seg.op_kinds)):
                out.append((si, role, k))
    return out


def rules_batch(prep, structure, kind_idx, params, bga, bgv):
    """Simulate M keys at once.

    ``kind_idx`` (M,) indexes the kinds in ``params``; ``bga``/``bgv`` (M, R) are the
    background bits of aggressor and victim.  Returns (detected (M,), canonical first event
    (M,) as an index into the canonical event list, that list).
    """
    M = kind_idx.size
    two = structure != SINGLE
    I = 4 if two else 2
    init_a = np.array([0, 0, 1, 1] if two else [0, 0], dtype=np.int8)
    init_v = np.array([0, 1, 0, 1] if two else [0, 1], dtype=np.int8)
    S = params["rt"].shape[0]
    p = {name: arr[:, kind_idx][:, :, None] for name, arr in params.items()}  # (S, M, 1)
    dynamic = bool((p["rt"] == 6).any())
    detected = np.ones(M, dtype=bool)
    canon_first = np.full(M, -1, dtype=np.int64)
    canon_events = None

    def apply_states(va, vv):
        for s in range(S):
            rt = p["rt"][s]
            m1 = (rt == 1) & (vv == p["v_pre"][s])
            m5 = (rt == 5) & (va == p["a_pre"][s]) & (vv == p["v_pre"][s])
            vv = np.where(m1 | m5, p["f"][s], vv)
        return vv

    for any_up in prep.scenarios:
        events = _events(prep, structure, any_up)
        va = np.broadcast_to(init_a, (M, I)).copy()
        vv = np.broadcast_to(init_v, (M, I)).copy()
        vv = apply_states(va, vv)
        first = np.full((M, I), -1, dtype=np.int64)
        last_pre_v = vv    # the victim's value before its previous operation in this visit
        for ev, (si, role, k) in enumerate(events):
            seg = prep.sched.segments[si]
            kind = seg.op_kinds[k]
            code = _OPCODE[kind]
            val = seg.op_values[k]
            da = (bga[:, seg.run] ^ val)[:, None]
            dv = (bgv[:, seg.run] ^ val)[:, None]
            ta, tv = bool(role & 1), bool(role & 2)
            pre_a, pre_v = va, vv
            fired = np.zeros((M, I), dtype=bool)
            fval = np.zeros((M, I), dtype=np.int8)
            outv = pre_v if (kind == "r" and tv) else None
            for s in range(S):
                rt = p["rt"][s]
                fire = None
                if tv:
                    opm = (p["v_op"][s] == code) & (pre_v == p["v_pre"][s])
                    if kind == "w":
                        opm = opm & (dv == p["v_val"][s])
                    mv = opm & ((rt == 2) | ((rt == 4) & (pre_a == p["a_pre"][s])))
                    if dynamic and k > 0:
                        # the previous operation of this visit (k-1) on the victim is the first
                        pk = seg.op_kinds[k - 1]
                        dprev = (bgv[:, seg.run] ^ seg.op_values[k - 1])[:, None]
                        dm = ((rt == 6) & (p["v_op"][s] == _OPCODE[pk]) & (last_pre_v == p["v_pre"][s])
                              & (p["t_op"][s] == code) & (pre_v == p["t_pre"][s]))
                        if pk == "w":
                            dm = dm & (dprev == p["v_val"][s])
                        if kind == "w":
                            dm = dm & (dv == p["t_val"][s])
                        mv = mv | dm
                    fire = mv
                    if outv is not None:
                        outv = np.where(mv, p["r"][s], outv)
                if ta:
                    opm = (rt == 3) & (p["a_op"][s] == code) & (pre_a == p["a_pre"][s]) & (pre_v == p["v_pre"][s])
                    if kind == "w":
                        opm = opm & (da == p["a_val"][s])
                    fire = opm if fire is None else (fire | opm)
                if fire is not None:
                    fired |= fire
                    fval = np.where(fire, p["f"][s], fval)
            if kind == "w":
                if ta:
                    va = np.broadcast_to(da, (M, I)).astype(np.int8)
                if tv:
                    vv = np.broadcast_to(dv, (M, I)).astype(np.int8)
            if tv:
                last_pre_v = pre_v
            vv = np.where(fired, fval, vv).astype(np.int8)
            vv = apply_states(va, vv)
            if outv is not None and (si, k) in prep.determined:
                det = (outv != dv) & (first < 0)
                first[det] = ev
        detected &= (first >= 0).all(axis=1)
        if all(any_up):
            canon_first = first.max(axis=1)
            canon_events = events
    canon_first[~detected] = -1
    return detected, canon_first, canon_events


# ---------------------------------------------------------------------------------------
# parallel grading: a pure function of (engine, family) run in forked workers

_FORKED: dict = {}


def _family_work(fam):
    engine, fams, scope = _FORKED["job"]
    return engine.grade_family(fam, fams[fam], scope)


def _default_workers(prep, n_steps: int) -> int:
    import multiprocessing
    import os
    import threading

    if n_steps < 2 or prep.n * prep.B < (1 << 18) or (os.cpu_count() or 1) < 2:
        return 1
    if "fork" not in multiprocessing.get_all_start_methods() or threading.active_count() > 1:
        return 1
    return 2


# ---------------------------------------------------------------------------------------
# results


@dataclass
class KindResult:
    """Verdicts for every instance of one kind, as counts."""

    kind: object
    instances: int = 0
    detected: int = 0
    complete_by: int | None = None          # element index by which all detected ones are
    first_by: int | None = None             # earliest element where one is first detected
    missed_structures: set = field(default_factory=set)   # e.g. {"aggressor first"}
    missed_examples: list = field(default_factory=list)   # a few undetected Instances

    def merge_element(self, e):
        """Note that some detected instances are first detected in element ``e``."""
        if e is None:
            return
        if self.complete_by is None or e > self.complete_by:
            self.complete_by = e
        if self.first_by is None or e < self.first_by:
            self.first_by = e


def _pair_counts_all(prep):
    """counts[structure, ka, kv] over all ordered pairs of distinct cells."""
    n, B, K = prep.n, prep.B, prep.K
    H = np.zeros((n, K), dtype=np.int64)
    np.add.at(H, (np.repeat(np.arange(n), B), prep.cell_key), 1)
    Hs = H[prep.order].astype(np.float64)
    P = np.cumsum(Hs, axis=0) - Hs
    out = np.zeros((4, K, K), dtype=np.int64)
    out[AFIRST] = np.rint(P.T @ Hs).astype(np.int64)
    out[VFIRST] = np.rint(Hs.T @ P).astype(np.int64)
    Hf = H.astype(np.float64)
    same = np.rint(Hf.T @ Hf).astype(np.int64) - np.diag(H.sum(axis=0))
    out[SAME] = same
    return out


def _pair_structure(prep, a, v):
    wa, wv = a // prep.B, v // prep.B
    ra, rv = prep.rank[wa], prep.rank[wv]
    return np.where(wa == wv, SAME, np.where(ra < rv, AFIRST, VFIRST))


def _pair_counts_explicit(prep, a, v):
    K = prep.K
    s = _pair_structure(prep, a, v)
    key = (s * K + prep.cell_key[a]) * K + prep.cell_key[v]
    return np.bincount(key, minlength=4 * K * K).reshape(4, K, K)


REPEAT_TRANSIENT = 8     # copies after which a repeated operation's effect is periodic ...
REPEAT_PERIOD = 12       # ... with a period dividing this (every cycle length 1 to 4)


def _short_count(k: int) -> int:
    """An equivalent repeat count for the time-independent families: a run of k identical
    operations on one word drives a finite state (the involved cells, the sense amplifier,
    the previous operation's context) through a deterministic map, which is periodic after
    REPEAT_TRANSIENT steps with a period dividing REPEAT_PERIOD; so k and
    T + P + (k - T) mod P copies leave the same state, and the shorter run, being a prefix
    that holds a whole period, shows every read value the long run shows.  Checked against
    the literal reference with long repeats in tests/test_dram.py."""
    T, P = REPEAT_TRANSIENT, REPEAT_PERIOD
    if k <= T + 2 * P:
        return k
    return T + P + (k - T) % P


def equivalent_short_test(test):
    from dataclasses import replace

    if all(_short_count(op.repeat) == op.repeat for e in test.elements for op in e.ops):
        return test
    items = []
    for it in test.items:
        if hasattr(it, "ops"):
            it = replace(it, ops=tuple(replace(op, repeat=_short_count(op.repeat)) for op in it.ops))
        items.append(it)
    return replace(test, items=tuple(items))


def _op_offset(seg, k: int) -> int:
    for r in seg.runs:
        if r.first <= k < r.first + r.repeat:
            return r.offset + (k - r.first) * r.each
    raise IndexError(k)


class Engine:
    """Grades a selection of fault kinds on one (test, memory)."""

    def __init__(self, test, mem, sched=None, examples: int = 0):
        from ..model import schedule

        self.full_test = test
        self.full_sched = sched or schedule(test, mem)
        short = equivalent_short_test(test)
        # families that do not depend on time grade an equivalent test with long repeats cut
        # down (see equivalent_short_test); the time-dependent ones work from full_sched
        self.prep = Prepared(short, mem, self.full_sched if short is test else None)
        self.examples = examples      # how many undetected instances to name per kind

    def _take(self, res, instances):
        room = self.examples - len(res.missed_examples)
        if room > 0:
            res.missed_examples.extend(instances[:room])

    # ---- rules family ------------------------------------------------------------
    def _rules_tables(self, kinds):
        """verdict tables: {structure: (det[kind, ka, kv], event[kind, ka, kv], events)}."""
        prep = self.prep
        K = prep.K
        params = _rule_params(kinds)
        tables = {}
        for structure in (SINGLE, AFIRST, VFIRST, SAME):
            sel = [j for j, k in enumerate(kinds) if (k.arity == 1) == (structure == SINGLE)]
            if not sel:
                continue
            if structure == SAME and prep.B == 1:
                continue
            kk, ka, kv = np.meshgrid(np.array(sel), np.arange(K), np.arange(K), indexing="ij")
            kk, ka, kv = kk.ravel(), ka.ravel(), kv.ravel()
            if structure == SINGLE:
                keep = ka == 0
                kk, ka, kv = kk[keep], ka[keep], kv[keep]
            present = self._present_keys.get(structure)
            if present is not None:
                keep = present[ka, kv]
                kk, ka, kv = kk[keep], ka[keep], kv[keep]
            det = np.zeros((len(kinds), K, K), dtype=bool)
            evt = np.full((len(kinds), K, K), -1, dtype=np.int64)
            if kk.size:
                d, e, events = rules_batch(prep, structure, kk, params, prep.key_bits[ka], prep.key_bits[kv])
                det[kk, ka, kv] = d
                evt[kk, ka, kv] = e
            else:
                events = []
            tables[structure] = (det, evt, events)
        return tables

    def grade_rules(self, kinds, scope, results):
        prep = self.prep
        K = prep.K
        single_counts = np.bincount(prep.cell_key, minlength=K)
        pairs = None
        if any(k.arity == 2 for k in kinds):
            pairs = cell_pairs(prep.mem, scope)
            pc = _pair_counts_all(prep) if pairs is None else _pair_counts_explicit(prep, *pairs)
        else:
            pc = np.zeros((4, K, K), dtype=np.int64)
        self._present_keys = {SINGLE: np.zeros((K, K), dtype=bool)}
        self._present_keys[SINGLE][0, :] = single_counts > 0
        for s in (AFIRST, VFIRST, SAME):
            self._present_keys[s] = pc[s] > 0
        tables = self._rules_tables(kinds)
        for j, kind in enumerate(kinds):
            res = results.setdefault(kind.text, KindResult(kind))
            structs = (SINGLE,) if kind.arity == 1 else (AFIRST, VFIRST, SAME)
            for s in structs:
                if s not in tables:
                    continue
                det, evt, events = tables[s]
                counts = np.zeros((K, K), dtype=np.int64)
                if s == SINGLE:
                    counts[0, :] = single_counts
                else:
                    counts = pc[s]
                res.instances += int(counts.sum())
                res.detected += int(counts[det[j]].sum())
                if (counts[~det[j]] > 0).any():
                    res.missed_structures.add(STRUCTURES[s])
                    if self.examples:
                        for ka, kv in zip(*np.nonzero((counts > 0) & ~det[j])):
                            self._take(res, [Instance(kind, c) for c in
                                             self._cells_with_key(s, int(ka), int(kv), pairs, self.examples)])
                for e in np.unique(evt[j][(counts > 0) & det[j]]):
                    res.merge_element(prep.sched.segments[events[e][0]].element)
        return results

    def _cells_with_key(self, s, ka, kv, pairs, limit):
        """Up to ``limit`` cell tuples whose key is (structure s, ka, kv)."""
        prep = self.prep
        ck = prep.cell_key
        if s == SINGLE:
            return [(int(c),) for c in np.nonzero(ck == kv)[0][:limit]]
        if pairs is not None:
            a, v = pairs
            m = (_pair_structure(prep, a, v) == s) & (ck[a] == ka) & (ck[v] == kv)
            idx = np.nonzero(m)[0][:limit]
            return [(int(a[i]), int(v[i])) for i in idx]
        B = prep.B
        cells = np.arange(prep.n * B)
        crank = prep.rank[cells // B]
        A = cells[ck == ka]
        V = cells[ck == kv]
        out = []
        if s == SAME:
            for c in A[:4 * limit + 64]:
                w = c // B
                for d in range(w * B, w * B + B):
                    if d != c and ck[d] == kv:
                        out.append((int(c), int(d)))
                        if len(out) >= limit:
                            return out
            return out
        A = A[np.argsort(crank[A], kind="stable")]
        V = V[np.argsort(crank[V], kind="stable")]
        if s == AFIRST:      # the aggressor's word earlier in ⇑ than the victim's
            a0 = A[0]
            later = V[crank[V] > crank[a0]]
            return [(int(a0), int(v)) for v in later[:limit]]
        v0 = V[0]
        later = A[crank[A] > crank[v0]]
        return [(int(a), int(v0)) for a in later[:limit]]

    # ---- AF -------------------------------------------------------------------------
    def _projected_ctx(self, words):
        prep = self.prep
        words = sorted(set(int(w) for w in words), key=lambda w: prep.rank[w])
        bg = [{w: list(map(int, prep.bg[r, w])) for w in words} for r in range(prep.R)]
        rank = {w: int(prep.rank[w]) for w in words}
        return Context(prep.test, prep.mem, prep.sched, bg, words, rank, prep.n)

    def _af_verdict(self, kind, a, b=None):
        inst = Instance(kind, (a,) if b is None else (a, b))
        ctx = self._projected_ctx(inst.sites)
        return verdict(ctx, inst)

    def grade_af(self, kinds, scope, results):
        prep = self.prep
        wk, rep = self.prep.word_keys()
        U = rep.size
        pairs = word_pairs(prep.mem, scope) if any(k.arity == 2 for k in kinds) else None
        for kind in kinds:
            res = results.setdefault(kind.text, KindResult(kind))
            if kind.arity == 1:
                counts = np.bincount(wk, minlength=U)
                for u in np.nonzero(counts)[0]:
                    det, ev = self._af_verdict(kind, int(rep[u]))
                    res.instances += int(counts[u])
                    if det:
                        res.detected += int(counts[u])
                        res.merge_element(prep.sched.segments[ev.seg].element)
                    else:
                        res.missed_structures.add("single")
                        if self.examples:
                            ws = np.nonzero(wk == u)[0][:self.examples]
                            self._take(res, [Instance(kind, (int(w),)) for w in ws])
                continue
            if pairs is None:
                H = np.zeros((prep.n, U), dtype=np.float64)
                H[np.arange(prep.n), wk] = 1
                Hs = H[prep.order]
                Pf = np.cumsum(Hs, axis=0) - Hs
                cnt = {AFIRST: np.rint(Pf.T @ Hs).astype(np.int64), VFIRST: np.rint(Hs.T @ Pf).astype(np.int64)}
            else:
                a, b = pairs
                s = np.where(prep.rank[a] < prep.rank[b], AFIRST, VFIRST)
                cnt = {}
                for st in (AFIRST, VFIRST):
                    m = s == st
                    cnt[st] = np.bincount(wk[a[m]] * U + wk[b[m]], minlength=U * U).reshape(U, U)
            for st, c in cnt.items():
                for ua, ub in zip(*np.nonzero(c)):
                    n_ = int(c[ua, ub])
                    if pairs is None:
                        wa, wb = self._af_pair_rep(ua, ub, st)
                    else:
                        a, b = pairs
                        i = np.nonzero((wk[a] == ua) & (wk[b] == ub) & ((prep.rank[a] < prep.rank[b]) == (st == AFIRST)))[0][0]
                        wa, wb = int(a[i]), int(b[i])
                    det, ev = self._af_verdict(kind, wa, wb)
                    res.instances += n_
                    if det:
                        res.detected += n_
                        res.merge_element(prep.sched.segments[ev.seg].element)
                    else:
                        res.missed_structures.add("a first" if st == AFIRST else "b first")
                        self._take(res, [Instance(kind, (wa, wb))])
        return results

    def _af_pair_rep(self, ua, ub, st):
        """Two distinct words with keys (ua, ub), a before b in ⇑ iff st == AFIRST."""
        prep = self.prep
        wk, _ = prep.word_keys()
        A = np.nonzero(wk == ua)[0]
        Bw = np.nonzero(wk == ub)[0]
        ra, rb = prep.rank[A], prep.rank[Bw]
        if st == AFIRST:
            i = int(np.argmin(ra))
            cand = Bw[rb > ra[i]]
            return int(A[i]), int(cand[0])
        i = int(np.argmax(ra))
        cand = Bw[rb < ra[i]]
        return int(A[i]), int(cand[0])

    # ---- SOF ------------------------------------------------------------------------
    def _sof_keys(self, cells):
        prep = self.prep
        n, B, R = prep.n, prep.B, prep.R
        w, b = cells // B, cells % B
        r = prep.rank[w]
        first, last = prep.order[0], prep.order[-1]
        pred = prep.order[np.maximum(r - 1, 0)]
        succ = prep.order[np.minimum(r + 1, n - 1)]
        flags = (r == 0).astype(np.int64) | (r == 1) << 1 | (r == n - 2) << 2 | (r == n - 1) << 3
        cols = [prep.bg[run, ctxw, b].astype(np.int64)
                for ctxw in (np.full_like(w, first), pred, w, succ, np.full_like(w, last))
                for run in range(R)]
        if len(cols) <= 58:        # pack into one int64
            key = flags
            for c in cols:
                key = key << 1 | c
        else:                      # very many background runs: number the distinct rows
            _, key = np.unique(np.stack([flags] + cols, axis=1), axis=0, return_inverse=True)
            key = key.ravel().astype(np.int64)
        return key

    def _sof_verdict(self, kind, cell):
        prep = self.prep
        w = cell // prep.B
        r = int(prep.rank[w])
        ctxw = {int(prep.order[0]), int(prep.order[-1]), w}
        if r > 0:
            ctxw.add(int(prep.order[r - 1]))
        if r < prep.n - 1:
            ctxw.add(int(prep.order[r + 1]))
        ctx = self._projected_ctx(ctxw)
        return verdict(ctx, Instance(kind, (int(cell),)))

    def grade_sof(self, kinds, results):
        prep = self.prep
        cells = np.arange(prep.n * prep.B, dtype=np.int64)
        key = self._sof_keys(cells)
        uk, first_idx, counts = np.unique(key, return_index=True, return_counts=True)
        for kind in kinds:
            res = results.setdefault(kind.text, KindResult(kind))
            for i, c in zip(first_idx, counts):
                det, ev = self._sof_verdict(kind, int(cells[i]))
                res.instances += int(c)
                if det:
                    res.detected += int(c)
                    res.merge_element(prep.sched.segments[ev.seg].element)
                else:
                    res.missed_structures.add("single")
                    self._take(res, [Instance(kind, (int(cells[i]),))])
        return results

    # ---- DRF ------------------------------------------------------------------------
    def drf_first(self, kind):
        """(detected (n, B), canonical first event (n, B) as (segment, op) code or -1)."""
        from ..model import seconds_to_cycles

        prep = self.prep
        n, B = prep.n, prep.B
        x = kind.drf_value
        tau = seconds_to_cycles(kind.tau, prep.mem.clock_hz)
        detected = np.ones((n, B), dtype=bool)
        canon = None
        maxk = max((len(s.op_kinds) for s in prep.sched.segments), default=1)
        words = np.arange(n)
        for any_up in prep.scenarios:
            # Initial contents cannot matter: every counted read of the cell comes after a
            # write to it, and that write restores the cell whatever it held before.
            val = np.full((n, B), 1 - x, dtype=np.int8)
            last = np.zeros((n, 1), dtype=np.int64)
            first = np.full((n, B), -1, dtype=np.int64)
            for si, seg in enumerate(prep.sched.segments):
                if seg.element is None:
                    continue
                up = prep.seg_up(si, any_up)
                pos = prep.rank[words] if up else n - 1 - prep.rank[words]
                base = (seg.start + pos * seg.per_address)[:, None]
                bg = prep.bg[seg.run]
                for k, kindop in enumerate(seg.op_kinds):
                    t = base + seg.op_offsets[k]
                    decayed = (val == x) & ((t - last) >= tau)
                    val[decayed] = 1 - x
                    last = t
                    data = bg ^ seg.op_values[k]
                    if kindop == "w":
                        val = data.astype(np.int8)
                    elif (si, k) in prep.determined:
                        det = (val != data) & (first < 0)
                        first[det] = si * maxk + k
            detected &= first >= 0
            if all(any_up):
                canon = first
        canon = np.where(detected, canon, -1)
        return detected, canon, maxk

    def grade_drf(self, kinds, results):
        prep = self.prep
        for kind in kinds:
            res = results.setdefault(kind.text, KindResult(kind))
            det, canon, maxk = self.drf_first(kind)
            res.instances += det.size
            res.detected += int(det.sum())
            if not det.all():
                res.missed_structures.add("single")
                if self.examples:
                    miss = np.nonzero(~det.ravel())[0][:self.examples]
                    self._take(res, [Instance(kind, (int(c),)) for c in miss])
            for code in np.unique(canon[det]):
                res.merge_element(prep.sched.segments[int(code) // maxk].element)
        return results

    # ---- everything ----------------------------------------------------------------
    def grade(self, selection, scope, progress=None, workers=None):
        """Counts for every kind of ``selection``.

        The families (primitives, AF, SOF, DRF) are independent pure computations over their
        kinds (:func:`_family_work`).  On large arrays they run in ``workers`` forked
        processes (default: 2 where the machine has two cores, the array has at least 2^18
        cells, fork is available and no other thread is running); measured on the 1 Mbit
        workload this takes about a third off the grading time.
        """
        fams: dict[str, list] = {}
        for k in selection.kinds:
            fams.setdefault(k.family, []).append(k)
        steps = [f for f in ("rules", "af", "sof", "drf", "retention", "disturb") if f in fams]
        if workers is None:
            workers = _default_workers(self.prep, len(steps))
        results: dict[str, KindResult] = {}
        done = 0
        if progress:
            progress(steps[0] if steps else "done", 0, len(steps))
        if workers > 1 and len(steps) > 1:
            import multiprocessing
            from concurrent.futures import ProcessPoolExecutor, as_completed

            self.prep.word_keys()   # shared lazy state, built once before the fork
            _FORKED["job"] = (self, fams, scope)
            try:
                with ProcessPoolExecutor(max_workers=workers,
                                         mp_context=multiprocessing.get_context("fork")) as pool:
                    futs = {pool.submit(_family_work, f): f for f in steps}
                    for fut in as_completed(futs):
                        results.update(fut.result())
                        done += 1
                        if progress:
                            progress(futs[fut], done, len(steps))
            finally:
                _FORKED.clear()
        else:
            for fam in steps:
                if progress:
                    progress(fam, done, len(steps))
                results.update(self.grade_family(fam, fams[fam], scope))
                done += 1
        if progress:
            progress("done", len(steps), len(steps))
        return [results[k.text] for k in selection.kinds]

    def grade_family(self, fam, kinds, scope) -> dict:
        out: dict[str, KindResult] = {}
        if fam == "rules":
            self.grade_rules(kinds, scope, out)
        elif fam == "af":
            self.grade_af(kinds, scope, out)
        elif fam == "sof":
            self.grade_sof(kinds, out)
        elif fam in ("retention", "disturb"):
            from .dram_fast import grade_dram_kinds

            grade_dram_kinds(self.dram_prep(), kinds, out, KindResult, self.examples)
        else:
            self.grade_drf(kinds, out)
        return out

    def dram_prep(self):
        """Shared state of the DRAM families (on the full-length test)."""
        if getattr(self, "_dram_prep", None) is None:
            from .dram_fast import DramPrep

            self._dram_prep = DramPrep(self.full_test, self.prep.mem, self.full_sched)
        return self._dram_prep

    # ---- per-instance verdicts (audits, differential tests) ------------------------
    def instance_verdicts(self, instances):
        """(detected, Detection | None) for each instance, without simulating the array."""
        prep = self.prep
        instances = list(instances)
        out = [None] * len(instances)
        rules = [i for i, x in enumerate(instances) if x.kind.family == "rules"]
        if rules:
            kinds = list({instances[i].kind.text: instances[i].kind for i in rules}.values())
            kidx = {k.text: j for j, k in enumerate(kinds)}
            keyed = []
            K = prep.K
            self._present_keys = {st: np.zeros((K, K), dtype=bool) for st in STRUCTURES}
            for i in rules:
                inst = instances[i]
                if inst.kind.arity == 1:
                    c = inst.sites[0]
                    s, ka, kv = SINGLE, 0, int(prep.cell_key[c])
                    aword = vword = c // prep.B
                else:
                    a, v = inst.sites
                    s = int(_pair_structure(prep, np.array([a]), np.array([v]))[0])
                    ka, kv = int(prep.cell_key[a]), int(prep.cell_key[v])
                    aword, vword = a // prep.B, v // prep.B
                self._present_keys[s][ka, kv] = True   # simulate only the keys asked about
                keyed.append((i, s, ka, kv, aword, vword))
            tables = self._rules_tables(kinds)
            for i, s, ka, kv, aword, vword in keyed:
                j = kidx[instances[i].kind.text]
                det, evt, events = tables[s]
                if not det[j, ka, kv]:
                    out[i] = (False, None)
                    continue
                si, role, k = events[evt[j, ka, kv]]
                word = aword if role == 1 else vword
                out[i] = (True, self._detection(si, k, word))
        for i, inst in enumerate(instances):
            fam = inst.kind.family
            if fam == "af":
                d, ev = self._af_verdict(inst.kind, *inst.sites)
                out[i] = (d, self._detection(ev.seg, ev.op, ev.word) if d else None)
            elif fam == "sof":
                d, ev = self._sof_verdict(inst.kind, inst.sites[0])
                out[i] = (d, self._detection(ev.seg, ev.op, ev.word) if d else None)
        dram = [i for i, x in enumerate(instances) if x.kind.family in ("retention", "disturb")]
        if dram:
            from .dram_fast import DramEngine, first_codes

            eng = DramEngine(self.dram_prep())
            dcache = {}
            for i in dram:
                inst = instances[i]
                if inst.kind.text not in dcache:
                    dcache[inst.kind.text] = first_codes(eng, inst.kind)
                det, canon, maxk = dcache[inst.kind.text]
                w, b = divmod(inst.sites[0], prep.B)
                if det[w, b]:
                    code = int(canon[w, b])
                    si, k = divmod(code, maxk)
                    seg = self.full_sched.segments[si]
                    cycle = int(seg.start + (prep.rank[w] if seg.order != "down" else prep.n - 1 - prep.rank[w])
                                * seg.per_address + _op_offset(seg, k))
                    out[i] = (True, Detection(seg.run, seg.element, k, int(w), cycle))
                else:
                    out[i] = (False, None)
        drf = [i for i, x in enumerate(instances) if x.kind.family == "drf"]
        cache = {}
        for i in drf:
            inst = instances[i]
            if inst.kind.text not in cache:
                cache[inst.kind.text] = self.drf_first(inst.kind)
            det, canon, maxk = cache[inst.kind.text]
            w, b = divmod(inst.sites[0], prep.B)
            if det[w, b]:
                code = int(canon[w, b])
                out[i] = (True, self._detection(code // maxk, code % maxk, w))
            else:
                out[i] = (False, None)
        return out

    def _detection(self, si, k, word):
        prep = self.prep
        seg = prep.sched.segments[si]
        cycle = int(prep.cycle_of(si, k, np.array([word]))[0])
        return Detection(seg.run, seg.element, k, int(word), cycle)
