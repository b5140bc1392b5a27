"""Fast path of the primitives family: verdicts per key, simulated in one numpy batch.

A two-cell instance's verdict depends only on its *key*: (kind, structure — whether both
cells are in one word and which word comes first in ⇑ —, the background bit of each cell in
every run).  All such keys are simulated at once (:func:`rules_batch`) and the instances of
each key are counted (prefix sums over the address order for all pairs, ``bincount`` for
explicit pairs).
"""

from __future__ import annotations

import numpy as np
from typing import NamedTuple


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
         ("rt", "a_pre", "a_op", "a_val", "v_pre", "v_op", "v_val", "f", "r", "t_pre", "t_op", "t_val",
          "has_a")}
    for j, k in enumerate(kinds):
        for s, rule in enumerate(k.rules):
            a, v = rule.agg, rule.vic
            if rule.then is not None:
                rt = 7 if rule.then_on_agg else 6
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
                P["has_a"][s, j] = 1
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

    def __init__(self, prep, structure, kind_idx, params, bga, bgv, posa=None, posv=None):
        self.prep = prep
        self.M = kind_idx.size
        self.S = params["rt"].shape[0]
        self.p = {name: arr[:, kind_idx][:, :, None] for name, arr in params.items()}
        self.dynamic = bool((self.p["rt"] >= 6).any())
        self.bga, self.bgv = bga, bgv
        zero = np.zeros((self.M, 1), dtype=np.int8)
        self.posa = zero if posa is None else posa[:, None]
        self.posv = zero if posv is None else posv[:, None]
        self.two = structure != SINGLE

    def _before(self, si, k, up, pos, join):
        """The operation just before op ``k`` of segment ``si`` (run ``up``) on a cell whose
        word sits at ``pos``: (kind, value, run, pre-value of the cell before it (M, I) or
        None for "from the visit", mask of keys for which it is back to back or None)."""
        prep = self.prep
        seg = prep.sched.segments[si]
        if k > 0:
            return seg.op_kinds[k - 1], seg.op_values[k - 1], seg.run, None, None
        if not prep.joined(si):
            return None
        ps = prep.sched.segments[prep.prev_element(si)]
        start = 1 if up else 2
        return ps.op_kinds[-1], ps.op_values[-1], ps.run, join - 1, (join > 0) & (pos == start)

    def apply_states(self, va, vv):
        p = self.p
        for s in range(self.S):
            rt = p["rt"][s]
            m1 = (rt == 1) & (vv == p["v_pre"][s])
            m5 = (rt == 5) & (va == p["a_pre"][s]) & (vv == p["v_pre"][s])
            vv = np.where(m1 | m5, p["f"][s], vv)
        return vv

    def run(self, events, va, vv, first, ups=None, ja=None, jv=None):
        """Apply ``events`` to states (va, vv) (M, I) int8; ``first`` (M, I) int64 gets the
        index in ``events`` of each scenario's first detection (where still -1).  ``ups``:
        segment → whether it runs ⇑ (default: ⇕ as ⇑).  ``ja``/``jv`` (M, I): whether the
        last operation before these events was on the aggressor's/victim's word, back to back
        with what follows if that word starts the next element (0: no; 1 + the cell's value
        before it).  Returns (va, vv, ja, jv) after the events."""
        prep, p, S = self.prep, self.p, self.S
        bga, bgv = self.bga, self.bgv
        shape = va.shape
        zero = np.zeros(shape, dtype=np.int8)
        ja = zero if ja is None else ja
        jv = zero if jv is None else jv
        up_of = (lambda si: prep.seg_up(si)) if ups is None else ups
        last_pre_v = vv    # each cell's value before its previous operation
        last_pre_a = va
        cur = None
        for ev, (si, role, k) in enumerate(events):
            if si != cur:
                if cur is not None:
                    ja, jv = self._ends(cur, up_of(cur), last_pre_a, last_pre_v, ja, jv)
                cur = si
                up = up_of(si)
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
            bv = self._before(si, k, up, self.posv, jv) if (self.dynamic and tv) else None
            ba = self._before(si, k, up, self.posa, ja) if (self.dynamic and ta and self.two) else None
            for s in range(S):
                rt = p["rt"][s]
                fire = None
                if tv:
                    opm = (p["v_op"][s] == code) & (pre_v == p["v_pre"][s])
                    if kind == "w":
                        opm = opm & (dv == p["v_val"][s])
                    mv = opm & ((rt == 2) | ((rt == 4) & (pre_a == p["a_pre"][s])))
                    if bv is not None:
                        # the operation before, back to back on the victim, was O1
                        pk, pval, prun, ppre, ok = bv
                        ppre = last_pre_v if ppre is None else ppre
                        dprev = (bgv[:, prun] ^ pval)[:, None]
                        dm = ((rt == 6) & (p["v_op"][s] == _OPCODE[pk]) & (ppre == p["v_pre"][s])
                              & (p["t_op"][s] == code) & (pre_v == p["t_pre"][s])
                              & ((p["has_a"][s] == 0) | (pre_a == p["a_pre"][s])))
                        if pk == "w":
                            dm = dm & (dprev == p["v_val"][s])
                        if kind == "w":
                            dm = dm & (dv == p["t_val"][s])
                        if ok is not None:
                            dm = dm & ok
                        mv = mv | dm
                    fire = mv
                    if outv is not None:
                        outv = np.where(mv, p["r"][s], outv)
                if ta:
                    opm = (rt == 3) & (p["a_op"][s] == code) & (pre_a == p["a_pre"][s]) & (pre_v == p["v_pre"][s])
                    if kind == "w":
                        opm = opm & (da == p["a_val"][s])
                    if ba is not None:
                        # dCFds: the aggressor's two operations back to back
                        pk, pval, prun, ppre, ok = ba
                        ppre = last_pre_a if ppre is None else ppre
                        daprev = (bga[:, prun] ^ pval)[:, None]
                        dm = ((rt == 7) & (p["a_op"][s] == _OPCODE[pk]) & (ppre == p["a_pre"][s])
                              & (p["t_op"][s] == code) & (pre_a == p["t_pre"][s]) & (pre_v == p["v_pre"][s]))
                        if pk == "w":
                            dm = dm & (daprev == p["a_val"][s])
                        if kind == "w":
                            dm = dm & (da == p["t_val"][s])
                        if ok is not None:
                            dm = dm & ok
                        opm = opm | dm
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
            if ta:
                last_pre_a = pre_a
            vv = np.where(fired, fval, vv).astype(np.int8)
            vv = self.apply_states(va, vv)
            if outv is not None and (si, k) in prep.determined:
                det = (outv != dv) & (first < 0)
                first[det] = ev
        if cur is not None:
            ja, jv = self._ends(cur, up_of(cur), last_pre_a, last_pre_v, ja, jv)
        return va, vv, ja, jv

    def _ends(self, si, up, last_pre_a, last_pre_v, ja, jv):
        """Join information after segment ``si``: a cell whose word the segment visits last
        had its last operation just before the next segment starts."""
        if not self.dynamic:
            return ja, jv
        end = 2 if up else 1
        jv = np.where(self.posv == end, last_pre_v + 1, 0).astype(np.int8)
        ja = np.where(self.posa == end, last_pre_a + 1, 0).astype(np.int8) if self.two else ja
        return ja, jv


def rules_batch(prep, structure, kind_idx, params, bga, bgv, posa=None, posv=None):
    """Simulate M keys at once.

    ``kind_idx`` (M,) int indexes the kinds in ``params``; ``bga``/``bgv`` (M, R) int8 are
    the background bits of aggressor and victim, ``posa``/``posv`` (M,) the positions of
    their words (0 inside, 1 first, 2 last of the ⇑ order).  Returns (detected (M,) bool,
    canonical first event (M,) int64 as an index into the canonical event list or -1, that
    list).

    The canonical scenario (⇕ run as ⇑) gives the first events; with ⇕ elements, detection
    for every choice of orders comes from :func:`~marchkit.engine.fast.sweep_orders` over
    the states of the key's cells (their values and, for dynamic kinds, whether the last
    operation of the element before was on their word and on which value) — linear in the
    number of elements.
    """
    b = _Batch(prep, structure, kind_idx, params, bga, bgv, posa, posv)
    M = b.M
    two = b.two
    I = 4 if two else 2
    init_a = np.array([0, 0, 1, 1] if two else [0, 0], dtype=np.int8)
    init_v = np.array([0, 1, 0, 1] if two else [0, 1], dtype=np.int8)
    va = np.broadcast_to(init_a, (M, I)).copy()
    vv = b.apply_states(va, np.broadcast_to(init_v, (M, I)).copy())
    events = _events(prep, structure)
    first = np.full((M, I), -1, dtype=np.int64)
    b.run(events, va.copy(), vv.copy(), first)
    detected = (first >= 0).all(axis=1)
    if prep.any_elems:
        from ..fast import sweep_orders

        J = 3 if b.dynamic else 1          # join information per cell: none, 1 + value
        NA = 2 if two else 1
        NJA = J if two else 1
        # state s = ((a · 2 + v) · NJA + ja) · J + jv
        idx = np.arange(NA * 2 * NJA * J)
        s_jv = idx % J
        s_ja = (idx // J) % NJA
        s_v = (idx // (J * NJA)) % 2
        s_a = idx // (J * NJA * 2)
        NS = idx.size

        def enc(a, v, ja_, jv_):
            return ((a.astype(np.intp) * 2 + v) * NJA + (ja_ if two else 0)) * J + (jv_ if b.dynamic else 0)

        def transition(si, up):
            """(end state (M, NS) intp, detected (M, NS) bool) of segment ``si`` from each state."""
            f = np.full((M, NS), -1, dtype=np.int64)
            bc = lambda x: np.broadcast_to(x.astype(np.int8), (M, NS)).copy()  # noqa: E731
            ea, ev_, eja, ejv = b.run(_seg_events(prep, si, structure, up), bc(s_a), bc(s_v), f,
                                      ups=lambda _si: up, ja=bc(s_ja), jv=bc(s_jv))
            return enc(ea, ev_, eja, ejv), f >= 0

        reach = np.zeros((M, NS), dtype=bool)
        reach[np.arange(M)[:, None], enc(va, vv, np.zeros_like(va), np.zeros_like(vv))] = True
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


class KeySpace(NamedTuple):
    """Cell keys one verdict table is indexed by: ``cell_key`` (n·B,), ``key_bits`` (K, R)
    int8 background bits per key, ``key_pos`` (K,) int8 word position per key (all 0 unless
    ``positional``), ``K``."""

    cell_key: np.ndarray
    key_bits: np.ndarray
    key_pos: np.ndarray
    K: int
    positional: bool


class RulesFast(FastPath):
    def prepare(self, eng, kinds, scope):
        eng.prep.setup.word_key_hist()
        if any(k.arity == 2 for k in kinds):
            eng.prep.setup.pair_counts(scope)

    def _rules_tables(self, eng, kinds, ks):
        """Verdict tables ``{structure: (det, event, events)}``: ``det`` (M kinds, K, K) bool and
        ``event`` (M, K, K) int64 (index into ``events``, the canonical event list, or -1) per
        (kind, aggressor key, victim key); only the keys present in ``eng.scratch['present']``
        ((K, K) bool per structure) are simulated."""
        prep = eng.prep
        K = ks.K
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
            events = []
            if kk.size:
                d, e, events = rules_batch(prep, structure, kk, params, ks.key_bits[ka], ks.key_bits[kv],
                                           ks.key_pos[ka], ks.key_pos[kv])
                det[kk, ka, kv] = d
                evt[kk, ka, kv] = e
            tables[structure] = (det, evt, events)
        return tables

    def _keyspaces(self, eng, kinds):
        """(KeySpace, kinds) parts: the static kinds on the memory set-up's cell keys
        (background bits); the dynamic kinds on keys that add the word's position in the order
        (:meth:`Prepared.dyn_keys`), since elements meet back to back on the first/last word."""
        prep = eng.prep
        out = []
        stat = [k for k in kinds if not k.is_dynamic]
        dyn = [k for k in kinds if k.is_dynamic]
        if stat:
            out.append((KeySpace(prep.cell_key, prep.key_bits, np.zeros(prep.K, dtype=np.int8), prep.K, False), stat))
        if dyn:
            out.append((KeySpace(*prep.dyn_keys(), True), dyn))
        return out

    def _pair_counts(self, prep, ks, scope):
        """counts[structure, ka, kv] (4, K, K) over the scope's pairs in keyspace ``ks``."""
        if not ks.positional:
            return prep.setup.pair_counts(scope)
        K = ks.K
        if scope.is_all:
            n, B = prep.n, prep.B
            H = np.zeros((n, K), dtype=np.int64)
            np.add.at(H, (np.repeat(np.arange(n), B), ks.cell_key), 1)
            Hs = H[prep.order].astype(np.float64)
            P = np.cumsum(Hs, axis=0) - Hs
            out = np.zeros((4, K, K), dtype=np.int64)
            out[AFIRST] = np.rint(P.T @ Hs).astype(np.int64)
            out[VFIRST] = np.rint(Hs.T @ P).astype(np.int64)
            Hf = H.astype(np.float64)
            out[SAME] = np.rint(Hf.T @ Hf).astype(np.int64) - np.diag(H.sum(axis=0))
            return out
        out = np.zeros(4 * K * K, dtype=np.int64)
        if {p[0] for p in scope.parts} == {"neighbours", "word"}:
            # the word part has every same-word pair: take the neighbour pairs across words only
            from ...faults import parse_pairs

            def chunks():
                for a, v in prep.setup.neighbour_cell_pair_chunks():
                    keep = a // prep.B != v // prep.B
                    yield a[keep], v[keep]
                yield from prep.setup.cell_pair_chunks(parse_pairs("word"))
        else:
            def chunks():
                yield from prep.setup.cell_pair_chunks(scope)
        for a, v in chunks():
            st = _pair_structure(prep, a, v).astype(np.int64)
            out += np.bincount((st * K + ks.cell_key[a]) * K + ks.cell_key[v], minlength=4 * K * K)
        return out.reshape(4, K, K)

    def grade(self, eng, kinds, scope, results):
        for ks, part in self._keyspaces(eng, kinds):
            self._grade_part(eng, part, scope, results, ks)
        return results

    def _grade_part(self, eng, kinds, scope, results, ks):
        prep = eng.prep
        K = ks.K
        single_counts = np.bincount(ks.cell_key, minlength=K) if ks.positional else \
            prep.setup.word_key_hist().sum(axis=0)
        if any(k.arity == 2 for k in kinds):
            pc = self._pair_counts(prep, ks, scope)
        else:
            pc = np.zeros((4, K, K), dtype=np.int64)
        eng.scratch["present"] = {SINGLE: np.zeros((K, K), dtype=bool)}
        eng.scratch["present"][SINGLE][0, :] = single_counts > 0
        for s in (AFIRST, VFIRST, SAME):
            eng.scratch["present"][s] = pc[s] > 0
        tables = self._rules_tables(eng, kinds, ks)
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
                                             self._cells_with_key(eng, s, int(ka), int(kv), scope, eng.examples,
                                                                  ks.cell_key)])
                for e in np.unique(evt[j][(counts > 0) & det[j]]):
                    res.merge_element(prep.sched.segments[events[e][0]].element)
        return results

    def _cells_with_key(self, eng, s, ka, kv, scope, limit, ck):
        """Up to ``limit`` cell tuples whose key (cell keys ``ck``) is (structure s, ka, kv)."""
        prep = eng.prep
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
        out = [None] * len(instances)
        for ks, part in self._keyspaces(eng, list({i.kind.text: i.kind for i in instances}.values())):
            names = {k.text for k in part}
            idx = [i for i, inst in enumerate(instances) if inst.kind.text in names]
            for i, v in zip(idx, self._verdicts_part(eng, [instances[i] for i in idx], ks)):
                out[i] = v
        return out

    def _verdicts_part(self, eng, instances, ks):
        prep = eng.prep
        out = [None] * len(instances)
        kinds = list({inst.kind.text: inst.kind for inst in instances}.values())
        kidx = {k.text: j for j, k in enumerate(kinds)}
        keyed = []
        K = ks.K
        ck = ks.cell_key
        eng.scratch["present"] = {st: np.zeros((K, K), dtype=bool) for st in STRUCTURES}
        for i, inst in enumerate(instances):
            if inst.kind.arity == 1:
                c = inst.sites[0]
                s, ka, kv = SINGLE, 0, int(ck[c])
                aword = vword = c // prep.B
            else:
                a, v = inst.sites
                s = int(_pair_structure(prep, np.array([a]), np.array([v]))[0])
                ka, kv = int(ck[a]), int(ck[v])
                aword, vword = a // prep.B, v // prep.B
            eng.scratch["present"][s][ka, kv] = True   # simulate only the keys asked about
            keyed.append((i, s, ka, kv, aword, vword))
        tables = self._rules_tables(eng, kinds, ks)
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
