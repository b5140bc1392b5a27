"""The fast engine: the same verdict as the reference simulator for every instance, at a
cost close to counting.

Why it is exact: a fault's verdict depends only on the operations applied to the words it
involves, their interleaving and the data written there.  Under an address order (the same
permutation for every ⇑ element, reversed for ⇓), the interleaving of a few words is fixed by
their order pattern.  So each family's fast path (``marchkit/engine/fastpaths/<family>.py``)
computes verdicts per *key* — kind, order pattern, the data of the words involved — and
counts instances per key, or, where a family depends on real time, computes all cells at
once with numpy.  Each fast path is checked instance by instance against its family's
oracle (``tests/test_engine.py``).

This module holds what the families share: :class:`Prepared` (the set-up of one test on one
memory) and :class:`Engine` (dispatch to the registered fast paths, per-instance verdicts,
and the parallel workers).
"""

from __future__ import annotations

import numpy as np

from ..faults import FAMILIES
from .core import Context, determined_reads
from .registry import fast_path
from .results import Detection, KindResult

__all__ = ["Engine", "Prepared", "KindResult", "Detection"]

# ---------------------------------------------------------------------------------------
# preparation shared by every kind


class Prepared:
    """One test on one memory: the memory's shared :class:`~marchkit.engine.setup.MemorySetup`
    (``setup``; its arrays are also attributes here: ``order``/``rank`` (n,) int64, ``bg``
    (R, n, B) uint8, ``key_bits`` (K, R) int8, ``cell_key`` (n·B,) small int) and the
    test's schedule facts (``sched``, ``determined`` — the compared reads, ``any_elems``)."""

    def __init__(self, test, mem, sched=None):
        from ..model import schedule
        from .setup import memory_setup

        self.test = test
        self.mem = mem
        self.sched = sched or schedule(test, mem)
        self.setup = ms = memory_setup(mem)
        self.order, self.rank, self.bg = ms.order, ms.rank, ms.bg
        self.R, self.n, self.B = ms.R, ms.n, ms.B
        self.key_bits, self.cell_key, self.K = ms.key_bits, ms.cell_key, ms.K
        self.determined = determined_reads(self.sched)
        self.any_elems = [i for i, e in enumerate(test.elements) if e.order == "any"]
        self._dyn = None

    def dyn_keys(self):
        """Cell keys for dynamic faults: (cell_key (n·B,) int64, key_bits (K', R) int8, key_pos
        (K',) int8, K').  A key is the cell's background bits (one per run) *and* its word's
        position in the ⇑ order (1 first, 2 last, 0 any other): the last operation of an
        element and the first of the next are back to back on the first or last word, so a
        dynamic fault's verdict depends on that position too."""
        if self._dyn is None:
            pos = np.zeros(self.n, dtype=np.int64)
            pos[self.order[0]] = 1
            pos[self.order[-1]] = 2
            ext = np.repeat(pos, self.B) * self.K + self.cell_key.astype(np.int64)
            uniq, inv = np.unique(ext, return_inverse=True)
            self._dyn = (inv.ravel().astype(np.int64), self.key_bits[uniq % self.K],
                         (uniq // self.K).astype(np.int8), int(uniq.size))
        return self._dyn

    def joined(self, si) -> bool:
        """Whether element segment ``si`` starts in the cycle the previous element segment
        ends (no pause between): then their meeting word's last and first operations are back
        to back."""
        segs = self.sched.segments
        p = si - 1
        while p >= 0 and segs[p].element is None:
            p -= 1
        return p >= 0 and segs[si].start == segs[p].start + segs[p].cycles

    def prev_element(self, si) -> int:
        p = si - 1
        while self.sched.segments[p].element is None:
            p -= 1
        return p

    @property
    def scenarios(self) -> list:
        """Every choice of orders for the ⇕ elements (2^k tuples of flags).  Exponential: kept
        for fast paths written before :func:`sweep_orders`; new code should use that."""
        import itertools

        return list(itertools.product((True, False), repeat=len(self.any_elems)))

    def seg_up(self, si, any_up=None) -> bool:
        """Whether segment ``si`` runs ⇑: ⇕ as ⇑ unless ``any_up`` (a flag per ⇕ element)."""
        seg = self.sched.segments[si]
        if seg.order == "up":
            return True
        if seg.order == "down":
            return False
        return True if any_up is None else any_up[self.any_elems.index(seg.element)]

    def word_keys(self):
        """(key (n,) int64 per word, representative word (U,) int64 per key)."""
        return self.setup.word_keys()

    def word_key_hist(self):
        """(n, K) int64: how many cells of each word have each key."""
        return self.setup.word_key_hist()

    def cycle_of(self, si, k, word: np.ndarray) -> np.ndarray:
        seg = self.sched.segments[si]
        r = self.rank[word]
        pos = self.n - 1 - r if seg.order == "down" else r
        return seg.start + pos * seg.per_address + seg.op_offsets[k]



# ---------------------------------------------------------------------------------------
# ⇕ elements: carried state sets, shared by the fast paths

MAX_CHOICE_SETS = 1 << 14


def sweep_orders(prep, reach, transition):
    """Whether some choice of ⇕ orders leaves each key undetected — without 2^k scenarios.

    ``reach`` (M, NS) bool: the states (of NS per key) each of M keys may start in.
    ``transition(si, up)`` → ``(end, det)``, both (M, NS): the state (small int) each start state
    is in after element segment ``si`` run ⇑ (``up``) or ⇓, and whether a read detected on
    the way (bool).  It is called at most twice per segment.  The set of reachable undetected
    states is carried from segment to segment (see :mod:`marchkit.engine.core`); with several
    background runs the order chosen for a ⇕ element is kept (as part of the state) until
    its last run, so that it runs the same way in every run.  Returns (M,) bool.
    """
    from ..errors import EngineLimitError

    segs = prep.sched.segments
    last_run = segs[-1].run if segs else 0
    M, NS = reach.shape
    alive = {(): reach}
    cache = {}
    for si, seg in enumerate(segs):
        if seg.element is None:
            continue
        new: dict = {}
        for vec, r in alive.items():
            chosen = dict(vec)
            if seg.order != "any":
                orders = (seg.order == "up",)
            elif seg.element in chosen:
                orders = (chosen[seg.element],)
            else:
                orders = (True, False)
            for up in orders:
                if (si, up) not in cache:
                    cache[(si, up)] = transition(si, up)
                end, det = cache[(si, up)]
                keep = r & ~det
                if not keep.any():
                    continue
                nr = np.zeros((M, NS), dtype=bool)
                for e in range(NS):         # reached state e from some kept state
                    nr[:, e] = (keep & (end == e)).any(axis=1)
                if seg.order == "any":
                    c = dict(chosen)
                    if seg.run < last_run:
                        c[seg.element] = up
                    else:
                        c.pop(seg.element, None)
                    nvec = tuple(sorted(c.items()))
                else:
                    nvec = vec
                if nvec in new:
                    new[nvec] |= nr
                else:
                    new[nvec] = nr
        if len(new) > MAX_CHOICE_SETS:
            raise EngineLimitError(
                f"the ⇕ elements of this test, repeated over {last_run + 1} background runs, leave more "
                f"than {MAX_CHOICE_SETS} combinations of orders distinguishable; write some ⇕ as ⇑ or ⇓, "
                "or grade one background at a time")
        alive = new
        if not alive:
            break
    out = np.zeros(M, dtype=bool)
    for r in alive.values():
        out |= r.any(axis=1)
    return out


REPEAT_TRANSIENT = 8     # copies after which a repeated operation's effect is periodic ...
REPEAT_PERIOD = 12       # ... with a period dividing this (every cycle length 1 to 4)


def _short_count(k: int) -> int:
    """An equivalent repeat count for the families that do not depend on time.  A run of k
    identical operations on one word drives a small finite state (the involved cells, the
    sense amplifier, the previous operation of the visit) through one deterministic map; it
    is periodic after REPEAT_TRANSIENT steps with a period dividing REPEAT_PERIOD, so k and
    T + P + (k − T) mod P copies leave the same state, and the shorter run — a prefix of the
    long one holding a whole period — shows every value a read of the long run returns.
    Checked against the literal reference running every copy (tests/test_dram.py)."""
    T, P = REPEAT_TRANSIENT, REPEAT_PERIOD
    if k <= T + 2 * P:
        return k
    return T + P + (k - T) % P


def equivalent_short_test(test):
    """``test`` with every repeat count k replaced by :func:`_short_count` (k) (the same
    object when nothing changes)."""
    from dataclasses import replace

    if all(_short_count(op.repeat) == op.repeat for e in test.elements for op in e.ops):
        return test
    items = []
    for it in test.items:
        if hasattr(it, "ops"):
            it = replace(it, ops=tuple(replace(op, repeat=_short_count(op.repeat)) for op in it.ops))
        items.append(it)
    return replace(test, items=tuple(items))


class Engine:
    """Grades a selection of fault kinds on one (test, memory), family by family through
    the fast paths of :mod:`marchkit.engine.fastpaths`."""

    def __init__(self, test, mem, sched=None, examples: int = 0):
        from ..model import schedule
        from .setup import check_limits

        check_limits(mem)             # before any work
        # Families that do not depend on time grade an equivalent test whose long repeats are
        # cut down (equivalent_short_test); the time-dependent DRAM families work in closed
        # form from the full test and schedule (full_test, full_sched).
        self.full_test = test
        self.full_sched = sched or schedule(test, mem)
        short = equivalent_short_test(test)
        self.prep = Prepared(short, mem, self.full_sched if short is test else None)
        self.examples = examples      # how many undetected instances to name per kind
        self.scratch: dict = {}       # per-call state of a fast path (not shared across calls)

    def take(self, res, instances):
        """Name up to ``examples`` undetected instances on ``res``."""
        room = self.examples - len(res.missed_examples)
        if room > 0:
            res.missed_examples.extend(instances[:room])

    def projected_context(self, words):
        """An oracle :class:`~marchkit.engine.core.Context` on ``words`` only (the words an
        instance involves and those whose reads it can see), with their true ranks."""
        prep = self.prep
        words = sorted(set(int(w) for w in words), key=lambda w: prep.rank[w])
        bg = [{w: list(map(int, prep.bg[r, w])) for w in words} for r in range(prep.R)]
        rank = {w: int(prep.rank[w]) for w in words}
        return Context(prep.test, prep.mem, prep.sched, bg, words, rank, prep.n)

    # ---- everything ----------------------------------------------------------------
    def grade(self, selection, scope, progress=None, workers=None):
        """Counts (one :class:`KindResult` per kind of ``selection``, in its order).

        First every family's shared set-up is made (``FastPath.prepare``: pair counts and
        keys, cached per memory and scope, so every test of a comparison reuses them); then
        the families — independent pure computations over their kinds — run, on large arrays
        in ``workers`` forked processes (:mod:`marchkit.engine.workers`; default 2 where the
        machine has two cores, the array has at least 2^18 cells, fork is available and no
        other thread is running).
        """
        from .workers import can_fork, map_forked

        fams: dict[str, list] = {}
        for k in selection.kinds:
            fams.setdefault(k.family, []).append(k)
        steps = [f.name for f in FAMILIES if f.name in fams]
        if progress:
            progress(steps[0] if steps else "done", 0, len(steps))
        for f in steps:   # the shared set-up (cached per memory and scope), before any fork
            fast_path(f).FAST.prepare(self, fams[f], scope)
        if workers is None:
            workers = can_fork(self.prep.n * self.prep.B) if len(steps) > 1 else 1
        done = [0]

        def tick(i):
            done[0] += 1
            if progress:
                progress(steps[i], done[0], len(steps))

        parts = map_forked(lambda f: self.grade_family(f, fams[f], scope), steps, workers, tick)
        results: dict[str, KindResult] = {}
        for part in parts:
            results.update(part)
        if progress:
            progress("done", len(steps), len(steps))
        return [results[k.text] for k in selection.kinds]

    def grade_family(self, fam, kinds, scope) -> dict:
        """``{kind.text: KindResult}`` for ``kinds``, all of family ``fam``."""
        return fast_path(fam).FAST.grade(self, kinds, scope, {})

    # ---- per-instance verdicts (audits, differential tests) ------------------------
    def instance_verdicts(self, instances):
        """(detected, Detection | None) for each instance, without simulating the array."""
        instances = list(instances)
        out = [None] * len(instances)
        by_fam: dict[str, list[int]] = {}
        for i, inst in enumerate(instances):
            by_fam.setdefault(inst.kind.family, []).append(i)
        for fam, idx in by_fam.items():
            got = fast_path(fam).FAST.verdicts(self, [instances[i] for i in idx])
            for i, v in zip(idx, got):
                out[i] = v
        return out

    def detection(self, si, k, word):
        """The :class:`Detection` of op ``k`` of segment ``si`` at ``word`` (⇕ run as ⇑).

        When the families graded an equivalent shorter test, op ``k`` of it is mapped back to
        the full test: a first detection inside a shortened run lies in its first T + P
        copies (later copies repeat earlier ones, see :func:`_short_count`), which are the
        same copies of the full run; ops after a shortened run move by the copies removed."""
        from ..model import op_cycle

        prep = self.prep
        seg = prep.sched.segments[si]
        if prep.sched is self.full_sched:
            cycle = int(prep.cycle_of(si, k, np.array([word]))[0])
            return Detection(seg.run, seg.element, k, int(word), cycle)
        full = self.full_sched.segments[si]
        fk = k
        for r, fr in zip(seg.runs, full.runs):
            if r.first <= k < r.first + r.repeat:
                j = k - r.first
                fk = fr.first + (j if j < REPEAT_TRANSIENT + REPEAT_PERIOD else j + fr.repeat - r.repeat)
                break
        r = int(prep.rank[word])
        pos = prep.n - 1 - r if seg.order == "down" else r
        return Detection(seg.run, seg.element, fk, int(word), int(op_cycle(full, fk, pos)))
