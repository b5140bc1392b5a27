"""Every failing compare of one fault instance — what a tester's fail log would hold.

The grader needs only the first detection; diagnosis needs the whole syndrome: for one fault
instance and one scenario (the initial values of the cells it involves, and the direction
each ⇕ element runs in), every compared read that returns something other than the expected
word, at the cycle the exported stimulus compares it (``marchkit.export``: the last cycle of
the read, plus the memory's ``read_latency``).

The behaviour is the oracle's (:class:`marchkit.engine.core.Run` with the family's oracle
from the registry, the semantics in DEVELOPERS.md), run on the *projected* words only: the
words the instance involves, plus, for a family whose oracle returns the sense amplifier's
value (stuck-open), the words whose reads can leave a value in it before one of its reads
(the words next to it in the address order and the first and last words of the order).  Every other word is fault free and its reads never fail, so the projection gives
exactly the compares the whole array gives (the tests check this against the full array);
times come from each word's rank in the full order, so a 1 Mbit array costs no more than a
small one.

A compare is reported when some bit is known and wrong (a *definite* fail) or when some bit
is unknown (``X``: a real chip returns one value or the other, so the compare *may* fail).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from .core import X, Context, Run, n_init_cells


@dataclass(frozen=True)
class Compare:
    """One compared read whose result is not certainly the expected word.

    ``expected`` and ``observed`` are words as integers (bit ``i`` of the word is bit ``i``
    of the number); ``known`` has a 1 for every bit whose read value is known; unknown bits
    are 0 in ``observed``.
    """

    cycle: int
    address: int
    expected: int
    observed: int
    known: int

    @property
    def definite(self) -> bool:
        """True when some known bit differs from the expected one."""
        return bool((self.observed ^ self.expected) & self.known)


class _Recorder(Run):
    """A :class:`Run` that goes on after the first detection and records every compare."""

    def collect(self, any_up) -> list[Compare]:
        ctx = self.ctx
        plan = _plan(ctx)
        out: list[Compare] = []
        rc1 = ctx.mem.read_cycles - 1 + getattr(ctx.mem, "read_latency", 0)   # issue → compare cycle
        n1 = ctx.n - 1
        fault = self.fault
        access = self.access
        for si, seg, ops, data in plan:
            up = seg.order == "up" or (seg.order == "any" and any_up[ctx.any_index[seg.element]])
            words = ctx.words_up if up else ctx.words_down
            for w in words:
                fault.visit(self, w)          # a new visit of the word
                base = seg.start + (ctx.rank[w] if up else n1 - ctx.rank[w]) * seg.per_address
                dw = data[w]
                for kind, v, off, compared in ops:
                    d = dw[v]
                    got = access(w, kind, d, base + off)
                    if got is None or not compared or got == d:
                        continue
                    exp = obs = known = 0
                    odd = False
                    for i, (o, e) in enumerate(zip(got, d)):
                        exp |= e << i
                        if o == X:
                            odd = True
                            continue
                        known |= 1 << i
                        obs |= o << i
                        if o != e:
                            odd = True
                    if odd:
                        out.append(Compare(base + off + rc1, w, exp, obs, known))
        return out


def _plan(ctx):
    """Per element segment: (index, segment, [(kind, value, offset, compared)], data) with
    ``data[word][value]`` the fault-free word a ``w{value}``/``r{value}`` carries; cached on
    the context."""
    plan = getattr(ctx, "_trace_plan", None)
    if plan is None:
        plan = []
        per_run: dict[int, dict] = {}
        for si, seg in enumerate(ctx.sched.segments):
            if seg.element is None:
                continue
            ops = [(kind, v, off, (si, k) in ctx.determined)
                   for k, (kind, v, off) in enumerate(zip(seg.op_kinds, seg.op_values, seg.op_offsets))]
            if seg.run not in per_run:
                per_run[seg.run] = {w: ([x for x in bgw], [1 - x for x in bgw])
                                    for w, bgw in ((w, ctx.bg[seg.run][w]) for w in ctx.words_up)}
            plan.append((si, seg, ops, per_run[seg.run]))
        ctx._trace_plan = plan
    return plan


def reads_sense_amplifier(kind) -> bool:
    """True when the family's oracle returns what the sense amplifier holds (so the words
    read before the instance's words matter); an oracle says so with a class attribute
    ``reads_sense_amplifier = True`` on its ``Fault``."""
    from .registry import oracle

    return bool(getattr(oracle(kind).Fault, "reads_sense_amplifier", False))


class Tracer:
    """Failing compares of single instances of faults for one test on one memory.

    Holds what every instance shares (the schedule, the ⇑ order and ranks, the background
    bits) so that one call costs only the projected simulation.
    """

    def __init__(self, test, mem, sched=None):
        from ..model import address_order, background_stack, ranks, schedule

        self.test = test
        self.mem = mem
        self.sched = sched or schedule(test, mem)
        self.order = address_order(mem)                 # (words,) int64, the ⇑ sequence
        self.rank = ranks(self.order)                   # (words,) int64
        self.bg = background_stack(mem)                 # (runs, words, bits) uint8
        self.n = mem.words
        self.any_count = sum(e.order == "any" for e in test.elements)
        self._ctx: dict[tuple[int, ...], Context] = {}

    # ---- the projection --------------------------------------------------------------
    def words_of(self, inst) -> tuple[int, ...]:
        """The words the projected simulation of ``inst`` needs, in ⇑ order."""
        from ..faults import family_of

        kind = inst.kind
        words = {int(w) for w in family_of(kind).site_words(inst, self.mem)}
        if reads_sense_amplifier(kind):
            # the last read before a read of one of its words is of that word, of the word
            # next to it in this element's order, or (first visit of an element) of the
            # first or last word of the order
            words |= {int(self.order[0]), int(self.order[-1])}
            for w in list(words):
                r = int(self.rank[w])
                if r > 0:
                    words.add(int(self.order[r - 1]))
                if r < self.n - 1:
                    words.add(int(self.order[r + 1]))
        return tuple(sorted(words, key=lambda w: self.rank[w]))

    def context(self, words) -> Context:
        words = tuple(words)
        ctx = self._ctx.get(words)
        if ctx is None:
            if len(self._ctx) > 4096:
                self._ctx.clear()
            bg = [{w: [int(x) for x in self.bg[r, w]] for w in words} for r in range(self.bg.shape[0])]
            rank = {w: int(self.rank[w]) for w in words}
            ctx = Context(self.test, self.mem, self.sched, bg, words, rank, self.n)
            self._ctx[words] = ctx
        return ctx

    # ---- scenarios -------------------------------------------------------------------
    def scenarios(self, inst, canonical: bool = True):
        """(initial values, ⇕ directions) to try.  ``canonical``: every ⇕ element ascending,
        as the exported stimulus runs it; else every combination of directions."""
        inits = list(itertools.product((0, 1), repeat=n_init_cells(inst.kind)))
        if canonical:
            dirs = [(True,) * self.any_count]
        else:
            dirs = list(itertools.product((True, False), repeat=self.any_count))
        return [(i, d) for d in dirs for i in inits]

    def compares(self, inst, inits=(), any_up=None, words=None) -> list[Compare]:
        """Every compare of ``inst`` that is not certainly right, in cycle order, for one
        scenario (``any_up`` defaults to every ⇕ element ascending).  ``words`` overrides the
        projection (the whole array: ``range(words)`` in ⇑ order, for checks)."""
        ctx = self.context(self.words_of(inst) if words is None else words)
        if any_up is None:
            any_up = (True,) * self.any_count
        return _Recorder(ctx, inst, tuple(inits)).collect(tuple(any_up))

    def syndromes(self, inst, canonical: bool = True) -> list[tuple[tuple, tuple[Compare, ...]]]:
        """[(scenario, compares)] for every scenario of :meth:`scenarios`."""
        return [((i, d), tuple(self.compares(inst, i, d))) for i, d in self.scenarios(inst, canonical)]

    def full_words(self) -> list[int]:
        return [int(w) for w in np.asarray(self.order)]


def failing_compares(test, mem, inst, inits=(), any_up=None, sched=None) -> list[Compare]:
    """Every compare of one instance that is not certainly right, for one scenario (see
    :class:`Tracer`; for many instances make one :class:`Tracer` and call ``compares``)."""
    return Tracer(test, mem, sched).compares(inst, inits, any_up)
