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
    """(n, 1) int64: cycle of the first op of each word's visit in segment ``si``."""
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
            """One element segment from (val (n, C, ...) int8, last (n, 1, ...) int64)."""
            seg = segs[si]
            base = _visit_times(prep, si, up)
            if val.ndim == 3:
                base = base[:, :, None]
            data0 = data_r[seg.run] if val.ndim == 2 else data_r[seg.run][:, :, None]
            for k, kindop in enumerate(seg.op_kinds):
                t = base + seg.op_offsets[k]
                decayed = (val == x) & ((t - last) >= tau)
                val = np.where(decayed, np.int8(1 - x), val)
                last = t
                data = data0 ^ np.int8(seg.op_values[k])
                if kindop == "w":
                    val = np.broadcast_to(data, val.shape).astype(np.int8)
                elif (si, k) in prep.determined:
                    det = (val != data) & (first < 0)
                    first[det] = si * maxk + k if code else 1
            return val, last

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
            # state s = value + 2·(previous element ran ⇑)
            sval = np.array([0, 1, 0, 1], dtype=np.int8)

            def transition(si, up):
                psi = prev[si]
                if psi is None:
                    last0 = np.zeros((n, 1, 4), dtype=np.int64)
                else:
                    lseg = segs[psi]
                    off = lseg.op_offsets[-1]
                    last0 = np.stack([_visit_times(prep, psi, False) + off] * 2
                                     + [_visit_times(prep, psi, True) + off] * 2, axis=2)
                v0 = np.broadcast_to(sval, (n, C, 4)).astype(np.int8)
                f = np.full((n, C, 4), -1, dtype=np.int8)
                v1, _ = run_seg(si, up, v0, last0, f, code=False)
                end = v1.astype(np.intp) + (2 if up else 0)
                return end.reshape(n * C, 4), (f >= 0).reshape(n * C, 4)

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
