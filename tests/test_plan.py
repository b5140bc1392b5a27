"""`marchkit plan`: the SoC file, grading on Dask (serial == distributed), the cache, the
choice per memory type and the power-constrained schedule (checked here independently)."""

import itertools
import json
import os
import random
import subprocess
import sys
import time
from fractions import Fraction
from pathlib import Path

import pytest

from marchkit.plan.grading import Cache, grade_jobs, make_job, run_job
from marchkit.plan.planner import check_generate, make_plan
from marchkit.plan.schedule import TICKS_PER_S, Task, lower_bound, solve
from marchkit.plan.soc import SocFileError, parse_soc, read_soc

ROOT = Path(__file__).resolve().parents[1]

SMALL = """\
[soc]
name = "Wren-2 test chip"
faults = "static,classic"
tests = ["MATS+", "March C-", "March SS"]

[require]
SAF = 100
AF = 100
TF = 100
CFin = 100

[power]
budget = "40mW"

[domains]
core = "400MHz"
slow = "100MHz"

[types.data]
words = 256
bits = 8
mux = 4
power = "25mW"

[types.bitmap]
words = 128
bits = 1
access_energy = "20pJ"

[[instances]]
name = "dmem{}"
count = 3
type = "data"
domain = "core"
group = "core_bist"

[[instances]]
name = "bm{}"
count = 2
type = "bitmap"
domain = "core"
group = "bm{}_bist"

[[instances]]
name = "slow_bm"
type = "bitmap"
domain = "slow"
"""


@pytest.fixture
def small(tmp_path):
    p = tmp_path / "wren.toml"
    p.write_text(SMALL)
    return p


def check_schedule_independently(rows, budget_w):
    """Groups never overlap; at every start time the power of the memories running stays
    within the budget (the power only rises at start times)."""
    by_group = {}
    for r in rows:
        by_group.setdefault(r["group"], []).append((r["start_s"], r["end_s"], r["name"]))
    for g, items in by_group.items():
        items.sort()
        for (s1, e1, a), (s2, e2, b) in zip(items, items[1:]):
            assert s2 >= e1 - 1e-15, f"{a} and {b} overlap in {g}"
    for r in rows:
        t = r["start_s"]
        load = sum(q["power_w"] for q in rows if q["start_s"] <= t < q["end_s"])
        assert load <= budget_w * (1 + 1e-9), f"{load} W at {t} s"
    for r in rows:
        assert r["end_s"] - r["start_s"] >= r["seconds"] * (1 - 1e-12)


# ---- the SoC file -------------------------------------------------------------------------

def test_read_small(small):
    soc = read_soc(small)
    assert soc.name == "Wren-2 test chip"
    assert [i.name for i in soc.instances] == ["dmem0", "dmem1", "dmem2", "bm0", "bm1", "slow_bm"]
    assert [i.group for i in soc.instances] == ["core_bist"] * 3 + ["bm0_bist", "bm1_bist", "slow_bm"]
    assert soc.budget_w == Fraction(40, 1000)
    assert soc.domains["slow"] == 100_000_000
    bm = soc.types["bitmap"]
    # energy per access × access rate: 20 pJ × 400 MHz = 8 mW (common practice, no source)
    assert bm.power(bm.memory(Fraction(400_000_000))) == Fraction(8, 1000)


def test_example_soc_size():
    soc = read_soc(ROOT / "examples" / "soc.toml")
    assert len(soc.instances) >= 200
    assert 18 <= len(soc.types) <= 22
    assert any(t.kind == "dram" for t in soc.types.values())
    assert any(t.kind == "regfile" for t in soc.types.values())


BAD = [
    # (replace this, with this, message fragment, line, column)
    ("words = 256", "wrods = 256", "did you mean 'words'", 20, 1),
    ("type = \"bitmap\"\ndomain = \"slow\"", "type = \"bitmpa\"\ndomain = \"slow\"", "did you mean 'bitmap'", 46, 8),
    ("budget = \"40mW\"", "budget = \"40 furlongs\"", "not a power", 13, 10),
    ("budget = \"40mW\"", "budegt = \"40mW\"", "did you mean 'budget'", 13, 1),
    ("[power]", "[powr]", "did you mean 'power'", 12, 1),
    ("CFin = 100", "CFIN = 100", "did you mean 'CFin'", 10, 1),
    ("CFin = 100", "CFin = 120", "0 to 100", 10, 8),
    ("\"March SS\"]", "\"March QQ\"]", "not a test in the library", 4, 31),
    ("mux = 4\npower", "mux = 3\npower", "column mux 3", 22, 7),
    ("domain = \"slow\"", "domain = \"fast\"", "unknown clock domain 'fast'", 47, 10),
    ("domain = \"slow\"", "domain = \"slow\"\ngroup = \"bm0_bist\"", "mixes clock domains", 48, 9),
    ("name = \"dmem{}\"", "name = \"dmem\"", "needs {}", 31, 8),
    ("power = \"25mW\"", "power = \"25mW\"\nclock = \"1GHz\"", "clock of their domain", 24, 1),
    ("access_energy = \"20pJ\"", "", "exactly one of 'power'", 25, 1),
    ("budget = \"40mW\"", "budget = \"20mW\"", "more than the whole power budget", 23, 9),
]


@pytest.mark.parametrize("old, new, message, line, col", BAD)
def test_bad_input_positioned(tmp_path, cli, old, new, message, line, col):
    assert old in SMALL
    text = SMALL.replace(old, new, 1)
    p = tmp_path / "bad.toml"
    p.write_text(text)
    with pytest.raises(SocFileError) as e:
        check_generate(parse_soc(text, str(p), base=tmp_path), None)
    assert message in e.value.message
    if line is not None:
        assert (e.value.pos.line, e.value.pos.column) == (line, col), e.value.render()
    code, out, err = cli("plan", str(p))
    assert code == 2 and out == ""
    assert message in err and "Traceback" not in err
    if line is not None:
        assert err.startswith(f"{p}:{line}:{col}: error:")
        assert "^" in err


def test_bad_toml_syntax(tmp_path, cli):
    p = tmp_path / "broken.toml"
    p.write_text(SMALL.replace("bits = 8", "bits = = 8"))
    code, out, err = cli("plan", str(p))
    assert code == 2 and err.startswith(f"{p}:21:8: error:")


def test_test_file_relative_to_soc(tmp_path):
    (tmp_path / "sub").mkdir()
    (tmp_path / "sub" / "ours.march").write_text('test "Wren quick"\n  {⇕(w0); ⇑(r0,w1); ⇓(r1,w0)}\n')
    text = SMALL.replace('"March SS"]', '"sub/ours.march:Wren quick"]')
    soc = parse_soc(text, str(tmp_path / "x.toml"), base=tmp_path)
    assert soc.candidates["sub/ours.march:Wren quick"].tests[0].name == "Wren quick"


# ---- choosing a test per type ---------------------------------------------------------------

def test_choice_and_shortfall(small, tmp_path):
    plan = make_plan(read_soc(small), cache_dir=tmp_path / "cache")
    data = plan.to_json()
    by_type = {(t["type"], t["clock_hz"]): t for t in data["types"]}
    bm = by_type[("bitmap", 400e6)]
    # van de Goor, "Testing Semiconductor Memories" (1991): MATS+ misses transition faults,
    # March C- detects SAF, TF, AF and CFin on a bit-oriented memory: the cheaper MATS+ is
    # refused and March C- (10n) chosen over March SS (22n)
    cands = {c["test"]: c for c in bm["candidates"]}
    assert not cands["MATS+"]["meets"] and "TF" in cands["MATS+"]["short"]
    assert cands["March C-"]["meets"] and cands["March SS"]["meets"]
    assert bm["test"] == "March C-" and bm["cycles"] == 10 * 128
    # the same type at another clock is graded as its own memory; the cycles are the same
    assert by_type[("bitmap", 100e6)]["cycles"] == 10 * 128
    assert by_type[("bitmap", 100e6)]["seconds"] == pytest.approx(1280 / 100e6)
    assert data["requirements_met"]
    assert {r["name"]: r["test"] for r in data["instances"]}["slow_bm"] == "March C-"


def test_unmet_requirement_is_named(tmp_path, cli, monkeypatch):
    monkeypatch.setenv("MARCHKIT_CACHE", str(tmp_path / "cache"))
    monkeypatch.setenv("COLUMNS", "80")
    # MATS+ alone cannot reach 100 % TF (van de Goor 1991)
    text = SMALL.replace('tests = ["MATS+", "March C-", "March SS"]', 'tests = ["MATS+"]')
    p = tmp_path / "short.toml"
    p.write_text(text)
    code, out, err = cli("plan", str(p))
    assert code == 1
    assert "requirements no candidate meets" in out
    assert "TF ≥ 100 %" in out and "(MATS+)" in out
    assert max(len(line) for line in out.splitlines()) <= 80


# ---- the schedule ----------------------------------------------------------------------------

def brute_force_makespan(durations, powers, groups, budget):
    """Exhaustive search over integer start times (independent of the solver): the shortest
    makespan with groups run one at a time and the power within the budget."""
    n = len(durations)
    horizon = sum(durations)
    best = [horizon]

    def ok(starts, i):
        s, e = starts[i], starts[i] + durations[i]
        for j in range(i):
            if groups[j] == groups[i] and starts[j] < e and s < starts[j] + durations[j]:
                return False
        for t in range(s, e):
            if sum(powers[j] for j in range(i + 1) if starts[j] <= t < starts[j] + durations[j]) > budget:
                return False
        return True

    starts = [0] * n

    def go(i):
        if i == n:
            best[0] = min(best[0], max(s + d for s, d in zip(starts, durations)))
            return
        for s in range(0, best[0] - durations[i] + 1):
            starts[i] = s
            if ok(starts, i):
                go(i + 1)

    go(0)
    return best[0]


def _tasks(durations, powers, groups):
    # durations in µs and powers in mW: whole ticks and power units, no rounding
    return [Task(f"m{i}", g, Fraction(d, 10**6), Fraction(p, 1000))
            for i, (d, p, g) in enumerate(zip(durations, powers, groups))]


def test_schedule_known_by_hand():
    # three memories of 3 mW each, separate controllers, 5 mW budget: no two can run
    # together, so the optimum is the sum of their times (by hand)
    s = solve(_tasks([4, 2, 3], [3, 3, 3], ["a", "b", "c"]), Fraction(5, 1000), 5)
    assert s.status == "optimal" and s.makespan == 9 * TICKS_PER_S // 10**6
    # one controller for all: the sum again, whatever the budget (by hand)
    s = solve(_tasks([4, 2, 3], [1, 1, 1], ["g", "g", "g"]), Fraction(1), 5)
    assert s.makespan == 9 * TICKS_PER_S // 10**6
    # two controllers, budget for both: the longer chain (by hand): g1 = 4 + 2, g2 = 3 + 1
    s = solve(_tasks([4, 2, 3, 1], [1, 1, 1, 1], ["g1", "g1", "g2", "g2"]), Fraction(2, 1000), 5)
    assert s.makespan == 6 * TICKS_PER_S // 10**6


def test_schedule_needs_the_solver():
    # a list schedule in the default order is not optimal here; CP-SAT proves the optimum
    # found by exhaustive search (budget 5): a(4,3) b(2,2) in g1; c(3,3) d(3,2) in g2; e(5,1)
    d, p, g = [4, 2, 3, 3, 5], [3, 2, 3, 2, 1], ["g1", "g1", "g2", "g2", "g3"]
    want = brute_force_makespan(d, p, g, 5)
    s = solve(_tasks(d, p, g), Fraction(5, 1000), 10)
    assert s.status == "optimal"
    assert s.makespan == want * TICKS_PER_S // 10**6
    assert s.bound == s.makespan


@pytest.mark.parametrize("seed", range(6))
def test_schedule_random_against_brute_force(seed):
    rnd = random.Random(seed)
    n = rnd.randint(3, 5)
    d = [rnd.randint(1, 4) for _ in range(n)]
    p = [rnd.randint(1, 4) for _ in range(n)]
    g = [rnd.choice("xyz") for _ in range(n)]
    budget = max(p) + rnd.randint(0, 4)
    tasks = _tasks(d, p, g)
    s = solve(tasks, Fraction(budget, 1000), 10)
    assert s.status == "optimal"
    assert s.makespan == brute_force_makespan(d, p, g, budget) * TICKS_PER_S // 10**6
    rows = [{"name": t.name, "group": t.group, "start_s": s.starts[t.name] / TICKS_PER_S,
             "end_s": s.ends[t.name] / TICKS_PER_S, "seconds": float(t.seconds), "power_w": float(t.watts)}
            for t in tasks]
    check_schedule_independently(rows, budget / 1000)
    assert lower_bound([x * 10**6 for x in d], p, g, budget) <= s.makespan


def test_plan_respects_budget_and_groups(small, tmp_path):
    plan = make_plan(read_soc(small), cache_dir=tmp_path / "cache")
    data = plan.to_json()
    check_schedule_independently(data["instances"], 0.040)
    # dmem0..2 share a controller and draw 25 mW each: they run one after the other, and the
    # 8 mW bitmaps fit beside one of them (25 + 8 = 33 ≤ 40), not beside two
    assert data["total_test_time_s"] == pytest.approx(3 * 2560 / 400e6)
    assert data["schedule"]["status"] == "optimal"


# ---- grading: serial, distributed, cached -----------------------------------------------------

def _jobs():
    from marchkit.model import make_memory
    from marchkit.notation import resolve_test

    mems = [make_memory(64, 8, mux=2, name="a"), make_memory(128, 1, backgrounds=("solid",), name="b"),
            make_memory(32, 16, mux=1, backgrounds=("solid", "checkerboard"), name="c")]
    tests = [resolve_test(t) for t in ("MATS++", "March C-", "IFA-9")]
    return [make_job(t, m, "static,classic,retention", (Fraction(1, 1000),), "neighbours")
            for t in tests for m in mems]


def _serial(jobs):
    return {j.key: run_job(j) for j in jobs}


def test_serial_equals_local_cluster():
    from marchkit.plan.cluster import open_client

    jobs = _jobs()
    want = _serial(jobs)
    with open_client(workers=2) as client:
        got = grade_jobs(jobs, client=client).results
        assert len(client.scheduler_info()["workers"]) == 2
    assert got == want


@pytest.fixture
def dask_pair(tmp_path):
    """A `dask scheduler` and a `dask worker` started as processes on 127.0.0.1, always torn
    down."""
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    info = tmp_path / "scheduler.json"
    procs = []
    try:
        procs.append(subprocess.Popen(
            [sys.executable, "-m", "distributed.cli.dask_scheduler", "--host", "127.0.0.1", "--port", "0",
             "--no-dashboard", "--scheduler-file", str(info)],
            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        deadline = time.monotonic() + 60
        while not (info.exists() and info.stat().st_size) and time.monotonic() < deadline:
            time.sleep(0.1)
        assert info.exists(), "the scheduler did not start"
        address = json.loads(info.read_text())["address"]
        assert address.startswith("tcp://127.0.0.1:")
        procs.append(subprocess.Popen(
            [sys.executable, "-m", "distributed.cli.dask_worker", address, "--nthreads", "1", "--nworkers", "1",
             "--host", "127.0.0.1", "--no-dashboard", "--no-nanny"],
            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        yield address
    finally:
        for p in reversed(procs):
            p.terminate()
        for p in reversed(procs):
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait(timeout=10)


def test_serial_equals_scheduler_and_worker_processes(dask_pair, small, tmp_path, cli, monkeypatch):
    from marchkit.plan.cluster import open_client

    jobs = _jobs()
    want = _serial(jobs)
    with open_client(scheduler=dask_pair) as client:
        client.wait_for_workers(1, timeout=60)
        got = grade_jobs(jobs, client=client).results
    assert got == want
    # the command line on the same cluster, against a serial plan of the same file
    monkeypatch.setenv("MARCHKIT_CACHE", str(tmp_path / "cache-cli"))
    code, out, err = cli("plan", str(small), "--scheduler", dask_pair, "--json")
    assert code == 0, err
    data = json.loads(out)
    assert data["graded"]["workers"] == "1 Dask worker" and data["graded"]["computed"] == 9
    serial = make_plan(read_soc(small), cache_dir=None).to_json()
    assert [t["candidates"] for t in data["types"]] == [t["candidates"] for t in serial["types"]]
    assert data["total_test_time_s"] == serial["total_test_time_s"]


def test_cache_hit_and_corrupt_entry(tmp_path):
    jobs = _jobs()[:4]
    cache = Cache(tmp_path / "c")
    first = grade_jobs(jobs, cache=cache)
    assert (first.computed, first.cached) == (4, 0)
    second = grade_jobs(jobs, cache=cache)
    assert (second.computed, second.cached) == (0, 4) and second.results == first.results
    # a truncated entry and an entry answering another key are ignored and recomputed
    files = sorted((tmp_path / "c").rglob("*.json"))
    assert len(files) == 4
    files[0].write_text(files[0].read_text()[:20])
    other = json.loads(files[2].read_text())
    files[1].write_text(json.dumps(other))
    third = grade_jobs(jobs, cache=cache)
    assert (third.computed, third.cached) == (2, 2) and third.results == first.results
    assert not list((tmp_path / "c").rglob("*.part"))


def test_cache_key_covers_inputs():
    from marchkit import __version__
    from marchkit.model import make_memory
    from marchkit.notation import resolve_test

    t = resolve_test("March C-")
    m = make_memory(64, 8)
    base = make_job(t, m, "static", (), "neighbours")
    assert base.key == make_job(t, make_memory(64, 8, name="other"), "static", (), "neighbours").key
    assert base.key != make_job(t, make_memory(64, 8, mux=2), "static", (), "neighbours").key
    assert base.key != make_job(t, m, "classic", (), "neighbours").key
    assert base.key != make_job(t, m, "static", (), "all").key
    assert base.key != make_job(resolve_test("March SS"), m, "static", (), "neighbours").key
    assert __version__ in json.dumps({"v": __version__})   # the version is part of the hashed text


def test_cli_second_run_uses_cache(small, tmp_path, cli, monkeypatch):
    monkeypatch.setenv("MARCHKIT_CACHE", str(tmp_path / "cache"))
    monkeypatch.setenv("COLUMNS", "80")
    gantt, report = tmp_path / "plan.png", tmp_path / "plan.html"
    code, out, err = cli("plan", str(small), "--workers", "1", "--gantt", str(gantt), "--report", str(report))
    assert code == 0, err
    assert "9 on 1 Dask worker" in out and "total test time 19.2 µs" in out
    assert "optimal" in out and "group core_bist (core)" in out
    assert max(len(line) for line in out.splitlines()) <= 80
    from PIL import Image

    with Image.open(gantt) as im:
        assert im.format == "PNG" and im.size[0] > 600
    html = report.read_text()
    assert "Wren-2 test chip" in html and "data:image/png;base64," in html and "<script" not in html
    code, out, err = cli("plan", str(small), "--json")
    assert code == 0
    data = json.loads(out)
    assert data["graded"]["computed"] == 0 and data["graded"]["cached"] == 9
    assert data["graded"]["workers"] == "cache"
    assert data["schedule"]["solver"].endswith("from the cache") or data["schedule"]["solver"] == "list schedule"
    assert [(r["name"], r["test"]) for r in data["instances"]] == [
        ("dmem0", "March C-"), ("dmem1", "March C-"), ("dmem2", "March C-"),
        ("bm0", "March C-"), ("bm1", "March C-"), ("slow_bm", "March C-")]
    assert data["total_test_time_s"] == pytest.approx(19.2e-6)
    # outputs exist: refused without --force, before any work
    code, out, err = cli("plan", str(small), "--gantt", str(gantt))
    assert code == 2 and "exists" in err


def test_cli_options_checked(small, cli):
    code, out, err = cli("plan", str(small), "--workers", "0")
    assert code == 2 and "--workers" in err
    code, out, err = cli("plan", str(small), "--scheduler", "localhost:1")
    assert code == 2 and "tcp://" in err
    code, out, err = cli("plan", str(small), "--gantt", "x.gif")
    assert code == 2 and ".png or .svg" in err
    code, out, err = cli("plan", "no/such/file.toml")
    assert code == 2 and "cannot read" in err


def test_schedule_cache_checked_on_loading(small, tmp_path):
    cache = tmp_path / "cache"
    first = make_plan(read_soc(small), cache_dir=cache).to_json()
    records = [p for p in cache.rglob("*.json") if '"starts"' in p.read_text()]
    assert len(records) == 1
    rec = json.loads(records[0].read_text())
    # move every memory to time 0: the groups now overlap; the record must be refused
    rec["starts"] = {k: 0 for k in rec["starts"]}
    rec["makespan"] = max(r["end_s"] - r["start_s"] for r in first["instances"]) * TICKS_PER_S
    records[0].write_text(json.dumps(rec))
    again = make_plan(read_soc(small), cache_dir=cache).to_json()
    check_schedule_independently(again["instances"], 0.040)
    assert again["total_test_time_s"] == first["total_test_time_s"]
    assert not again["schedule"]["solver"].endswith("from the cache")


def test_gantt_has_a_bar_per_memory(small, tmp_path):
    from marchkit.report import plan_figure

    data = make_plan(read_soc(small), cache_dir=tmp_path / "cache").to_json()
    fig = plan_figure(data)
    gantt, power = fig.axes[:2]
    bars = [p for c in gantt.containers for p in c.patches]
    assert len(bars) == len(data["instances"])    # no retention pause in these tests
    # each bar spans its memory's test, in µs (the longest time is 19.2 µs)
    spans = sorted(round(b.get_width(), 6) for b in bars)
    assert spans == sorted(round(r["seconds"] * 1e6, 6) for r in data["instances"])
    assert [t.get_text() for t in gantt.get_yticklabels()][0] == "core_bist"


def test_example_test_file_is_clean(cli):
    code, out, err = cli("check", str(ROOT / "examples" / "harrier_tests.march"), "--strict")
    assert code == 0, out + err


def test_a_memory_draws_no_power_in_its_retention_pauses():
    # by hand: A is 4 µs long but accesses only in [0, 1) and [3, 4) µs (a pause between);
    # B (2 µs, accessing throughout) cannot run beside A's accesses (3 + 3 mW > 5 mW) but fits in
    # A's pause: 4 µs in all, where a constant-power model needs 6 µs
    us = Fraction(1, 10**6)
    a = Task("a", "ga", 4 * us, Fraction(3, 1000), ((0, us), (3 * us, us)))
    b = Task("b", "gb", 2 * us, Fraction(3, 1000))
    s = solve([a, b], Fraction(5, 1000), 10)
    assert s.makespan == 4 * TICKS_PER_S // 10**6 and s.status == "optimal"
    assert s.starts["b"] - s.starts["a"] == 1 * TICKS_PER_S // 10**6
    flat = solve([Task("a", "ga", 4 * us, Fraction(3, 1000)), b], Fraction(5, 1000), 10)
    assert flat.makespan == 6 * TICKS_PER_S // 10**6


def test_active_spans_of_a_test_with_pauses():
    from marchkit.model import make_memory
    from marchkit.notation import resolve_test
    from marchkit.plan.planner import active_spans

    # IFA-9 (Dekker et al., IEEE TCAD 1990): 9 operations per address, a pause, 2, a pause, 1
    # (the 100 ms pauses are the library's choice); 64 words at 100 MHz, one cycle per op
    mem = make_memory(64, 1, clock="100MHz")
    spans = active_spans(resolve_test("IFA-9"), mem)
    ns = Fraction(1, 10**9)
    assert spans == ((0, 576 * 10 * ns), (576 * 10 * ns + Fraction(1, 10), 128 * 10 * ns),
                     (704 * 10 * ns + Fraction(2, 10), 64 * 10 * ns))
    assert active_spans(resolve_test("March C-"), mem) is None
