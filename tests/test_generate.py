"""marchkit generate: shortest tests, checked against published minimal tests and the engine.

Outside sources named beside each check:
* March C- is 10n and detects SAF, TF, AF, CFin, CFid, CFst — A. J. van de Goor, Testing
  Semiconductor Memories: Theory and Practice, Wiley, 1991.
* March SS (22n) detects every static simple fault — S. Hamdioui, A. J. van de Goor,
  M. Rodgers, "March SS: a test for all static simple RAM faults", MTDT 2002.
* March MSS, 18n, minimal for the unlinked static faults — G. Harutyunyan, V. A. Vardanian,
  Y. Zorian, VTS 2005 (from memory).
"""

from __future__ import annotations

import json
import os
import random
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

from marchkit.faults import parse_pairs, select_faults
from marchkit.generate import GenerateError, generate, shorten
from marchkit.grade import grade
from marchkit.model import make_memory
from marchkit.notation import format_notation, parse_file, parse_notation, resolve_test

ROOT = Path(__file__).resolve().parents[1]
CLASSIC = "SAF,TF,AF,CFin,CFid,CFst"


def test_classic_set_gives_10n_proven_like_march_c_minus():
    # van de Goor 1991: March C- (10n) detects SAF, TF, AF, CFin, CFid, CFst
    mem = make_memory(16)
    g = generate(CLASSIC, mem)
    assert g.length == 10 and g.proven_minimal and g.lower_bound == 10
    assert g.grade.total.coverage == 1.0
    ref = grade(resolve_test("March C-"), mem, CLASSIC)
    assert ref.total.coverage == 1.0 and ref.total.instances == g.grade.total.instances


def test_static_set_at_most_18n_and_complete():
    # Harutyunyan, Vardanian, Zorian VTS 2005 (from memory): 18n suffices for the 48 static
    # primitives; Hamdioui et al. 2002: March SS (22n) detects them all
    mem = make_memory(8)
    g = generate("static", mem, exact=False)      # first solution only; the benchmark runs the proof
    assert g.length <= 18
    assert g.grade.total.coverage == 1.0
    assert grade(resolve_test("March SS"), mem, "static").total.coverage == 1.0
    assert g.lower_bound <= g.length


def test_generated_test_is_minimal_for_a_single_primitive():
    # common practice, no source: a transition fault <0w1/0/-> needs w0, w1, r1 (3n), and
    # the search proves nothing shorter exists
    g = generate("<0w1/0/->", make_memory(8))
    assert g.length == 3 and g.proven_minimal
    assert format_notation(g.test) in ("{⇕(w0,w1,r1)}", "{⇕(w0); ⇕(w1,r1)}", "{⇕(w0); ⇕(w1); ⇕(r1)}", "{⇕(w0,w1); ⇕(r1)}")


def _my_verdicts(selection, mem, scope, test):
    from marchkit.generate.keys import discover
    from marchkit.generate.tables import evaluate_masks

    groups, _ = discover(selection, mem, scope)
    items = [(e.order, tuple((o.kind, o.value) for o in e.expanded())) for e in test.elements]
    out: dict = {}
    for g in groups:
        ok = any(evaluate_masks(g.subs, items))
        out[g.kind.text] = out.get(g.kind.text, True) and ok
    return out


def _random_test(rng):
    items = []
    cur = None
    for _ in range(rng.randint(1, 5)):
        ops = []
        for _ in range(rng.randint(1, 4)):
            if cur is not None and rng.random() < 0.5:
                ops.append(f"r{cur}")
            else:
                cur = rng.randint(0, 1)
                ops.append(f"w{cur}")
        items.append(rng.choice("⇑⇓⇕") + "(" + ",".join(ops) + ")")
    return parse_notation("{" + "; ".join(items) + "}")


MEMORIES = [
    dict(words=8, mux=2),
    dict(words=8, mux=2, order="random:3", backgrounds="checkerboard"),
    dict(words=4, bits=2, backgrounds="columns"),
    dict(words=8, scramble_xor=5, order="gray", backgrounds="rows", mux=2),
]


@pytest.mark.parametrize("seed", range(4))
def test_search_model_agrees_with_engine_on_random_tests(seed):
    # differential (one background run, so the model is exact): the key model's verdict per
    # fault kind equals the engine's on the memory
    rng = random.Random(seed)
    mem = make_memory(**MEMORIES[seed])
    sel = select_faults("static,dynamic,SAF,AF,CFin,CFid")
    scope = parse_pairs("neighbours,word" if mem.bits > 1 else "neighbours")
    for _ in range(6):
        t = _random_test(rng)
        mine = _my_verdicts(sel, mem, scope, t)
        res = grade(t, mem, sel, "neighbours")
        eng = {r.kind.text: r.detected == r.instances for r in res.kinds if r.kind.text in mine}
        assert mine == eng, format_notation(t)


def test_word_oriented_model_never_claims_more_than_engine():
    # several background runs: the search counts a key only when one run detects it from any
    # start, which implies the engine's verdict (common practice, no source)
    rng = random.Random(7)
    mem = make_memory(4, bits=4, backgrounds="word")
    sel = select_faults("CFid,CFst,SAF,TF,AF")
    scope = parse_pairs("word,neighbours")
    for _ in range(6):
        t = _random_test(rng)
        mine = _my_verdicts(sel, mem, scope, t)
        res = grade(t, mem, sel, scope)
        for r in res.kinds:
            if mine.get(r.kind.text):
                assert r.detected == r.instances, (r.kind.text, format_notation(t))


def test_word_oriented_intra_word_coupling():
    mem = make_memory(8, bits=4, backgrounds="word")
    g = generate("CFst,CFds", mem, "word", time_limit=20)
    # within one word a write changes aggressor and victim at once: a CFds whose aggressor is
    # written leaves the victim as the write does under every background, so it is excluded
    excluded = {f for f, _, _ in g.excluded}
    assert excluded and all("w" in f for f in excluded)
    for r in g.grade.kinds:
        if r.kind.text not in excluded:
            assert r.detected == r.instances, r.kind.text


def test_undetectable_keys_are_excluded_with_a_reason():
    # cells of one word under one solid background always hold equal values after a write:
    # CFst <0;1/0/-> there is never sensitised for the start (0, 0)
    mem = make_memory(8, bits=4)
    g = generate("<0;1/0/->,SAF", mem, "word,neighbours")
    assert g.excluded and all("no march test" in r for _, _, r in g.excluded)
    assert any(w == "same word" for _, w, _ in g.excluded)
    with pytest.raises(GenerateError, match="no march test detects"):
        generate("<0;1/0/->", mem, "word")


def test_impossible_limits():
    mem = make_memory(8)
    with pytest.raises(GenerateError, match="alone needs"):
        generate(CLASSIC, mem, max_length=2)
    with pytest.raises(GenerateError, match="at least 10"):
        generate(CLASSIC, mem, max_length=9)
    with pytest.raises(GenerateError):
        generate(CLASSIC, mem, time_limit=0)


def test_like_shortens_and_keeps_detections():
    mem = make_memory(8)
    house = parse_notation("{⇕(w0); ⇑(r0,w1,r1); ⇑(r1,w0); ⇓(r0,w1); ⇓(r1,w0); ⇕(r0); ⇕(r0,w0)}")
    g = shorten(house, mem, CLASSIC)
    assert g.length < house.ops_per_cell
    before = {r.kind.text: r.detected for r in grade(house, mem, CLASSIC).kinds}
    after = {r.kind.text: r.detected for r in g.grade.kinds}
    assert all(after[k] >= v for k, v in before.items())


# ---- command line ---------------------------------------------------------------------


def test_cli_writes_library_file_that_grade_takes(cli, tmp_path):
    out = tmp_path / "gen.march"
    code, text, err = cli("generate", "--faults", CLASSIC, "--words", "16", "--workers", "0", "-o", str(out))
    assert code == 0, err
    assert "proven minimal" in text and "10n" in text
    (t,) = parse_file(out)
    assert t.length == "10n" and t.source.startswith("generated by marchkit on ")
    assert "--faults " + CLASSIC in t.source and set(CLASSIC.split(",")) <= set(t.targets)
    code, text, err = cli("grade", str(out), "--faults", CLASSIC, "--words", "16", "--json")
    assert code == 0 and json.loads(text)["total"]["coverage"] == 1.0
    code, text, err = cli("compare", str(out), "March C-", "--faults", CLASSIC, "--words", "16")
    assert code == 0, err
    csv = tmp_path / "gen.csv"
    code, text, err = cli("export", str(out), "--words", "16", "--format", "csv", "-o", str(csv))
    assert code == 0, err
    assert len(csv.read_text().splitlines()) == 1 + 10 * 16       # header + 10n cycles
    code, text, err = cli("generate", "--faults", CLASSIC, "--words", "16", "--workers", "0", "-o", str(out))
    assert code == 2 and "exists" in err


def test_cli_json_contract(cli):
    code, text, err = cli("generate", "--faults", "SAF,TF", "--words", "8", "--workers", "0", "--json")
    assert code == 0, err
    d = json.loads(text)
    assert {"test", "length", "proven_minimal", "lower_bound", "grade"} <= set(d)
    assert d["proven_minimal"] is True and d["length"] == d["lower_bound"]
    # SAF and TF: MATS++ is 6n (van de Goor 1991); the proven shortest is no longer
    assert d["length"] <= 6
    assert parse_notation(d["test"]).ops_per_cell == d["length"]


@pytest.mark.parametrize("argv, words", [
    (["--faults", ","], "empty"),
    (["--faults", "nonsense"], "unknown fault selection"),
    (["--faults", CLASSIC, "--max-length", "3"], "alone needs"),
    (["--faults", CLASSIC, "--max-length", "0"], "--max-length"),
    (["--faults", CLASSIC, "--time-limit", "-1"], "--time-limit"),
    (["--faults", "SOF"], "nothing to search"),
    (["--faults", CLASSIC, "--workers", "-1"], "--workers"),
    (["--faults", CLASSIC, "--scheduler", "localhost:1"], "--scheduler"),
    (["--faults", "<0;1/0/->", "--bits", "4", "--pairs", "word"], "no march test detects"),
])
def test_cli_errors_exit_2(cli, argv, words):
    code, out, err = cli("generate", "--words", "8", "--workers", "0", *argv)
    assert code == 2
    assert words in err and "Traceback" not in err


# ---- Dask: a real LocalCluster, and a scheduler + worker pair as processes -------------


def test_dask_local_cluster_gives_the_serial_answer():
    from marchkit.plan.cluster import open_client

    mem = make_memory(8)
    serial = generate(CLASSIC, mem, local_nodes=0)
    with open_client(workers=2) as client:
        dist = generate(CLASSIC, mem, executor=client, local_nodes=0)
    assert dist.remote_levels > 0
    assert format_notation(dist.test) == format_notation(serial.test)
    assert dist.proven_minimal and dist.length == serial.length


def _free_port():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


def test_dask_scheduler_and_worker_processes(cli):
    pytest.importorskip("distributed")
    port = _free_port()
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    bindir = Path(sys.executable).parent
    dask = str(bindir / "dask") if (bindir / "dask").exists() else "dask"
    procs = []
    try:
        procs.append(subprocess.Popen([dask, "scheduler", "--host", "127.0.0.1", "--port", str(port),
                                       "--no-dashboard"], env=env, stdout=subprocess.DEVNULL,
                                      stderr=subprocess.DEVNULL))
        procs.append(subprocess.Popen([dask, "worker", f"tcp://127.0.0.1:{port}", "--nthreads", "1",
                                       "--no-dashboard", "--host", "127.0.0.1"], env=env,
                                      stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        from marchkit.plan.cluster import open_client

        deadline = time.time() + 60
        while True:
            try:
                with open_client(scheduler=f"tcp://127.0.0.1:{port}") as client:
                    client.wait_for_workers(1, timeout=30)
                    mem = make_memory(8)
                    dist = generate(CLASSIC, mem, executor=client, local_nodes=0)
                break
            except Exception:
                if time.time() > deadline:
                    raise
                time.sleep(1)
        serial = generate(CLASSIC, make_memory(8), local_nodes=0)
        assert dist.remote_levels > 0
        assert format_notation(dist.test) == format_notation(serial.test)
        code, out, err = cli("generate", "--faults", "SAF,TF", "--words", "8", "--scheduler",
                             f"tcp://127.0.0.1:{port}", "--json")
        assert code == 0, err
        assert json.loads(out)["proven_minimal"] is True
    finally:
        for p in reversed(procs):
            p.terminate()
        for p in procs:
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                p.kill()


def _all_tests(length, max_element):
    """Every test of exactly ``length`` operations in the search space, by brute force."""
    from marchkit.generate.tables import R_, W0, W1
    from itertools import product

    def comps(n):
        if n == 0:
            yield ()
            return
        for k in range(1, min(n, max_element) + 1):
            for rest in comps(n - k):
                yield (k,) + rest

    for sizes in comps(length):
        for orders in product(("up", "down"), repeat=len(sizes)):
            for flat in product((R_, W0, W1), repeat=length):
                if flat[0] == R_:
                    continue
                items, f, i = [], 0, 0
                for k, o in zip(sizes, orders):
                    ops = []
                    for c in flat[i:i + k]:
                        if c == R_:
                            ops.append(("r", f))
                        else:
                            f = c - 1
                            ops.append(("w", f))
                    items.append((o, tuple(ops)))
                    i += k
                yield items


@pytest.mark.parametrize("fault", ["<0w1/0/->", "<1r1/0/1>", "<0r0/1/0>", "<1;0w1/0/->", "<0w1;0/1/->",
                                   "<0;1/0/->", "<1w0r0/1/1>", "SAF", "SAF,TF"])
def test_proven_length_matches_brute_force(fault):
    # exhaustive enumeration of the space (common practice, no source): nothing shorter than
    # the proven length detects the fault, and the generated test does
    from marchkit.generate.keys import discover
    from marchkit.generate.tables import evaluate_masks

    mem = make_memory(8)
    g = generate(fault, mem, max_element=4)
    assert g.proven_minimal
    groups, _ = discover(select_faults(fault), mem, parse_pairs("neighbours"))

    def detects(items):
        return all(any(evaluate_masks(gr.subs, items)) for gr in groups)

    for n in range(1, g.length):
        assert not any(detects(t) for t in _all_tests(n, 4)), n
    items = [(e.order, tuple((o.kind, o.value) for o in e.ops)) for e in g.test.elements]
    assert detects(items)


def test_cli_like_and_not_searched_families(cli):
    code, out, err = cli("generate", "--faults", "SAF,TF", "--words", "8", "--like", "MATS++", "--json")
    assert code == 0, err
    d = json.loads(out)
    # MATS++ (6n, van de Goor 1991) detects SAF and TF; the shortened test keeps that
    assert d["length"] <= 6 and d["grade"]["total"]["coverage"] == 1.0 and d["proven_minimal"] is False
    code, out, err = cli("generate", "--faults", "SAF,SOF", "--words", "8", "--workers", "0")
    assert code == 0, err
    assert "not searched SOF" in out
