"""Tests for the memory model: geometry and its validation, the address map, the physical
neighbours, address orders, data backgrounds, timing and memory files.

Each check against something outside the project names its source in a comment; facts of
the trade are marked "common practice, no source", values recalled are marked "from memory".
The memories in the demo files (the "Tern-7" test chip) are invented.
"""

from __future__ import annotations

import itertools
import math
import re
import tomllib
from decimal import Decimal
from fractions import Fraction

import networkx as nx
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from marchkit.errors import ModelError, PositionedError
from marchkit.model import (
    Memory,
    address_order,
    background_array,
    background_names,
    background_stack,
    intra_word_words,
    lfsr_sequence,
    load_memory_file,
    make_memory,
    neighbour_edges,
    neighbour_graph,
    parse_duration,
    parse_frequency,
    parse_order,
    ranks,
    schedule,
    seconds_to_cycles,
)
from marchkit.model.orders import LFSR_TAPS
from marchkit.notation import Delay, Element, MarchTest, Op, parse_notation

PROPERTY = settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.too_slow])


# ---- geometry validation ---------------------------------------------------------------

@pytest.mark.parametrize(
    "kwargs, pattern",
    [
        (dict(words=10, mux=3), r"column mux 3 does not divide 10 words into whole rows"),
        (dict(words=16, mux=0), r"column mux 0 does not divide 16 words"),
        (dict(words=16, bits=0), r"bits per word must be 1 to 1024 \(got 0\)"),
        (dict(words=16, bits=1025), r"bits per word must be 1 to 1024 \(got 1025\)"),
        (dict(words=1), r"at least 2 words \(got 1\)"),
        (dict(words=16, scramble_bits=(0, 1, 2)), r"permutation of 0\.\.3 \(4 address bits for 16 words\), got \[0, 1, 2\]"),
        (dict(words=16, scramble_bits=(0, 1, 1, 3)), r"permutation of 0\.\.3.*got \[0, 1, 1, 3\]"),
        (dict(words=16, scramble_bits=(0, 1, 2, 4)), r"permutation of 0\.\.3"),
        (dict(words=16, scramble_xor=16), r"XOR mask 0x10 has bits beyond the 4 address bits"),
        (dict(words=16, scramble_xor=-1), r"XOR mask .* has bits beyond the 4 address bits"),
        (dict(words=12, scramble_bits=(0, 1, 2, 3)), r"address-bit scrambling needs a power-of-two number of words"),
        (dict(words=12, scramble_xor=3), r"XOR scrambling needs a power-of-two number of words"),
        (dict(words=16, read_cycles=0), r"at least one clock cycle"),
        (dict(words=16, write_cycles=0), r"at least one clock cycle"),
        (dict(words=16, neighbours=6), r"neighbours must be 4 .* or 8"),
        (dict(words=16, clock="0MHz"), r"clock frequency must be positive"),
        (dict(words=16, order="zigzag"), r"unknown address order 'zigzag'"),
        (dict(words=16, order="stride:4"), r"stride 2\^4 is not smaller than the 16 words"),
        (dict(words=16, order="random:x"), r"'x' is not a whole number"),
        (dict(words=16, backgrounds=("plaid",)), r"unknown background 'plaid'"),
        (dict(words=16, bits=4, backgrounds=("0x1F",)), r"more bits than the 4-bit word"),
        (dict(words=16, backgrounds=()), r"at least one data background"),
    ],
)
def test_impossible_geometry_raises_model_error(kwargs, pattern):
    with pytest.raises(ModelError) as info:
        make_memory(**kwargs)
    assert re.search(pattern, info.value.message), info.value.message
    assert info.value.exit_code == 2
    assert info.value.render().startswith("error: ")


def test_good_geometry_derived_values():
    m = make_memory(256, 8, mux=4, scramble_bits="1,0,2,3,4,5,6,7", scramble_xor="0x0F")
    assert (m.rows, m.columns, m.cells, m.address_bits) == (64, 32, 2048, 8)
    assert m.word_oriented
    assert not make_memory(2).word_oriented
    # address bits = ceil(log2 words) (common practice, no source)
    assert make_memory(1000).address_bits == 10 and make_memory(1024).address_bits == 10


# ---- the address map ---------------------------------------------------------------------

@st.composite
def scrambled_memories(draw):
    k = draw(st.integers(1, 10))
    perm = draw(st.permutations(list(range(k))))
    use_perm = draw(st.booleans())
    xor = draw(st.integers(0, (1 << k) - 1))
    mux_exp = draw(st.integers(0, k))
    bits = draw(st.integers(1, 5))
    return make_memory(1 << k, bits, mux=1 << min(mux_exp, k),
                       scramble_bits=tuple(perm) if use_perm else None, scramble_xor=xor)


@PROPERTY
@given(scrambled_memories())
def test_physical_and_logical_word_are_inverse_permutations(mem):
    a = np.arange(mem.words)
    p = mem.physical_word(a)
    # a bijection of 0..words-1 onto itself (definition of a permutation)
    assert sorted(p.tolist()) == a.tolist()
    assert np.array_equal(mem.logical_word(p), a)
    assert np.array_equal(mem.physical_word(mem.logical_word(a)), a)
    # the map as documented: physical bit i is logical bit scramble_bits[i], then XOR
    perm = mem.scramble_bits or tuple(range(mem.address_bits))
    for x in (0, mem.words - 1, mem.words // 3):
        want = sum(((x >> src) & 1) << i for i, src in enumerate(perm)) ^ mem.scramble_xor
        assert int(mem.physical_word(x)) == want


@PROPERTY
@given(scrambled_memories())
def test_place_and_cell_at_are_inverse(mem):
    w = np.repeat(np.arange(mem.words), mem.bits)
    b = np.tile(np.arange(mem.bits), mem.words)
    row, col = mem.place(w, b)
    assert row.min() >= 0 and row.max() < mem.rows
    assert col.min() >= 0 and col.max() < mem.columns
    # every physical place is used exactly once
    assert len(set(zip(row.tolist(), col.tolist()))) == mem.cells
    w2, b2 = mem.cell_at(row, col)
    assert np.array_equal(w2, w) and np.array_equal(b2, b)


def test_mux_interleaves_bits():
    # behind a 4:1 column mux the same bit of 4 consecutive words sits side by side
    # (common practice, no source)
    m = make_memory(16, 2, mux=4)
    assert [tuple(int(x) for x in m.place(w, 0)) for w in range(4)] == [(0, 0), (0, 1), (0, 2), (0, 3)]
    assert tuple(int(x) for x in m.place(0, 1)) == (0, 4)
    assert tuple(int(x) for x in m.place(4, 0)) == (1, 0)


# ---- neighbours ----------------------------------------------------------------------------

GEOMETRIES = [
    dict(words=16),
    dict(words=16, neighbours=4),
    dict(words=8, bits=4),
    dict(words=8, bits=4, neighbours=4),
    dict(words=32, bits=2, mux=4),
    dict(words=32, bits=2, mux=4, neighbours=4),
    dict(words=32, bits=3, mux=2, scramble_bits=(4, 2, 0, 1, 3), scramble_xor=0b10110),
    dict(words=32, bits=3, mux=2, scramble_bits=(4, 2, 0, 1, 3), scramble_xor=0b10110, neighbours=4),
    dict(words=12, bits=3, mux=3),
    dict(words=4, mux=4),                     # a single row
    dict(words=5),                            # a single column
]


def _ids(g):
    return ",".join(f"{k}={v}" for k, v in g.items())


@pytest.mark.parametrize("geo", GEOMETRIES, ids=_ids)
def test_neighbour_edges_match_neighbour_graph(geo):
    mem = make_memory(**geo)
    src, dst = neighbour_edges(mem)
    directed = list(zip(src.tolist(), dst.tolist()))
    assert len(directed) == len(set(directed)), "no duplicate edges"
    assert all(a != b for a, b in directed), "no self-loops"

    g = neighbour_graph(mem)
    assert isinstance(g, nx.Graph) and g.number_of_nodes() == mem.cells
    # networkx is the reference: each undirected edge of its graph, in both directions
    flat = lambda node: node[0] * mem.bits + node[1]
    from_graph = set()
    for u, v in g.edges():
        from_graph.add((flat(u), flat(v)))
        from_graph.add((flat(v), flat(u)))
    assert set(directed) == from_graph


@pytest.mark.parametrize("geo", GEOMETRIES, ids=_ids)
def test_neighbour_count_closed_form(geo):
    mem = make_memory(**geo)
    r, c = mem.rows, mem.columns
    # rows x cols grid graph: r(c-1) + c(r-1) edges with N/S/E/W, plus 2(r-1)(c-1)
    # diagonals (elementary combinatorics)
    undirected = r * (c - 1) + c * (r - 1)
    if mem.neighbours == 8:
        undirected += 2 * (r - 1) * (c - 1)
    src, _ = neighbour_edges(mem)
    assert src.size == 2 * undirected
    assert neighbour_graph(mem).number_of_edges() == undirected
    # cross-check with networkx's own grid generator (4 neighbours)
    if mem.neighbours == 4:
        assert nx.grid_2d_graph(r, c).number_of_edges() == undirected


@pytest.mark.parametrize("geo", GEOMETRIES, ids=_ids)
def test_neighbour_graph_is_physical(geo):
    mem = make_memory(**geo)
    g = neighbour_graph(mem)
    step = {"N": (-1, 0), "S": (1, 0), "W": (0, -1), "E": (0, 1),
            "NW": (-1, -1), "NE": (-1, 1), "SW": (1, -1), "SE": (1, 1)}
    for u, v, d in g.edges(data="direction"):
        (ru, cu), (rv, cv) = [(g.nodes[x]["row"], g.nodes[x]["column"]) for x in (u, v)]
        dr, dc = rv - ru, cv - cu
        assert (dr, dc) in (step[d], (-step[d][0], -step[d][1]))
        assert max(abs(dr), abs(dc)) == 1
        if mem.neighbours == 4:
            assert abs(dr) + abs(dc) == 1
    # with networkx as the reference: the graph is a grid graph relabelled by place
    if mem.neighbours == 4:
        grid = nx.grid_2d_graph(mem.rows, mem.columns)
        placed = nx.relabel_nodes(g, {n: (g.nodes[n]["row"], g.nodes[n]["column"]) for n in g})
        assert set(map(frozenset, placed.edges())) == set(map(frozenset, grid.edges()))


def test_scrambling_changes_neighbours():
    plain = make_memory(16)
    scrambled = make_memory(16, scramble_xor=0b0101)
    pairs = lambda m: set(zip(*(x.tolist() for x in neighbour_edges(m))))
    assert pairs(plain) != pairs(scrambled)
    # in a 16x1 column, logical words 0 and 1 are physical rows 5 and 4: still neighbours
    assert (0, 1) in pairs(scrambled)


# ---- address orders --------------------------------------------------------------------

ORDER_SPECS = ["linear", "gray", "complement", "stride:0", "stride:1", "stride:2",
               "random:0", "random:1", "random:7", "random:12345"]


@pytest.mark.parametrize("spec", ORDER_SPECS)
@pytest.mark.parametrize("n", [2, 3, 5, 8, 12, 16, 64, 100, 1024])
def test_every_order_is_a_permutation(spec, n):
    if spec.startswith("stride:") and (1 << int(spec[7:])) >= n:
        with pytest.raises(ModelError):
            make_memory(n, order=spec)
        return
    order = address_order(make_memory(n, order=spec))
    assert sorted(order.tolist()) == list(range(n))
    r = ranks(order)
    assert np.array_equal(order[r], np.arange(n))


def test_linear_order():
    assert address_order(make_memory(6)).tolist() == [0, 1, 2, 3, 4, 5]


def _reflected_gray(k: int) -> list[int]:
    # binary-reflected Gray code by its construction: G(k) = 0G(k-1), 1·reverse(G(k-1))
    # (F. Gray, US patent 2,632,058, 1953; from memory)
    codes = [0]
    for i in range(k):
        codes = codes + [(1 << i) | c for c in reversed(codes)]
    return codes


@pytest.mark.parametrize("k", range(1, 13))
def test_gray_order_power_of_two(k):
    n = 1 << k
    order = address_order(make_memory(max(2, n), order="gray")).tolist()
    assert order == _reflected_gray(k)
    # consecutive addresses differ in exactly one bit, also from the last back to the first
    # (definition of the binary-reflected Gray code)
    for a, b in zip(order, order[1:] + order[:1]):
        assert bin(a ^ b).count("1") == 1


def test_gray_order_other_sizes_keep_gray_sequence():
    # for n not a power of two: the Gray sequence of the next power of two, restricted to 0..n-1
    order = address_order(make_memory(6, order="gray")).tolist()
    assert order == [g for g in _reflected_gray(3) if g < 6]


@pytest.mark.parametrize("n", [2, 3, 7, 8, 33, 64])
def test_complement_order(n):
    # each address followed by its complement: 0, n-1, 1, n-2, ...
    # (address-complement order, common practice, no source)
    order = address_order(make_memory(n, order="complement")).tolist()
    for i in range(n // 2):
        assert order[2 * i] == i
        assert order[2 * i + 1] == n - 1 - order[2 * i]
    if n % 2:
        assert order[-1] == n // 2
    if n & (n - 1) == 0:
        for i in range(n // 2):   # for n = 2^k the pair is a bitwise complement
            assert order[2 * i] ^ order[2 * i + 1] == n - 1


@pytest.mark.parametrize("n, i", [(16, 0), (16, 1), (16, 2), (16, 3), (64, 3), (10, 1), (10, 3), (100, 4)])
def test_stride_order(n, i):
    # 2^i address increments: 0, 2^i, 2*2^i, ... then the next residue (common practice, no source)
    s = 1 << i
    order = address_order(make_memory(n, order=f"stride:{i}")).tolist()
    assert order == [a for r in range(s) for a in range(r, n, s)]
    # residues mod 2^i come in blocks, in increasing order
    res = [a % s for a in order]
    assert res == sorted(res)
    assert [k for k, _ in itertools.groupby(res)] == list(range(s))


def test_parse_order():
    assert parse_order(" Gray ") == ("gray", None)
    assert parse_order("stride:3") == ("stride", 3)
    assert parse_order("random:0x10") == ("random", 16)
    assert parse_order("stride") == ("stride", 1)
    for bad in ("stride:-1", "random:abc", "up", ""):
        with pytest.raises(ModelError):
            parse_order(bad)


def _gf2_mulmod(a: int, b: int, poly: int, deg: int) -> int:
    out = 0
    while b:
        if b & 1:
            out ^= a
        b >>= 1
        a <<= 1
        if a >> deg & 1:
            a ^= poly
    return out


def _gf2_powmod(e: int, poly: int, deg: int) -> int:
    result, base = 1, 2          # x
    while e:
        if e & 1:
            result = _gf2_mulmod(result, base, poly, deg)
        base = _gf2_mulmod(base, base, poly, deg)
        e >>= 1
    return result


def _prime_factors(n: int) -> set[int]:
    out, p = set(), 2
    while p * p <= n:
        while n % p == 0:
            out.add(p)
            n //= p
        p += 1
    if n > 1:
        out.add(n)
    return out


@pytest.mark.parametrize("width", sorted(LFSR_TAPS))
def test_lfsr_taps_are_primitive_polynomials(width):
    # An LFSR has maximal period 2^k - 1 exactly when its feedback polynomial
    # x^k + sum x^t + 1 is primitive over GF(2): x has order 2^k - 1 modulo it
    # (LFSR theory, e.g. S. W. Golomb, "Shift Register Sequences", 1967; from memory)
    taps = LFSR_TAPS[width]
    assert taps[0] == width
    poly = 1
    for t in taps:
        poly |= 1 << t
    order = (1 << width) - 1
    assert _gf2_powmod(order, poly, width) == 1
    for q in _prime_factors(order):
        assert _gf2_powmod(order // q, poly, width) != 1


@pytest.mark.parametrize("width", range(2, 21))
def test_lfsr_sequence_has_full_period(width):
    # a maximal LFSR of k bits runs through all 2^k - 1 nonzero states before it repeats
    # (LFSR theory, property of maximal-length sequences; from memory)
    period = (1 << width) - 1
    seq = lfsr_sequence(width, 0)
    assert seq.size == period
    assert seq.min() == 1 and seq.max() == period
    assert np.unique(seq).size == period
    if width <= 14:
        # the state after the last one is the first again: start at the last state
        again = lfsr_sequence(width, int(seq[-1]) - 1)
        assert int(again[0]) == int(seq[-1]) and int(again[1]) == int(seq[0])
        # a different seed gives the same cycle, rotated
        other = lfsr_sequence(width, 5 % period)
        start = int(np.flatnonzero(seq == other[0])[0])
        assert np.array_equal(other, np.roll(seq, -start))


def test_random_order_reproducible_and_seeded():
    n = 64
    a = address_order(make_memory(n, order="random:42"))
    b = address_order(make_memory(n, order="random:42"))
    assert np.array_equal(a, b)
    a[0] = -1   # the caller's copy; the next call is unaffected
    assert address_order(make_memory(n, order="random:42"))[0] != -1
    assert not np.array_equal(address_order(make_memory(n, order="random:42")), np.arange(n))
    # every seed below the number of words gives its own order
    seen = {tuple(address_order(make_memory(n, order=f"random:{s}")).tolist()) for s in range(n)}
    assert len(seen) == n


# ---- data backgrounds ------------------------------------------------------------------

def test_intra_word_backgrounds_for_a_byte():
    # van de Goor & Tlili, "A systematic method for modifying march tests for bit-oriented
    # memories into tests for word-oriented memories", IEEE Trans. Computers 52(10), 2003:
    # for B = 8 the backgrounds 00000000, 01010101, 00110011, 00001111 (from memory)
    assert intra_word_words(8) == [0x00, 0x55, 0x33, 0x0F]
    m = make_memory(16, 8, backgrounds="word")
    assert background_names(m) == ["0x00", "0x55", "0x33", "0x0f"]
    # the same rule for B = 16 (from memory)
    assert intra_word_words(16) == [0x0000, 0x5555, 0x3333, 0x0F0F, 0x00FF]


@pytest.mark.parametrize("bits", range(2, 65))
def test_intra_word_background_count_and_separation(bits):
    words = intra_word_words(bits)
    # ceil(log2 B) + 1 backgrounds (van de Goor & Tlili, IEEE Trans. Computers 52(10), 2003)
    assert len(words) == math.ceil(math.log2(bits)) + 1
    assert len(set(words)) == len(words)
    assert words[0] == 0 and all(0 <= w < (1 << bits) for w in words)
    # the purpose of the set: any two bits of the word hold different values in some
    # background, so with its complement both 01 and 10 reach every bit pair
    # (van de Goor & Tlili 2003)
    for i in range(bits):
        for j in range(i + 1, bits):
            assert any(((w >> i) ^ (w >> j)) & 1 for w in words), (i, j)


def _physical(mem, bg):
    """bg as a rows x columns picture of the physical array."""
    rows = np.arange(mem.rows)[:, None]
    cols = np.arange(mem.columns)[None, :]
    w, b = mem.cell_at(rows + 0 * cols, cols + 0 * rows)
    return bg[w, b]


@pytest.mark.parametrize("geo", GEOMETRIES, ids=_ids)
def test_checkerboard_alternates_physically(geo):
    mem = make_memory(**geo)
    pic = _physical(mem, background_array(mem, "checkerboard"))
    # checkerboard: neighbours along a row and along a column hold different values
    # (common practice, no source)
    assert np.all(pic[:, 1:] != pic[:, :-1])
    assert np.all(pic[1:, :] != pic[:-1, :])
    assert pic[0, 0] == 0


@pytest.mark.parametrize("geo", GEOMETRIES, ids=_ids)
def test_row_and_column_stripes(geo):
    mem = make_memory(**geo)
    rows = _physical(mem, background_array(mem, "rows"))
    cols = _physical(mem, background_array(mem, "columns"))
    # row stripe: every row uniform, rows alternate; column stripe: the transpose
    # (common practice, no source)
    assert np.all(rows == (np.arange(mem.rows) % 2)[:, None])
    assert np.all(cols == (np.arange(mem.columns) % 2)[None, :])


def test_solid_hex_and_stack():
    m = make_memory(8, 4, backgrounds=("solid", "0xA", "checkerboard"))
    assert background_names(m) == ["solid", "0xa", "checkerboard"]
    stack = background_stack(m)
    assert stack.shape == (3, 8, 4)
    assert not stack[0].any()
    assert stack[1].tolist() == [[0, 1, 0, 1]] * 8      # bit i of the word is bit i of 0xA
    with pytest.raises(ModelError, match="not a hex word"):
        make_memory(8, 4, backgrounds=("0xZ",))


# ---- timing ------------------------------------------------------------------------------

def test_parse_frequency():
    assert parse_frequency("100MHz") == 100_000_000
    assert parse_frequency("1.2 GHz") == Fraction(1_200_000_000)
    assert parse_frequency("33.3kHz") == 33_300
    assert parse_frequency("250e6") == 250_000_000
    assert parse_frequency(50) == 50
    assert parse_frequency(2.5e8) == 250_000_000
    assert isinstance(parse_frequency("100MHz"), Fraction)
    for bad in ("fast", "", "-5MHz", "100 MHZz", "0Hz", 0, -1.0):
        with pytest.raises(ModelError):
            parse_frequency(bad)


def test_parse_duration():
    assert parse_duration("10ms") == Fraction(1, 100)
    assert parse_duration("64 us") == Fraction(64, 10**6)
    assert parse_duration("64µs") == Fraction(64, 10**6)
    assert parse_duration("2s") == 2
    assert parse_duration("1.5 ns") == Fraction(3, 2 * 10**9)
    for bad in ("10", "ten ms", "5 min", "-1ms", ""):
        with pytest.raises(ModelError):
            parse_duration(bad)


def test_seconds_to_cycles():
    # 10 ms at 100 MHz = 0.01 s x 1e8 /s = 1,000,000 cycles (arithmetic)
    assert seconds_to_cycles(Fraction(1, 100), Fraction(10**8)) == 1_000_000
    # a fraction of a cycle still takes a whole cycle (ceil)
    assert seconds_to_cycles(Fraction(1, 10**9), Fraction(3 * 10**8)) == 1
    assert seconds_to_cycles(Fraction(0), Fraction(10**8)) == 0
    assert seconds_to_cycles(Fraction(64, 10**3), Fraction(200 * 10**6)) == 12_800_000


def _cycles_by_hand(test, mem, runs):
    """cycles = runs x (words x sum of op cycles + delay cycles): the closed form."""
    per_address = sum(
        (mem.read_cycles if op.kind == "r" else mem.write_cycles) * op.repeat
        for el in test.elements for op in el.ops
    )
    delays = sum(math.ceil(d.seconds * mem.clock_hz) for d in test.delays)
    return runs * (mem.words * per_address + delays)


def test_schedule_closed_form():
    test = MarchTest((
        Element("any", (Op("w", 0),)),
        Element("up", (Op("r", 0), Op("w", 1, 2))),
        Delay(Decimal(10), "ms"),
        Element("down", (Op("r", 1),)),
    ))
    mem = make_memory(64, read_cycles=2, write_cycles=3, clock="100MHz",
                      backgrounds=("solid", "checkerboard"))
    s = schedule(test, mem)
    # per address 3 + (2 + 3 + 3) + 2 = 13 cycles; 64 words; a 10 ms pause at 100 MHz is
    # 1,000,000 cycles; two background runs
    assert s.cycles == 2 * (64 * 13 + 1_000_000) == 2_001_664
    assert s.cycles == _cycles_by_hand(test, mem, 2)
    assert s.runs == 2
    assert s.ops == 2 * 64 * test.ops_per_cell == 2 * 64 * 5
    assert s.seconds == Fraction(s.cycles, 100_000_000)
    # segments tile time without gaps, in order
    t = 0
    for seg in s.segments:
        assert seg.start == t
        t += seg.cycles
    assert t == s.cycles
    el = s.segments[1]
    assert el.element == 1 and el.order == "up"
    assert el.per_address == 8 and el.op_offsets == (0, 2, 5)
    assert el.op_kinds == ("r", "w", "w") and el.op_values == (0, 1, 1)
    delay = s.segments[2]
    assert delay.element is None and delay.cycles == 1_000_000


@pytest.mark.parametrize("words, rc, wc, clock", [(16, 1, 1, "100MHz"), (1000, 2, 1, "333MHz"), (8, 3, 5, "1.2GHz")])
def test_schedule_of_a_parsed_test(words, rc, wc, clock):
    # March C- with a pause, 10n + Del (van de Goor 1991, without the pause; from memory)
    test = parse_notation("{⇕(w0); ⇑(r0,w1); ⇑(r1,w0); Del(1ms); ⇓(r0,w1); ⇓(r1,w0); ⇕(r0)}")
    mem = make_memory(words, clock=clock, read_cycles=rc, write_cycles=wc)
    s = schedule(test, mem)
    assert s.cycles == _cycles_by_hand(test, mem, 1)
    assert s.ops == 10 * words
    # with one cycle per op and no pause the cycle count is the test length 10n
    if rc == wc == 1:
        assert s.cycles - seconds_to_cycles(Fraction(1, 1000), mem.clock_hz) == 10 * words


# ---- memory files ------------------------------------------------------------------------

GOOD = """\
# Tern-7 test chip, scratchpad macro (invented)
[memory]
name = "tern7-scratch"
words = 256
bits = 8
mux = 4
order = "gray"
backgrounds = ["solid", "checkerboard", "word"]
clock = "250MHz"
read_cycles = 2
write_cycles = 1
scramble_bits = [1, 0, 2, 3, 4, 5, 6, 7]
scramble_xor = "0x0F"
neighbours = 4
"""


def _write(tmp_path, text, name="tern7.toml"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_good_memory_file(tmp_path):
    m = load_memory_file(_write(tmp_path, GOOD))
    assert isinstance(m, Memory)
    assert (m.name, m.words, m.bits, m.mux, m.order) == ("tern7-scratch", 256, 8, 4, "gray")
    assert m.backgrounds == ("solid", "checkerboard", "word")
    assert m.clock_hz == 250_000_000
    assert (m.read_cycles, m.write_cycles, m.neighbours) == (2, 1, 4)
    assert m.scramble_bits == (1, 0, 2, 3, 4, 5, 6, 7) and m.scramble_xor == 0x0F
    assert len(background_names(m)) == 2 + 4


def test_top_level_keys_and_default_name(tmp_path):
    m = load_memory_file(_write(tmp_path, "words = 32\nbits = 4\nclock = \"50MHz\"\n", "tern7_regfile.toml"))
    assert (m.words, m.bits, m.clock_hz, m.name) == (32, 4, 50_000_000, "tern7_regfile")


def test_flags_override_file(tmp_path):
    p = _write(tmp_path, GOOD)
    m = load_memory_file(p, bits=16, order="linear", clock="1GHz", name=None, mux=None)
    assert (m.bits, m.order, m.clock_hz) == (16, "linear", 10**9)
    assert (m.name, m.mux) == ("tern7-scratch", 4)           # None leaves the file's value
    m = load_memory_file(_write(tmp_path, "bits = 2\n", "nowords.toml"), words=64)
    assert (m.words, m.bits) == (64, 2)


def _error(path, **kw) -> PositionedError:
    with pytest.raises(ModelError) as info:
        load_memory_file(path, **kw)
    assert isinstance(info.value, PositionedError)
    return info.value


def test_unknown_key_has_line_column_and_caret(tmp_path):
    p = _write(tmp_path, "[memory]\nwords = 16\n  wrods = 16\n")
    e = _error(p)
    assert (e.pos.line, e.pos.column) == (3, 3)
    text = e.render()
    lines = text.split("\n")
    assert lines[0] == f"{p}:3:3: error: unknown key 'wrods' (did you mean 'words'?); a memory file knows: " + \
        "backgrounds, bits, clock, mux, name, neighbours, order, page, read_cycles, read_latency, refresh, " \
        "refresh_during_delays, refresh_scheme, retention, scramble_bits, scramble_xor, words, write_cycles"
    assert lines[1] == "      wrods = 16"
    assert lines[2] == "      ^^^^^"
    assert e.exit_code == 2


def test_toml_syntax_error_position(tmp_path):
    text = "[memory]\nwords = 16\nbits = = 8\n"
    p = _write(tmp_path, text)
    # tomllib (the standard library's TOML reader) is the reference for where the error is
    with pytest.raises(tomllib.TOMLDecodeError) as ref:
        tomllib.loads(text)
    line, col = map(int, re.search(r"line (\d+), column (\d+)", str(ref.value)).groups())
    e = _error(p)
    assert (e.pos.line, e.pos.column) == (line, col) and line == 3
    out = e.render().split("\n")
    assert out[0].startswith(f"{p}:{line}:{col}: error: ")
    assert "(at line" not in out[0]
    assert out[1] == "    bits = = 8"
    assert out[2] == "    " + " " * (col - 1) + "^"


@pytest.mark.parametrize(
    "body, key, line, pattern",
    [
        ('words = "many"\n', "words", 2, r"words has the wrong type \(str\)"),
        ("words = true\n", "words", 2, r"words has the wrong type \(bool\)"),
        ("words = 2.5\n", "words", 2, r"words has the wrong type \(float\)"),
        ("words = 16\nbits = [8]\n", "bits", 3, r"bits has the wrong type \(list\)"),
        ("words = 16\nname = 7\n", "name", 3, r"name has the wrong type \(int\)"),
        ("words = 16\nscramble_bits = [0, 'a', 2, 3]\n", "scramble_bits", 3, r"scramble_bits must list whole numbers, not 'a'"),
        ("words = 16\nscramble_bits = [0, true, 2, 3]\n", "scramble_bits", 3, r"scramble_bits must list whole numbers"),
        ("words = 16\nbackgrounds = ['solid', 5]\n", "backgrounds", 3, r"backgrounds must list strings, not 5"),
    ],
)
def test_memory_file_type_errors(tmp_path, body, key, line, pattern):
    e = _error(_write(tmp_path, "[memory]\n" + body))
    assert re.search(pattern, e.message), e.message
    assert e.pos.line == line and e.pos.column == 1
    assert e.render().split("\n")[2] == "    " + "^" * len(key)


@pytest.mark.parametrize(
    "body, key, pattern",
    [
        ("words = 16\nbits = 8\nmux = 3\n", "mux", r"column mux 3 does not divide 16 words"),
        ("words = 16\nbits = 8\nscramble_xor = 64\n", "scramble_xor", r"XOR mask 0x40"),
        ("words = 12\nbits = 8\nscramble_bits = [0, 1, 2, 3]\n", "scramble_bits", r"power-of-two"),
        ("bits = 8\nwords = 16\nscramble_bits = [0, 1, 2]\n", "scramble_bits", r"permutation of 0\.\.3"),
        ("words = 16\nbits = 2000\n", "bits", r"bits per word must be"),
        ("words = 16\nclock = \"fast\"\n", "clock", r"not a frequency"),
        ("words = 16\norder = \"stride:9\"\n", "order", r"stride 2\^9"),
        ("words = 16\nbits = 4\nbackgrounds = [\"0x1FF\"]\n", "backgrounds", r"more bits"),
        ("words = 16\nread_cycles = 1\nwrite_cycles = 0\n", "write_cycles", r"at least one clock cycle"),
        ("words = 1\nbits = 8\n", "words", r"at least 2 words"),
    ],
)
def test_memory_file_geometry_error_points_at_its_key(tmp_path, body, key, pattern):
    text = "[memory]\n" + body
    e = _error(_write(tmp_path, text))
    assert re.search(pattern, e.message), e.message
    want_line = next(i for i, l in enumerate(text.split("\n"), 1) if l.startswith(key + " "))
    assert e.pos.line == want_line, (e.pos, key)


def test_memory_file_missing_words_and_unreadable(tmp_path):
    e = _error(_write(tmp_path, "[memory]\nbits = 8\n"))
    assert "needs 'words'" in e.message
    with pytest.raises(ModelError, match="cannot read memory file"):
        load_memory_file(tmp_path / "absent.toml")
    e = _error(_write(tmp_path, "memory = 5\n", "scalar.toml"))
    assert "[memory] must be a table" in e.message


def test_memory_file_override_error_not_blamed_on_file(tmp_path):
    # the bad value comes from a flag, so no line of the file is shown
    p = _write(tmp_path, "[memory]\nwords = 16\nmux = 4\n")
    with pytest.raises(ModelError) as info:
        load_memory_file(p, mux=3)
    assert "column mux 3" in info.value.message
    assert getattr(info.value, "pos", None) is None
