"""Set-up that depends only on the memory and the pair scope, computed once and shared.

:func:`memory_setup` returns a cached :class:`MemorySetup` per :class:`~marchkit.model.Memory`
(the last few memories are kept), so every family of one grading and every test of a
``compare`` share the address order, the cell keys and the pair counts per key.

Keys: a cell's *key* is the index of its background bits (one per run) among the patterns
present; a word's key likewise for all its bits.  Pair counts per (structure, key, key) are
counted on the cell grid, a chunk of rows at a time, without ever listing the pairs
(``--pairs neighbours`` on 2^26 cells holds a few MB at a time).
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

SINGLE, AFIRST, VFIRST, SAME = 0, 1, 2, 3
MAX_SETUP_BYTES = 3 << 29      # what the fast engine's per-cell and per-word arrays may take (1.5 GiB)


def setup_bytes(mem) -> int:
    """Estimated bytes of the fast engine's arrays for ``mem``: per cell the background of
    every run (uint8 each), the cell key (int32) and room for one more byte; per word the order, the
    ranks, the word keys and the retention state (64 bytes)."""
    from ..model import background_names

    return mem.cells * (len(background_names(mem)) + 5) + mem.words * 64


def check_limits(mem) -> None:
    """Refuse, before any work, a memory whose arrays the fast engine cannot hold."""
    need = setup_bytes(mem)
    if need > MAX_SETUP_BYTES:
        from ..errors import EngineLimitError

        raise EngineLimitError(
            f"{mem.words:,} words × {mem.bits} bits would need about {need / 2**30:.1f} GiB of arrays "
            f"in the fast engine (at most {MAX_SETUP_BYTES / 2**30:.1f} GiB: about 2^28 cells with one "
            "background run, or 2^24 words); grade a smaller array, fewer background runs, or a sub-array")
CHUNK_CELLS = 1 << 20          # grid cells per chunk of the neighbour counting


def dense_codes(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(inverse, first): ``x`` (m,) integer → dense codes 0..U-1 in increasing order of value
    (inverse (m,) int64) and the index of the first occurrence of each (first (U,) int64).
    Sort-based (no hash-based ``np.unique``, slow on millions of distinct values)."""
    x = np.asarray(x)
    if x.size == 0:
        return np.empty(0, np.int64), np.empty(0, np.int64)
    if x.dtype.kind in "ui" and x.min() >= 0 and int(x.max()) < max(1 << 16, 4 * x.size):
        present = np.bincount(x, minlength=int(x.max()) + 1) > 0
        code = np.cumsum(present) - 1
        inv = code[x].astype(np.int64)
        first = np.full(int(present.sum()), x.size, dtype=np.int64)
        np.minimum.at(first, inv, np.arange(x.size, dtype=np.int64))
        return inv, first
    order = np.argsort(x, kind="stable")
    xs = x[order]
    new = np.empty(x.size, dtype=bool)
    new[0] = True
    new[1:] = xs[1:] != xs[:-1]
    ids = np.cumsum(new) - 1
    inv = np.empty(x.size, dtype=np.int64)
    inv[order] = ids
    return inv, order[new].astype(np.int64)


def dense_rows(m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """:func:`dense_codes` for the rows of a 0/1 matrix ``m`` (rows, cols)."""
    rows, cols = m.shape
    if cols <= 62:
        packed = (m.astype(np.int64) << np.arange(cols, dtype=np.int64)[None, :]).sum(axis=1)
        return dense_codes(packed)
    packed = np.packbits(m.astype(np.uint8), axis=1)
    v = np.ascontiguousarray(packed).view(np.dtype((np.void, packed.shape[1]))).ravel()
    _, first, inv = np.unique(v, return_index=True, return_inverse=True)
    return inv.ravel().astype(np.int64), first.astype(np.int64)


class MemorySetup:
    """Arrays of one memory (every array indexed by logical word or flat cell ``w·B + b``):

    * ``order`` (n,) int64 — the ⇑ address sequence; ``rank`` (n,) int64 — its inverse;
    * ``bg`` (R, n, B) uint8 — the background of each run;
    * ``key_bits`` (K, R) int8 — the background bits of each cell key;
      ``cell_key`` (n·B,) int32 — each cell's key (int32, not smaller, so that key arithmetic
      in a fast path cannot wrap around);
    * :meth:`word_keys`, :meth:`word_key_hist`, :meth:`pair_counts`, :meth:`word_pair_counts`
      — computed on first use and kept.
    """

    def __init__(self, mem):
        from ..model import address_order, background_stack, ranks

        self.mem = mem
        self.order = address_order(mem)
        self.rank = ranks(self.order)
        self.bg = background_stack(mem)
        self.R, self.n, self.B = self.bg.shape
        bits = self.bg.reshape(self.R, -1)                       # (R, n·B)
        if self.R <= 20:
            if self.R == 1:
                raw = bits[0]
            else:
                raw = np.zeros(bits.shape[1], dtype=np.uint8 if self.R <= 8 else np.int32)
                for r in range(self.R):
                    raw |= bits[r].astype(raw.dtype) << raw.dtype.type(r)
            if self.R == 1:
                ones = int(np.count_nonzero(raw))
                present = np.array([ones < raw.size, ones > 0])
            else:
                present = np.zeros(1 << self.R, dtype=bool)
                for i in range(0, raw.size, CHUNK_CELLS * 4):      # bincount casts to intp: chunk it
                    present |= np.bincount(raw[i:i + CHUNK_CELLS * 4], minlength=1 << self.R) > 0
            code = (np.cumsum(present) - 1)
            vals = np.nonzero(present)[0]
            self.key_bits = ((vals[:, None] >> np.arange(self.R)[None, :]) & 1).astype(np.int8)
            self.K = int(vals.size)
            if self.K == 1:
                self.cell_key = np.zeros(raw.size, dtype=np.int32)
            elif self.K == (1 << self.R) and raw.dtype == np.uint8:
                self.cell_key = raw.astype(np.int32)                  # every pattern present: identity
            else:
                self.cell_key = np.take(code.astype(np.int32), raw)
        else:
            inv, first = dense_rows(bits.T)
            self.key_bits = bits.T[first].astype(np.int8)
            self.K = int(first.size)
            self.cell_key = inv.astype(np.int32)
        self._cache: dict = {}

    # ---- words ---------------------------------------------------------------------
    def word_keys(self):
        """(key (n,) int64 per word, representative word (U,) int64 per key): words with the
        same data in every run share a key."""
        if "wk" not in self._cache:
            if self.K ** self.B <= (1 << 62) and self.B <= 62:
                ck = self.cell_key.reshape(self.n, self.B).astype(np.int64)
                packed = np.zeros(self.n, dtype=np.int64)
                for b in range(self.B):
                    packed = packed * self.K + ck[:, b]
                self._cache["wk"] = dense_codes(packed)
            else:
                self._cache["wk"] = dense_rows(np.ascontiguousarray(self.bg.transpose(1, 0, 2).reshape(self.n, -1)))
        return self._cache["wk"]

    def word_key_hist(self):
        """(n, K) int64: how many cells of each word have each key."""
        if "wkh" not in self._cache:
            H = np.zeros((self.n, self.K), dtype=np.int64)
            ck = self.cell_key.reshape(self.n, self.B)
            for k in range(self.K):
                H[:, k] = (ck == k).sum(axis=1)
            self._cache["wkh"] = H
        return self._cache["wkh"]

    def sof_keys(self):
        """(count (U,) int64, representative cell (U,) int64) per stuck-open key.  The key
        of a cell: where its word sits (first, second, second-last, last in ⇑) and the cell's
        bit in every run in the first word, the words just before and after it, its own and
        the last word — all a read-to-read chain of the sense amplifier can reach.  Keys are
        numbered in increasing order of those bits packed (flags first); the representative
        is the first cell with the key."""
        if "sof" not in self._cache:
            n, B, R = self.n, self.B, self.R
            w = np.arange(n, dtype=np.int64)
            r = self.rank
            pred = self.order[np.maximum(r - 1, 0)]
            succ = self.order[np.minimum(r + 1, n - 1)]
            flags = np.stack([r == 0, r == 1, r == n - 2, r == n - 1], axis=1)   # (n, 4)
            ctx = (np.full(n, self.order[0]), pred, w, succ, np.full(n, self.order[-1]))
            if 4 + 5 * R <= 24:
                space = 1 << (4 + 5 * R)
                packed = (flags.astype(np.int32) << np.arange(4, dtype=np.int32)).sum(axis=1).astype(np.int32)
                counts = np.zeros(space, dtype=np.int64)
                first = np.full(space, n * B, dtype=np.int64)
                step = max(1, CHUNK_CELLS // B)
                for w0 in range(0, n, step):
                    sl = slice(w0, min(n, w0 + step))
                    key = np.broadcast_to(packed[sl, None], (sl.stop - sl.start, B)).astype(np.int32)
                    for cw in ctx:
                        for run in range(R):
                            key = key << 1 | self.bg[run, cw[sl]].astype(np.int32)
                    key = key.ravel()
                    c = np.bincount(key, minlength=space)
                    new = np.nonzero((c > 0) & (counts == 0))[0]
                    if new.size:        # first cell of each key seen for the first time
                        order = np.argsort(key, kind="stable")
                        pos = np.searchsorted(key[order], new)
                        first[new] = w0 * B + order[pos]
                    counts += c
                present = counts > 0
                self._cache["sof"] = (counts[present], first[present])
            else:   # very many background runs: number the distinct rows of bits
                ww = np.repeat(w, B)
                b = np.tile(np.arange(B), n)
                cols = [np.repeat(flags, B, axis=0)[:, ::-1]]
                cols += [self.bg[run, cw[ww], b][:, None] for cw in ctx for run in range(R)]
                inv, first = dense_rows(np.concatenate([c.astype(np.uint8) for c in cols], axis=1)[:, ::-1])
                self._cache["sof"] = (np.bincount(inv, minlength=first.size), first)
        return self._cache["sof"]

    # ---- cell pairs ----------------------------------------------------------------
    def pair_counts(self, scope):
        """counts[structure, key a, key v] (4, K, K) int64 over the ordered cell pairs of
        ``scope`` (structure 1: a's word first in ⇑, 2: v's first, 3: same word)."""
        key = ("pc", scope)
        if key not in self._cache:
            self._cache[key] = self._pair_counts(scope)
        return self._cache[key]

    def _pair_counts(self, scope):
        from ..faults import cell_pairs

        if scope.is_all:
            return self._pair_counts_all()
        kinds = {p[0] for p in scope.parts}
        if kinds <= {"neighbours", "word"}:
            out = np.zeros((4, self.K, self.K), dtype=np.int64)
            if "neighbours" in kinds:
                out += self._neighbour_counts()
            if "word" in kinds:      # a superset of the neighbour pairs inside one word
                out[SAME] = self._same_word_counts()
            return out
        a, v = cell_pairs(self.mem, scope)
        return self.pair_counts_explicit(a, v)

    def _pair_counts_all(self):
        n, K = self.n, self.K
        H = self.word_key_hist()
        Hs = H[self.order].astype(np.float64)
        P = np.cumsum(Hs, axis=0) - Hs
        out = np.zeros((4, K, K), dtype=np.int64)
        out[AFIRST] = np.rint(P.T @ Hs).astype(np.int64)
        out[VFIRST] = np.rint(Hs.T @ P).astype(np.int64)
        out[SAME] = self._same_word_counts()
        return out

    def _same_word_counts(self):
        H = self.word_key_hist()
        Hf = H.astype(np.float64)
        return np.rint(Hf.T @ Hf).astype(np.int64) - np.diag(H.sum(axis=0))

    def pair_structure(self, a, v):
        """(m,) int64 structure of explicit cell pairs ``a``, ``v`` (m,)."""
        wa, wv = a // self.B, v // self.B
        ra, rv = self.rank[wa], self.rank[wv]
        return np.where(wa == wv, SAME, np.where(ra < rv, AFIRST, VFIRST))

    def pair_counts_explicit(self, a, v):
        """(4, K, K) int64 counts over explicit cell pairs ``a``, ``v`` (m,) int64."""
        K = self.K
        s = self.pair_structure(a, v)
        key = (s * K + self.cell_key[a].astype(np.int64)) * K + self.cell_key[v]
        return np.bincount(key, minlength=4 * K * K).reshape(4, K, K)

    def grid_rows(self, r0, r1):
        """Logical word (h, cols) int64 and cell key (h, cols) of grid rows [r0, r1)."""
        mem = self.mem
        rr = np.arange(r0, r1, dtype=np.int64)
        lw = mem.logical_word(rr[:, None] * mem.mux + np.arange(mem.mux, dtype=np.int64)[None, :])
        W = np.tile(lw, (1, self.B))                               # column c → slot c % mux
        bitc = np.repeat(np.arange(self.B, dtype=np.int64), mem.mux)  # column c → bit c // mux
        return W, self.cell_key[W * self.B + bitc[None, :]]

    def _neighbour_counts(self):
        """Counts over the physical neighbour pairs, on the grid, a chunk of rows at a time.

        Half of the directions (dr > 0, or dr = 0 and dc > 0) are counted; the opposite ones
        follow by symmetry (the pair reversed: keys swapped, a-first ↔ v-first).  The
        structure of a pair depends only on its two words, i.e. on (row, slot): it is
        computed on (rows, mux) arrays ``S`` (uint8: 1 a first, 2 v first, 3 same word) and
        only spread over the columns (bits) when the cell keys vary (K > 1)."""
        from ..model.geometry import neighbour_directions

        from .workers import can_fork, map_forked

        mem = self.mem
        rows = mem.rows
        workers = can_fork(mem.cells, 1 << 22)
        bounds = [(0, rows)] if workers < 2 else [(0, rows // 2), (rows // 2, rows)]
        total = sum(map_forked(lambda b: self._count_rows(*b), bounds, workers))
        K = self.K
        c = total.reshape(4, K, K)
        out = c.copy()
        out[AFIRST] += c[VFIRST].T
        out[VFIRST] += c[AFIRST].T
        out[SAME] += c[SAME].T
        return out

    def _count_rows(self, row0, row1):
        """(4·K·K,) int64 counts of the half-direction neighbour pairs whose first cell is in
        grid rows [row0, row1) (see :meth:`_neighbour_counts`)."""
        from ..model.geometry import neighbour_directions

        mem, K = self.mem, self.K
        rows, cols, mux = mem.rows, mem.columns, mem.mux
        half = [(dr, dc) for dr, dc in neighbour_directions(mem) if dr > 0 or (dr == 0 and dc > 0)]
        total = np.zeros(4 * K * K, dtype=np.int64)
        chunk = max(1, CHUNK_CELLS // cols)
        code_t = np.uint8 if 4 * K * K <= 256 else np.int32
        slots = np.arange(mux)
        for r0 in range(row0, row1, chunk):
            r1 = min(row1, r0 + chunk)
            hi = min(rows, r1 + 1)                                  # one halo row below
            rr = np.arange(r0, hi, dtype=np.int64)
            lw = mem.logical_word(rr[:, None] * mux + slots[None, :])   # (h, mux) int64
            rk = self.rank[lw]
            CK = None
            for dr, dc in half:
                a1 = min(r1, rows - dr) - r0
                c0, c1 = max(0, -dc), cols - max(0, dc)
                if a1 <= 0 or c1 <= c0:
                    continue
                sb = (slots + dc) % mux                              # slot of the neighbour column
                Ra, Rb = rk[:a1], rk[dr:dr + a1][:, sb]
                S = (Ra > Rb).view(np.uint8) + 1
                S += (Ra == Rb).view(np.uint8) * 2
                colslot = np.arange(c0, c1) % mux
                if K == 1:
                    nb = np.bincount(colslot, minlength=mux)       # valid columns per slot
                    for sv in (1, 2, 3):
                        total[sv] += int(((S == sv) * nb[None, :]).sum())
                    continue
                if CK is None:
                    _, CK = self.grid_rows(r0, hi)
                    CK = CK.astype(code_t)
                # (the column gather comes out column-major: make it row-major like CK)
                Sc = S.astype(code_t) if mux == 1 else np.ascontiguousarray(S[:, colslot], dtype=code_t)
                # python-int scalars: a numpy scalar makes strided uint8 arithmetic ~10× slower
                code = (Sc * K + CK[:a1, c0:c1]) * K + CK[dr:dr + a1, c0 + dc:c1 + dc]
                total += np.bincount(code.ravel().astype(np.intp), minlength=4 * K * K)
        return total

    # ---- word pairs (address-decoder faults) ---------------------------------------
    def word_pair_counts(self, scope):
        """{AFIRST: (U, U) int64, VFIRST: (U, U) int64}: ordered pairs (a, b) of distinct
        words of ``scope`` per (word key of a, word key of b), by which comes first in ⇑."""
        key = ("wpc", scope)
        if key not in self._cache:
            self._cache[key] = self._word_pair_counts(scope)
        return self._cache[key]

    def _word_pair_counts(self, scope):
        from ..faults import word_pairs

        wk, rep = self.word_keys()
        U = rep.size
        if scope.is_all:
            H = np.zeros((self.n, U), dtype=np.float64)
            H[np.arange(self.n), wk] = 1
            Hs = H[self.order]
            Pf = np.cumsum(Hs, axis=0) - Hs
            return {AFIRST: np.rint(Pf.T @ Hs).astype(np.int64), VFIRST: np.rint(Hs.T @ Pf).astype(np.int64)}
        kinds = {p[0] for p in scope.parts}
        cnt = {AFIRST: np.zeros(U * U, np.int64), VFIRST: np.zeros(U * U, np.int64)}
        if kinds <= {"neighbours", "word"}:
            if "neighbours" in kinds:
                for a, b in self.neighbour_word_pair_chunks():
                    self._add_word_pairs(cnt, a, b, wk, U)
        else:
            a, b = word_pairs(self.mem, scope)
            self._add_word_pairs(cnt, a, b, wk, U)
        return {st: c.reshape(U, U) for st, c in cnt.items()}

    def _add_word_pairs(self, cnt, a, b, wk, U):
        """Add word pairs ``a``, ``b`` (m,) int64 to ``cnt`` ({structure: (U·U,) int64})."""
        first = self.rank[a] < self.rank[b]
        code = wk[a] * U + wk[b]
        cnt[AFIRST] += np.bincount(code[first], minlength=U * U)
        cnt[VFIRST] += np.bincount(code[~first], minlength=U * U)

    def word_pair_chunks(self, scope):
        """The word pairs (a, b) of an explicit ``scope`` (not ``all``), a chunk at a time."""
        from ..faults import word_pairs

        kinds = {p[0] for p in scope.parts}
        if kinds <= {"neighbours", "word"}:
            if "neighbours" in kinds:
                yield from self.neighbour_word_pair_chunks()
            return
        yield word_pairs(self.mem, scope)

    def neighbour_word_pair_chunks(self):
        """Logical word pairs (a, b), (m,) int64 each, of the neighbour scope, a chunk at a time."""
        from ..model.geometry import neighbour_word_offsets, neighbour_word_pairs_at

        mem = self.mem
        chunk = max(1, CHUNK_CELLS // mem.mux)
        for dr, ds in neighbour_word_offsets(mem):
            for r0 in range(0, mem.rows, chunk):
                p, q = neighbour_word_pairs_at(mem, dr, ds, r0, min(mem.rows, r0 + chunk))
                if p.size:
                    yield mem.logical_word(p), mem.logical_word(q)

    def neighbour_cell_pair_chunks(self):
        """Cell pairs (a, v), (m,) int64 each, of the neighbour scope, a chunk at a time, in the
        order of :func:`~marchkit.model.neighbour_edges` (for finding examples; counting never
        lists them)."""
        from ..model.geometry import neighbour_directions

        mem = self.mem
        rows, cols = mem.rows, mem.columns
        chunk = max(1, CHUNK_CELLS // cols)
        bitc = np.repeat(np.arange(self.B, dtype=np.int64), mem.mux)[None, :]
        for dr, dc in neighbour_directions(mem):
            for r0 in range(max(0, -dr), rows - max(0, dr), chunk):
                a0, a1 = r0, min(r0 + chunk, rows - max(0, dr))
                lo, hi = min(a0, a0 + dr), max(a1, a1 + dr)
                W, _ = self.grid_rows(lo, hi)
                C = W * self.B + bitc
                c0, c1 = max(0, -dc), cols - max(0, dc)
                if c1 <= c0:
                    continue
                yield (C[a0 - lo:a1 - lo, c0:c1].ravel(),
                       C[a0 + dr - lo:a1 + dr - lo, c0 + dc:c1 + dc].ravel())

    def cell_pair_chunks(self, scope):
        """The cell pairs (a, v) of an explicit ``scope`` (not ``all``), a chunk at a time;
        for combined scopes a pair may come twice."""
        from ..faults import cell_pairs

        kinds = {p[0] for p in scope.parts}
        if not kinds <= {"neighbours", "word"}:
            yield cell_pairs(self.mem, scope)
            return
        if "neighbours" in kinds:
            yield from self.neighbour_cell_pair_chunks()
        if "word" in kinds:
            B = self.B
            bb = np.arange(B)
            ba, bv = np.meshgrid(bb, bb, indexing="ij")
            keep = ba != bv
            ba, bv = ba[keep], bv[keep]
            step = max(1, CHUNK_CELLS // max(1, B * B))
            for w0 in range(0, self.n, step):
                w = np.arange(w0, min(self.n, w0 + step), dtype=np.int64)[:, None]
                yield (w * B + ba[None, :]).ravel(), (w * B + bv[None, :]).ravel()


@lru_cache(maxsize=2)
def memory_setup(mem) -> MemorySetup:
    """The shared :class:`MemorySetup` of ``mem`` (cached: the last two memories)."""
    return MemorySetup(mem)
