"""Exact search for the shortest march test: a greedy first solution, then IDA*.

IDA* (Korf, "Depth-first iterative-deepening: an optimal admissible tree search", Artificial
Intelligence 27, 1985) over test prefixes.  A node is (fault-free value, the mask index of
every sub-key); a child appends one element.  The bound h(node) = max over keys of the fewest
operations that detect that key alone (exact per key, precomputed on its mask graph; for a
key with several background runs, the least over its runs) never overestimates, so when no
test of length L is found, none exists in the search space: the lower bound rises to L + 1.
A transposition table per task skips nodes already searched with a cost no larger.

Symmetries cut the space when the key set allows them (checked on canonical descriptions):
data complement (w0↔w1, r0↔r1) → the first write is w0; mirror (⇑↔⇓) → the first element is ⇑.

Parallel part: at each bound the first elements are split into chunks searched independently
(serially in order, or as tasks on any executor with ``submit``/``gather``; Dask in the CLI).
The answer is the first solution in chunk order, so it does not depend on the executor.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from .tables import INF, MaskGraph, SubTables, concrete_ops, element_set


class Interrupted(Exception):
    pass


@dataclass
class Problem:
    """Everything a search task needs (plain numpy arrays: cheap to ship to workers)."""

    max_element: int
    T: np.ndarray              # (2, G, N) int32: global mask id → next global mask id per element
    d: np.ndarray              # (2, G) int32 exact per-sub-key distance
    init: np.ndarray           # (K,) int32 global id of each sub-key's initial mask
    first_d: np.ndarray        # (K,) distance of each sub-key from the start
    starts: np.ndarray         # (Gr,) first sub-key of each group (sub-keys are grouped)
    singletons: bool
    comp_sym: bool
    mirror_sym: bool
    es: object = field(default=None, repr=False)

    def __post_init__(self):
        if self.es is None:
            self.es = element_set(self.max_element)

    def __getstate__(self):
        s = dict(self.__dict__)
        s["es"] = None
        return s

    def __setstate__(self, s):
        self.__dict__.update(s)
        self.es = element_set(self.max_element)

    def subset(self, keep) -> "Problem":
        """The same tables restricted to the groups flagged in ``keep`` (bool per group)."""
        ends = list(self.starts[1:]) + [self.init.size]
        init, fd, starts = [], [], []
        for gi, k in enumerate(keep):
            if not k:
                continue
            starts.append(len(init))
            init.extend(self.init[self.starts[gi]:ends[gi]].tolist())
            fd.extend(self.first_d[self.starts[gi]:ends[gi]].tolist())
        return Problem(self.max_element, self.T, self.d, np.array(init, dtype=np.int32),
                       np.array(fd, dtype=np.int32), np.array(starts, dtype=np.int64),
                       self.singletons, self.comp_sym, self.mirror_sym, self.es)

    def group_h(self, H):
        """(K, n) per-sub-key bounds → (n,) bound per child (max over groups of min over runs)."""
        if self.singletons:
            return H.max(axis=0)
        return np.minimum.reduceat(H, self.starts, axis=0).max(axis=0)

    def root_bound(self) -> int:
        fd = self.first_d.astype(np.int64)
        if self.singletons:
            return int(fd.max()) if fd.size else 0
        return int(np.minimum.reduceat(fd, self.starts).max())

    def first_elements(self, rem):
        """Indices of elements allowed first (cost ≤ rem), in search order."""
        es = self.es
        n = es.upto[min(rem, self.max_element)]
        ok = es.starts_with_write[:n].copy()
        if self.comp_sym:
            ok &= es.first_write[:n] == 0
        if self.mirror_sym:
            ok &= np.array([o == "up" for o in es.order[:n]])
        return np.nonzero(ok)[0]

    def children(self, f, gids, rem, first=False, guide=False):
        """Children within the budget: (element indices, next gids (K, n), bound (n,)), ordered."""
        es = self.es
        n = es.upto[min(rem, self.max_element)]
        if n == 0:
            return None
        fr = 0 if first else f
        C = self.T[fr][gids, :n]                              # (K, n)
        H = self.d[es.fend[fr, :n][None, :], C]                # (K, n)
        h = self.group_h(H)
        cost = es.cost[:n]
        ok = cost + h <= rem
        if first:
            allowed = np.zeros(n, dtype=bool)
            allowed[self.first_elements(rem)] = True
            ok &= allowed
        idx = np.nonzero(ok)[0]
        if idx.size == 0:
            return None
        if guide:     # look for any solution: least total remaining work first
            tot = np.add.reduceat(np.minimum(H, INF), self.starts, axis=0) if not self.singletons else H
            score = tot.sum(axis=0)[idx] + cost[idx]
            order = np.lexsort((idx, score))
        else:
            order = np.lexsort((idx, h[idx]))                # most promising first, then index
        idx = idx[order]
        return idx, C, h


def build_problem(groups, max_element=6, progress=None):
    """Tables for the given groups (list of :class:`keys.Group`).

    Returns ``(problem, detectable, reps)``: ``detectable[i]`` tells whether any march test in
    the space detects group i.  The problem holds a reduced family: in each group the runs
    that can never detect are dropped (exact: a group is detected when any run detects it),
    groups with the same runs are merged, and a group whose runs include all runs of another
    is dropped (detecting the other detects it).  ``reps[j]``: an input group standing for
    reduced group j (for messages)."""
    from .keys import canonical, complement, mirror

    es = element_set(max_element)
    cache: dict = {}
    graphs, reps_sk = [], []
    members = []
    for gi, g in enumerate(groups):
        ids = []
        for sk in g.subs:
            c = canonical(sk)
            if c not in cache:
                st = SubTables(sk, es)
                cache[c] = len(graphs)
                graphs.append(MaskGraph(st, es))
                reps_sk.append(sk)
            ids.append(cache[c])
        members.append(ids)
        if progress:
            progress(gi + 1, len(groups))
    first = [gr.first_distance(es) for gr in graphs]
    sets = [frozenset(u for u in ids if first[u] < INF) for ids in members]
    detectable = [bool(x) for x in sets]
    uniq: dict = {}
    for gi, x in enumerate(sets):
        if x and x not in uniq:
            uniq[x] = gi
    fam = sorted(uniq, key=lambda x: (len(x), sorted(x)))
    kept = []
    for x in fam:                       # smallest first: a superset of a kept set is implied
        if not any(y < x for y in kept):
            kept.append(x)
    reps = [groups[uniq[x]] for x in kept]

    def closed(fn):
        have = set(kept)
        for x in kept:
            img = set()
            for u in x:
                c = canonical(fn(reps_sk[u]))
                if c not in cache:
                    return False
                img.add(cache[c])
            if frozenset(img) not in have:
                return False
        return True

    offs = np.cumsum([0] + [len(gr.masks) for gr in graphs])
    T = np.concatenate([gr.T + offs[i] for i, gr in enumerate(graphs)], axis=1) if graphs else np.zeros((2, 0, es.size), np.int32)
    d = np.concatenate([gr.d for gr in graphs], axis=1) if graphs else np.zeros((2, 0), np.int32)
    flat, starts, fd = [], [], []
    for x in kept:
        starts.append(len(flat))
        for u in sorted(x):
            flat.append(offs[u] + graphs[u].init)
            fd.append(first[u])
    prob = Problem(
        max_element=max_element, T=T.astype(np.int32), d=d.astype(np.int32),
        init=np.array(flat, dtype=np.int32), first_d=np.array(fd, dtype=np.int32),
        starts=np.array(starts, dtype=np.int64), singletons=all(len(x) == 1 for x in kept),
        comp_sym=closed(complement), mirror_sym=closed(mirror), es=es,
    )
    return prob, detectable, reps


def group_distances(prob: Problem) -> np.ndarray:
    fd = prob.first_d.astype(np.int64)
    return np.minimum.reduceat(fd, prob.starts) if fd.size else fd


# ---------------------------------------------------------------------------------------
# greedy first solution


def greedy(prob: Problem):
    """A complete test quickly: list of element indices (an upper bound for the search)."""
    es = prob.es
    gids = prob.init.copy()
    f = 0
    path = []
    first = True
    steps = 0
    budget = prob.max_element
    while True:
        fr = 0 if first else f
        n = es.upto[budget]
        C = prob.T[fr][gids, :n]
        H = prob.d[es.fend[fr, :n][None, :], C]
        Hg = np.minimum.reduceat(H, prob.starts, axis=0) if not prob.singletons else H
        cur = prob.d[fr if not first else 0, gids]
        cur_g = np.minimum.reduceat(cur, prob.starts) if not prob.singletons else cur
        if (cur_g == 0).all():
            return path
        allowed = np.ones(n, dtype=bool)
        if first:
            allowed[:] = False
            allowed[prob.first_elements(budget)] = True
        total_now = cur_g.sum()
        total = Hg.sum(axis=0)
        gain = (total_now - total) / es.cost[:n]
        gain[~allowed] = -np.inf
        if steps < 200 and gain.max() > 0:
            e = int(np.argmax(gain))
        else:                              # follow the hardest key's shortest path
            j = int(np.argmax(np.where(cur_g >= INF, -1, cur_g)))
            on_path = (es.cost[:n] + Hg[j] == cur_g[j]) & allowed
            e = int(np.nonzero(on_path)[0][0])
        path.append(e)
        gids = C[:, e].copy()
        f = int(es.fend[fr, e])
        first = False
        steps += 1
        if steps > 10_000:   # pragma: no cover - every step above finishes or shortens a key
            raise RuntimeError("greedy construction did not finish")


# ---------------------------------------------------------------------------------------
# IDA*


def _dfs_task(prob: Problem, roots, L, deadline, node_cap=None, guide=False, tick=None, tt=None):
    """Search the subtrees below the given first elements for a test of length ≤ L.

    Returns (status, path or None, nodes): status 'found' | 'exhausted' | 'timeout'."""
    es = prob.es
    nodes = 0
    # nodes already searched at this bound without success; a serial run shares it between
    # chunks (an earlier chunk failed, so skipping its dead ends finds the same first solution)
    tt = {} if tt is None else tt
    found = None

    class _Stop(Exception):
        pass

    def rec(f, gids, g, path):
        nonlocal nodes, found
        nodes += 1
        if nodes & 1023 == 0:
            if deadline is not None and time.time() > deadline:
                raise _Stop
            if tick is not None and nodes & 8191 == 0:
                tick(nodes)
        if node_cap is not None and nodes > node_cap:
            raise _Stop
        ch = prob.children(f, gids, L - g, guide=guide)
        if ch is None:
            return False
        idx, C, h = ch
        for e in idx.tolist():
            c = int(es.cost[e])
            if h[e] == 0:
                found = path + [e]
                return True
            nf = int(es.fend[f, e])
            child = C[:, e]
            key = (nf, child.tobytes())
            seen = tt.get(key)
            if seen is not None and seen <= g + c:
                continue
            if len(tt) > 3_000_000:
                tt.clear()
            tt[key] = g + c
            if rec(nf, child, g + c, path + [e]):
                return True
        return False

    try:
        ch = prob.children(0, prob.init, L, first=True, guide=guide)
        if ch is not None:
            idx, C, h = ch
            want = set(int(r) for r in roots)
            for e in idx.tolist():
                if e not in want:
                    continue
                c = int(es.cost[e])
                if h[e] == 0:
                    return "found", [e], nodes
                nf = int(es.fend[0, e])
                if rec(nf, C[:, e], c, [e]):
                    return "found", found, nodes
    except _Stop:
        return "timeout", None, nodes
    return "exhausted", None, nodes


def _chunks(items, k):
    k = max(1, min(k, len(items)))
    size = -(-len(items) // k)
    return [items[i:i + size] for i in range(0, len(items), size)]


@dataclass
class SearchOutcome:
    path: list
    length: int
    proven: bool
    lower_bound: int
    nodes: int
    first_solution_s: float
    elapsed_s: float
    stopped: str = ""          # "", "time limit", "interrupted"
    remote_levels: int = 0     # bounds searched on the executor


def search(prob: Problem, max_length=None, time_limit=None, executor=None, chunks=None, progress=None,
           beam_width=50, local_nodes=20_000, exact=True):
    """Shortest test over the problem's groups.  ``executor``: None (serial) or an object with
    ``submit``/``gather`` (e.g. a dask.distributed Client).  ``progress(dict)`` is called as
    the search goes on."""
    t0 = time.time()
    deadline = t0 + time_limit if time_limit else None
    es = prob.es
    best = greedy(prob)
    best_len = int(sum(es.cost[e] for e in best))
    t_first = time.time() - t0
    lb = prob.root_bound()
    if progress:
        progress({"phase": "first solution", "lower_bound": lb, "best": best_len, "nodes": 0,
                  "elapsed": time.time() - t0})
    stopped = ""
    if best_len > lb and beam_width:
        try:
            got = beam(prob, beam_width, upper=best_len, deadline=deadline)
        except KeyboardInterrupt:
            got, stopped = None, "interrupted"
        if got is not None:
            best, best_len = got, int(sum(es.cost[e] for e in got))
            t_first = time.time() - t0
        if deadline is not None and time.time() > deadline:
            stopped = "time limit"
    nodes = 0
    shared = None
    n_chunks = chunks or 16

    def report():
        if progress:
            progress({"phase": "exact search", "lower_bound": lb, "best": best_len, "nodes": nodes,
                      "elapsed": time.time() - t0})

    report()
    opened = None
    factory = executor if (callable(executor) and not hasattr(executor, "submit")) else None
    client = None if factory is not None else executor
    prev_nodes = 0
    remote_levels = 0
    try:
        L = lb
        while exact and L < best_len and not stopped:
            if max_length is not None and L > max_length:
                break
            roots = prob.first_elements(L).tolist()
            parts = _chunks(roots, n_chunks)
            result = None
            timed_out = False
            level_start = nodes
            # small levels run here; the executor takes the levels worth shipping
            remote = (factory is not None or client is not None) and prev_nodes >= local_nodes
            if remote and client is None:
                opened = factory()
                client = opened.__enter__()
            if remote and shared is None and hasattr(client, "scatter"):
                shared = client.scatter(prob, broadcast=True)
            executor = client if remote else None
            remote_levels += bool(remote)
            if executor is None:
                shared_tt: dict = {}
                for part in parts:
                    base = nodes
                    status, path, k = _dfs_task(prob, part, L, deadline, tick=lambda n: progress and progress(
                        {"phase": "exact search", "lower_bound": lb, "best": best_len, "nodes": base + n,
                         "elapsed": time.time() - t0}), tt=shared_tt)
                    nodes += k
                    report()
                    if status == "found":
                        result = path
                        break
                    if status == "timeout":
                        timed_out = True
                        break
            else:
                target = shared if shared is not None else prob
                futs = [executor.submit(_dfs_task, target, part, L, deadline) for part in parts]
                try:
                    for fu in futs:
                        status, path, k = executor.gather(fu) if hasattr(executor, "gather") else fu.result()
                        nodes += k
                        report()
                        if status == "found":
                            result = path
                            break
                        if status == "timeout":
                            timed_out = True
                            break
                finally:
                    for fu in futs:
                        if hasattr(fu, "cancel"):
                            fu.cancel()
            if result is not None:
                best, best_len = result, int(sum(es.cost[e] for e in result))
                lb = best_len
                report()
                break
            if timed_out:
                stopped = "time limit"
                break
            lb = L + 1
            prev_nodes = nodes - level_start
            report()
            L += 1
    except KeyboardInterrupt:
        stopped = "interrupted"
    finally:
        if opened is not None:
            opened.__exit__(None, None, None)
    proven = lb >= best_len and not stopped
    return SearchOutcome(best, best_len, proven, min(lb, best_len), nodes, t_first, time.time() - t0, stopped,
                         remote_levels)


def path_items(prob: Problem, path):
    """Element indices → [(order, ((kind, value), ...))] with reads at their fault-free value."""
    es = prob.es
    out = []
    f = 0
    for e in path:
        ops = concrete_ops(es.patterns[e], f)
        out.append((es.order[e], ops))
        f = int(es.fend[f, e])
    return out


SCORE_UNDONE = 0


def beam(prob: Problem, width=400, upper=None, deadline=None, per_node=None):
    """Beam search by test length: for every length g keep the ``width`` prefixes with the
    least total remaining work (sum over keys of their exact distances).  Returns the shortest
    complete test it meets (element indices) or None.  Not exact; gives the upper bound."""
    es = prob.es
    per_node = per_node or width
    seen_best = None
    buckets: dict = {0: [(0, 0, prob.init.copy(), [], True)]}
    seen: dict = {}
    g = 0
    limit = upper if upper is not None else 10_000
    while g < limit:
        if deadline is not None and time.time() > deadline:
            return None
        nodes = buckets.pop(g, [])
        if not nodes:
            if not buckets:
                return None
            g = min(buckets)
            continue
        nodes.sort(key=lambda x: (x[0], x[1]))
        for _, _, gids, path, first in nodes[:width]:
            f = _f_of(prob, path)
            rem = limit - 1 - g
            ch = prob.children(f, gids, rem, first=first)
            if ch is None:
                continue
            idx, C, h = ch
            n = C.shape[1]
            H = prob.d[es.fend[0 if first else f, :n][None, :], C]
            Hg = (np.minimum.reduceat(H, prob.starts, axis=0) if not prob.singletons else H)
            tot = Hg.sum(axis=0) + SCORE_UNDONE * (Hg > 0).sum(axis=0)
            done = idx[h[idx] == 0]
            if done.size:     # complete tests among the children: keep the shortest
                e = int(done[np.lexsort((done, es.cost[done]))][0])
                limit = g + int(es.cost[e])
                seen_best = path + [e]
                buckets = {k: v for k, v in buckets.items() if k < limit}
                continue
            srt = idx[np.lexsort((idx, tot[idx], es.cost[idx]))]       # per length, least work first
            cs = es.cost[srt]
            rank_in = np.arange(srt.size) - np.searchsorted(cs, cs, side="left")
            keep = srt[rank_in < per_node]
            for e in keep.tolist():
                c = g + int(es.cost[e])
                if c >= limit:
                    continue
                nf = int(es.fend[0 if first else f, e])
                child = C[:, e]
                key = (nf, child.tobytes())
                if seen.get(key, 1 << 30) <= c:
                    continue
                seen[key] = c
                buckets.setdefault(c, []).append((int(tot[e]), len(buckets.get(c, ())), child.copy(), path + [e], False))
        g += 1
    return seen_best


def _f_of(prob, path):
    f = 0
    for e in path:
        f = int(prob.es.fend[f, e])
    return f
