"""Fast path of the group-rule families (``linked3``: LF3; ``npsf``): keyed, vectorised.

Why it is exact: a group fault involves only its roles' cells, and static group rules look
only at those cells' values, which change only by operations on their words.  So the verdict
of an instance is a function of

* which roles exist (NPSF at the edge of the array),
* how the roles' words are ordered in ⇑ — for every pair of roles whether the first role's
  word comes before, is, or comes after the second's (that fixes the interleaving of their
  operations in every ⇑, ⇓ and ⇕ element, as the order is one permutation and ⇓ its reverse),
* the background bit of every role's cell in every run (that fixes the data each operation
  writes and each read expects),

and of nothing else: no other word's operations touch the roles' cells or conditions, and
group rules have no timing and no back-to-back conditions.  The key of an instance is exactly
that tuple (``_keys``); instances with equal keys get one simulation (``group_batch``,
vectorised over kinds and initial values) and are counted.  The simulation is the semantics of
``engine/oracles/group.py`` applied to the projected words: the differential tests check it
instance by instance against the literal simulator.
"""

from __future__ import annotations

import numpy as np

from ...faults import Instance
from ...faults import family_of
from ...faults.group import grules
from ..results import KindResult
from .base import FastPath

_OPC = {"w": 1, "r": 2}
MAX_LISTED_TRIPLES = 2_000_000    # above this, --pairs all triples are counted in closed form


def _params(kinds, k):
    S = max(len(grules(kd)) for kd in kinds)
    M = len(kinds)
    need = np.full((S, M, k), 2, dtype=np.int8)       # 2: any
    op_role = np.full((S, M), -1, dtype=np.int8)      # -1: a state rule; -2: empty slot
    op_code = np.zeros((S, M), dtype=np.int8)
    op_val = np.zeros((S, M), dtype=np.int8)
    f = np.zeros((S, M), dtype=np.int8)
    r = np.zeros((S, M), dtype=np.int8)
    victims = set()
    for j, kd in enumerate(kinds):
        for s in range(S):
            if s >= len(grules(kd)):
                op_role[s, j] = -2
                continue
            g = grules(kd)[s]
            victims.add(g.victim)
            for i, nv in enumerate(g.need):
                if nv is not None:
                    need[s, j, i] = nv
            if g.op is not None:
                op_role[s, j] = g.op[0]
                op_code[s, j] = _OPC[g.op[1]]
                op_val[s, j] = g.op[2] or 0
            f[s, j] = g.f
            r[s, j] = g.r or 0
    assert len(victims) == 1, "one victim role per batch"
    return dict(need=need, op_role=op_role, op_code=op_code, op_val=op_val, f=f, r=r,
                victim=victims.pop(), S=S)


def _seg_events(prep, si, groups, up):
    """(segment, roles touched, op index) of segment ``si`` in time order, for roles grouped
    by word (``groups``: role lists in ⇑ order of their words)."""
    seg = prep.sched.segments[si]
    order = groups if up else groups[::-1]
    return [(si, roles, k) for roles in order for k in range(len(seg.op_kinds))]


def _events(prep, groups):
    out = []
    for si, seg in enumerate(prep.sched.segments):
        if seg.element is not None:
            out += _seg_events(prep, si, groups, prep.seg_up(si))
    return out


class _Batch:
    """Every kind of ``P`` on one key: ``present`` (k,) roles that exist, ``bgbits`` (k, R)."""

    def __init__(self, prep, P, present, bgbits):
        self.prep, self.P, self.bgbits = prep, P, bgbits
        need = P["need"].copy()
        need[:, :, ~present] = 2
        self.need = need
        self.S, self.M, self.k = need.shape
        self.vic = P["victim"]

    def holds(self, s, vals):
        ok = np.ones(vals.shape[:2], dtype=bool)
        for i in range(self.k):
            nd = self.need[s, :, i][:, None]
            ok &= (nd == 2) | (vals[:, :, i] == nd)
        return ok

    def states(self, vals):
        P, vic = self.P, self.vic
        for s in range(self.S):
            st = (P["op_role"][s] == -1)[:, None]
            if not st.any():
                continue
            m = st & self.holds(s, vals)
            vals[:, :, vic] = np.where(m, P["f"][s][:, None], vals[:, :, vic])
        return vals

    def run(self, events, vals, first):
        """Apply ``events`` to ``vals`` (M, L, k) int8; ``first`` (M, L) gets the index of
        each lane's first detection (where still -1).  Returns the values after."""
        prep, P, vic = self.prep, self.P, self.vic
        for ev, (si, roles, kk) in enumerate(events):
            seg = prep.sched.segments[si]
            kind = seg.op_kinds[kk]
            code = _OPC[kind]
            val = seg.op_values[kk]
            data = {i: int(self.bgbits[i, seg.run]) ^ val for i in roles}
            pre = vals.copy()
            fired = np.zeros(vals.shape[:2], dtype=bool)
            fval = np.zeros(vals.shape[:2], dtype=np.int8)
            out = pre[:, :, vic].copy() if (kind == "r" and vic in roles) else None
            for s in range(self.S):
                orl = P["op_role"][s]
                cand = np.zeros(self.M, dtype=bool)
                for i in roles:
                    cand |= orl == i
                cand &= P["op_code"][s] == code
                if kind == "w" and cand.any():
                    dvec = np.zeros(self.k + 2, dtype=np.int8)      # -1/-2 (no role) index the tail
                    for i in roles:
                        dvec[i] = data[i]
                    cand &= dvec[orl] == P["op_val"][s]
                if not cand.any():
                    continue
                m = cand[:, None] & self.holds(s, pre)
                fired |= m
                fval = np.where(m, P["f"][s][:, None], fval)
                if out is not None:
                    rd = m & (orl == vic)[:, None]
                    out = np.where(rd, P["r"][s][:, None], out)
            if kind == "w":
                for i in roles:
                    vals[:, :, i] = data[i]
            vals[:, :, vic] = np.where(fired, fval, vals[:, :, vic])
            vals = self.states(vals)
            if out is not None and (si, kk) in prep.determined:
                det = (out != data[vic]) & (first < 0)
                first[det] = ev
        return vals


def group_batch(prep, P, present, groups, bgbits):
    """Simulate every kind of ``P`` on one key.

    ``present`` (k,) bool: roles that exist; ``groups``: the roles grouped by word, in ⇑
    order; ``bgbits`` (k, R): each role's background bit per run.  Returns (detected (M,),
    the canonical latest first detection (M,) as an index into the canonical event list
    (-1 when undetected), that list).  With ⇕ elements, detection for every choice of
    orders comes from ``sweep_orders`` over the 2^k states of the key's cells.
    """
    b = _Batch(prep, P, present, bgbits)
    M, k = b.M, b.k
    NS = 1 << k
    allst = ((np.arange(NS)[:, None] >> np.arange(k)[None, :]) & 1).astype(np.int8)   # (NS, k)
    start_vals = b.states(np.broadcast_to(allst, (M, NS, k)).copy())
    weights = (1 << np.arange(k)).astype(np.intp)
    events = _events(prep, groups)
    first = np.full((M, NS), -1, dtype=np.int64)
    b.run(events, start_vals.copy(), first)
    detected = (first >= 0).all(axis=1)
    if prep.any_elems:
        from ..fast import sweep_orders

        def transition(si, up):
            f = np.full((M, NS), -1, dtype=np.int64)
            end = b.run(_seg_events(prep, si, groups, up),
                        np.broadcast_to(allst, (M, NS, k)).copy(), f)
            return (end.astype(np.intp) * weights).sum(axis=2), f >= 0

        reach = np.zeros((M, NS), dtype=bool)
        idx = (start_vals.astype(np.intp) * weights).sum(axis=2)
        reach[np.arange(M)[:, None], idx] = True
        detected &= ~sweep_orders(prep, reach, transition)
    canon = first.max(axis=1)
    canon[~detected] = -1
    return detected, canon, events


# ---------------------------------------------------------------------------------------
# keys


def _keys(prep, tuples):
    """Key of each tuple (T, k) of cells (-1: role missing): presence, the pairwise order of
    the roles' words, each role's background bits.  Returns (keys (T,) int64 or rows)."""
    T, k = tuples.shape
    present = tuples >= 0
    words = np.where(present, tuples // prep.B, 0)
    rank = np.where(present, prep.rank[words], -1)
    code = np.zeros(T, dtype=np.int64)
    for i in range(k):
        code = code * 2 + present[:, i]
    for i in range(k):
        for j in range(i + 1, k):
            code = code * 3 + np.sign(rank[:, i] - rank[:, j]) + 1
    R = prep.R
    cells = np.where(present, tuples, 0)
    bits = prep.bg.reshape(R, -1)[:, cells]                 # (R, T, k)
    if code.max(initial=0) < (1 << 63 - k * R - 1) and k * R <= 40:
        for i in range(k):
            for run in range(R):
                code = (code << 1) | (bits[run, :, i].astype(np.int64) & present[:, i])
        return code, None
    rows = np.concatenate([code[:, None], (bits.transpose(1, 2, 0) * present[:, :, None]).reshape(T, -1)], axis=1)
    _, inv = np.unique(rows, axis=0, return_inverse=True)
    return inv.ravel().astype(np.int64), rows


def _describe_key(prep, rep):
    """(present, groups of roles by word in ⇑ order, bgbits) of a representative tuple."""
    k = rep.size
    present = rep >= 0
    words = {}
    for i in range(k):
        if present[i]:
            words.setdefault(int(rep[i]) // prep.B, []).append(i)
    groups = [words[w] for w in sorted(words, key=lambda w: prep.rank[w])]
    bgbits = np.zeros((k, prep.R), dtype=np.int8)
    for i in range(k):
        if present[i]:
            w, b = divmod(int(rep[i]), prep.B)
            bgbits[i] = prep.bg[:, w, b]
    return present, groups, bgbits


def _lf3_neighbour_counts(prep):
    """Counts of the LF3 triples of the neighbours scope per key, without listing the
    triples.  The key of (a1, a2, v) is what :func:`_keys` encodes — the order of the three
    words in ⇑ (pairwise: before, same, after) and the three cells' background bits — built
    from per-cell arrays: for each pair of neighbour slots (i, j) of every victim, one code per
    victim, counted with ``bincount``.  Returns {code: (count, representative (a1, a2, v))}."""
    from ...faults.group import _neighbour_table

    tab = _neighbour_table(prep.mem)
    n, D = tab.shape
    R = prep.R
    if R > 6:            # many background runs: the generic path
        return None
    G = 1 << R
    bgc = (prep.bg.reshape(R, -1).astype(np.int32) << np.arange(R, dtype=np.int32)[:, None]).sum(axis=0)
    crank = prep.rank[np.arange(n) // prep.B].astype(np.int64)
    valid = tab >= 0
    safe = np.where(valid, tab, 0)
    nrank = crank[safe]                                   # (n, D)
    # per victim and slot: which way the neighbour's word lies from v's (0 before, 1 same,
    # 2 after) and its background bits, one small code
    slot = ((np.sign(nrank - crank[:, None]) + 1).astype(np.int32) * G + bgc[safe]).astype(np.int32)
    SENT = 3 * (3 * G) * (3 * G) * G
    # code of (a1, a2, v) = ((s · 3G + slot_a1) · 3G + slot_a2) · G + bg_v, s = which way a1's
    # word lies from a2's; swapping a1 and a2 maps code c to perm[c]
    c = np.arange(SENT)
    bv, rest = c % G, c // G
    sa2, rest = rest % (3 * G), rest // (3 * G)
    sa1, sgn = rest % (3 * G), rest // (3 * G)
    perm = (((2 - sgn) * 3 * G + sa2) * 3 * G + sa1) * G + bv
    tot = np.zeros(SENT, dtype=np.int64)
    reps: dict = {}
    for i in range(D):
        for j in range(i + 1, D):
            ok = valid[:, i] & valid[:, j]
            if not ok.any():
                continue
            sgn_ij = (np.sign(nrank[:, i] - nrank[:, j]) + 1).astype(np.int32)
            code = ((sgn_ij * (3 * G) + slot[:, i]) * (3 * G) + slot[:, j]) * G + bgc
            code[~ok] = SENT
            cnt = np.bincount(code, minlength=SENT + 1)[:SENT]
            tot += cnt
            np.add.at(tot, perm, cnt)
            for cc in np.nonzero(cnt)[0].tolist():
                if cc not in reps:
                    v = int(np.argmax(code == cc))
                    reps[cc] = np.array([tab[v, i], tab[v, j], v], dtype=np.int64)
                    reps.setdefault(int(perm[cc]), np.array([tab[v, j], tab[v, i], v], dtype=np.int64))
    out = {int(cc): (int(tot[cc]), reps[int(cc)]) for cc in np.nonzero(tot)[0]}
    return out


def _lf3_all_counts(prep):
    """Counts of every ordered triple of distinct cells (a1, a2, v) per key — the weak order
    of the three words in ⇑ (13 cases) and the three cells' background bits — in closed form
    from per-word histograms of the cells' background codes (prefix sums over the order), never
    listing the n³ triples.  Returns {key: (count, (present, groups, bgbits))}."""
    R = prep.R
    if R > 4:
        return None
    G = 1 << R
    n, B = prep.n, prep.B
    bgc = (prep.bg.reshape(R, -1).astype(np.int64) << np.arange(R)[:, None]).sum(axis=0)
    H = np.zeros((n, G), dtype=np.float64)
    np.add.at(H, (np.repeat(np.arange(n), B), bgc), 1)
    Hs = H[prep.order]
    P = np.cumsum(Hs, axis=0) - Hs              # cells of earlier words
    Sx = Hs.sum(axis=0)[None, :] - np.cumsum(Hs, axis=0)   # cells of later words
    eye = np.eye(G)
    W2 = Hs[:, :, None] * Hs[:, None, :] - eye[None] * Hs[:, :, None]      # two distinct cells of one word
    W3 = (Hs[:, :, None, None] * Hs[:, None, :, None] * Hs[:, None, None, :]
          - eye[None, :, :, None] * Hs[:, :, None, None] * Hs[:, None, None, :]
          - eye[None, :, None, :] * Hs[:, :, None, None] * Hs[:, None, :, None]
          - eye[None, None, :, :] * Hs[:, None, :, None] * Hs[:, :, None, None]
          + 2 * (eye[:, :, None] * eye[:, None, :])[None] * Hs[:, :, None, None])
    out: dict = {}
    bits_of = ((np.arange(G)[:, None] >> np.arange(R)[None, :]) & 1).astype(np.int8)
    import itertools

    for ranks in itertools.product(range(3), repeat=3):
        used = sorted(set(ranks))
        if used != list(range(len(used))):
            continue                             # dense ranks only: each weak order once
        k = len(used)
        # tensor T[g_a1, g_a2, g_v] of triple counts with this weak order
        if k == 1:
            T = W3.sum(axis=0)
        elif k == 3:
            order = sorted(range(3), key=lambda i: ranks[i])     # roles first, middle, last
            T0 = np.einsum("ma,mb,mc->abc", P, Hs, Sx)
            T = np.transpose(T0, np.argsort(order))
        else:
            pair = [i for i in range(3) if ranks.count(ranks[i]) == 2]
            lone = [i for i in range(3) if ranks.count(ranks[i]) == 1][0]
            side = P if ranks[lone] < ranks[pair[0]] else Sx
            T0 = np.einsum("mab,mc->abc", W2, side)      # (pair[0], pair[1], lone)
            T = np.transpose(T0, np.argsort(pair + [lone]))
        T = np.rint(T).astype(np.int64)
        groups = [[i for i in range(3) if ranks[i] == r] for r in used]
        for g1, g2, gv in zip(*np.nonzero(T)):
            sg = int(np.sign(ranks[0] - ranks[1]) + 1)
            s1 = int(np.sign(ranks[0] - ranks[2]) + 1) * G + int(g1)
            s2 = int(np.sign(ranks[1] - ranks[2]) + 1) * G + int(g2)
            code = ((sg * 3 * G + s1) * 3 * G + s2) * G + int(gv)
            bgbits = np.stack([bits_of[g1], bits_of[g2], bits_of[gv]])
            out[code] = (int(T[g1, g2, gv]), (np.ones(3, dtype=bool), groups, bgbits))
    return out


def _chunks(prep, kinds, scope, npsf):
    from ...faults.group import lf3_triple_chunks, npsf_neighbourhoods

    if npsf:
        yield npsf_neighbourhoods(prep.mem)
        return
    for c in lf3_triple_chunks(prep.mem, scope):
        yield np.stack(c, axis=1)


class GroupFast(FastPath):
    def grade(self, eng, kinds, scope, results):
        """Counts for the group kinds (LF3 and NPSF separately: their roles differ)."""
        from ...faults.group import NPSF_CLASSES, npsf_applies, roles

        prep = eng.prep
        rank = prep.rank
        for npsf in (True, False):
            ks = [kd for kd in kinds if (kd.cls in NPSF_CLASSES) == npsf]
            if not ks:
                continue
            counts: dict = {}
            reps: dict = {}
            fastn = _lf3_neighbour_counts(prep) if (not npsf and scope.parts == (("neighbours",),)) else None
            if fastn is not None:
                for kk, (c, rep) in fastn.items():
                    counts[("n", kk)] = c
                    reps[("n", kk)] = rep
            described = {}
            n = prep.mem.cells
            if (fastn is None and not npsf and scope.parts == (("all",),)
                    and n * (n - 1) * (n - 2) > MAX_LISTED_TRIPLES):
                fastn = _lf3_all_counts(prep)
                if fastn is not None:
                    for kk, (c, desc) in fastn.items():
                        counts[("a", kk)] = c
                        described[("a", kk)] = desc
            for tup in (() if fastn is not None else _chunks(prep, ks, scope, npsf)):
                if tup.size == 0:
                    continue
                key, rows = _keys(prep, tup)
                u, idx, cnt = np.unique(key, return_index=True, return_counts=True)
                for kk, i, c in zip(u.tolist(), idx.tolist(), cnt.tolist()):
                    if rows is not None:          # chunk-local numbers: key on the row itself
                        kk = tuple(rows[i].tolist())
                    counts[kk] = counts.get(kk, 0) + c
                    if kk not in reps:
                        reps[kk] = tup[i]
            P = _params(ks, len(roles(ks[0])))
            res = {kd.text: results.setdefault(kd.text, KindResult(kd)) for kd in ks}
            for kk, c in counts.items():
                if kk in described:
                    present, groups, bgbits = described[kk]
                else:
                    present, groups, bgbits = _describe_key(prep, reps[kk])
                det, ev, events = group_batch(prep, P, present, groups, bgbits)
                for j, kd in enumerate(ks):
                    if npsf and not npsf_applies(kd, present[1:]):
                        continue
                    r = res[kd.text]
                    r.instances += c
                    if det[j]:
                        r.detected += c
                        r.merge_element(prep.sched.segments[events[ev[j]][0]].element)
                    elif kk in described:           # closed-form count: name the structure only
                        names = ("a1", "a2", "v")
                        r.missed_structures.add(" < ".join(" = ".join(names[i] for i in g) for g in groups)
                                                if len(groups) > 1 else "same word")
                    else:
                        inst = Instance(kd, tuple(int(x) for x in reps[kk]))
                        r.missed_structures.add(family_of(kd).structure(inst, prep.mem, rank))
                        eng.take(r, [inst])
        return results

    def verdicts(self, eng, instances):
        """(detected, Detection | None) per instance: each key is simulated once for all the
        kinds asked about on it; the detecting read is on the victim's word."""
        from ...faults.group import NPSF_CLASSES, roles

        prep = eng.prep
        by_key: dict = {}
        keyof = []
        for inst in instances:
            tup = np.array([inst.sites], dtype=np.int64)
            key, rows = _keys(prep, tup)
            ck = (inst.kind.cls in NPSF_CLASSES, int(key[0]) if rows is None else tuple(rows[0].tolist()))
            keyof.append(ck)
            entry = by_key.setdefault(ck, (tup[0], {}))
            entry[1].setdefault(inst.kind.text, inst.kind)
        verdict = {}
        for ck, (rep, kinds) in by_key.items():
            ks = list(kinds.values())
            present, groups, bgbits = _describe_key(prep, rep)
            P = _params(ks, len(roles(ks[0])))
            det, ev, events = group_batch(prep, P, present, groups, bgbits)
            for j, kd in enumerate(ks):
                verdict[(ck, kd.text)] = (bool(det[j]), events[ev[j]] if det[j] else None, P["victim"])
        out = []
        for inst, ck in zip(instances, keyof):
            det, event, vic = verdict[(ck, inst.kind.text)]
            if not det:
                out.append((False, None))
                continue
            si, _, k = event
            out.append((True, eng.detection(si, k, inst.sites[vic] // prep.B)))
        return out


FAST = GroupFast()
