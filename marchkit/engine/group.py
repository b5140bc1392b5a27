"""Fast path of the ``group`` family (LF3, NPSF): keyed, vectorised.

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
``core.Run.access_group`` applied to the projected words: the differential tests check it
instance by instance against the literal simulator.
"""

from __future__ import annotations

import numpy as np

_OPC = {"w": 1, "r": 2}


def _params(kinds, k):
    S = max(len(kd.grules) for kd in kinds)
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
            if s >= len(kd.grules):
                op_role[s, j] = -2
                continue
            g = kd.grules[s]
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


def _events(prep, groups, any_up):
    """(segment, roles touched, op index) in time order for roles grouped by word
    (``groups``: list of role lists, in ⇑ order of their words)."""
    out = []
    for si, seg in enumerate(prep.sched.segments):
        if seg.element is None:
            continue
        order = groups if prep.seg_up(si, any_up) else groups[::-1]
        for roles in order:
            for k in range(len(seg.op_kinds)):
                out.append((si, roles, k))
    return out


def group_batch(prep, P, present, groups, bgbits):
    """Simulate every kind of ``P`` on one key.

    ``present`` (k,) bool: roles that exist; ``groups``: the roles grouped by word, in ⇑
    order; ``bgbits`` (k, R): each role's background bit per run.  Returns (detected (M,),
    element of the canonical latest first detection (M,), -1 when undetected)."""
    need = P["need"].copy()
    need[:, :, ~present] = 2
    S, M, k = need.shape
    vic = P["victim"]
    I = 1 << k
    init = ((np.arange(I)[:, None] >> np.arange(k)[None, :]) & 1).astype(np.int8)   # (I, k)
    detected = np.ones(M, dtype=bool)
    canon = np.full(M, -1, dtype=np.int64)
    canon_events = []

    def holds(s, vals):
        ok = np.ones((M, I), dtype=bool)
        for i in range(k):
            nd = need[s, :, i][:, None]
            ok &= (nd == 2) | (vals[:, :, i] == nd)
        return ok

    def states(vals):
        for s in range(S):
            st = (P["op_role"][s] == -1)[:, None]
            if not st.any():
                continue
            m = st & holds(s, vals)
            vals[:, :, vic] = np.where(m, P["f"][s][:, None], vals[:, :, vic])
        return vals

    for any_up in prep.scenarios:
        events = _events(prep, groups, any_up)
        vals = np.broadcast_to(init, (M, I, k)).copy()
        vals = states(vals)
        first = np.full((M, I), -1, dtype=np.int64)
        for ev, (si, roles, kk) in enumerate(events):
            seg = prep.sched.segments[si]
            kind = seg.op_kinds[kk]
            code = _OPC[kind]
            val = seg.op_values[kk]
            data = {i: int(bgbits[i, seg.run]) ^ val for i in roles}
            pre = vals.copy()
            fired = np.zeros((M, I), dtype=bool)
            fval = np.zeros((M, I), dtype=np.int8)
            out = pre[:, :, vic].copy() if (kind == "r" and vic in roles) else None
            for s in range(S):
                orl = P["op_role"][s]
                cand = np.zeros(M, dtype=bool)
                for i in roles:
                    cand |= orl == i
                cand &= P["op_code"][s] == code
                if kind == "w":
                    dv = np.array([data.get(int(x), 0) for x in orl], dtype=np.int8) if cand.any() else None
                    if dv is not None:
                        cand &= dv == P["op_val"][s]
                if not cand.any():
                    continue
                m = cand[:, None] & holds(s, pre)
                fired |= m
                fval = np.where(m, P["f"][s][:, None], fval)
                if out is not None:
                    rd = m & (orl == vic)[:, None]
                    out = np.where(rd, P["r"][s][:, None], out)
            if kind == "w":
                for i in roles:
                    vals[:, :, i] = data[i]
            vals[:, :, vic] = np.where(fired, fval, vals[:, :, vic])
            vals = states(vals)
            if out is not None and (si, kk) in prep.determined:
                det = (out != data[vic]) & (first < 0)
                first[det] = ev
        detected &= (first >= 0).all(axis=1)
        if all(any_up):
            canon = first.max(axis=1)
            canon_events = events
    canon[~detected] = -1
    return detected, canon, canon_events


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


def grade_group(engine, kinds, scope, results, KindResult, Instance):
    """Counts for the group kinds (LF3 and NPSF separately: their roles differ)."""
    from ..faults import NPSF_CLASSES
    from ..faults.catalogue import lf3_triple_chunks, npsf_neighbourhoods
    from ..faults.group import npsf_applies

    prep = engine.prep
    for sub in ("npsf", "lf3"):
        ks = [kd for kd in kinds if (kd.cls in NPSF_CLASSES) == (sub == "npsf")]
        if not ks:
            continue
        if sub == "npsf":
            chunks = [npsf_neighbourhoods(prep.mem)]
        else:
            chunks = (np.stack(c, axis=1) for c in lf3_triple_chunks(prep.mem, scope))
        counts: dict = {}
        reps: dict = {}
        for tup in chunks:
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
        P = _params(ks, len(ks[0].roles))
        res = {kd.text: results.setdefault(kd.text, KindResult(kd)) for kd in ks}
        for kk, c in counts.items():
            present, groups, bgbits = _describe_key(prep, reps[kk])
            det, ev, events = group_batch(prep, P, present, groups, bgbits)
            for j, kd in enumerate(ks):
                if sub == "npsf" and not npsf_applies(kd, present[1:]):
                    continue
                r = res[kd.text]
                r.instances += c
                if det[j]:
                    r.detected += c
                    r.merge_element(prep.sched.segments[events[ev[j]][0]].element)
                else:
                    r.missed_structures.add("group")
                    engine._take(r, [Instance(kd, tuple(int(x) for x in reps[kk]))])
    return results


def group_verdicts(engine, instances):
    """(detected, Detection | None) per group instance: each key is simulated once for all
    the kinds asked about on it; the detecting read is on the victim's word."""
    from ..faults import NPSF_CLASSES

    prep = engine.prep
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
        P = _params(ks, len(ks[0].roles))
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
        out.append((True, engine._detection(si, k, inst.sites[vic] // prep.B)))
    return out
