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
        self._columns()
        self.cache: dict = {}         # sort orders and event layouts shared by every kind

    def _columns(self):
        """Cells with the same data in every background run behave alike in a word: work on
        (word, key) columns when there are no more keys than bits (``data[r]`` (1, C)), else
        on (word, bit) (``data[r]`` (n, B)).  ``hist`` (n, C) counts the cells of each column;
        ``col`` (n·B,) is each cell's column."""
        R, n, B = self.bg.shape
        self._raw = None
        if R <= 4:                                  # few runs: small codes, no int64 copies
            raw = np.zeros((n, B), np.uint8)
            for r in range(R):
                raw |= self.bg[r] << np.uint8(r)
            present = np.array([v for v in range(1 << R) if (raw == v).any()], np.int64)
            K = present.size
            if K <= B:
                self.C = K
                key_bits = ((present[:, None] >> np.arange(R)[None, :]) & 1).astype(np.int8)
                self.data = [key_bits[:, r][None, :] for r in range(R)]
                self.hist = (np.full((n, 1), B, np.int64) if K == 1 else
                             np.stack([(raw == v).sum(axis=1) for v in present], axis=1).astype(np.int64))
                self._raw, self._present = raw, present
                return
        self.C = B
        self.data = [self.bg[r].astype(np.int8) for r in range(R)]
        self.hist = np.ones((n, B), np.int64)

    @property
    def col(self) -> np.ndarray:
        """Column of each cell (n·B,) int64."""
        if self._raw is None:
            return np.tile(np.arange(self.B, dtype=np.int64), self.n)
        lut = np.zeros(1 << 4, np.int64)
        lut[self._present] = np.arange(self._present.size)
        return lut[self._raw.reshape(-1)]

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
        bg = p.data[seg.run]
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

    def _blocks(self, kind, seq, unit):
        """Consecutive visits of one unit (row or word) merged into blocks, in visiting
        order: (unit (nb,), first position (nb,), last position (nb,), block of each position
        (n,)); cached per visiting order.  Inside a block the unit is restored every
        operation, so a block is one restore event from its first to its last operation."""
        key = (kind, int(seq[0]), int(seq[-1]))
        if key not in self.p.cache:
            u = unit[seq]
            start = np.ones(u.size, bool)
            start[1:] = u[1:] != u[:-1]
            p0 = np.nonzero(start)[0]
            p1 = np.append(p0[1:] - 1, u.size - 1)
            self.p.cache[key] = (u[p0], p0, p1, np.cumsum(start) - 1)
        return self.p.cache[key]

    def _ret_seg(self, seg, tf, seq, st, unit, unit_row, tau):
        """Latest crossing (stretch ≥ τ ending) of each word's unit up to its visit (n,)."""
        bu, p0, p1, blk = self._blocks("retb", seq, unit)
        key = ("rets", int(seq[0]), int(seq[-1]))
        if key not in self.p.cache:
            idx = np.argsort(bu, kind="stable")
            us = bu[idx]
            self.p.cache[key] = (idx, us) + _groups(us)
        idx, us, gstart, is_start = self.p.cache[key]
        Pa = seg.per_address
        a = seg.start + p0[idx] * Pa
        b = seg.start + p1[idx] * Pa + Pa - seg.runs[-1].each
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
        flb = np.empty(bu.size, np.int64)
        flb[idx] = fl
        flw = np.empty(self.p.n, np.int64)
        flw[seq] = flb[blk]
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
        n = p.n
        br, p0, p1, blk = self._blocks("distb", seq, p.row)
        if p.mem.page == "open":
            first_act = bool(br[0] != st["open"])     # later blocks always change row
        else:
            first_act = None
        st["open"] = int(br[-1])
        flb = np.full(br.size, -1, np.int64)
        for side, d in ((0, 1), (1, -1)):      # side 0: aggressor below (v = r + 1); side 1: above
            key = ("dist", seg.start, int(seq[0]), int(seq[-1]), side, first_act)
            if key not in p.cache:
                p.cache[key] = self._dist_layout(seg, br, p0, p1, first_act, d)
            ev_v, ev_s, ev_e, ev_w, ev_piece, ev_slot, ev_blk, gstart, is_start, last_ref = p.cache[key]
            prev_end = np.empty_like(ev_e)
            prev_end[1:] = ev_e[:-1]
            prev_end[is_start] = st["ct"][side][ev_v[is_start]]
            refreshed = last_ref > prev_end
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
            isb = ev_blk >= 0
            flb[ev_blk[isb]] = np.maximum(flb[ev_blk[isb]], fl[isb])
        flw = np.empty(n, np.int64)
        flw[seq] = flb[blk]
        return flw

    def _dist_layout(self, seg, br, p0, p1, first_act, d):
        """The events of every victim row on one side in one segment, sorted by (row, time);
        independent of the threshold and of the state carried in.  Events: the blocks of the
        victim row (resets) and the blocks of row v ∓ 1 split at the victim row's refresh
        slots (pieces, with their activations counted in closed form)."""
        p = self.p
        plan = p.plan
        Pa = seg.per_address
        base_b = seg.start + p0 * Pa
        tl_b = seg.start + p1 * Pa + Pa - seg.runs[-1].each
        v = br + d
        vi = np.nonzero((v >= 0) & (v < p.rows))[0]
        vv = v[vi]
        if plan.period:
            P = plan.period
            off = plan.offsets[vv]

            def F(t):
                return np.where(t >= off, (t - off) // P + 1, 0)

            m = F(tl_b[vi]) - F(base_b[vi])
        else:
            m = np.zeros(vi.size, np.int64)
        rep = np.repeat(np.arange(vi.size), m + 1)
        jp = np.arange(rep.size) - np.repeat(np.cumsum(m + 1) - (m + 1), m + 1)
        pv = vv[rep]
        pb = base_b[vi][rep]
        ptl = tl_b[vi][rep]
        if plan.period:
            offp = plan.offsets[pv]
            k0 = np.where(pb >= offp, (pb - offp) // P + 1, 0)
            ps = np.where(jp == 0, pb, offp + (k0 + jp - 1) * P)
            pe = np.where(jp == m[rep], ptl + 1, offp + (k0 + jp) * P)
        else:
            ps, pe = pb, ptl + 1
        if first_act is None:
            # closed page: every copy activates; whole visits inside a piece count ops_per_visit
            ja = (ps - pb) // Pa
            jb = (pe - 1 - pb) // Pa
            va, vb = pb + ja * Pa, pb + jb * Pa
            same = _copies_in(seg, va, ps, pe)
            split = (_copies_in(seg, va, ps, va + Pa) + np.maximum(0, jb - ja - 1) * seg.ops_per_visit
                     + _copies_in(seg, vb, vb, pe))
            w = np.where(ja == jb, same, split)
        else:
            act = np.ones(br.size, bool)
            act[0] = first_act
            w = np.where((jp == 0) & act[vi][rep], 1, 0).astype(np.int64)
        nb = br.size
        ev_v = np.concatenate([pv, br])
        ev_s = np.concatenate([ps, base_b])
        ev_e = np.concatenate([pe - 1, tl_b])
        ev_w = np.concatenate([w, np.zeros(nb, np.int64)])
        ev_piece = np.concatenate([np.ones(pv.size, bool), np.zeros(nb, bool)])
        ev_slot = np.concatenate([jp > 0, np.zeros(nb, bool)])
        ev_blk = np.concatenate([np.full(pv.size, -1, np.int64), np.arange(nb, dtype=np.int64)])
        o = np.lexsort((ev_s, ev_v))
        ev_v, ev_s, ev_e, ev_w = ev_v[o], ev_s[o], ev_e[o], ev_w[o]
        ev_piece, ev_slot, ev_blk = ev_piece[o], ev_slot[o], ev_blk[o]
        gstart, is_start = _groups(ev_v)
        return (ev_v, ev_s, ev_e, ev_w, ev_piece, ev_slot, ev_blk, gstart, is_start,
                plan.last_refresh(ev_v, ev_s))

    # ---- the scan shared by both families ------------------------------------------------
    def _scan(self, kind, seg_fn, fresh, x, tau_word=None):
        """(detected (n, B), canonical first event code (n, B), maxk)."""
        p = self.p
        detected = np.ones((p.n, p.C), bool)
        canon = None
        inits = p.inits or (1 - x,)
        for any_up in p.scenarios:
            firsts = []
            for init in inits:
                val = np.full((p.n, p.C), init, np.int8)
                since = np.full((p.n, p.C), -1, np.int64)
                first = np.full((p.n, p.C), -1, np.int64)
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
        present = prep.hist > 0
        res.instances += int(prep.hist.sum())
        res.detected += int(prep.hist[det].sum())
        if (present & ~det).any():
            res.missed_structures.add("single")
            room = examples - len(res.missed_examples)
            if room > 0:
                missed_cells = np.nonzero(~det[np.arange(prep.n).repeat(prep.B), prep.col])[0][:room]
                res.missed_examples.extend(Instance(kind, (int(c),)) for c in missed_cells)
        segs = np.bincount(canon[det & present] // maxk)       # segments of first detections
        for si in np.nonzero(segs)[0]:
            res.merge_element(prep.sched.segments[int(si)].element)
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
        w = inst.sites[0] // prep.B
        col = int(prep.col[inst.sites[0]])
        if not det[w, col]:
            out.append((False, None))
            continue
        si, k = divmod(int(canon[w, col]), maxk)
        seg = prep.sched.segments[si]
        pos = prep.rank[w] if seg.order != "down" else prep.n - 1 - prep.rank[w]
        out.append((True, Detection(seg.run, seg.element, k, int(w), int(op_cycle(seg, k, int(pos))))))
    return out
