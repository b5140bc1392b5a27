"""Fast path of the stuck-open family: the sense amplifier's value comes from the word before
(or after) in the order, or from the first/last word across elements: keyed on those words'
data and the cell's place; each key simulated by the oracle on the projected words."""

from __future__ import annotations

import numpy as np

from ...faults import Instance
from ..core import verdict
from ..results import KindResult
from .base import FastPath


class StuckOpenFast(FastPath):
    """Keys from ``prep.setup.sof_keys()``: count (U,) int64 and representative cell (U,)
    int64 per key; one oracle run on the projected words per key and kind."""

    def prepare(self, eng, kinds, scope):
        eng.prep.setup.sof_keys()

    def _sof_verdict(self, eng, kind, cell):
        prep = eng.prep
        w = cell // prep.B
        r = int(prep.rank[w])
        ctxw = {int(prep.order[0]), int(prep.order[-1]), w}
        if r > 0:
            ctxw.add(int(prep.order[r - 1]))
        if r < prep.n - 1:
            ctxw.add(int(prep.order[r + 1]))
        ctx = eng.projected_context(ctxw)
        return verdict(ctx, Instance(kind, (int(cell),)))

    def grade(self, eng, kinds, scope, results):
        prep = eng.prep
        counts, first_idx = prep.setup.sof_keys()
        for kind in kinds:
            res = results.setdefault(kind.text, KindResult(kind))
            for i, c in zip(first_idx, counts):
                det, ev = self._sof_verdict(eng, kind, int(i))
                res.instances += int(c)
                if det:
                    res.detected += int(c)
                    res.merge_element(prep.sched.segments[ev.seg].element)
                else:
                    res.missed_structures.add("single")
                    eng.take(res, [Instance(kind, (int(i),))])
        return results

    def verdicts(self, eng, instances):
        out = []
        for inst in instances:
            d, ev = self._sof_verdict(eng, inst.kind, inst.sites[0])
            out.append((d, eng.detection(ev.seg, ev.op, ev.word) if d else None))
        return out


FAST = StuckOpenFast()
