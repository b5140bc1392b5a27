"""The behaviour of one faulty memory under a march test — the semantics every engine uses.

Semantics (the standard ones; see DEVELOPERS.md):
* Initial contents are unknown.  Cells a fault involves are tried with every initial value;
  other cells start unknown (``X``).  A fault is detected only if it is detected for every
  initial value of its cells and, independently for each ⇕ element, for both orders.
* A read detects when it returns, in any bit, a known value other than the expected one.
  Reads before the test's first write expect nothing (the cell was never written) and never
  detect.
* A primitive ``<S/F/R>`` fires when its sensitising operation is applied while its state
  conditions hold (conditions are judged on the values before the operation); state-sensitised
  primitives act at the start and after every operation.  Inside one word a write is applied
  to all bits at once; a fault's effect overrides what the write put in the victim.
* SOF: writes do not reach the cell; a read returns, for that bit, the sense amplifier's
  previous value.  The sense amplifier holds the last value read, per bit (unknown at first).
* AF: see :mod:`marchkit.faults.primitives`; a read of several cells returns their AND; a read
  of an address that selects no cell returns a fixed value, the same in every bit, unknown
  which (so detection must hold for both).
* Dynamic primitives ``<x O1 O2/F/R>``, ``<a; x O1 O2/F/R>``, ``<x O1 O2; y/F/->``: O1 and
  O2 are applied back to back to one cell (the victim, or for dCFds the aggressor) — O1 is
  the operation just before O2 in the whole run, on the same word, with no pause between:
  adjacent operations of one visit, or the last operation of an element and the first of
  the next when both address the same word (⇑ then ⇓ meet at the last address, ⇓ then ⇑ at
  the first), also across background runs.  The cell holds x before O1 and holds the
  fault-free value after O1 (the value O2's notation names) before O2: a cell already upset
  by another fault does not see the sequence the primitive describes.  Other conditions
  (aggressor state a, victim state y) are judged just before O2.  O2 then leaves F in the
  victim (and a victim read O2 returns R).
* Group faults (LF3, NPSF; :mod:`marchkit.faults.group`): each ``GRule`` fires when its
  operation is applied to its role's cell while every role it names holds the required value
  (judged before the operation); the victim then holds ``f`` (overriding a simultaneous
  write) and a victim read returns ``r``.  State rules act at the start and after every
  operation.  Roles cut off by the array's edge (NPSF) impose nothing.
* DRF: when a cell holding the lost value is accessed (read or write of its word) at least τ
  after its last access (or the start), it has flipped before the operation acts.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

X = 2  # unknown value


def and3(a: int, b: int) -> int:
    if a == 0 or b == 0:
        return 0
    if a == 1 and b == 1:
        return 1
    return X


@dataclass(frozen=True)
class Event:
    """Where a read detected: segment index in the schedule, word, op index in the element."""

    seg: int
    word: int
    op: int
    seq: int        # position of the event in the run (for ordering)


def determined_reads(sched) -> set[tuple[int, int]]:
    """(segment index, op index) of reads that come after the test's first write."""
    out = set()
    seen_write = False
    for si, seg in enumerate(sched.segments):
        for k, kind in enumerate(seg.op_kinds):
            if kind == "w":
                seen_write = True
            elif seen_write:
                out.add((si, k))
    return out


class Run:
    """One scenario of one fault instance: fixed initial values and ⇕ choices."""

    def __init__(self, ctx, inst, inits, any_up):
        self.ctx = ctx
        self.inst = inst
        self.kind = inst.kind
        self.any_up = any_up
        bits = ctx.bits
        self.vals = {w: [X] * bits for w in ctx.words_up}
        self.sa = [X] * bits
        fam = self.kind.family
        if fam in ("rules", "drf"):
            self.cells = [divmod(c, bits) for c in inst.sites]
            for (w, b), v in zip(self.cells, inits):
                self.vals[w][b] = v
        if fam == "drf":
            self.last = 0
            self.tau = ctx.tau_cycles(self.kind.tau)
        if fam == "af":
            a = inst.sites[0]
            b = inst.sites[1] if len(inst.sites) > 1 else None
            self.dec = {}
            if self.kind.af == "none":
                self.dec[a] = []
                self.floating = inits[0]
            elif self.kind.af == "alias":
                self.dec[b] = [a]
            elif self.kind.af == "multi":
                self.dec[a] = [a, b]
            else:
                self.dec[a] = [a, b]
                self.dec[b] = [a, b]
        if fam == "sof":
            self.sof = divmod(inst.sites[0], bits)
        if fam == "group":
            # one cell per role, None where an NPSF neighbourhood is cut by the array's edge
            self.gcells = [divmod(c, bits) if c >= 0 else None for c in inst.sites]
            for c, v in zip(self.gcells, inits):
                if c is not None:
                    self.vals[c[0]][c[1]] = v
            self.apply_gstates()
        self.prev = None
        if fam == "rules":
            self.apply_states()

    # -- rules (primitives and classic models) --------------------------------------
    def cell(self, i):
        w, b = self.cells[i]
        return self.vals[w][b]

    def apply_states(self):
        for rule in self.kind.rules:
            if rule.vic.op is not None or (rule.agg is not None and rule.agg.op is not None):
                continue
            vi = len(self.cells) - 1
            if self.cell(vi) != rule.vic.pre:
                continue
            if rule.agg is not None and self.cell(0) != rule.agg.pre:
                continue
            w, b = self.cells[vi]
            self.vals[w][b] = rule.f

    def access_rules(self, w, kind, data):
        vi = len(self.cells) - 1
        vw, vb = self.cells[vi]
        pre_v = self.vals[vw][vb]
        aw = ab = pre_a = None
        if vi == 1:
            aw, ab = self.cells[0]
            pre_a = self.vals[aw][ab]
        pre = {c: self.vals[c[0]][c[1]] for c in self.cells}
        out = None
        if kind == "r":
            out = list(self.vals[w])
        post_v = None
        prev = self.prev
        for rule in self.kind.rules:
            ca, cv = rule.agg, rule.vic
            if rule.then is not None:
                # dynamic: this operation is the second one; the operation just before it in
                # time (``prev``: the previous operation of the whole run, nothing between)
                # was the first one, on the same word, the cell holding its x before it
                t = rule.then
                if rule.then_on_agg:            # dCFds: both operations on the aggressor
                    cw, cb, first, pre_c = aw, ab, ca, pre_a
                else:
                    cw, cb, first, pre_c = vw, vb, cv, pre_v
                if (w != cw or prev is None or prev[0] != cw or prev[1] != first.op
                        or prev[3].get((cw, cb)) != first.pre
                        or (first.op == "w" and prev[2][cb] != first.val)
                        or kind != t.op or pre_c != t.pre or (kind == "w" and data[cb] != t.val)):
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
        # what a dynamic primitive's second operation looks back at: this operation's word,
        # kind, data and the values the fault's cells held before it
        self.prev = (w, kind, data, pre)
        if kind == "w":
            self.vals[w] = list(data)
        if post_v is not None:
            self.vals[vw][vb] = post_v
        self.apply_states()
        return out

    # -- group rules (LF3, NPSF): conditions on any roles, one operation -----------------
    def _gholds(self, g, pre) -> bool:
        return all(need is None or self.gcells[i] is None or pre[i] == need
                   for i, need in enumerate(g.need))

    def apply_gstates(self):
        for g in self.kind.grules:
            if g.op is not None:
                continue
            pre = [self.vals[c[0]][c[1]] if c is not None else None for c in self.gcells]
            if self._gholds(g, pre):
                vw, vb = self.gcells[g.victim]
                self.vals[vw][vb] = g.f

    def access_group(self, w, kind, data):
        cells = self.gcells
        pre = [self.vals[c[0]][c[1]] if c is not None else None for c in cells]
        out = list(self.vals[w]) if kind == "r" else None
        post = []
        for g in self.kind.grules:
            if g.op is None:
                continue
            role, op, val = g.op
            c = cells[role]
            if c is None or c[0] != w or op != kind or (kind == "w" and data[c[1]] != val):
                continue
            if not self._gholds(g, pre):
                continue
            post.append((cells[g.victim], g.f))
            if kind == "r" and role == g.victim:
                out[cells[g.victim][1]] = g.r
        if kind == "w":
            self.vals[w] = list(data)
        for (vw, vb), f in post:
            self.vals[vw][vb] = f
        self.apply_gstates()
        return out

    # -- one operation -----------------------------------------------------------------
    def access(self, w, kind, data, t):
        fam = self.kind.family
        if fam == "rules":
            out = self.access_rules(w, kind, data)
        elif fam == "group":
            out = self.access_group(w, kind, data)
        elif fam == "af":
            targets = self.dec.get(w, [w])
            if kind == "w":
                for p in targets:
                    self.vals[p] = list(data)
                return None
            if not targets:
                out = [self.floating] * self.ctx.bits
            else:
                out = list(self.vals[targets[0]])
                for p in targets[1:]:
                    out = [and3(x, y) for x, y in zip(out, self.vals[p])]
        elif fam == "sof":
            cw, cb = self.sof
            if kind == "w":
                keep = self.vals[w][cb]
                self.vals[w] = list(data)
                if w == cw:
                    self.vals[w][cb] = keep
                return None
            out = list(self.vals[w])
            if w == cw:
                out[cb] = self.sa[cb]
        else:  # drf
            (cw, cb), = self.cells
            if w == cw:
                if self.vals[cw][cb] == self.kind.drf_value and t - self.last >= self.tau:
                    self.vals[cw][cb] = 1 - self.kind.drf_value
                self.last = t
            if kind == "w":
                self.vals[w] = list(data)
                return None
            out = list(self.vals[w])
        if kind == "r":
            self.sa = list(out)
        return out

    def run(self):
        """First detecting :class:`Event`, or None."""
        ctx = self.ctx
        seq = 0
        for si, seg in enumerate(ctx.sched.segments):
            if seg.element is None:
                self.prev = None          # a pause: nothing is back to back across it
                continue
            up = seg.order == "up" or (seg.order == "any" and self.any_up[ctx.any_index[seg.element]])
            words = ctx.words_up if up else ctx.words_down
            bg = ctx.bg[seg.run]
            n1 = ctx.n - 1
            for w in words:
                pos = ctx.rank[w] if up else n1 - ctx.rank[w]
                base = seg.start + pos * seg.per_address
                bgw = bg[w]
                for k, kind in enumerate(seg.op_kinds):
                    v = seg.op_values[k]
                    data = [x ^ v for x in bgw]
                    out = self.access(w, kind, data, base + seg.op_offsets[k])
                    seq += 1
                    if out is not None and (si, k) in ctx.determined:
                        for o, e in zip(out, data):
                            if o != X and o != e:
                                return Event(si, w, k, seq)
        return None


class Context:
    """What every scenario of a test on a (possibly projected) memory shares."""

    def __init__(self, test, mem, sched, bg, words_up, rank, n):
        self.test = test
        self.mem = mem
        self.sched = sched
        self.bits = mem.bits
        self.bg = bg                 # bg[run][word] -> list of bits
        self.words_up = list(words_up)
        self.words_down = self.words_up[::-1]
        self.rank = rank             # word -> position in the full ⇑ order
        self.n = n
        self.determined = determined_reads(sched)
        any_elems = [i for i, e in enumerate(test.elements) if e.order == "any"]
        self.any_index = {e: j for j, e in enumerate(any_elems)}
        self.n_any = len(any_elems)

    def tau_cycles(self, tau) -> int:
        from ..model import seconds_to_cycles

        return seconds_to_cycles(tau, self.mem.clock_hz)


def n_init_cells(kind) -> int:
    if kind.family == "af":
        return 1 if kind.af == "none" else 0   # the floating read value
    return kind.arity if kind.family in ("rules", "drf", "group") else 0


def verdict(ctx, inst):
    """(detected, first detecting Event in the canonical scenario) for one instance.

    The canonical scenario runs every ⇕ element as ⇑ — the order the exported stimulus
    uses; its event is the latest first detection over the initial values.
    """
    n_init = n_init_cells(inst.kind)
    canonical = None
    for any_up in itertools.product((True, False), repeat=ctx.n_any):
        is_canon = all(any_up)
        for inits in itertools.product((0, 1), repeat=n_init):
            ev = Run(ctx, inst, inits, any_up).run()
            if ev is None:
                return False, None
            if is_canon and (canonical is None or ev.seq > canonical.seq):
                canonical = ev
    return True, canonical
