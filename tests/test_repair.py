"""Spare allocation against brute force, must-repair by hand, and the repair command.

Outside references: the problem statement and the must-repair rule are those of Kuo & Fuchs,
"Efficient spare allocation for reconfigurable arrays", IEEE Design & Test 4(1), 1987; the
optimum is checked against an exhaustive search written here (every set of at most R
failing rows; the columns left over must then all be replaced), an independent path.
"""

from __future__ import annotations

import itertools
import json
import random

import numpy as np
import pytest

from marchkit.diagnose.repair import plan_repair


def brute_force(cells, R, C):
    """Fewest spares covering ``cells`` with ≤ R rows and ≤ C columns, or None."""
    rows = sorted({r for r, _ in cells})
    best = None
    for k in range(0, min(R, len(rows)) + 1):
        for chosen in itertools.combinations(rows, k):
            s = set(chosen)
            need = {c for r, c in cells if r not in s}
            if len(need) <= C and (best is None or k + len(need) < best):
                best = k + len(need)
    return best


def test_ten_thousand_random_bitmaps_against_brute_force():
    rng = random.Random(2026)
    checked = repairable = 0
    for _ in range(10_000):
        n, m = rng.randint(1, 10), rng.randint(1, 10)
        shape = rng.random()
        if shape < 0.6:           # scattered cells
            k = rng.randint(0, max(1, n * m // 3))
            cells = {(rng.randrange(n), rng.randrange(m)) for _ in range(k)}
        else:                     # a few lines plus scattered cells
            cells = set()
            for _ in range(rng.randint(0, 3)):
                if rng.random() < 0.5:
                    r = rng.randrange(n)
                    cells |= {(r, c) for c in range(m) if rng.random() < 0.8}
                else:
                    c = rng.randrange(m)
                    cells |= {(r, c) for r in range(n) if rng.random() < 0.8}
            cells |= {(rng.randrange(n), rng.randrange(m)) for _ in range(rng.randint(0, 4))}
        R, C = rng.randint(0, 4), rng.randint(0, 4)
        r = [a for a, _ in cells]
        c = [b for _, b in cells]
        plan = plan_repair(r, c, n, m, R, C)
        best = brute_force(cells, R, C)
        assert plan.repairable == (best is not None), (cells, R, C)
        if plan.repairable:
            repairable += 1
            assert plan.spares_used == best, (cells, R, C, plan)          # never more than the optimum
            assert len(plan.rows) <= R and len(plan.cols) <= C
            assert all(a in plan.rows or b in plan.cols for a, b in cells)  # every failing cell covered
        checked += 1
    assert checked == 10_000
    assert 2_000 < repairable < 9_000          # both verdicts are exercised


def test_must_repair_by_hand():
    """Kuo & Fuchs (1987): a row with more failing cells than spare columns must take a spare
    row; here row 2 has 3 fails and there are 2 spare columns."""
    r = [2, 2, 2, 5]
    c = [1, 4, 7, 4]
    plan = plan_repair(r, c, 8, 8, 1, 2)
    assert plan.repairable and plan.must_rows == [2]
    assert plan.rows == [2] and plan.cols == [4] and plan.spares_used == 2


def test_unrepairable_reasons():
    plan = plan_repair([0, 0, 0, 1, 1, 1], [0, 1, 2, 3, 4, 5], 4, 8, 1, 2)
    assert not plan.repairable and "must-repair" in plan.reason
    # a diagonal of 5 cells needs 5 lines (König: a matching of 5); 2 + 2 spares are too few
    plan = plan_repair(range(5), range(5), 8, 8, 2, 2)
    assert not plan.repairable and plan.rows == [] and plan.cols == []
    assert plan_repair([], [], 4, 4, 0, 0).repairable


def test_repair_refuses_cells_outside_the_array():
    from marchkit.errors import InputError

    with pytest.raises(InputError, match="outside"):
        plan_repair([4], [0], 4, 4, 1, 1)


def _write_bitmap(path, cells):
    path.write_text("row,col\n" + "".join(f"{a},{b}\n" for a, b in cells))


def test_repair_command_json_contract(cli, tmp_path):
    f = tmp_path / "bm.csv"
    _write_bitmap(f, [(3, c) for c in range(10)] + [(r, 6) for r in range(12)] + [(20, 20)])
    code, out, err = cli("repair", "--bitmap", str(f), "--rows", "32", "--cols", "32",
                         "--spare-rows", "2", "--spare-cols", "2", "--json")
    assert code == 0, err
    res = json.loads(out)
    assert res["repairable"] is True
    assert res["rows"] + res["cols"] and set(res) >= {"repairable", "rows", "cols"}
    assert res["spares_used"]["total"] == len(res["rows"]) + len(res["cols"]) == 3
    assert 3 in res["rows"] and 6 in res["cols"]
    code, out, err = cli("repair", "--bitmap", str(f), "--rows", "32", "--cols", "32",
                         "--spare-rows", "1", "--spare-cols", "1")
    assert code == 1 and "NOT repairable" in out and "do not ship" in out


def test_repair_from_a_fail_log_places_cells_through_the_mux(cli, tmp_path):
    """A fail log's cells land on the physical array (DEVELOPERS.md placement): two failing bits
    of one word with mux 4 are 4 columns apart in one row, so one spare row repairs both."""
    from marchkit.engine.trace import Tracer
    from marchkit.faults import SAF, Instance
    from marchkit.diagnose import fail_log_csv
    from marchkit.model import make_memory
    from marchkit.notation import resolve_test

    mem = make_memory(words=64, bits=4, mux=4)
    tr = Tracer(resolve_test("March C-"), mem)
    lines = [c for c in tr.compares(Instance(SAF[1], (9 * 4 + 0,))) if c.definite]
    lines += [c for c in tr.compares(Instance(SAF[1], (9 * 4 + 2,))) if c.definite]
    merged = {}
    for c in lines:
        prev = merged.get(c.cycle)
        obs = c.observed | (prev.observed if prev else 0)
        merged[c.cycle] = type(c)(c.cycle, c.address, c.expected, obs, c.known)
    f = tmp_path / "fails.csv"
    f.write_text(fail_log_csv(merged.values(), mem))
    code, out, err = cli("repair", "--fails", str(f), "--words", "64", "--bits", "4", "--mux", "4",
                         "--spare-rows", "1", "--spare-cols", "0", "--json")
    assert code == 0, err
    res = json.loads(out)
    assert res["repairable"] and res["rows"] == [9 // 4] and res["cols"] == []


@pytest.mark.parametrize("body, needle, line", [
    ("row,col\n1,2\n40,1\n", "row 40 is outside the array", 3),
    ("row,col\n1,x\n", "decimal numbers", 2),
    ("r,c\n1,2\n", "header row,col", 1),
    ("row,col\n1,2,3\n", "2 fields", 2),
])
def test_bad_bitmaps_name_the_line(cli, tmp_path, body, needle, line):
    f = tmp_path / "bm.csv"
    f.write_text(body)
    code, out, err = cli("repair", "--bitmap", str(f), "--rows", "32", "--cols", "32",
                         "--spare-rows", "1", "--spare-cols", "1")
    assert code == 2 and f"{f}:{line}:" in err and needle in err, err


def test_repair_option_errors(cli, tmp_path):
    f = tmp_path / "bm.csv"
    _write_bitmap(f, [(1, 1)])
    code, _, err = cli("repair", "--bitmap", str(f), "--spare-rows", "1", "--spare-cols", "1")
    assert code == 2 and "--rows R --cols C" in err
    code, _, err = cli("repair", "--spare-rows", "1", "--spare-cols", "1")
    assert code == 2 and "--fails FILE or with --bitmap FILE" in err
    code, _, err = cli("repair", "--bitmap", str(f), "--rows", "4", "--cols", "4", "--spare-rows", "-1",
                       "--spare-cols", "1")
    assert code == 2 and "negative" in err


def test_repair_picture(cli, tmp_path):
    f = tmp_path / "bm.csv"
    _write_bitmap(f, [(3, c) for c in range(10)] + [(7, 7)])
    pic = tmp_path / "r.png"
    code, out, err = cli("repair", "--bitmap", str(f), "--rows", "16", "--cols", "16",
                         "--spare-rows", "2", "--spare-cols", "0", "--picture", str(pic))
    assert code == 0 and pic.read_bytes().startswith(b"\x89PNG")


def test_large_bitmap_early_abort_and_must_repair():
    """1 Mbit, 10^4 failing cells: scattered ones cannot be repaired with 8 + 8 spares (many
    rows need more columns than there are: must-repair runs out); 200 scattered cells are more
    than 2·R·C = 128 after must-repair (Kuo & Fuchs's early abort); lines plus a few cells can."""
    rng = np.random.default_rng(5)
    r, c = rng.integers(0, 1024, 10_000), rng.integers(0, 1024, 10_000)
    plan = plan_repair(r, c, 1024, 1024, 8, 8)
    assert not plan.repairable and "must-repair" in plan.reason
    r, c = rng.choice(1024, 200, replace=False), rng.choice(1024, 200, replace=False)
    plan = plan_repair(r, c, 1024, 1024, 8, 8)
    assert not plan.repairable and "128 at most" in plan.reason
    rows = rng.choice(1024, 5, replace=False)
    cols = rng.choice(1024, 5, replace=False)
    rr = np.concatenate([np.repeat(rows, 1024), np.tile(np.arange(1024), 5), [1, 2, 3]])
    cc = np.concatenate([np.tile(np.arange(1024), 5), np.repeat(cols, 1024), [7, 8, 9]])
    plan = plan_repair(rr, cc, 1024, 1024, 8, 8)
    assert plan.repairable and sorted(rows.tolist()) == sorted(set(plan.rows) & set(rows.tolist()))
    assert plan.spares_used == 13
