"""Fast path of the address-decoder family: keyed on the two words' data in every run and
their order; each key simulated by the oracle on the projected words."""

from __future__ import annotations

import numpy as np

from ...faults import Instance
from ..setup import dense_codes
from ..core import verdict
from ..results import KindResult
from .base import FastPath
from .rules import AFIRST, VFIRST


class DecoderFast(FastPath):
    """Keys: a word's key ``wk`` (n,) int64 numbers its data in every run (``prep.word_keys()``,
    with a representative word (U,) int64 per key); pair counts per (structure, key a, key b)
    are (U, U) int64 tables from the shared set-up.  One oracle run per key and kind."""

    def _af_verdict(self, eng, kind, a, b=None):
        inst = Instance(kind, (a,) if b is None else (a, b))
        ctx = eng.projected_context(inst.sites)
        return verdict(ctx, inst)

    def grade(self, eng, kinds, scope, results):
        prep = eng.prep
        wk, rep = eng.prep.word_keys()
        U = rep.size
        cnt = prep.setup.word_pair_counts(scope) if any(k.arity == 2 for k in kinds) else None
        for kind in kinds:
            res = results.setdefault(kind.text, KindResult(kind))
            if kind.arity == 1:
                counts = np.bincount(wk, minlength=U)
                for u in np.nonzero(counts)[0]:
                    det, ev = self._af_verdict(eng, kind, int(rep[u]))
                    res.instances += int(counts[u])
                    if det:
                        res.detected += int(counts[u])
                        res.merge_element(prep.sched.segments[ev.seg].element)
                    else:
                        res.missed_structures.add("single")
                        if eng.examples:
                            ws = np.nonzero(wk == u)[0][:eng.examples]
                            eng.take(res, [Instance(kind, (int(w),)) for w in ws])
                continue
            reps = None if scope.is_all else self._scope_reps(eng, scope, cnt)
            for st, c in cnt.items():
                for ua, ub in zip(*np.nonzero(c)):
                    n_ = int(c[ua, ub])
                    if reps is None:
                        wa, wb = self._af_pair_rep(eng, ua, ub, st)
                    else:
                        wa, wb = reps[(st, int(ua), int(ub))]
                    det, ev = self._af_verdict(eng, kind, wa, wb)
                    res.instances += n_
                    if det:
                        res.detected += n_
                        res.merge_element(prep.sched.segments[ev.seg].element)
                    else:
                        res.missed_structures.add("a first" if st == AFIRST else "b first")
                        eng.take(res, [Instance(kind, (wa, wb))])
        return results

    def _scope_reps(self, eng, scope, cnt):
        """{(structure, key a, key b): a first word pair of ``scope`` with those keys}."""
        prep = eng.prep
        wk, rep = prep.word_keys()
        U = rep.size
        want = {(st, int(ua), int(ub)) for st, c in cnt.items() for ua, ub in zip(*np.nonzero(c))}
        out = {}
        for a, b in prep.setup.word_pair_chunks(scope):
            st = np.where(prep.rank[a] < prep.rank[b], AFIRST, VFIRST)
            code = (st * U + wk[a]) * U + wk[b]
            _, first = dense_codes(code)
            for i in first:
                key = (int(st[i]), int(wk[a[i]]), int(wk[b[i]]))
                if key in want and key not in out:
                    out[key] = (int(a[i]), int(b[i]))
            if len(out) == len(want):
                break
        return out

    def _af_pair_rep(self, eng, ua, ub, st):
        """Two distinct words with keys (ua, ub), a before b in ⇑ iff st == AFIRST."""
        prep = eng.prep
        wk, _ = prep.word_keys()
        A = np.nonzero(wk == ua)[0]
        Bw = np.nonzero(wk == ub)[0]
        ra, rb = prep.rank[A], prep.rank[Bw]
        if st == AFIRST:
            i = int(np.argmin(ra))
            cand = Bw[rb > ra[i]]
            return int(A[i]), int(cand[0])
        i = int(np.argmax(ra))
        cand = Bw[rb < ra[i]]
        return int(A[i]), int(cand[0])

    def prepare(self, eng, kinds, scope):
        eng.prep.word_keys()
        if any(k.arity == 2 for k in kinds):
            eng.prep.setup.word_pair_counts(scope)

    def verdicts(self, eng, instances):
        out = []
        for inst in instances:
            d, ev = self._af_verdict(eng, inst.kind, *inst.sites)
            out.append((d, eng.detection(ev.seg, ev.op, ev.word) if d else None))
        return out


FAST = DecoderFast()
