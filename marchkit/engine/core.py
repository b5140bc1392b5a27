"""The behaviour of one faulty memory under a march test — the semantics every engine uses.

Semantics (the standard ones; see DEVELOPERS.md):
* Initial contents are unknown.  Cells a fault involves are tried with every initial value;
  other cells start unknown (``X``).  A fault is detected only if it is detected for every
  initial value of its cells and, independently for each ⇕ element, for both orders.
* A read detects when it returns, in any bit, a known value other than the expected one.
  Reads before the test's first write expect nothing (the cell was never written) and never
  detect.
* What a fault does is its family's *oracle* (``marchkit/engine/oracles/<family>.py``): a
  :class:`OracleFault` that takes part in every operation of the run.

**⇕ elements without 2^k scenarios.**  "Detected for every choice of orders" is computed by
carrying, from element to element, the set of distinct states (memory contents, sense
amplifier, the fault's own state) that are reachable with no detection yet: a ⇕ element runs
every state of the set both ways; a state whose run detects is dropped; equal states merge.
The fault is detected iff the set is empty at the end.  This is exactly the enumeration of
all 2^k choices (every path reaches its end state through the set), at a cost linear in the
number of elements times the size of the set, which for a march test stays small (its
writes make the contents of every word known).

A ⇕ element runs the same way in every background run (one choice per element), so with
several runs the choices of ⇕ elements that come again in a later run are part of the state
until their last run; with one run (the default) nothing is carried but contents.  Above
:data:`MAX_STATES` states the reference refuses (:class:`~marchkit.errors.EngineLimitError`)
rather than run away.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

X = 2  # unknown value
MAX_STATES = 4096   # reachable undetected states carried across a ⇕ element, per instance


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
    from ..model import compared_reads

    return compared_reads(sched)


class OracleFault:
    """One fault instance's behaviour in one scenario (a family's oracle subclasses this).

    ``__init__(ctx, inst, inits, run)`` places the fault (``inits``: the initial values it
    tries, as many as ``Family.init_values(kind)``); it may set ``run.vals`` of its cells.
    ``access(run, w, kind, data, t)`` performs one operation — ``kind`` ``"r"``/``"w"`` on word
    ``w`` with fault-free data ``data`` (list of bits) at cycle ``t`` — updating
    ``run.vals`` and returning the bits a read returns (None for a write).  ``visit(run, w)``
    is called when a new visit of word ``w`` starts.  ``mutable`` names the attributes that
    change while running (copied per branch, part of the state that ⇕ sets compare).
    """

    mutable: tuple[str, ...] = ()

    def visit(self, run, w):
        pass

    def activate(self, run, row, t):
        """A hammer item activates physical row ``row`` at cycle ``t`` (no cell is read or
        written); only the DRAM families react."""

    def access(self, run, w, kind, data, t):  # pragma: no cover - every oracle overrides it
        raise NotImplementedError

    def state(self) -> tuple:
        return tuple(_frozen(getattr(self, n)) for n in self.mutable)

    def copy(self) -> "OracleFault":
        import copy

        new = copy.copy(self)
        for n in self.mutable:
            v = getattr(self, n)
            if isinstance(v, (list, dict, set)):
                setattr(new, n, copy.deepcopy(v))
        return new


def _frozen(v):
    if isinstance(v, list):
        return tuple(_frozen(x) for x in v)
    if isinstance(v, dict):
        return tuple(sorted((k, _frozen(x)) for k, x in v.items()))
    if isinstance(v, set):
        return tuple(sorted(v))
    return v


class Run:
    """One scenario of one fault instance: fixed initial values; orders chosen per element."""

    def __init__(self, ctx, inst, inits, _copy=False):
        if _copy:
            return
        from .registry import oracle

        self.ctx = ctx
        self.inst = inst
        self.kind = inst.kind
        bits = ctx.bits
        self.vals = {w: [X] * bits for w in ctx.words_up}
        self.sa = [X] * bits
        self.seq = 0
        self.choices = ()                 # (element, up) of ⇕ elements still to come again
        self.fault = oracle(inst.kind).Fault(ctx, inst, inits, self)

    def copy(self) -> "Run":
        new = Run(None, None, None, _copy=True)
        new.ctx, new.inst, new.kind, new.seq = self.ctx, self.inst, self.kind, self.seq
        new.choices = self.choices
        new.vals = {w: list(v) for w, v in self.vals.items()}
        new.sa = list(self.sa)
        new.fault = self.fault.copy()
        return new

    def state(self) -> tuple:
        return (tuple(tuple(v) for v in self.vals.values()), tuple(self.sa), self.fault.state(), self.choices)

    def access(self, w, kind, data, t):
        out = self.fault.access(self, w, kind, data, t)
        if kind == "r":
            self.sa = list(out)
        return out

    def run_segment(self, si, up):
        """Run segment ``si`` in the given order; the first detecting :class:`Event`, or None."""
        ctx = self.ctx
        seg = ctx.sched.segments[si]
        words = ctx.words_up if up else ctx.words_down
        bg = ctx.bg[seg.run]
        n1 = ctx.n - 1
        fault = self.fault
        for w in words:
            fault.visit(self, w)          # a new visit: nothing done to this word just before
            pos = ctx.rank[w] if up else n1 - ctx.rank[w]
            base = seg.start + pos * seg.per_address
            bgw = bg[w]
            for k, kind in enumerate(seg.op_kinds):
                v = seg.op_values[k]
                data = [x ^ v for x in bgw]
                out = self.access(w, kind, data, base + seg.op_offsets[k])
                self.seq += 1
                if out is not None and (si, k) in ctx.determined:
                    for o, e in zip(out, data):
                        if o != X and o != e:
                            return Event(si, w, k, self.seq)
        return None

    def run_hammer(self, si):
        """Segment ``si``, a hammer item: every activation, literally, in time order (the
        item visits the physical rows, ⇑ from row 0)."""
        ctx = self.ctx
        seg = ctx.sched.segments[si]
        h = seg.hammer
        R = ctx.mem.rows
        rc = seg.row_cycle
        fault = self.fault
        t = seg.start
        for r0 in (range(R) if seg.order == "up" else range(R - 1, -1, -1)):
            targets = [(r0 + k) % R for k in h.offsets]
            for _ in range(h.count):
                for r in targets:
                    fault.activate(self, r, t)
                    t += rc

    def run(self, any_up=None):
        """First detecting :class:`Event` of the whole test, or None; ⇕ elements run as ⇑
        unless ``any_up`` (one flag per ⇕ element) says otherwise."""
        ctx = self.ctx
        for si, seg in enumerate(ctx.sched.segments):
            if seg.hammer is not None:
                self.run_hammer(si)
                continue
            if seg.element is None:
                continue
            up = seg.order != "down"
            if seg.order == "any" and any_up is not None:
                up = any_up[ctx.any_index[seg.element]]
            ev = self.run_segment(si, up)
            if ev is not None:
                return ev
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
        from ..units import seconds_to_cycles

        return seconds_to_cycles(tau, self.mem.clock_hz)


def n_init_cells(kind) -> int:
    """Unknown initial values the oracle tries for one instance of ``kind``."""
    from ..faults import family_of

    return family_of(kind).init_values(kind)


def undetected_survives(ctx, inst, max_states=MAX_STATES) -> bool:
    """True if some choice of initial values and ⇕ orders leaves ``inst`` undetected —
    by carrying the set of reachable undetected states (see the module docstring)."""
    from ..errors import EngineLimitError

    states = {}
    for inits in itertools.product((0, 1), repeat=n_init_cells(inst.kind)):
        r = Run(ctx, inst, inits)
        states.setdefault(r.state(), r)
    last_run = ctx.sched.segments[-1].run if ctx.sched.segments else 0
    for si, seg in enumerate(ctx.sched.segments):
        if seg.hammer is not None:
            nxt = {}
            for r in states.values():
                r.run_hammer(si)
                nxt.setdefault(r.state(), r)
            states = nxt
            continue
        if seg.element is None:
            continue
        nxt = {}
        for r in states.values():
            chosen = dict(r.choices)
            if seg.order != "any":
                orders = (seg.order == "up",)
            elif seg.element in chosen:
                orders = (chosen[seg.element],)
            else:
                orders = (True, False)
            for j, up in enumerate(orders):
                rr = r.copy() if j + 1 < len(orders) else r
                if seg.order == "any":
                    c = dict(chosen)
                    if seg.run < last_run:
                        c[seg.element] = up         # the element comes again: keep its order
                    else:
                        c.pop(seg.element, None)    # its last run: forget it
                    rr.choices = tuple(sorted(c.items()))
                if rr.run_segment(si, up) is None:
                    nxt.setdefault(rr.state(), rr)
        if len(nxt) > max_states:
            raise EngineLimitError(
                f"{inst.kind.text}: more than {max_states} distinct undetected memory states after "
                f"element {seg.element + 1}; the reference simulator refuses this test (its ⇕ "
                "elements leave too many contents possible)")
        states = nxt
        if not states:
            return False
    return bool(states)


def verdict(ctx, inst):
    """(detected, first detecting Event in the canonical scenario) for one instance.

    The canonical scenario runs every ⇕ element as ⇑ — the order the exported stimulus
    uses; its event is the latest first detection over the initial values.
    """
    canonical = None
    for inits in itertools.product((0, 1), repeat=n_init_cells(inst.kind)):
        ev = Run(ctx, inst, inits).run()
        if ev is None:
            return False, None
        if canonical is None or ev.seq > canonical.seq:
            canonical = ev
    if ctx.n_any and undetected_survives(ctx, inst):
        return False, None
    return True, canonical


def verdict_enumerated(ctx, inst):
    """The same verdict by trying all 2^k ⇕ choices one by one (exponential; for the
    differential tests of :func:`verdict` on small cases only)."""
    canonical = None
    for any_up in itertools.product((True, False), repeat=ctx.n_any):
        is_canon = all(any_up)
        for inits in itertools.product((0, 1), repeat=n_init_cells(inst.kind)):
            ev = Run(ctx, inst, inits).run(any_up)
            if ev is None:
                return False, None
            if is_canon and (canonical is None or ev.seq > canonical.seq):
                canonical = ev
    return True, canonical
