"""The small memory the search runs on: fault *keys* and their per-scenario behaviour.

Why a handful of cells represents every memory size (the argument the search rests on):

* A fault instance of the rules family (static and dynamic primitives, SAF, TF, CFin, CFid,
  CFst ...) involves one or two cells.  Every other cell is fault-free, so a read of it returns
  the expected value and never detects; operations on other words do not change the involved
  cells.  What the instance sees of a march test is therefore the sequence of operations
  applied to *its* words, with the data the background puts in *its* cells.
* Every ⇑ element visits the words in the same permutation (the memory's address order), ⇓ in
  the reverse one.  So for two words the interleaving is fixed by one fact: which comes first
  in ⇑.  Between two visits of the same word other words are visited, so a dynamic
  primitive's two operations can only be adjacent inside one visit.
* Hence the verdict of an instance is a function of its *key*: the fault kind, the structure
  (one cell / aggressor's word first / victim's word first / both in one word) and the
  background bit of each cell in every run.  An address decoder fault (AF) involves one or
  two addresses: its key is the AF kind, which address comes first, and the background words
  of both addresses in every run.  A memory of one or two words with those backgrounds shows
  exactly the behaviour of every instance with that key, on a memory of any size.
* ``discover`` lists the keys that occur on the user's memory for the chosen pair scope; a
  test that detects every key detects every instance (confirmed afterwards by the engine).

Each key becomes one :class:`SubKey` per background run.  A sub-key is simulated as a small
deterministic machine: a *state* is the contents of its cells (plus, within one visit, the
previous operation, which dynamic primitives look at); an operation maps a state to a state
or to ``DETECTED``.  Scenarios (initial values) are the initial states.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

X = 2                     # unknown value (AF cells start unknown)
DETECTED = -1

SINGLE, AFIRST, VFIRST, SAME = "single", "aggressor first", "victim first", "same word"
AF_A_FIRST, AF_B_FIRST = "a first", "b first"


@dataclass(frozen=True)
class SubKey:
    """One key in one background run, on its projected words (slots 0 and 1 in ⇑ order).

    rules family: ``cells`` = ((slot, background bit), ...), aggressor first for two cells.
    af family: ``words`` = background word (int, bit i = bit i) of each slot, ``a_slot``
    the slot of address a, ``bits`` the word width.
    """

    family: str
    slots: int
    rules: tuple = ()
    cells: tuple = ()
    af: str | None = None
    words: tuple = ()
    a_slot: int = 0
    bits: int = 1

    # -- states --------------------------------------------------------------------
    def states(self) -> list:
        """Every state between two visits (a superset of the reachable ones)."""
        if self.family == "rules":
            return [(v, None) for v in itertools.product((0, 1), repeat=len(self.cells))]
        if self.af == "none":
            return [(0,), (1,)]
        vals = [None] + sorted({w ^ m for w in self.words for m in (0, (1 << self.bits) - 1)})
        return [(a, b) for a in vals for b in vals]

    def initial(self) -> list:
        """The initial state of every scenario (every initial value of the involved cells)."""
        if self.family == "rules":
            out = []
            for v in itertools.product((0, 1), repeat=len(self.cells)):
                vals = list(v)
                self._apply_states(vals)
                out.append((tuple(vals), None))
            return sorted(set(out))
        if self.af == "none":
            return [(0,), (1,)]             # the floating read value, unknown which
        return [(None, None)]

    def between(self, state):
        """The state at the end of a visit (the look-back of dynamic primitives forgotten)."""
        if self.family == "rules":
            return (state[0], None)
        return state

    # -- one operation -----------------------------------------------------------------
    def step(self, state, slot: int, op: str, v: int, determined: bool = True):
        """Apply ``op`` (``'r'``/``'w'``) with value ``v`` to the word in ``slot``.

        For a read ``v`` is the expected value.  Returns the next state, or ``DETECTED``.
        """
        if self.family == "rules":
            return self._rules_step(state, slot, op, v, determined)
        return self._af_step(state, slot, op, v, determined)

    def _apply_states(self, vals):
        vi = len(self.cells) - 1
        for rule in self.rules:
            if rule.vic.op is not None or rule.then is not None or (rule.agg is not None and rule.agg.op is not None):
                continue
            if vals[vi] != rule.vic.pre:
                continue
            if rule.agg is not None and vals[0] != rule.agg.pre:
                continue
            vals[vi] = rule.f

    def _rules_step(self, state, slot, op, v, determined):
        vals, prev = state
        cells = self.cells
        vi = len(cells) - 1
        vslot, vbg = cells[vi]
        pre_v = vals[vi]
        pre_a = vals[0] if vi == 1 else None
        post_v = None
        out_v = None
        for rule in self.rules:
            ca, cv = rule.agg, rule.vic
            if rule.then is not None:
                t = rule.then
                if (slot != vslot or prev is None or prev[0] != cv.op or prev[2] != cv.pre
                        or (cv.op == "w" and prev[1] != cv.val)
                        or op != t.op or pre_v != t.pre or (op == "w" and (vbg ^ v) != t.val)):
                    continue
                post_v = rule.f
                if op == "r":
                    out_v = rule.r
                continue
            if ca is None:
                if cv.op is None or slot != vslot or cv.op != op or pre_v != cv.pre:
                    continue
                if op == "w" and (vbg ^ v) != cv.val:
                    continue
                post_v = rule.f
                if op == "r":
                    out_v = rule.r
            elif ca.op is not None:
                aslot, abg = cells[0]
                if slot != aslot or ca.op != op or pre_a != ca.pre or pre_v != cv.pre:
                    continue
                if op == "w" and (abg ^ v) != ca.val:
                    continue
                post_v = rule.f
            elif cv.op is not None:
                if slot != vslot or cv.op != op or pre_v != cv.pre or pre_a != ca.pre:
                    continue
                if op == "w" and (vbg ^ v) != cv.val:
                    continue
                post_v = rule.f
                if op == "r":
                    out_v = rule.r
        if op == "r" and determined:
            for i, (s, bg) in enumerate(cells):
                if s != slot:
                    continue
                got = out_v if (i == vi and out_v is not None) else vals[i]
                if got != X and got != (bg ^ v):
                    return DETECTED
        new = list(vals)
        if slot == vslot:
            prev = (op, (vbg ^ v) if op == "w" else None, pre_v)
        if op == "w":
            for i, (s, bg) in enumerate(cells):
                if s == slot:
                    new[i] = bg ^ v
        if post_v is not None:
            new[vi] = post_v
        self._apply_states(new)
        if not any(r.then is not None for r in self.rules):
            prev = None
        return (tuple(new), prev)

    def _af_step(self, state, slot, op, v, determined):
        full = (1 << self.bits) - 1
        data = self.words[slot] ^ (full if v else 0)
        if self.af == "none":
            if op == "w" or not determined:
                return state
            return DETECTED if data != (full if state[0] else 0) else state
        addr = "a" if slot == self.a_slot else "b"
        targets = {"alias": {"a": "a", "b": "a"}, "multi": {"a": "ab", "b": "b"},
                   "cross": {"a": "ab", "b": "ab"}}[self.af][addr]
        ca, cb = state
        if op == "w":
            return (data if "a" in targets else ca, data if "b" in targets else cb)
        if not determined:
            return state
        known, val = full, full          # AND of the selected cells, three-valued per bit
        for t in targets:
            c = ca if t == "a" else cb
            if c is None:                # unknown cell: only the bits already known 0 stay known
                known &= ~val & full
                val = 0
            else:                        # a 0 is known whatever the other cell holds
                known = (known | (~c & full)) & full
                val &= c
        return DETECTED if ((val ^ data) & known) else state


# ---------------------------------------------------------------------------------------
# keys present on a memory


@dataclass(frozen=True)
class Group:
    """One key of one fault kind: detected when any of its per-run sub-keys is (``subs``)."""

    kind: object
    structure: str
    subs: tuple            # one SubKey per background run

    def describe(self) -> str:
        return f"{self.kind.text} ({self.structure})"


def _patterns(bg):
    """bg (R, n, B) → (pattern id per cell (n*B,), patterns (P, R) int8)."""
    R = bg.shape[0]
    bits = bg.reshape(R, -1).T
    uniq, inv = np.unique(bits, axis=0, return_inverse=True)
    return inv.ravel(), uniq.astype(np.int8)


def _word_patterns(bg):
    """Words as ints per run: (pattern id per word (n,), patterns (P, R) of ints)."""
    R, n, B = bg.shape
    w = (bg.astype(np.int64) << np.arange(B, dtype=np.int64)[None, None, :]).sum(axis=2)   # (R, n)
    uniq, inv = np.unique(w.T, axis=0, return_inverse=True)
    return inv.ravel(), uniq


def _ordered_pairs_present(pid, rank, P):
    """For pattern ids per item at ranks: (pa, pb) with some a before some b, and after."""
    lo = np.full(P, np.iinfo(np.int64).max)
    hi = np.full(P, -1)
    np.minimum.at(lo, pid, rank)
    np.maximum.at(hi, pid, rank)
    first = lo[:, None] < hi[None, :]      # a (pattern pa) strictly before some b (pattern pb)
    after = hi[:, None] > lo[None, :]
    return first, after


def discover(selection, mem, scope):
    """Every (kind, key) group that occurs on ``mem``: a list of :class:`Group`.

    Kinds of other families (SOF, DRF) are returned separately as ``unsupported``.
    """
    from ..faults import cell_pairs, word_pairs
    from ..model import address_order, background_stack, ranks

    bg = background_stack(mem)                   # (R, n, B)
    R, n, B = bg.shape
    rank = ranks(address_order(mem))
    cpid, cpat = _patterns(bg)
    P = cpat.shape[0]
    groups: list[Group] = []
    unsupported = []
    need_pairs = any(k.family == "rules" and k.arity == 2 for k in selection.kinds)
    cell_struct = None
    if need_pairs:
        pairs = cell_pairs(mem, scope)
        cell_rank = np.repeat(rank, B)
        if pairs is None:
            first, after = _ordered_pairs_present(cpid, cell_rank, P)
            same = np.zeros((P, P), dtype=bool)
            if B > 1:
                wp = cpid.reshape(n, B)
                rows = np.unique(wp, axis=0)
                for row in rows:
                    for i in range(B):
                        for j in range(B):
                            if i != j:
                                same[row[i], row[j]] = True
            cell_struct = {AFIRST: first, VFIRST: after, SAME: same}
        else:
            a, v = pairs
            wa, wv = a // B, v // B
            st = np.where(wa == wv, 2, np.where(rank[wa] < rank[wv], 0, 1))
            code = np.unique((st * P + cpid[a]) * P + cpid[v])
            cell_struct = {s: np.zeros((P, P), dtype=bool) for s in (AFIRST, VFIRST, SAME)}
            for c in code.tolist():
                s, rest = divmod(c, P * P)
                cell_struct[(AFIRST, VFIRST, SAME)[s]][rest // P, rest % P] = True
    wpid = wpat = None
    for kind in selection.kinds:
        if kind.family == "rules" and (kind.cls.startswith("LF")
                                       or (kind.arity == 2 and any(r.then is not None for r in kind.rules))):
            unsupported.append(kind)     # linked and two-cell dynamic faults: graded, not searched yet
            continue
        if kind.family == "rules":
            if kind.arity == 1:
                for p in sorted(set(cpid.tolist())):
                    subs = tuple(SubKey("rules", 1, kind.rules, ((0, int(cpat[p, r])),)) for r in range(R))
                    groups.append(Group(kind, SINGLE, subs))
                continue
            for s, table in cell_struct.items():
                for pa, pv in zip(*np.nonzero(table)):
                    subs = []
                    for r in range(R):
                        ba, bv = int(cpat[pa, r]), int(cpat[pv, r])
                        cells = {AFIRST: ((0, ba), (1, bv)), VFIRST: ((1, ba), (0, bv)), SAME: ((0, ba), (0, bv))}[s]
                        subs.append(SubKey("rules", 1 if s == SAME else 2, kind.rules, cells))
                    groups.append(Group(kind, s, tuple(subs)))
        elif kind.family == "af":
            if wpid is None:
                wpid, wpat = _word_patterns(bg)
            if kind.arity == 1:
                for p in sorted(set(wpid.tolist())):
                    subs = tuple(SubKey("af", 1, af="none", words=(int(wpat[p, r]),), bits=B) for r in range(R))
                    groups.append(Group(kind, SINGLE, subs))
                continue
            pairs = word_pairs(mem, scope)
            Pw = wpat.shape[0]
            if pairs is None:
                first, after = _ordered_pairs_present(wpid, rank, Pw)
            else:
                a, b = pairs
                first = np.zeros((Pw, Pw), dtype=bool)
                after = np.zeros((Pw, Pw), dtype=bool)
                m = rank[a] < rank[b]
                first[wpid[a[m]], wpid[b[m]]] = True
                after[wpid[a[~m]], wpid[b[~m]]] = True
            for s, table in ((AF_A_FIRST, first), (AF_B_FIRST, after)):
                for pa, pb in zip(*np.nonzero(table)):
                    subs = []
                    for r in range(R):
                        wa_, wb_ = int(wpat[pa, r]), int(wpat[pb, r])
                        if s == AF_A_FIRST:
                            subs.append(SubKey("af", 2, af=kind.af, words=(wa_, wb_), a_slot=0, bits=B))
                        else:
                            subs.append(SubKey("af", 2, af=kind.af, words=(wb_, wa_), a_slot=1, bits=B))
                    groups.append(Group(kind, s, tuple(subs)))
        else:
            unsupported.append(kind)
    return groups, unsupported


# ---------------------------------------------------------------------------------------
# symmetries (data complement, ⇑/⇓ mirror) on canonical descriptions


def _comp_cond(c):
    from ..faults import Cond

    if c is None:
        return None
    return Cond(1 - c.pre, c.op, None if c.val is None else 1 - c.val)


def _comp_rule(r):
    from ..faults import Rule

    return Rule(_comp_cond(r.vic), 1 - r.f, None if r.r is None else 1 - r.r, _comp_cond(r.agg), _comp_cond(r.then))


def canonical(sk: SubKey):
    """A description equal for sub-keys that behave identically under every test."""
    if sk.family == "rules":
        a = (tuple(sorted(r.text for r in sk.rules)), sk.cells, sk.slots)
        comp = tuple(_comp_rule(r) for r in sk.rules)
        b = (tuple(sorted(r.text for r in comp)), tuple((s, 1 - bgb) for s, bgb in sk.cells), sk.slots)
        return ("rules",) + min(a, b)
    return ("af", sk.af, sk.words, sk.a_slot, sk.bits, sk.slots)


def complement(sk: SubKey) -> SubKey:
    """The sub-key a data-complemented test (w0↔w1, r0↔r1) sees as this one sees the test."""
    if sk.family == "rules":
        return SubKey("rules", sk.slots, sk.rules, tuple((s, 1 - b) for s, b in sk.cells))
    full = (1 << sk.bits) - 1
    return SubKey("af", sk.slots, af=sk.af, words=tuple(w ^ full for w in sk.words), a_slot=sk.a_slot, bits=sk.bits)


def mirror(sk: SubKey) -> SubKey:
    """The sub-key a test with ⇑ and ⇓ swapped sees as this one sees the test."""
    if sk.slots == 1:
        return sk
    if sk.family == "rules":
        return SubKey("rules", 2, sk.rules, tuple((1 - s, b) for s, b in sk.cells))
    return SubKey("af", 2, af=sk.af, words=sk.words[::-1], a_slot=1 - sk.a_slot, bits=sk.bits)


def group_canon(subs) -> tuple:
    return tuple(canonical(s) for s in subs)


def closed_under(groups, fn) -> bool:
    have = {group_canon(g.subs) for g in groups}
    return all(tuple(canonical(fn(s)) for s in g.subs) in have for g in groups)
