"""Fast path of the retention family: real-time arithmetic for all words at once.

A retention fault's verdict depends only on when its word is accessed (its rank in the
order, the schedule) and on the data its cell holds in every run — the cell's *key* (the
index of its background bits among the patterns present, ``prep.cell_key``).  So the
arithmetic runs on (word, column) arrays: one column per key when there are no more keys
than bits (the data of key k in run r is ``prep.key_bits[k, r]``, the same for every word),
else one column per bit.  Counts are the number of cells of each (word, key).

With ⇕ elements the state of a (word, column) between elements is (its value, the order the
previous element ran in — which fixes its last access time): 4 states, carried by
:func:`~marchkit.engine.fast.sweep_orders`.
"""

from __future__ import annotations

import numpy as np

from ...faults import Instance
from ..results import KindResult
from .base import FastPath


def _columns(prep):
    """(C, per-run data of the columns, by_key): data[r] is (1, C) (keys) or (n, B) (bits), int8."""
    if prep.K <= prep.B:
        return prep.K, [prep.key_bits[:, r][None, :].astype(np.int8) for r in range(prep.R)], True
    return prep.B, [prep.bg[r].astype(np.int8) for r in range(prep.R)], False


def _visit_times(prep, si, up):
    """(n, 1) int64: cycle of the start of each word's visit in segment ``si`` (cached)."""
    cache = prep.__dict__.setdefault("_visit_cache", {})
    if (si, up) not in cache:
        if len(cache) > 8:
            cache.clear()
        cache[(si, up)] = _visit_times_uncached(prep, si, up)
    return cache[(si, up)]


def _visit_times_uncached(prep, si, up):
    seg = prep.sched.segments[si]
    pos = prep.rank if up else prep.n - 1 - prep.rank
    return (seg.start + pos.astype(np.int64) * seg.per_address)[:, None]


class RetentionFast(FastPath):
    def prepare(self, eng, kinds, scope):
        if eng.prep.K <= eng.prep.B:
            eng.prep.setup.word_key_hist()

    def drf_table(self, eng, kind):
        """(detected (n, C) bool, canonical first event (n, C) int64 as a segment·maxk + op
        code or -1, maxk, by_key) for each (word, column)."""
        from ...units import seconds_to_cycles

        prep = eng.prep
        n = prep.n
        C, data_r, by_key = _columns(prep)
        x = kind.drf_value
        tau = seconds_to_cycles(kind.tau, prep.mem.clock_hz)
        maxk = max((len(s.op_kinds) for s in prep.sched.segments), default=1)
        segs = prep.sched.segments

        def run_seg(si, up, val, last, first, code=True):
            """One element segment from ``val`` (n, C) int8 and ``last`` (n, 1) int64 (the
            last access of each word); ``first`` (n, C) gets the first detection (a code, or 1
            when ``code`` is false) where still -1.  Only a visit's first op has a per-word gap
            since the last access; the later ops of the visit follow at fixed offsets."""
            seg = segs[si]
            offs = seg.op_offsets
            t0 = _visit_times(prep, si, up) + offs[0]
            data0 = data_r[seg.run]
            lost = np.int8(1 - x)
            for k, kindop in enumerate(seg.op_kinds):
                if k == 0:
                    val = np.where((val == x) & ((t0 - last) >= tau), lost, val)
                elif offs[k] - offs[k - 1] >= tau:
                    val = np.where(val == x, lost, val)
                data = data0 ^ np.int8(seg.op_values[k])
                if kindop == "w":
                    val = np.broadcast_to(data, val.shape).astype(np.int8)
                elif (si, k) in prep.determined:
                    det = (val != data) & (first < 0)
                    first[det] = si * maxk + k if code else 1
            return val, t0 + (offs[-1] - offs[0])

        # canonical scenario, ⇕ as ⇑.  Initial contents cannot matter: every counted read of
        # the cell comes after a write to it, and that write restores the cell whatever it held.
        val = np.full((n, C), 1 - x, dtype=np.int8)
        last = np.zeros((n, 1), dtype=np.int64)
        first = np.full((n, C), -1, dtype=np.int64)
        for si, seg in enumerate(segs):
            if seg.element is not None:
                val, last = run_seg(si, seg.order != "down", val, last, first)
        detected = first >= 0
        if prep.any_elems:
            from ..fast import sweep_orders

            prev = {}
            p = None
            for si, seg in enumerate(segs):
                if seg.element is not None:
                    prev[si] = p
                    p = si
            # state s = value + 2·(previous element ran ⇑).  Only the first op of a visit
            # looks at the last access (whether the cell decays before it); after it the run
            # depends on the (possibly decayed) value alone: so run each element from the two
            # values with no decay at its first op, and pick per state.
            def transition(si, up):
                """(end state (n·C, 4) int8, detected (n·C, 4) bool) of segment ``si`` run ⇑/⇓."""
                seg = segs[si]
                t0 = _visit_times(prep, si, up) + seg.op_offsets[0]          # (n, 1) int64
                psi = prev[si]
                if psi is None:
                    lasts = (np.zeros((n, 1), dtype=np.int64),) * 2
                else:
                    off = segs[psi].op_offsets[-1]
                    lasts = (_visit_times(prep, psi, False) + off, _visit_times(prep, psi, True) + off)
                ends, dets = [], []
                for v in (0, 1):
                    f = np.full((n, C), -1, dtype=np.int8)
                    v1, _ = run_seg(si, up, np.full((n, C), v, dtype=np.int8), t0, f, code=False)
                    ends.append(v1 + np.int8(2 if up else 0))
                    dets.append(f >= 0)
                end = np.empty((n, C, 4), dtype=np.int8)
                det = np.empty((n, C, 4), dtype=bool)
                for st in range(4):
                    v, pu = st & 1, st >> 1
                    if v == x:           # the lost value: decays if the gap is at least τ
                        flip = (t0 - lasts[pu]) >= tau                         # (n, 1) bool
                        end[..., st] = np.where(flip, ends[1 - x], ends[x])
                        det[..., st] = np.where(flip, dets[1 - x], dets[x])
                    else:
                        end[..., st] = ends[v]
                        det[..., st] = dets[v]
                return end.reshape(n * C, 4), det.reshape(n * C, 4)

            reach = np.zeros((n * C, 4), dtype=bool)
            reach[:, 1 - x] = True
            detected &= ~sweep_orders(prep, reach, transition).reshape(n, C)
        canon = np.where(detected, first, -1)
        return detected, canon, maxk, by_key

    def _cell_cols(self, eng, cells, by_key):
        prep = eng.prep
        return prep.cell_key[cells] if by_key else cells % prep.B

    def grade(self, eng, kinds, scope, results):
        prep = eng.prep
        for kind in kinds:
            res = results.setdefault(kind.text, KindResult(kind))
            det, canon, maxk, by_key = self.drf_table(eng, kind)
            H = prep.word_key_hist() if by_key else np.ones((prep.n, prep.B), dtype=np.int64)
            res.instances += prep.n * prep.B
            res.detected += int(H[det].sum())
            if (H[~det] > 0).any():
                res.missed_structures.add("single")
                if eng.examples:
                    miss_words = np.nonzero(((H > 0) & ~det).any(axis=1))[0]
                    found = []
                    for w in miss_words:
                        cells = np.arange(w * prep.B, (w + 1) * prep.B)
                        bad = cells[~det[w, self._cell_cols(eng, cells, by_key)]]
                        found += [int(c) for c in bad[:eng.examples - len(found)]]
                        if len(found) >= eng.examples:
                            break
                    eng.take(res, [Instance(kind, (c,)) for c in found])
            codes = canon[det & (H > 0)]
            if codes.size:
                seen = np.zeros(len(prep.sched.segments) * maxk, dtype=bool)
                seen[codes] = True
                for code in np.nonzero(seen)[0]:
                    res.merge_element(prep.sched.segments[int(code) // maxk].element)
        return results

    def verdicts(self, eng, instances):
        prep = eng.prep
        cache = {}
        out = []
        for inst in instances:
            if inst.kind.text not in cache:
                cache[inst.kind.text] = self.drf_table(eng, inst.kind)
            det, canon, maxk, by_key = cache[inst.kind.text]
            c = inst.sites[0]
            w = c // prep.B
            col = int(self._cell_cols(eng, np.array([c]), by_key)[0])
            if det[w, col]:
                code = int(canon[w, col])
                out.append((True, eng.detection(code // maxk, code % maxk, w)))
            else:
                out.append((False, None))
        return out


FAST = RetentionFast()
