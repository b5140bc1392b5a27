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
        """(first cycle of each word's visit (n,), words in visiting order (n,)), cached per
        (segment, order): every kind and scenario asks for the same arrays."""
        key = ("visit", seg.start, up)
        if key not in self.cache:
            pos = self.rank if up else self.n - 1 - self.rank
            seq = self.order if up else self.order[::-1]
            self.cache[key] = (seg.start + pos * seg.per_address, seq)
        return self.cache[key]


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
        return np.empty(0, np.int64), np.empty(0, bool)
    start = np.ones(keys.size, bool)
    start[1:] = keys[1:] != keys[:-1]
    gidx = np.where(start, np.arange(keys.size), 0)
    return np.maximum.accumulate(gidx), start


def _ret_apply(plan, st, units, rows, a, b, gstart, is_start, tau):
    """Restore events of retention units (sorted by (unit, time); ``a``/``b`` first and last
    restore of each event, ``rows`` the physical row of each event's unit) from the carried
    state ``st`` (``last`` restore, ``fl`` latest crossing per unit), updating it; the latest
    crossing (a stretch ≥ τ without restore ending) up to each event (E,) int64."""
    prev = np.empty_like(b)
    prev[1:] = b[:-1]
    prev[is_start] = st["last"][units[is_start]]
    gap = plan.max_gap(rows, prev, a)
    cross = np.where(gap >= tau, a, -1)
    cross = np.where(is_start, np.maximum(cross, st["fl"][units]), cross)
    fl = _last_valid(cross, gstart)
    end = np.ones(units.size, bool)
    end[:-1] = units[1:] != units[:-1]
    st["last"][units[end]] = b[end]
    st["fl"][units[end]] = fl[end]
    return fl


def _split_at_slots(plan, vv, base, tl):
    """Windows [base, tl] of victim rows ``vv`` split at the rows' refresh slots in (base, tl]:
    (source window of each piece, index of the piece in its window (0: the first; > 0: it
    starts at a slot), piece start, piece end (exclusive)), all (Q,) int64."""
    if plan.period:
        P = plan.period
        off = plan.offsets[vv]

        def F(t):
            return np.where(t >= off, (t - off) // P + 1, 0)

        m = F(tl) - F(base)
    else:
        m = np.zeros(vv.size, np.int64)
    rep = np.repeat(np.arange(vv.size), m + 1)
    jp = np.arange(rep.size) - np.repeat(np.cumsum(m + 1) - (m + 1), m + 1)
    pb, ptl = base[rep], tl[rep]
    if plan.period:
        offp = plan.offsets[vv[rep]]
        k0 = np.where(pb >= offp, (pb - offp) // P + 1, 0)
        ps = np.where(jp == 0, pb, offp + (k0 + jp - 1) * P)
        pe = np.where(jp == m[rep], ptl + 1, offp + (k0 + jp) * P)
    else:
        ps, pe = pb, ptl + 1
    return rep, jp, ps, pe


def _sorted_events(plan, ev_v, ev_s, ev_e, ev_w, ev_piece, ev_slot, ev_blk):
    """The events of one side sorted by (victim row, start), with group starts and each
    event's latest refresh of its row at or before its start: the layout of
    :meth:`DramEngine._dist_apply`."""
    o = np.lexsort((ev_s, ev_v))
    ev_v, ev_s, ev_e, ev_w = ev_v[o], ev_s[o], ev_e[o], ev_w[o]
    ev_piece, ev_slot, ev_blk = ev_piece[o], ev_slot[o], ev_blk[o]
    gstart, is_start = _groups(ev_v)
    return (ev_v, ev_s, ev_e, ev_w, ev_piece, ev_slot, ev_blk, gstart, is_start,
            plan.last_refresh(ev_v, ev_s))


def _single_row(rows) -> bool:
    """Does every visit of a hammer item open one row only (``rows`` (V, m) int64)?"""
    return bool((rows == rows[:, :1]).all())


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
        ham = None
        if row_mode:
            for seg in p.sched.segments:
                if seg.hammer is not None and tau <= seg.per_address // seg.hammer.count:
                    raise FaultSpecError(
                        f"retention time {kind.text} is {tau} clock cycle(s), not longer than one round of "
                        f"the hammer item ({seg.per_address // seg.hammer.count} cycles); retention times are "
                        "meant to be far longer")
            ham = lambda seg, st: self._ret_hammer(seg, st, tau)        # noqa: E731
        return self._scan(kind, lambda seg, tf, seq, st: self._ret_seg(seg, tf, seq, st, unit, unit_row, tau),
                          lambda: {"last": np.zeros(U, np.int64), "fl": np.full(U, -1, np.int64)}, x,
                          None if row_mode else tau, ham)

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
        fl = _ret_apply(self.p.plan, st, us, unit_row[us], a, b, gstart, is_start, tau)
        flb = np.empty(bu.size, np.int64)
        flb[idx] = fl
        flw = np.empty(self.p.n, np.int64)
        flw[seq] = flb[blk]
        return flw

    def _ret_hammer(self, seg, st, tau):
        """A hammer segment on a DRAM: each activation restores its row.  The restores of a
        row in one visit are one event from its first to its last activation (the stretches
        between them are at most one round, shorter than τ)."""
        p = self.p
        key = ("reth", seg.start)
        if key not in p.cache:
            rows, base, _, _ = self._hammer_rows(seg)
            n, m = rows.shape
            rc = seg.row_cycle
            M = m * rc
            N = seg.hammer.count
            j = np.arange(m, dtype=np.int64)
            # per visit and distinct row: first and last position of the row in a round
            code = np.arange(n, dtype=np.int64)[:, None] * p.rows + rows
            uq, inv = np.unique(code, return_inverse=True)
            inv = inv.reshape(n, m)
            jmin = np.full(uq.size, m, np.int64)
            jmax = np.full(uq.size, -1, np.int64)
            np.minimum.at(jmin, inv.ravel(), np.broadcast_to(j, (n, m)).ravel())
            np.maximum.at(jmax, inv.ravel(), np.broadcast_to(j, (n, m)).ravel())
            vis, row = uq // p.rows, uq % p.rows
            a = base[vis] + jmin * rc
            b = base[vis] + (N - 1) * M + jmax * rc
            o = np.lexsort((a, row))
            row, a, b = row[o], a[o], b[o]
            gstart, is_start = _groups(row)
            p.cache[key] = (row, a, b, gstart, is_start)
        row, a, b, gstart, is_start = p.cache[key]
        if row.size:
            _ret_apply(p.plan, st, row, row, a, b, gstart, is_start, tau)

    # ---- hammer items ----------------------------------------------------------------------
    def _hammer_rows(self, seg):
        """The activations of a hammer segment, visit by visit in visiting order (a hammer
        item visits the physical rows: ``V`` visits, one per row): ``rows`` (V, m) int64, the
        row each activation of a round opens; ``base`` (V,) int64, the first cycle of each visit; ``act_first`` / ``act_steady`` (n, m) bool, whether the
        activation really opens its row in the first round / in the later rounds (always on a
        closed page; on an open page only when another row is open — the first activation of
        the first visit follows the row left open before the segment: ``act_first[0, 0]`` is
        True here and corrected by the caller)."""
        p = self.p
        key = ("hrows", seg.start)
        if key not in p.cache:
            R = p.rows
            seq = np.arange(R, dtype=np.int64) if seg.order == "up" else np.arange(R - 1, -1, -1, dtype=np.int64)
            offs = np.asarray(seg.hammer.offsets, np.int64)
            rows = (seq[:, None] + offs[None, :]) % R
            base = seg.start + np.arange(R, dtype=np.int64) * seg.per_address
            if p.mem.page == "closed":
                act_first = act_steady = np.ones(rows.shape, bool)
            else:
                act_steady = rows != np.roll(rows, 1, axis=1)
                act_first = act_steady.copy()
                # a visit that starts on the row the last one ended on opens it again when a
                # refresh (of any row) closed it in between: the visits follow each other, so
                # that is a slot in the row cycle up to the visit's first activation
                act_first[1:, 0] = (rows[1:, 0] != rows[:-1, -1]) | (
                    p.plan.count_all(base[1:] - seg.row_cycle, base[1:]) > 0)
                act_first[0, 0] = True
            p.cache[key] = (rows, base, act_first, act_steady)
        return p.cache[key]

    def _dist_hammer(self, seg, st, N):
        """A hammer segment for read disturb: the events of every victim row (its own
        activations reset its counts; the activations of a neighbour row add to that side)."""
        p = self.p
        rows, _, act_first, act_steady = self._hammer_rows(seg)
        m = rows.shape[1]
        if N < m:
            raise FaultSpecError(
                f"disturb threshold {N} is below the {m} rows the hammer item cycles through; the closed "
                "form needs a threshold of at least that many activations (use --engine reference)")
        if p.mem.page == "closed":
            first_act = True
        else:
            # closed form on an open page with refresh: every activation changes row, or every
            # round opens a single row (it stays open; a refresh closes it and the next
            # activation opens it again).  A mix depends on where each slot falls in a round.
            if p.plan.period and not (act_steady.all() or _single_row(rows)):
                raise FaultSpecError(
                    "a hammer item whose rounds open the same row twice in a row among other rows, on a "
                    "DRAM with an open page and refresh, is not graded in closed form — whether a refresh "
                    "reopens the row depends on where it falls in the round; use --engine reference, or "
                    "offsets that differ from one activation to the next")
            first_act = self._first_opens(st, rows[0, 0], seg.start)
        st["open"] = int(rows[-1, -1])
        st["last_t"] = seg.start + seg.cycles - seg.row_cycle
        for side, d in ((0, 1), (1, -1)):
            key = ("disth", seg.start, side, first_act)
            if key not in p.cache:
                p.cache[key] = self._hammer_layout(seg, d, first_act)
            self._dist_apply(p.cache[key], st, side, N)

    def _hammer_layout(self, seg, d, first_act):
        """Events of every victim row v on one side (aggressor row v − d) in a hammer segment,
        sorted by (row, time), in the layout :meth:`_dist_apply` reads.  Per visit that
        activates v: the aggressor's activations before v's first activation (a piece), v's
        activations (a reset: between two of them at most m − 1 aggressor activations, below
        the threshold), the aggressor's activations after v's last one (a piece); per visit
        that activates the aggressor only: one piece.  Pieces are split at v's refresh slots."""
        p = self.p
        rows, base, act_first, act_steady = self._hammer_rows(seg)
        if not first_act:
            act_first = act_first.copy()
            act_first[0, 0] = False
        n, m = rows.shape
        R = p.rows
        rc = seg.row_cycle
        M = m * rc
        N = seg.hammer.count
        Pa = seg.per_address
        # (visit, victim) pairs: victims whose own row or aggressor row the visit opens
        cand = np.concatenate([rows, rows + d], axis=1)
        vis = np.repeat(np.arange(n, dtype=np.int64), 2 * m)
        v = cand.ravel()
        ok = (v >= 0) & (v < R) & (v - d >= 0) & (v - d < R)
        code = np.unique(vis[ok] * R + v[ok])
        P, V = code // R, code % R
        X = V - d
        rp = rows[P]
        isX, isV = rp == X[:, None], rp == V[:, None]
        aF, aS = act_first[P], act_steady[P]
        xF, vF = isX & aF, isV & aF
        xS, vS = (isX & aS, isV & aS) if N > 1 else (np.zeros_like(isX), np.zeros_like(isV))
        b = base[P]
        has_vF, has_vS = vF.any(axis=1), vS.any(axis=1)
        t_first = np.where(has_vF, b + vF.argmax(axis=1) * rc, b + M + vS.argmax(axis=1) * rc)
        t_last = np.where(has_vS, b + (N - 1) * M + (m - 1 - vS[:, ::-1].argmax(axis=1)) * rc,
                          b + (m - 1 - vF[:, ::-1].argmax(axis=1)) * rc)
        vact = has_vF | has_vS
        end = b + Pa
        # pieces [ps, pe): before the first / after the last activation of v, or the whole visit
        a_s = np.concatenate([b, (t_last + 1)[vact]])
        a_e = np.concatenate([np.where(vact, t_first, end), end[vact]])
        a_q = np.concatenate([np.arange(P.size), np.nonzero(vact)[0]])
        keep = a_e > a_s
        a_s, a_e, a_q = a_s[keep], a_e[keep], a_q[keep]
        rep, jp, ps, pe = _split_at_slots(p.plan, V[a_q], a_s, a_e - 1)
        q = a_q[rep]
        bq = b[q]
        w = np.zeros(q.size, np.int64)
        for j in range(m):
            t0 = bq + j * rc
            w += xF[q, j] & (t0 >= ps) & (t0 < pe)
            lo = np.maximum(1, -((t0 - ps) // M))          # first round i ≥ 1 at or after ps
            hi = np.minimum(N - 1, (pe - 1 - t0) // M)
            w += np.where(xS[q, j], np.maximum(0, hi - lo + 1), 0)
        if p.mem.page == "open" and p.plan.period and _single_row(rows):
            # each visit opens one row; after its first activation, that row is opened again at
            # the activation after each refresh slot (it closes the row) up to the visit's last
            lo = np.maximum(bq, ps - 1)
            hi = np.minimum(bq + Pa - rc, pe - 1)
            w += np.where(isX[q, 0], p.plan.count_all(lo, hi), 0)
        qb = np.nonzero(vact)[0]
        ev_v = np.concatenate([V[q], V[qb]])
        ev_s = np.concatenate([ps, t_first[qb]])
        ev_e = np.concatenate([pe - 1, t_last[qb]])
        ev_w = np.concatenate([w, np.zeros(qb.size, np.int64)])
        ev_piece = np.concatenate([np.ones(q.size, bool), np.zeros(qb.size, bool)])
        ev_slot = np.concatenate([jp > 0, np.zeros(qb.size, bool)])
        ev_blk = np.full(ev_v.size, -1, np.int64)
        return _sorted_events(p.plan, ev_v, ev_s, ev_e, ev_w, ev_piece, ev_slot, ev_blk)

    # ---- disturb -------------------------------------------------------------------------
    def disturb_first(self, kind):
        N = kind.threshold
        rows = self.p.rows

        def fresh():
            return {"cnt": np.zeros((2, rows), np.int64), "ct": np.zeros((2, rows), np.int64),
                    "fl": np.full((2, rows), -1, np.int64), "open": -1, "last_t": -1}

        return self._scan(kind, lambda seg, tf, seq, st: self._dist_seg(seg, tf, seq, st, N), fresh,
                          kind.drf_value, ham_fn=lambda seg, st: self._dist_hammer(seg, st, N))

    def _first_opens(self, st, row, t) -> bool:
        """Open page: does the segment's first access (to ``row``, at cycle ``t``) activate its
        row — another row is open, or a refresh closed the row since the last access?"""
        return bool(row != st["open"]) or bool(self.p.plan.count_all(st["last_t"], t) > 0)

    def _dist_seg(self, seg, tf, seq, st, N):
        p = self.p
        n = p.n
        br, p0, p1, blk = self._blocks("distb", seq, p.row)
        if p.mem.page == "open":
            first_act = self._first_opens(st, br[0], seg.start)     # later blocks always change row
        else:
            first_act = None
        st["open"] = int(br[-1])
        st["last_t"] = seg.start + seg.cycles - seg.runs[-1].each
        flb = np.full(br.size, -1, np.int64)
        for side, d in ((0, 1), (1, -1)):      # side 0: aggressor below (v = r + 1); side 1: above
            key = ("dist", seg.start, int(seq[0]), int(seq[-1]), side, first_act)
            if key not in p.cache:
                p.cache[key] = self._dist_layout(seg, br, p0, p1, first_act, d)
            fl = self._dist_apply(p.cache[key], st, side, N)
            ev_blk = p.cache[key][6]
            isb = ev_blk >= 0
            flb[ev_blk[isb]] = np.maximum(flb[ev_blk[isb]], fl[isb])
        flw = np.empty(n, np.int64)
        flw[seq] = flb[blk]
        return flw

    def _dist_apply(self, layout, st, side, N):
        """Run the events of one side (a layout of :meth:`_dist_layout` or
        :meth:`_hammer_layout`) from the carried state ``st``, updating it; the latest
        crossing up to each event (-1: none) (E,) int64."""
        ev_v, ev_s, ev_e, ev_w, ev_piece, ev_slot, ev_blk, gstart, is_start, last_ref = layout
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
        return fl

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
        rep, jp, ps, pe = _split_at_slots(plan, v[vi], base_b[vi], tl_b[vi])
        pv = v[vi][rep]
        pb = base_b[vi][rep]
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
            # open page: a block opens its row once, and again after every refresh (of any
            # row: it closes the open row) between its first and its last operation
            act = np.ones(br.size, bool)
            act[0] = first_act
            ptl = tl_b[vi][rep]
            w = (np.where((jp == 0) & act[vi][rep], 1, 0).astype(np.int64)
                 + plan.count_all(np.maximum(pb, ps - 1), np.minimum(ptl, pe - 1)))
        nb = br.size
        ev_v = np.concatenate([pv, br])
        ev_s = np.concatenate([ps, base_b])
        ev_e = np.concatenate([pe - 1, tl_b])
        ev_w = np.concatenate([w, np.zeros(nb, np.int64)])
        ev_piece = np.concatenate([np.ones(pv.size, bool), np.zeros(nb, bool)])
        ev_slot = np.concatenate([jp > 0, np.zeros(nb, bool)])
        ev_blk = np.concatenate([np.full(pv.size, -1, np.int64), np.arange(nb, dtype=np.int64)])
        return _sorted_events(plan, ev_v, ev_s, ev_e, ev_w, ev_piece, ev_slot, ev_blk)

    # ---- the scan shared by both families ------------------------------------------------
    def _scan(self, kind, seg_fn, fresh, x, tau_word=None, ham_fn=None):
        """(detected (n, B), canonical first event code (n, B), maxk).  ``seg_fn`` updates the
        state of an element segment and returns each word's latest crossing; ``ham_fn``
        updates it for a hammer segment (no word is visited: nothing decays there)."""
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
                    if seg.hammer is not None:
                        if ham_fn is not None:
                            ham_fn(seg, st)
                        continue
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
