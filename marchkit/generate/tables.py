"""Elements of the search space, per-sub-key transition tables and exact per-key distances.

The search space (what "every shorter test was exhausted" ranges over):

* a test is a sequence of march elements, each ⇑ or ⇓ (a ⇕ element is never needed for a
  shortest test: it must detect for both orders, so replacing it by ⇑ never loses a
  detection; the finished test turns elements back into ⇕ where both orders work);
* an element applies 1 … ``max_element`` operations to every address; each operation is a
  write ``w0``/``w1`` or a read, and a read expects the value a fault-free cell holds there
  (any other read would fail a good memory);
* the test starts with a write (a read of never-written cells detects nothing);
* length = operations per address (k of k·n).  No delays: retention faults are not searched.

Incremental evaluation: for one sub-key a scenario is a deterministic machine, so the state of
a test prefix is the *set* of states of the scenarios not yet detected (a bit mask over the
sub-key's states; ⇕ choices and initial values are the scenarios).  Extending a prefix by one
element maps each state through the element, so it costs one table lookup per sub-key.
Masks only shrink in what they can detect: an empty mask means the key is detected in every
scenario, and stays empty.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .keys import DETECTED

R_, W0, W1 = 0, 1, 2          # op codes in an element's pattern: read (the current value), w0, w1
INF = 10_000


@dataclass(frozen=True)
class ElementSet:
    """Every candidate element for a given fault-free value ``f`` at its start.

    patterns[i]: tuple of op codes; ops(i, f) → ((kind, value), ...);
    order[i]: 'up' | 'down'; cost[i]: operations; fend[f][i]: fault-free value after it.
    Sorted by cost, so ``upto[c]`` elements have cost ≤ c.
    """

    patterns: tuple
    order: tuple
    cost: np.ndarray
    fend: np.ndarray           # (2, N) int8
    starts_with_write: np.ndarray
    first_write: np.ndarray    # value of the first write (or -1)
    upto: tuple

    @property
    def size(self) -> int:
        return len(self.patterns)


def concrete_ops(pattern, f):
    out = []
    cur = f
    for c in pattern:
        if c == R_:
            out.append(("r", cur))
        else:
            cur = c - 1
            out.append(("w", cur))
    return tuple(out)


def element_set(max_element: int) -> ElementSet:
    pats = []
    for k in range(1, max_element + 1):
        level = [()]
        for _ in range(k):
            level = [p + (c,) for p in level for c in (R_, W0, W1)]
        pats.extend(level)
    patterns, order = [], []
    for p in pats:                       # cost-major: ⇑ and ⇓ of each pattern side by side
        for o in ("up", "down"):
            patterns.append(p)
            order.append(o)
    cost = np.array([len(p) for p in patterns], dtype=np.int16)
    fend = np.zeros((2, len(patterns)), dtype=np.int8)
    for f in (0, 1):
        for i, p in enumerate(patterns):
            cur = f
            for c in p:
                if c != R_:
                    cur = c - 1
            fend[f, i] = cur
    sw = np.array([p[0] != R_ for p in patterns])
    fw = np.array([next((c - 1 for c in p if c != R_), -1) for p in patterns], dtype=np.int8)
    upto = tuple(int(np.searchsorted(cost, c, side="right")) for c in range(max_element + 1))
    return ElementSet(tuple(patterns), tuple(order), cost, fend, sw, fw, upto)


class SubTables:
    """State-level tables of one sub-key: ``img[f][e, s]`` → next state index or -1."""

    def __init__(self, sk, es: ElementSet):
        self.sk = sk
        states = sk.states()
        self.states = states
        index = {s: i for i, s in enumerate(states)}
        self.index = index
        S = len(states)
        if S > 62:
            raise ValueError("too many states for one key")
        step_cache: dict = {}

        def step(st, slot, op, v):
            key = (st, slot, op, v)
            r = step_cache.get(key)
            if r is None:
                r = sk.step(st, slot, op, v)
                step_cache[key] = r
            return r

        self.img = []
        for f in (0, 1):
            # visit functions by pattern, built along the prefix tree: vis[slot][pattern] =
            # tuple over start states of the (in-visit) state or DETECTED
            vis = [dict() for _ in range(sk.slots)]
            for slot in range(sk.slots):
                vis[slot][()] = tuple(states)
            for pat in es.patterns[::2]:
                prefix, last = pat[:-1], pat[-1]
                if pat in vis[0]:
                    continue
                ops = concrete_ops(pat, f)
                kind, v = ops[-1]
                for slot in range(sk.slots):
                    base = vis[slot][prefix]
                    vis[slot][pat] = tuple(DETECTED if b is DETECTED else step(b, slot, kind, v) for b in base)
            img = np.full((es.size, S), -1, dtype=np.int8)
            # end-of-visit: forget the in-visit look-back
            end = [{p: tuple(-1 if x is DETECTED else index[sk.between(x)] for x in t) for p, t in vis[s].items()}
                   for s in range(sk.slots)]
            for e, pat in enumerate(es.patterns):
                first = end[0][pat]
                if sk.slots == 1:
                    img[e] = first
                    continue
                seq = (0, 1) if es.order[e] == "up" else (1, 0)
                a = end[seq[0]][pat]
                b = end[seq[1]][pat]
                img[e] = [-1 if x < 0 else b[x] for x in a]
            self.img.append(img)
        self.init_mask = 0
        for s in sk.initial():
            self.init_mask |= 1 << index[s]


def mask_image(img: np.ndarray, mask: int) -> np.ndarray:
    """Image of a state mask under every element: (N,) int64 masks."""
    cols = [i for i in range(img.shape[1]) if mask >> i & 1]
    if not cols:
        return np.zeros(img.shape[0], dtype=np.int64)
    sub = img[:, cols].astype(np.int64)
    bits = np.where(sub >= 0, np.left_shift(1, np.maximum(sub, 0)), 0)
    return np.bitwise_or.reduce(bits, axis=1)


class MaskGraph:
    """Reachable masks of one sub-key, their transitions and exact remaining distances.

    ``masks``: list of int masks (index 0 is the empty mask); ``T[f]``: (M, N) int32 of next
    mask indices; ``d[f, m]``: fewest operations that detect this sub-key alone from mask m
    with fault-free value f (INF if none can).  ``d`` is an admissible bound for the search.
    """

    def __init__(self, st: SubTables, es: ElementSet):
        masks = [0]
        idx = {0: 0}
        if st.init_mask not in idx:
            idx[st.init_mask] = len(masks)
            masks.append(st.init_mask)
        pending = list(masks)
        done_rows: dict = {}
        while pending:                      # breadth-first over the masks reachable from the start
            m = pending.pop(0)
            for f in (0, 1):
                nxt = mask_image(st.img[f], m)
                out = np.empty(nxt.size, dtype=np.int32)
                for u in np.unique(nxt).tolist():
                    if u not in idx:
                        idx[u] = len(masks)
                        masks.append(u)
                        pending.append(u)
                    out[nxt == u] = idx[u]
                done_rows[(f, m)] = out
        M = len(masks)
        self.masks = masks
        self.index = idx
        self.T = np.stack([np.stack([done_rows[(f, m)] for m in masks]) for f in (0, 1)])   # (2, M, N)
        self.init = idx[st.init_mask]
        d = np.full((2, M), INF, dtype=np.int32)
        d[:, 0] = 0
        cost = es.cost.astype(np.int32)
        while True:
            nd = d.copy()
            for f in (0, 1):
                cand = cost[None, :] + d[es.fend[f][None, :], self.T[f]]    # (M, N)
                nd[f] = np.minimum(nd[f], cand.min(axis=1))
            nd[:, 0] = 0
            if np.array_equal(nd, d):
                break
            d = nd
        self.d = d

    def first_distance(self, es: ElementSet) -> int:
        """Fewest operations detecting this sub-key from the start (first op a write)."""
        sw = es.starts_with_write
        cand = es.cost.astype(np.int32) + self.d[es.fend[0], self.T[0][self.init]]
        return int(cand[sw].min())


def evaluate_masks(subs, items):
    """Per sub-key: True when ``items`` (a list of (order, ((kind, value), ...)) with order
    'up' | 'down' | 'any') detects it in every scenario.  Reads before the test's first
    write detect nothing.  Direct simulation, no tables (used for checks and ⇕ relaxing)."""
    out = []
    for sk in subs:
        cur = set(sk.initial())
        seen_write = False
        for order, ops in items:
            dets = []
            for i, (k, v) in enumerate(ops):
                dets.append(seen_write or any(o[0] == "w" for o in ops[:i]))
            nxt = set()
            seqs = {"up": [(0, 1)], "down": [(1, 0)], "any": [(0, 1), (1, 0)]}[order]
            for s0 in cur:
                for seq in seqs:
                    s = s0
                    for slot in seq[:sk.slots] if sk.slots == 2 else (0,):
                        for (k, v), det in zip(ops, dets):
                            s = sk.step(s, slot, k, v, det)
                            if s is DETECTED:
                                break
                        if s is DETECTED:
                            break
                        s = sk.between(s)
                    if s is not DETECTED:
                        nxt.add(s)
            cur = nxt
            if any(k == "w" for k, _ in ops):
                seen_write = True
        out.append(not cur)
    return out
