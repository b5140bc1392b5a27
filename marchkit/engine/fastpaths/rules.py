"""Fast path of the primitives family: verdicts per key, simulated in one numpy batch.

A two-cell instance's verdict depends only on its *key*: (kind, structure — whether both
cells are in one word and which word comes first in ⇑ —, the background bit of each cell in
every run).  All such keys are simulated at once (:func:`rules_batch`) and the instances of
each key are counted (prefix sums over the address order for all pairs, ``bincount`` for
explicit pairs).
"""

from __future__ import annotations

import numpy as np


from ...faults import Instance
from ..results import KindResult
from .base import FastPath

_OPCODE = {None: 0, "w": 1, "r": 2}
SINGLE, AFIRST, VFIRST, SAME = 0, 1, 2, 3
STRUCTURES = {SINGLE: "single", AFIRST: "aggressor first", VFIRST: "victim first", SAME: "same word"}


def _rule_params(kinds):
    """Parameter arrays describing each kind's rules: ``{name: (S, M) int8}`` for S rule slots
    (the most rules of any kind) × M kinds — ``rt`` the rule type (0 none, 1 state, 2 victim
    op, 3 aggressor op, 4 victim op with aggressor state, 5 two states, 6 dynamic), the
    aggressor's and victim's ``pre``/``op`` (0 none, 1 w, 2 r)/``val``, ``f``, ``r``, and the
    dynamic second operation's ``t_pre``/``t_op``/``t_val``."""
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


def _seg_events(prep, si, structure, up):
    """(segment, role, op) of segment ``si`` in time order, run ⇑ (``up``) or ⇓; role 1
    aggressor, 2 victim, 3 both (same word)."""
    seg = prep.sched.segments[si]
    if structure == SINGLE:
        roles = (2,)
    elif structure == SAME:
        roles = (3,)
    else:
        first_a = (structure == AFIRST) == up
        roles = (1, 2) if first_a else (2, 1)
    return [(si, role, k) for role in roles for k in range(len(seg.op_kinds))]


def _events(prep, structure, any_up=None):
    """Every (segment, role, op) of the test in time order, ⇕ run as ⇑ unless ``any_up``."""
    out = []
    for si, seg in enumerate(prep.sched.segments):
        if seg.element is not None:
            out += _seg_events(prep, si, structure, prep.seg_up(si, any_up))
    return out


class _Batch:
    """M keys of one structure: the kinds' rule parameters and the two cells' data.

    ``p[name]`` (S, M, 1) int8 — rule slot × key; ``bga``/``bgv`` (M, R) int8 background bits
    of aggressor and victim per run.  States are (M, I) int8 arrays ``va``/``vv``: the two
    cells' values for I scenarios at once.
    """

    def __init__(self, prep, structure, kind_idx, params, bga, bgv):
        self.prep = prep
        self.M = kind_idx.size
        self.S = params["rt"].shape[0]
        self.p = {name: arr[:, kind_idx][:, :, None] for name, arr in params.items()}
        self.dynamic = bool((self.p["rt"] == 6).any())
        self.bga, self.bgv = bga, bgv
        self.two = structure != SINGLE

    def apply_states(self, va, vv):
        p = self.p
        for s in range(self.S):
            rt = p["rt"][s]
            m1 = (rt == 1) & (vv == p["v_pre"][s])
            m5 = (rt == 5) & (va == p["a_pre"][s]) & (vv == p["v_pre"][s])
            vv = np.where(m1 | m5, p["f"][s], vv)
        return vv

    def run(self, events, va, vv, first):
        """Apply ``events`` to states (va, vv) (M, I) int8; ``first`` (M, I) int64 gets the
        index in ``events`` of each scenario's first detection (where still -1).  Returns
        the states after the events."""
        prep, p, S = self.prep, self.p, self.S
        bga, bgv = self.bga, self.bgv
        shape = va.shape
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
            fired = np.zeros(shape, dtype=bool)
            fval = np.zeros(shape, dtype=np.int8)
            outv = pre_v if (kind == "r" and tv) else None
            for s in range(S):
                rt = p["rt"][s]
                fire = None
                if tv:
                    opm = (p["v_op"][s] == code) & (pre_v == p["v_pre"][s])
                    if kind == "w":
                        opm = opm & (dv == p["v_val"][s])
                    mv = opm & ((rt == 2) | ((rt == 4) & (pre_a == p["a_pre"][s])))
                    if self.dynamic and k > 0:
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
                    va = np.broadcast_to(da, shape).astype(np.int8)
                if tv:
                    vv = np.broadcast_to(dv, shape).astype(np.int8)
            if tv:
                last_pre_v = pre_v
            vv = np.where(fired, fval, vv).astype(np.int8)
            vv = self.apply_states(va, vv)
            if outv is not None and (si, k) in prep.determined:
                det = (outv != dv) & (first < 0)
                first[det] = ev
        return va, vv


def rules_batch(prep, structure, kind_idx, params, bga, bgv):
    """Simulate M keys at once.

    ``kind_idx`` (M,) int indexes the kinds in ``params``; ``bga``/``bgv`` (M, R) int8 are
    the background bits of aggressor and victim.  Returns (detected (M,) bool, canonical
    first event (M,) int64 as an index into the canonical event list or -1, that list).

    The canonical scenario (⇕ run as ⇑) gives the first events; with ⇕ elements, detection
    for every choice of orders comes from :func:`~marchkit.engine.fast.sweep_orders` over
    the 2 or 4 states of the key's cells — linear in the number of elements.
    """
    b = _Batch(prep, structure, kind_idx, params, bga, bgv)
    M = b.M
    two = b.two
    I = 4 if two else 2
    init_a = np.array([0, 0, 1, 1] if two else [0, 0], dtype=np.int8)
    init_v = np.array([0, 1, 0, 1] if two else [0, 1], dtype=np.int8)
    va = np.broadcast_to(init_a, (M, I)).copy()
    vv = b.apply_states(va, np.broadcast_to(init_v, (M, I)).copy())
    start = (va.astype(np.intp) << 1 | vv) if two else vv.astype(np.intp)   # (M, I) state index
    events = _events(prep, structure)
    first = np.full((M, I), -1, dtype=np.int64)
    b.run(events, va.copy(), vv.copy(), first)
    detected = (first >= 0).all(axis=1)
    if prep.any_elems:
        from ..fast import sweep_orders

        NS = I
        sa = np.broadcast_to(init_a, (M, NS)).copy()    # state s: aggressor s >> 1, victim s & 1
        sv = np.broadcast_to(init_v, (M, NS)).copy()

        def transition(si, up):
            """(end state (M, NS) intp, detected (M, NS) bool) of segment ``si`` from each state."""
            f = np.full((M, NS), -1, dtype=np.int64)
            ea, ev_ = b.run(_seg_events(prep, si, structure, up), sa.copy(), sv.copy(), f)
            end = (ea.astype(np.intp) << 1 | ev_) if two else ev_.astype(np.intp)
            return end, f >= 0

        reach = np.zeros((M, NS), dtype=bool)
        reach[np.arange(M)[:, None], start] = True
        detected &= ~sweep_orders(prep, reach, transition)
    canon_first = first.max(axis=1)
    canon_first[~detected] = -1
    return detected, canon_first, events


def _pair_counts_all(prep):
    """counts[structure, ka, kv] (4, K, K) int64 over all ordered pairs of distinct cells."""
    return prep.setup._pair_counts_all()


def _pair_structure(prep, a, v):
    """(m,) int64 structure of explicit cell pairs ``a``, ``v`` (m,) int64."""
    return prep.setup.pair_structure(a, v)


def _pair_counts_explicit(prep, a, v):
    """counts[structure, ka, kv] (4, K, K) int64 over explicit cell pairs."""
    return prep.setup.pair_counts_explicit(a, v)


class RulesFast(FastPath):
    def prepare(self, eng, kinds, scope):
        eng.prep.setup.word_key_hist()
        if any(k.arity == 2 for k in kinds):
            eng.prep.setup.pair_counts(scope)

    def _rules_tables(self, eng, kinds):
        """Verdict tables ``{structure: (det, event, events)}``: ``det`` (M kinds, K, K) bool and
        ``event`` (M, K, K) int64 (index into ``events``, the canonical event list, or -1) per
        (kind, aggressor key, victim key); only the keys present in ``eng.scratch['present']``
        ((K, K) bool per structure) are simulated."""
        prep = eng.prep
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
            present = eng.scratch["present"].get(structure)
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

    def grade(self, eng, kinds, scope, results):
        prep = eng.prep
        K = prep.K
        single_counts = prep.setup.word_key_hist().sum(axis=0)
        if any(k.arity == 2 for k in kinds):
            pc = prep.setup.pair_counts(scope)
        else:
            pc = np.zeros((4, K, K), dtype=np.int64)
        eng.scratch["present"] = {SINGLE: np.zeros((K, K), dtype=bool)}
        eng.scratch["present"][SINGLE][0, :] = single_counts > 0
        for s in (AFIRST, VFIRST, SAME):
            eng.scratch["present"][s] = pc[s] > 0
        tables = self._rules_tables(eng, kinds)
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
                    if eng.examples:
                        for ka, kv in zip(*np.nonzero((counts > 0) & ~det[j])):
                            eng.take(res, [Instance(kind, c) for c in
                                             self._cells_with_key(eng, s, int(ka), int(kv), scope, eng.examples)])
                for e in np.unique(evt[j][(counts > 0) & det[j]]):
                    res.merge_element(prep.sched.segments[events[e][0]].element)
        return results

    def _cells_with_key(self, eng, s, ka, kv, scope, limit):
        """Up to ``limit`` cell tuples whose key is (structure s, ka, kv)."""
        prep = eng.prep
        ck = prep.cell_key
        if s == SINGLE:
            return [(int(c),) for c in np.nonzero(ck == kv)[0][:limit]]
        if not scope.is_all:
            out: dict = {}
            for a, v in prep.setup.cell_pair_chunks(scope):
                m = (_pair_structure(prep, a, v) == s) & (ck[a] == ka) & (ck[v] == kv)
                for i in np.nonzero(m)[0][:limit]:
                    out.setdefault((int(a[i]), int(v[i])), None)
                if len(out) >= limit:
                    break
            return list(out)[:limit]
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

    def verdicts(self, eng, instances):
        prep = eng.prep
        out = [None] * len(instances)
        kinds = list({inst.kind.text: inst.kind for inst in instances}.values())
        kidx = {k.text: j for j, k in enumerate(kinds)}
        keyed = []
        K = prep.K
        eng.scratch["present"] = {st: np.zeros((K, K), dtype=bool) for st in STRUCTURES}
        for i, inst in enumerate(instances):
            if inst.kind.arity == 1:
                c = inst.sites[0]
                s, ka, kv = SINGLE, 0, int(prep.cell_key[c])
                aword = vword = c // prep.B
            else:
                a, v = inst.sites
                s = int(_pair_structure(prep, np.array([a]), np.array([v]))[0])
                ka, kv = int(prep.cell_key[a]), int(prep.cell_key[v])
                aword, vword = a // prep.B, v // prep.B
            eng.scratch["present"][s][ka, kv] = True   # simulate only the keys asked about
            keyed.append((i, s, ka, kv, aword, vword))
        tables = self._rules_tables(eng, kinds)
        for i, s, ka, kv, aword, vword in keyed:
            j = kidx[instances[i].kind.text]
            det, evt, events = tables[s]
            if not det[j, ka, kv]:
                out[i] = (False, None)
                continue
            si, role, k = events[evt[j, ka, kv]]
            word = aword if role == 1 else vword
            out[i] = (True, eng.detection(si, k, word))
        return out


FAST = RulesFast()
