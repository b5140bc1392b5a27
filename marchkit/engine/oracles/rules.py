"""Oracle of the primitives family: a set of fault primitives ``<S/F/R>``, ``<Sa;Sv/F/R>``
and dynamic ``<x O1 O2/F/R>`` acting together on one or two cells.

A primitive fires when its sensitising operation is applied while its state conditions hold
(judged on the values before the operation); state-sensitised primitives act at the start and
after every operation.  Inside one word a write is applied to all bits at once; a fault's
effect overrides what the write put in the victim.

A dynamic primitive's O1 and O2 are back to back on one cell (the victim; for dCFds the
aggressor): O1 is the operation just before O2 in the whole run, on the same word, ending in
the cycle O2 starts (no pause, no other operation between) — adjacent operations of one
visit, or the last operation of an element and the first of the next on the same word (⇑
then ⇓ meet at the last address, ⇓ then ⇑ at the first; also from one background run to the
next).  The cell holds x before O1 and, before O2, the value O2's notation names (the
fault-free value after O1): a cell already upset by another fault does not see the sequence
the primitive describes.  The other cell's condition (aggressor state a, victim state y) is
judged just before O2.  This oracle must run on the whole array (it looks at the previous
operation of the run).
"""

from __future__ import annotations

from ..core import OracleFault


class Fault(OracleFault):
    mutable = ("prev",)

    def __init__(self, ctx, inst, inits, run):
        bits = ctx.bits
        self.cycles = {"r": ctx.mem.read_cycles, "w": ctx.mem.write_cycles}
        self.rules = inst.kind.rules
        self.cells = [divmod(c, bits) for c in inst.sites]
        for (w, b), v in zip(self.cells, inits):
            run.vals[w][b] = v
        self.prev = None
        self.apply_states(run)

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
        aw = ab = pre_a = None
        if vi == 1:
            aw, ab = self.cells[0]
            pre_a = vals[aw][ab]
        pre = tuple(vals[c[0]][c[1]] for c in self.cells)
        out = None
        if kind == "r":
            out = list(vals[w])
        post_v = None
        prev = self.prev
        for rule in self.rules:
            ca, cv = rule.agg, rule.vic
            if rule.then is not None:
                # dynamic: this operation is O2; the previous operation of the run (``prev``:
                # word, kind, data, the fault's cells before it, the cycle it ended) was O1
                t2 = rule.then
                if rule.then_on_agg:            # dCFds: both operations on the aggressor
                    ci, cw, cb, o1, pre_c = 0, aw, ab, ca, pre_a
                else:
                    ci, cw, cb, o1, pre_c = vi, vw, vb, cv, pre_v
                if (w != cw or prev is None or prev[0] != cw or prev[4] != t or prev[1] != o1.op
                        or prev[3][ci] != o1.pre or (o1.op == "w" and prev[2][cb] != o1.val)
                        or kind != t2.op or pre_c != t2.pre or (kind == "w" and data[cb] != t2.val)):
                    continue
                if rule.then_on_agg:
                    if pre_v != cv.pre:
                        continue
                elif ca is not None and pre_a != ca.pre:
                    continue
                post_v = rule.f
                if kind == "r" and not rule.then_on_agg:
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
        # what a dynamic primitive's O2 looks back at: this operation and when it ends
        self.prev = (w, kind, tuple(data), pre, t + self.cycles[kind])
        if kind == "w":
            vals[w] = list(data)
        if post_v is not None:
            vals[vw][vb] = post_v
        self.apply_states(run)
        return out
