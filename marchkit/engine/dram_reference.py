"""Literal oracle for the DRAM families (retention with refresh, disturb): one victim cell,
every operation of the test in time order, every initial value and ⇕ choice.

Semantics (see :mod:`marchkit.faults.dram` and :mod:`marchkit.model.dram`):

* an operation at cycle t on word w acts on row r = physical(w) // mux;
* refresh slots of a row at cycle s happen before an operation at the same cycle;
* retention: the victim's restore events are the accesses of its row (of its own word on a
  memory without refresh) and the refreshes of its row; when a stretch of ≥ τ between two
  consecutive restore events ends while the cell holds the value it loses, the cell flips;
* disturb: an access activates its row (closed page: always; open page: when another row is
  open; refresh is hidden and leaves the open row open); an activation of the victim's
  row and a refresh of it reset the two neighbour counts; an activation of row rv ± 1 adds
  one to that side's count, and when a count reaches the threshold a victim holding the
  vulnerable value flips.

Operations run one by one.  A run of more than :data:`LITERAL` copies of one operation is
taken in closed form, written independently of the fast path: the first copies literally
(after them the victim's state is a fixed point, since every copy sees the same state and
the same gap), and for a neighbour row's activations an explicit walk over the refresh slots
of the two rows inside the run, counting the copies between slots arithmetically.
"""

from __future__ import annotations

import itertools

from .reference import Detection

LITERAL = 64


class _Ctx:
    def __init__(self, test, mem, sched):
        from ..model import address_order, background_stack, ranks
        from ..model.dram import RefreshPlan

        self.test, self.mem, self.sched = test, mem, sched
        self.order = [int(w) for w in address_order(mem)]
        self.rank = {w: i for i, w in enumerate(self.order)}
        self.bg = background_stack(mem)
        self.row = [int(r) for r in mem.physical_word(list(range(mem.words))) // mem.mux]
        self.plan = RefreshPlan(mem, sched)
        self.determined = set()
        seen_write = False
        for si, seg in enumerate(sched.segments):
            for r in seg.runs:
                if r.kind == "w":
                    seen_write = True
                elif seen_write:
                    self.determined.add((si, r.first))
        any_elems = [i for i, e in enumerate(test.elements) if e.order == "any"]
        self.any_index = {e: j for j, e in enumerate(any_elems)}
        self.n_any = len(any_elems)


class _Victim:
    """One scenario of one instance."""

    def __init__(self, ctx, kind, cell, init, any_up):
        self.ctx = ctx
        self.kind = kind
        self.x = kind.drf_value
        self.word, self.bit = divmod(cell, ctx.mem.bits)
        self.vrow = ctx.row[self.word]
        self.val = init
        self.any_up = any_up
        self.now = -1                  # refresh slots up to here are processed
        self.disturb = kind.family == "disturb"
        if self.disturb:
            self.n = kind.threshold
            self.cnt = {-1: 0, 1: 0}
            self.open_row = None
            self.row_access = {}       # row -> cycle of its last access (kept for audits)
        else:
            self.tau = ctx.tau
            self.last = 0              # the start counts as a restore
            self.row_mode = ctx.mem.dram

    # ---- refresh of the victim's row up to cycle t (inclusive) -------------------
    def _refresh_until(self, t):
        if t <= self.now:
            return
        for s in self.ctx.plan.slots(self.vrow, self.now + 1, t + 1):
            if self.disturb:
                self.cnt = {-1: 0, 1: 0}
            else:
                self._restore(s)
        self.now = t

    def _restore(self, t):
        if self.val == self.x and t - self.last >= self.tau:
            self.val = 1 - self.x
        self.last = t

    def _flip_on(self, side, added):
        self.cnt[side] += added
        if self.cnt[side] >= self.n and self.val == self.x:
            self.val = 1 - self.x

    def _activates(self, r, t):
        """Closed page: every access activates; open page: only when another row (or none,
        at the start) is open.  Refresh is hidden: it does not close the open row."""
        return self.ctx.mem.page == "closed" or self.open_row != r

    # ---- one operation ---------------------------------------------------------------
    def op(self, w, r, t, kind, data):
        """Apply one access; return the victim bit a read of the victim word returns, else None."""
        self._refresh_until(t)
        if self.disturb:
            act = self._activates(r, t)
            self.open_row = r
            self.row_access[r] = t
            if act:
                if r == self.vrow:
                    self.cnt = {-1: 0, 1: 0}
                elif abs(r - self.vrow) == 1:
                    self._flip_on(r - self.vrow, 1)
        else:
            touches = (r == self.vrow) if self.row_mode else (w == self.word)
            if touches:
                self._restore(t)
        if w != self.word:
            return None
        if kind == "w":
            self.val = data
            return None
        return self.val

    def hammer_neighbour(self, w, r, t0, each, k):
        """k > LITERAL copies of an access to row r = vrow ± 1 (not the victim's word)."""
        side = r - self.vrow
        plan = self.ctx.plan
        tl = t0 + (k - 1) * each
        # activations: closed page every copy; open page the first (by the rule) and the
        # first copy at or after each refresh of row r inside the run
        if self.ctx.mem.page == "closed":
            acts = None
        else:
            acts = [t0] if self._activates(r, t0) else []
        resets = plan.slots(self.vrow, self.now + 1, tl + 1)
        start = self.now + 1          # refreshes of the victim's row before t0 come first
        for b in resets + [tl + 1]:
            # activations in [start, b)
            if acts is None:
                lo = max(0, -((t0 - start) // each))        # first copy at or after start
                hi = min(k - 1, (b - 1 - t0) // each)       # last copy before b
                n = max(0, hi - lo + 1)
            else:
                n = sum(1 for tt in acts if start <= tt < b)
            if n:
                self._flip_on(side, n)
            if b <= tl:
                self.cnt = {-1: 0, 1: 0}
            start = b
        self.now = tl
        self.open_row = r
        self.row_access[r] = tl


def _scenario(ctx, kind, cell, init, any_up):
    """First detection (segment, word, op index, cycle) or None."""
    v = _Victim(ctx, kind, cell, init, any_up)
    mem = ctx.mem
    n = mem.words
    for si, seg in enumerate(ctx.sched.segments):
        if seg.element is None:
            continue
        up = seg.order == "up" or (seg.order == "any" and any_up[ctx.any_index[seg.element]])
        words = ctx.order if up else ctx.order[::-1]
        bg = ctx.bg[seg.run]
        for pos, w in enumerate(words):
            r = ctx.row[w]
            base = seg.start + pos * seg.per_address
            for run in seg.runs:
                data = int(bg[w, v.bit]) ^ run.value
                t0 = base + run.offset
                det = (si, run.first) in ctx.determined
                k = run.repeat
                lit = k if k <= LITERAL else 3
                for i in range(lit):
                    t = t0 + i * run.each
                    out = v.op(w, r, t, run.kind, data)
                    if out is not None and det and out != data:
                        return si, w, run.first + i, t
                if k > lit:
                    tl = t0 + (k - 1) * run.each
                    if v.disturb and abs(r - v.vrow) == 1 and w != v.word:
                        v.hammer_neighbour(w, r, t0 + lit * run.each, run.each, k - lit)
                    elif v.disturb:
                        # other rows: only the open row and the refresh slots move on; the
                        # victim's own row: every copy resets the counts, state is fixed
                        v._refresh_until(tl)
                        if v._activates(r, tl) and r == v.vrow:
                            v.cnt = {-1: 0, 1: 0}
                        v.open_row = r
                        v.row_access[r] = tl
                    else:
                        # retention: copies 2.. see the same state and the same gap (`each`),
                        # so the state after the literal copies is fixed; refreshes inside
                        # a run of restores change nothing
                        touches = (r == v.vrow) if v.row_mode else (w == v.word)
                        if touches:
                            v.now = max(v.now, tl)
                            v.last = tl
                        else:
                            v._refresh_until(tl)
    return None


def dram_verdict(ctx, kind, cell):
    """(detected, canonical first detection or None) for one instance."""
    canonical = None
    for any_up in itertools.product((True, False), repeat=ctx.n_any):
        for init in (0, 1):
            ev = _scenario(ctx, kind, cell, init, any_up)
            if ev is None:
                return False, None
            if all(any_up) and (canonical is None or (ev[3], ev[2]) > (canonical[3], canonical[2])):
                canonical = ev
    return True, canonical


def dram_reference_verdicts(test, mem, instances, sched):
    """(detected, Detection | None) per instance of the retention / disturb families."""
    from ..model import seconds_to_cycles

    ctx = _Ctx(test, mem, sched)
    out = []
    for inst in instances:
        kind = inst.kind
        ctx.tau = seconds_to_cycles(kind.tau, mem.clock_hz) if kind.tau is not None else None
        det, ev = dram_verdict(ctx, kind, inst.sites[0])
        if det:
            si, w, op, cycle = ev
            seg = sched.segments[si]
            out.append((True, Detection(seg.run, seg.element, op, w, cycle)))
        else:
            out.append((False, None))
    return out
