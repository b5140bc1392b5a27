"""Oracle of the primitives family: a set of fault primitives ``<S/F/R>``, ``<Sa;Sv/F/R>``
and dynamic ``<x O1 O2/F/R>`` acting together on one or two cells.

A primitive fires when its sensitising operation is applied while its state conditions hold
(judged on the values before the operation); state-sensitised primitives act at the start and
after every operation.  Inside one word a write is applied to all bits at once; a fault's
effect overrides what the write put in the victim.  A dynamic primitive's O1 and O2 are
adjacent operations of one visit of the victim's address.
"""

from __future__ import annotations

from ..core import OracleFault


class Fault(OracleFault):
    def __init__(self, ctx, inst, inits, run):
        bits = ctx.bits
        self.rules = inst.kind.rules
        self.cells = [divmod(c, bits) for c in inst.sites]
        for (w, b), v in zip(self.cells, inits):
            run.vals[w][b] = v
        self.prev = None
        self.apply_states(run)

    def visit(self, run, w):
        self.prev = None

    def cell(self, run, i):
        w, b = self.cells[i]
        return run.vals[w][b]

    def apply_states(self, run):
        for rule in self.rules:
            if rule.vic.op is not None or (rule.agg is not None and rule.agg.op is not None):
                continue
            vi = len(self.cells) - 1
            if self.cell(run, vi) != rule.vic.pre:
                continue
            if rule.agg is not None and self.cell(run, 0) != rule.agg.pre:
                continue
            w, b = self.cells[vi]
            run.vals[w][b] = rule.f

    def access(self, run, w, kind, data, t):
        vals = run.vals
        vi = len(self.cells) - 1
        vw, vb = self.cells[vi]
        pre_v = vals[vw][vb]
        if vi == 1:
            aw, ab = self.cells[0]
            pre_a = vals[aw][ab]
        out = None
        if kind == "r":
            out = list(vals[w])
        post_v = None
        prev = self.prev
        for rule in self.rules:
            ca, cv = rule.agg, rule.vic
            if rule.then is not None:
                # dynamic: the previous operation of this visit was the first one, on the
                # cell holding cv.pre, and this operation is the second one
                t2 = rule.then
                if (w != vw or prev is None or prev[0] != cv.op or prev[2] != cv.pre
                        or (cv.op == "w" and prev[1] != cv.val)
                        or kind != t2.op or pre_v != t2.pre or (kind == "w" and data[vb] != t2.val)):
                    continue
                post_v = rule.f
                if kind == "r":
                    out[vb] = rule.r
                continue
            if ca is None:
                if cv.op is None or w != vw or cv.op != kind or pre_v != cv.pre:
                    continue
                if kind == "w" and data[vb] != cv.val:
                    continue
                post_v = rule.f
                if kind == "r":
                    out[vb] = rule.r
            elif ca.op is not None:
                if w != aw or ca.op != kind or pre_a != ca.pre or pre_v != cv.pre:
                    continue
                if kind == "w" and data[ab] != ca.val:
                    continue
                post_v = rule.f
            elif cv.op is not None:
                if w != vw or cv.op != kind or pre_v != cv.pre or pre_a != ca.pre:
                    continue
                if kind == "w" and data[vb] != cv.val:
                    continue
                post_v = rule.f
                if kind == "r":
                    out[vb] = rule.r
        if w == vw:   # what a dynamic primitive's second operation looks back at
            self.prev = (kind, data[vb] if kind == "w" else None, pre_v)
        if kind == "w":
            vals[w] = list(data)
        if post_v is not None:
            vals[vw][vb] = post_v
        self.apply_states(run)
        return out
