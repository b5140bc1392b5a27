"""Fast path of the retention family: real-time arithmetic for all cells at once."""

from __future__ import annotations

import numpy as np

from ...faults import Instance
from ..results import KindResult
from .base import FastPath


class RetentionFast(FastPath):
    def drf_first(self, eng, kind):
        """(detected (n, B), canonical first event (n, B) as (segment, op) code or -1)."""
        from ...units import seconds_to_cycles

        prep = eng.prep
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

    def grade(self, eng, kinds, scope, results):
        prep = eng.prep
        for kind in kinds:
            res = results.setdefault(kind.text, KindResult(kind))
            det, canon, maxk = self.drf_first(eng, kind)
            res.instances += det.size
            res.detected += int(det.sum())
            if not det.all():
                res.missed_structures.add("single")
                if eng.examples:
                    miss = np.nonzero(~det.ravel())[0][:eng.examples]
                    eng.take(res, [Instance(kind, (int(c),)) for c in miss])
            for code in np.unique(canon[det]):
                res.merge_element(prep.sched.segments[int(code) // maxk].element)
        return results

    def verdicts(self, eng, instances):
        prep = eng.prep
        cache = {}
        out = []
        for inst in instances:
            if inst.kind.text not in cache:
                cache[inst.kind.text] = self.drf_first(eng, inst.kind)
            det, canon, maxk = cache[inst.kind.text]
            w, b = divmod(inst.sites[0], prep.B)
            if det[w, b]:
                code = int(canon[w, b])
                out.append((True, eng.detection(code // maxk, code % maxk, w)))
            else:
                out.append((False, None))
        return out


FAST = RetentionFast()
