"""Fast path for the DRAM families (retention with refresh, disturb): every cell at once with
numpy, in closed form in the repeat counts — the cost grows with the number of words and
elements, not with how long an element hammers.

Why it is exact (the semantics are those of :mod:`marchkit.engine.dram_reference`):

* Every element visits every word once; a visit's operations all act on one row, at cycles
  ``start + pos·per_address + offset`` that are arithmetic inside each run of copies.
* A cell's value changes only at its own word's visits (writes) or by a fault flip.  So a
  cell holding the vulnerable value since its last write at ``since`` has flipped by the
  time its word is next visited iff its row (retention: its unit — row on a DRAM, word
  otherwise) saw a *crossing* after ``since``: a stretch ≥ τ without a restore
  (retention), or a neighbour count reaching the threshold (disturb).  Crossings are
  computed per unit from the unit's events in time order with grouped prefix scans.
* Retention: the unit's events are the visits; the longest stretch between two visits,
  counting refreshes, is :meth:`RefreshPlan.max_gap` (closed form).  Inside a visit the
  stretches are one operation long, shorter than τ (τ must exceed a row cycle).
* Disturb: the events of victim row v are the visits of v (reset) and the visits of v ± 1
  split at the refresh slots of v (each piece resets at its slot); a piece's activations
  are counted arithmetically per run (closed page: every copy; open page: the first
  copy when another row was open).  A refresh of v between events resets lazily
  (:meth:`RefreshPlan.last_refresh`).
"""

from __future__ import annotations

import itertools

import numpy as np

from ..errors import FaultSpecError


class DramPrep:
    """What every DRAM-family kind of one (test, memory) shares."""

    def __init__(self, test, mem, sched):
        from ..model import address_order, background_stack, ranks
        from ..model.dram import RefreshPlan, row_cycle

        self.test, self.mem, self.sched = test, mem, sched
        self.n, self.B = mem.words, mem.bits
        self.order = address_order(mem).astype(np.int64)
        self.rank = ranks(self.order)
        self.bg = background_stack(mem)
        self.row = (mem.physical_word(np.arange(self.n)) // mem.mux).astype(np.int64)
        self.rows = mem.rows
        self.plan = RefreshPlan(mem, sched)
        self.row_cycle = row_cycle(mem)
        self.determined = set()
        seen = False
        for si, seg in enumerate(sched.segments):
            for r in seg.runs:
                if r.kind == "w":
                    seen = True
                elif seen:
                    self.determined.add((si, r.first))
        self.any_elems = [i for i, e in enumerate(test.elements) if e.order == "any"]
        self.scenarios = list(itertools.product((True, False), repeat=len(self.any_elems)))
        self.maxk = max((s.ops_per_visit for s in sched.segments), default=1)
        self.inits = self._inits()

    def _inits(self):
        """Initial values worth trying: the start value matters only when some word is read
        (determined) before its first write, in the first element that writes."""
        for seg in self.sched.segments:
            if seg.element is None:
                continue
            kinds = [r.kind for r in seg.runs]
            if "w" in kinds:
                return (0, 1) if kinds.index("w") > 0 else None
        return None

    def seg_up(self, seg, any_up) -> bool:
        if seg.order == "up":
            return True
        if seg.order == "down":
            return False
        return any_up[self.any_elems.index(seg.element)]

    def visit_start(self, seg, up):
        """(first cycle of each word's visit (n,), words in visiting order (n,))."""
        pos = self.rank if up else self.n - 1 - self.rank
        seq = self.order if up else self.order[::-1]
        return seg.start + pos * seg.per_address, seq


def _last_valid(values, group_start_idx):
    """Grouped 'latest value ≥ 0 so far' (values -1 = none); groups are contiguous and
    ``group_start_idx`` gives each element's group start index."""
    idx = np.where(values >= 0, np.arange(values.size), -1)
    run = np.maximum.accumulate(idx) if values.size else idx
    ok = run >= group_start_idx
    return np.where(ok, values[np.maximum(run, 0)], -1)


def _groups(keys):
    """Start index of each element's group (keys sorted)."""
    if keys.size == 0:
        return np.empty(0, np.int64)
    start = np.ones(keys.size, bool)
    start[1:] = keys[1:] != keys[:-1]
    gidx = np.where(start, np.arange(keys.size), 0)
    return np.maximum.accumulate(gidx), start


def _copies_in(seg, base, a, b):
    """Copies of the visit starting at ``base`` with cycle in [a, b) (arrays)."""
    total = np.zeros(np.broadcast(base, a, b).shape, np.int64)
    for r in seg.runs:
        t0 = base + r.offset
        lo = np.maximum(0, -((t0 - a) // r.each))
        hi = np.minimum(r.repeat - 1, (b - 1 - t0) // r.each)
        total += np.maximum(0, hi - lo + 1)
    return total


class DramEngine:
    def __init__(self, prep: DramPrep):
        self.p = prep

    # ---- per-cell ops of a visit (shared by both families) ---------------------------
    def _visit_ops(self, si, seg, val, since, first, tstart, x, tau_word=None):
        """The operations of every word's visit.  ``tau_word`` (memories without refresh):
        stretches inside a visit are one operation long and may reach τ; after two copies
        of a run the state is fixed (every copy sees the same state and gap)."""
        p = self.p
        bg = p.bg[seg.run]
        prev_each = None

        def decay():
            val[val == x] = 1 - x

        for r in seg.runs:
            data = bg ^ np.int8(r.value)
            copies = 2 if (tau_word is not None and r.repeat > 1 and r.each >= tau_word) else 1
            for c in range(copies):
                if tau_word is not None and ((c == 0 and prev_each is not None and prev_each >= tau_word) or c == 1):
                    decay()
                if r.kind == "w":
                    val[...] = data
                elif (si, r.first) in p.determined:
                    det = (val != data) & (first < 0)
                    first[det] = si * p.maxk + r.first + c
            if r.kind == "w":
                since[...] = (tstart + r.offset + (r.repeat - 1) * r.each)[:, None]
            prev_each = r.each

    # ---- retention ---------------------------------------------------------------------
    def retention_first(self, kind):
        p = self.p
        from ..model import seconds_to_cycles

        tau = seconds_to_cycles(kind.tau, p.mem.clock_hz)
        if p.mem.dram and tau <= p.row_cycle:
            raise FaultSpecError(
                f"retention time {kind.text} is {tau} clock cycle(s), not longer than a row cycle "
                f"({p.row_cycle}); retention times are meant to be far longer than one access"
            )
        row_mode = p.mem.dram
        unit = p.row if row_mode else np.arange(p.n, dtype=np.int64)
        U = p.rows if row_mode else p.n
        unit_row = np.arange(U, dtype=np.int64) if row_mode else p.row
        x = kind.drf_value
        return self._scan(kind, lambda seg, tf, seq, st: self._ret_seg(seg, tf, seq, st, unit, unit_row, tau),
                          lambda: {"last": np.zeros(U, np.int64), "fl": np.full(U, -1, np.int64)}, x,
                          None if row_mode else tau)

    def _ret_seg(self, seg, tf, seq, st, unit, unit_row, tau):
        """Latest crossing (stretch ≥ τ ending) of each word's unit up to its visit (n,)."""
        tl = tf + seg.per_address - seg.runs[-1].each
        u = unit[seq]                                  # visiting order
        t1 = tf[seq]
        t2 = tl[seq]
        idx = np.argsort(u, kind="stable")
        us, a, b = u[idx], t1[idx], t2[idx]
        gstart, is_start = _groups(us)
        prev = np.empty_like(b)
        prev[1:] = b[:-1]
        prev[is_start] = st["last"][us[is_start]]
        gap = self.p.plan.max_gap(unit_row[us], prev, a)
        cross = np.where(gap >= tau, a, -1)
        cross = np.where(is_start, np.maximum(cross, st["fl"][us]), cross)
        fl = _last_valid(cross, gstart)
        end = np.ones(us.size, bool)
        end[:-1] = us[1:] != us[:-1]
        st["last"][us[end]] = b[end]
        st["fl"][us[end]] = fl[end]
        flw = np.empty(self.p.n, np.int64)
        flw[seq[idx]] = fl
        return flw

    # ---- disturb -------------------------------------------------------------------------
    def disturb_first(self, kind):
        N = kind.threshold
        rows = self.p.rows

        def fresh():
            return {"cnt": np.zeros((2, rows), np.int64), "ct": np.zeros((2, rows), np.int64),
                    "fl": np.full((2, rows), -1, np.int64), "open": -1}

        return self._scan(kind, lambda seg, tf, seq, st: self._dist_seg(seg, tf, seq, st, N), fresh,
                          kind.drf_value)

    def _dist_seg(self, seg, tf, seq, st, N):
        p = self.p
        plan = p.plan
        rows = p.rows
        n = p.n
        r = p.row[seq]                         # row of each visit, in time order
        base = tf[seq]
        tl = base + seg.per_address - seg.runs[-1].each
        if p.mem.page == "open":
            prev_row = np.empty_like(r)
            prev_row[0] = st["open"]
            prev_row[1:] = r[:-1]
            act_first = r != prev_row
        else:
            act_first = None
        st["open"] = int(r[-1])
        flw = np.full(n, -1, np.int64)
        for side, d in ((0, 1), (1, -1)):      # side 0: aggressor below (v = r + 1); side 1: above
            v = r + d
            ok = (v >= 0) & (v < rows)
            vi = np.nonzero(ok)[0]
            vv = v[vi]
            # pieces of each aggressor visit, split at the refresh slots of the victim row
            if plan.period:
                off = plan.offsets[vv]
                P = plan.period

                def F(t):
                    return np.where(t >= off, (t - off) // P + 1, 0)

                m = F(tl[vi]) - F(base[vi])
            else:
                m = np.zeros(vi.size, np.int64)
            rep = np.repeat(np.arange(vi.size), m + 1)
            jp = np.arange(rep.size) - np.repeat(np.cumsum(m + 1) - (m + 1), m + 1)
            pv = vv[rep]
            pb = base[vi][rep]
            if plan.period:
                k0 = np.where(pb >= plan.offsets[pv], (pb - plan.offsets[pv]) // P + 1, 0)
                slot = plan.offsets[pv] + (k0 + jp - 1) * P
                ps = np.where(jp == 0, pb, slot)
                nxt = plan.offsets[pv] + (k0 + jp) * P
                pe = np.where(jp == m[rep], tl[vi][rep] + 1, nxt)
            else:
                ps, pe = pb, tl[vi][rep] + 1
            if act_first is None:
                w = _copies_in(seg, pb, ps, pe)
            else:
                w = np.where((jp == 0) & act_first[vi][rep], 1, 0).astype(np.int64)
            # reset events: the visits of the victim row itself
            ev_v = np.concatenate([pv, r])
            ev_s = np.concatenate([ps, base])
            ev_e = np.concatenate([pe - 1, tl])
            ev_w = np.concatenate([w, np.zeros(n, np.int64)])
            ev_piece = np.concatenate([np.ones(pv.size, bool), np.zeros(n, bool)])
            ev_slot = np.concatenate([jp > 0, np.zeros(n, bool)])
            ev_word = np.concatenate([np.full(pv.size, -1, np.int64), seq])
            o = np.lexsort((ev_s, ev_v))
            ev_v, ev_s, ev_e, ev_w = ev_v[o], ev_s[o], ev_e[o], ev_w[o]
            ev_piece, ev_slot, ev_word = ev_piece[o], ev_slot[o], ev_word[o]
            gstart, is_start = _groups(ev_v)
            prev_end = np.empty_like(ev_e)
            prev_end[1:] = ev_e[:-1]
            prev_end[is_start] = st["ct"][side][ev_v[is_start]]
            refreshed = plan.last_refresh(ev_v, ev_s) > prev_end
            reset = (~ev_piece) | ev_slot | refreshed
            c_incl = np.cumsum(ev_w)
            c_excl = c_incl - ev_w
            anchor_pt = reset | is_start
            anchor = np.maximum.accumulate(np.where(anchor_pt, np.arange(ev_v.size), 0))
            carry = np.where(reset[anchor], 0, st["cnt"][side][ev_v[anchor]])
            count = c_incl - c_excl[anchor] + carry
            cross = np.where(ev_piece & (count >= N), ev_e, -1)
            cross = np.where(is_start, np.maximum(cross, st["fl"][side][ev_v]), cross)
            fl = _last_valid(cross, gstart)
            end = np.ones(ev_v.size, bool)
            end[:-1] = ev_v[1:] != ev_v[:-1]
            st["cnt"][side][ev_v[end]] = count[end]
            st["ct"][side][ev_v[end]] = ev_e[end]
            st["fl"][side][ev_v[end]] = fl[end]
            isw = ev_word >= 0
            flw[ev_word[isw]] = np.maximum(flw[ev_word[isw]], fl[isw])
        return flw

    # ---- the scan shared by both families ------------------------------------------------
    def _scan(self, kind, seg_fn, fresh, x, tau_word=None):
        """(detected (n, B), canonical first event code (n, B), maxk)."""
        p = self.p
        detected = np.ones((p.n, p.B), bool)
        canon = None
        inits = p.inits or (1 - x,)
        for any_up in p.scenarios:
            firsts = []
            for init in inits:
                val = np.full((p.n, p.B), init, np.int8)
                since = np.full((p.n, p.B), -1, np.int64)
                first = np.full((p.n, p.B), -1, np.int64)
                st = fresh()
                for si, seg in enumerate(p.sched.segments):
                    if seg.element is None:
                        continue
                    tf, seq = p.visit_start(seg, p.seg_up(seg, any_up))
                    flw = seg_fn(seg, tf, seq, st)
                    decayed = (val == x) & (flw[:, None] > since)
                    val[decayed] = 1 - x
                    self._visit_ops(si, seg, val, since, first, tf, x, tau_word)
                firsts.append(first)
            f = np.stack(firsts)
            detected &= (f >= 0).all(axis=0)
            if all(any_up):
                canon = f.max(axis=0)
        canon = np.where(detected, canon, -1)
        return detected, canon, p.maxk


# ---- grading glue (counts per kind) ----------------------------------------------------------

def dram_prep(eng):
    """The DRAM families' set-up for a fast :class:`~marchkit.engine.fast.Engine` (on the
    full-length test), built once per engine."""
    dp = eng.scratch.get("dram_prep")
    if dp is None:
        dp = eng.scratch["dram_prep"] = DramPrep(eng.full_test, eng.prep.mem, eng.full_sched)
    return dp


def grade_dram_kinds(eng, kinds, results):
    """Add a KindResult per retention / disturb kind to ``results``."""
    from ..faults import Instance
    from .results import KindResult

    prep = dram_prep(eng)
    deng = DramEngine(prep)
    examples = eng.examples
    for kind in kinds:
        res = results.setdefault(kind.text, KindResult(kind))
        det, canon, maxk = first_codes(deng, kind)
        res.instances += det.size
        res.detected += int(det.sum())
        if not det.all():
            res.missed_structures.add("single")
            room = examples - len(res.missed_examples)
            if room > 0:
                miss = np.nonzero(~det.ravel())[0][:room]
                res.missed_examples.extend(Instance(kind, (int(c),)) for c in miss)
        for code in np.unique(canon[det]):
            res.merge_element(prep.sched.segments[int(code) // maxk].element)
    return results


def first_codes(eng, kind):
    if kind.family == "disturb":
        return eng.disturb_first(kind)
    return eng.retention_first(kind)


def dram_verdicts(eng, instances):
    """(detected, Detection | None) per retention / disturb instance."""
    from ..model import op_cycle
    from .results import Detection

    prep = dram_prep(eng)
    deng = DramEngine(prep)
    cache = {}
    out = []
    for inst in instances:
        if inst.kind.text not in cache:
            cache[inst.kind.text] = first_codes(deng, inst.kind)
        det, canon, maxk = cache[inst.kind.text]
        w, b = divmod(inst.sites[0], prep.B)
        if not det[w, b]:
            out.append((False, None))
            continue
        si, k = divmod(int(canon[w, b]), maxk)
        seg = prep.sched.segments[si]
        pos = prep.rank[w] if seg.order != "down" else prep.n - 1 - prep.rank[w]
        out.append((True, Detection(seg.run, seg.element, k, int(w), int(op_cycle(seg, k, int(pos))))))
    return out
