"""Benchmark of the fast fault-simulation engine (a script, not a test).

    python benchmarks/bench_engine.py            # everything (a few minutes on 2 cores)
    python benchmarks/bench_engine.py --quick    # smaller reference sizes, one repeat

For each workload it prints the instances, the wall time of grading (``marchkit.grade.grade``
with the default engine, in a fresh process so that the peak RSS is the workload's own), the
instance rate, and the speed-up over the literal reference simulator.  The reference cannot
finish the big sizes, so it is measured on the *same workload* (test, fault selection, pair
scope, memory options) at a small size, in the same run; the engine is measured on that small
size too.  Two ratios are printed, each labelled:

* ``same size``: engine rate / reference rate, both on the small memory;
* ``big vs small``: engine rate on the big memory / reference rate on the small memory.  The
  reference's rate falls as the memory grows (each instance costs it O(words)), so this
  ratio is a lower bound of the true ratio at the big size; nothing is extrapolated.

Then a scaling table over the array size for March SS, static primitives, all pairs, and, if
the ``grade`` command exists, whole-process timings of the ``marchkit`` console script.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

WORKLOADS = [
    dict(name="March SS 4096x1 static, all pairs", test="March SS",
         mem=dict(words=4096, bits=1), faults="static", pairs="all",
         small=dict(words=8, bits=1), small_quick=dict(words=4, bits=1),
         cli=["March SS", "--words", "4096", "--bits", "1", "--faults", "static", "--pairs", "all"]),
    dict(name="March SS 65536x16 static,SAF,TF,SOF,AF,DRF, neighbours", test="March SS",
         mem=dict(words=65536, bits=16), faults="static,SAF,TF,SOF,AF,DRF", pairs="neighbours",
         small=dict(words=4, bits=4), small_quick=dict(words=2, bits=4),
         cli=["March SS", "--words", "65536", "--bits", "16", "--faults", "static,SAF,TF,SOF,AF,DRF",
              "--pairs", "neighbours"]),
    dict(name="March SS 1048576x64 (64 Mbit) static,SAF,TF,SOF,AF,DRF, neighbours", test="March SS",
         mem=dict(words=1048576, bits=64), faults="static,SAF,TF,SOF,AF,DRF", pairs="neighbours",
         small=dict(words=4, bits=4), small_quick=dict(words=2, bits=4), repeat=1, sample=False,
         cli=["March SS", "--words", "1048576", "--bits", "64", "--faults", "static,SAF,TF,SOF,AF,DRF",
              "--pairs", "neighbours"]),
    dict(name="March SS 1048576x64 (64 M cells) dynamic", test="March SS",
         mem=dict(words=1048576, bits=64), faults="dynamic", pairs="neighbours",
         small=dict(words=8, bits=2), small_quick=dict(words=4, bits=2), repeat=1, sample=False,
         cli=["March SS", "--words", "1048576", "--bits", "64", "--faults", "dynamic"]),
]
# whole-process commands timed besides the workloads (issue targets: compare ≤ 5 s; a refusal < 1 s)
EXTRA_CLI = [
    ("compare --library, 65536x16, neighbours",
     ["compare", "--library", "--words", "65536", "--bits", "16", "--pairs", "neighbours"]),
    ("a size the engine refuses (2^26 words x 1024 bits)",
     ["grade", "March SS", "--words", str(1 << 26), "--bits", "1024"]),
]
SCALING_WORDS = (64, 256, 1024, 4096, 16384)


# ---------------------------------------------------------------------------------------
# measurements (each run in a child process: `--child JSON`)


def _peak_rss_mb() -> float:
    """Peak RSS of this process or of any worker it forked (the larger; Linux: KiB)."""
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    kids = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return max(own, kids) / 1024


def measure_engine(spec: dict) -> dict:
    from marchkit.grade import grade
    from marchkit.model import make_memory
    from marchkit.notation import find_in_library

    test = find_in_library(spec["test"])
    mem = make_memory(**spec["mem"])
    times = []
    res = None
    for _ in range(spec.get("repeat", 1)):
        t0 = time.perf_counter()
        res = grade(test, mem, spec["faults"], spec["pairs"])
        times.append(time.perf_counter() - t0)
    return {"instances": res.total.instances, "detected": res.total.detected,
            "times": times, "rss_mb": _peak_rss_mb()}


def measure_reference(spec: dict) -> dict:
    """Reference simulator on the whole workload: every kind, every instance."""
    from marchkit.engine.reference import reference_verdicts
    from marchkit.faults import DEFAULT_RETENTION, enumerate_instances, parse_pairs, select_faults
    from marchkit.model import make_memory
    from marchkit.notation import find_in_library

    test = find_in_library(spec["test"])
    mem = make_memory(**spec["mem"])
    sel = select_faults(spec["faults"], DEFAULT_RETENTION)
    scope = parse_pairs(spec["pairs"])
    t0 = time.perf_counter()
    insts = [i for k in sel.kinds for i in enumerate_instances(k, mem, scope)]
    verdicts = reference_verdicts(test, mem, insts)
    dt = time.perf_counter() - t0
    return {"instances": len(insts), "detected": sum(d for d, _ in verdicts), "times": [dt],
            "rss_mb": _peak_rss_mb()}


def measure_reference_sample(spec: dict) -> dict:
    """Reference simulator on a seeded random sample of the *big* workload's instances (same
    memory, test and faults), instance by instance until a time budget is spent; the engine's
    verdicts for the same instances are compared."""
    import random

    import numpy as np

    from marchkit.engine.fast import Engine
    from marchkit.engine.reference import reference_verdicts
    from marchkit.faults import (DEFAULT_RETENTION, Instance, cell_pairs, instance_count,
                                 parse_pairs, select_faults, word_pairs)
    from marchkit.model import make_memory, schedule
    from marchkit.notation import find_in_library

    test = find_in_library(spec["test"])
    mem = make_memory(**spec["mem"])
    sel = select_faults(spec["faults"], DEFAULT_RETENTION)
    scope = parse_pairs(spec["pairs"])
    rng = random.Random(7)
    weights = [instance_count(k, mem, scope) for k in sel.kinds]
    explicit = {}

    from marchkit.faults import family_of
    from marchkit.model.geometry import neighbour_directions, neighbour_word_offsets

    def neighbour_pair(words):
        """A uniformly drawn ordered neighbour pair (cells, or words), without a list:
        a random place and direction, redrawn until the neighbour is inside the array."""
        while True:
            if words:
                dr, ds = rng.choice(neighbour_word_offsets(mem))
                p = rng.randrange(mem.words)
                r, s_ = divmod(p, mem.mux)
                if 0 <= r + dr < mem.rows and 0 <= s_ + ds < mem.mux:
                    q = p + dr * mem.mux + ds
                    return int(mem.logical_word(p)), int(mem.logical_word(q))
            else:
                dr, dc = rng.choice(neighbour_directions(mem))
                r, c = rng.randrange(mem.rows), rng.randrange(mem.columns)
                if 0 <= r + dr < mem.rows and 0 <= c + dc < mem.columns:
                    (w1, b1), (w2, b2) = mem.cell_at(r, c), mem.cell_at(r + dr, c + dc)
                    return int(w1) * mem.bits + int(b1), int(w2) * mem.bits + int(b2)

    def draw():
        kind = rng.choices(sel.kinds, weights)[0]
        words = family_of(kind).site == "words"
        n = mem.words if words else mem.cells
        if kind.arity == 1:
            return Instance(kind, (rng.randrange(n),))
        if spec["pairs"] == "neighbours":
            return Instance(kind, neighbour_pair(words))
        key = "af" if words else "cells"
        if key not in explicit:
            explicit[key] = (word_pairs if key == "af" else cell_pairs)(mem, scope)
        pairs = explicit[key]
        if pairs is None:
            a = rng.randrange(n)
            v = rng.randrange(n - 1)
            return Instance(kind, (a, v + (v >= a)))
        i = rng.randrange(pairs[0].size)
        return Instance(kind, (int(pairs[0][i]), int(pairs[1][i])))

    sched = schedule(test, mem)
    insts, verdicts = [], []
    t0 = time.perf_counter()
    while not insts or (time.perf_counter() - t0 < spec["budget"] and len(insts) < 200):
        inst = draw()
        verdicts += reference_verdicts(test, mem, [inst], sched, limit=float("inf"))
        insts.append(inst)
    dt = time.perf_counter() - t0
    agree = Engine(test, mem, sched).instance_verdicts(insts) == verdicts
    return {"instances": len(insts), "detected": sum(d for d, _ in verdicts), "times": [dt],
            "agree": agree, "rss_mb": _peak_rss_mb()}


def in_child(kind: str, spec: dict) -> dict:
    out = subprocess.run(
        [sys.executable, __file__, "--child", json.dumps({"kind": kind, "spec": spec})],
        capture_output=True, text=True, cwd=ROOT,
    )
    if out.returncode:
        raise SystemExit(f"child failed ({kind} {spec}):\n{out.stderr}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def _cli_command() -> list[str]:
    exe = shutil.which("marchkit")
    return [exe] if exe else [sys.executable, "-m", "marchkit"]


def run_process(argv: list[str]) -> dict:
    """One whole ``marchkit`` process: wall time, exit status, its own peak RSS."""
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    with tempfile.TemporaryFile() as fo, tempfile.TemporaryFile() as fe:
        t0 = time.perf_counter()
        proc = subprocess.Popen(_cli_command() + argv, stdout=fo, stderr=fe, env=env)
        _, status, ru = os.wait4(proc.pid, 0)
        dt = time.perf_counter() - t0
        fe.seek(0)
        err = fe.read().decode()
    return {"seconds": dt, "status": os.waitstatus_to_exitcode(status), "rss_mb": ru.ru_maxrss / 1024,
            "stderr": err.strip().splitlines()[-1][:200] if err.strip() else ""}


def run_cli(args: list[str]) -> dict | None:
    """One whole ``marchkit grade ... --json`` process: wall time, its counts and its own
    peak RSS (``os.wait4`` gives the resource usage of that one child)."""
    if not (ROOT / "marchkit" / "cli" / "cmd_grade.py").exists():
        return None
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    with tempfile.TemporaryFile() as fo, tempfile.TemporaryFile() as fe:
        t0 = time.perf_counter()
        proc = subprocess.Popen(_cli_command() + ["grade", *args, "--json"], stdout=fo, stderr=fe, env=env)
        _, status, ru = os.wait4(proc.pid, 0)
        dt = time.perf_counter() - t0
        proc.returncode = os.waitstatus_to_exitcode(status)
        fo.seek(0)
        fe.seek(0)
        stdout, stderr = fo.read().decode(), fe.read().decode()
    if proc.returncode:
        last = (stderr.strip().splitlines() or [""])[-1]
        return {"error": f"exit {proc.returncode}: {last[:300]}", "seconds": dt}
    try:
        total = json.loads(stdout)["total"]
    except (ValueError, KeyError):
        return {"error": "output is not the grade JSON", "seconds": dt}
    return {"seconds": dt, "instances": total["instances"], "detected": total["detected"],
            "rss_mb": ru.ru_maxrss / 1024}


# ---------------------------------------------------------------------------------------
# report


def fmt_n(n: float) -> str:
    return f"{n:,.0f}"


def fmt_rate(r: float) -> str:
    return f"{r:.3g}/s"


def best(times):
    return min(times)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="smaller reference sizes, one repeat")
    ap.add_argument("--repeat", type=int, default=3, help="engine runs per workload (best and median are printed)")
    ap.add_argument("--no-cli", action="store_true", help="skip the whole-process CLI timings")
    ap.add_argument("--child", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child:
        job = json.loads(args.child)
        fn = {"engine": measure_engine, "reference": measure_reference,
              "sample": measure_reference_sample}[job["kind"]]
        print(json.dumps(fn(job["spec"])))
        return 0

    repeat = 1 if args.quick else args.repeat
    import numpy

    import marchkit

    print(f"marchkit {marchkit.__version__}, Python {sys.version.split()[0]}, numpy {numpy.__version__}, "
          f"{os.cpu_count()} CPUs, load average {', '.join(f'{x:.2f}' for x in os.getloadavg())}")
    print("times are wall-clock seconds of marchkit.grade.grade() in a fresh process "
          f"(engine: best and median of {repeat}; reference: one run); CLI: one whole process\n")

    for w in WORKLOADS:
        small = w["small_quick" if args.quick else "small"]
        base = dict(test=w["test"], faults=w["faults"], pairs=w["pairs"])
        big = in_child("engine", dict(base, mem=w["mem"], repeat=min(repeat, w.get("repeat", repeat))))
        eng_small = in_child("engine", dict(base, mem=small, repeat=max(repeat, 3)))
        ref_small = in_child("reference", dict(base, mem=small))
        agree = (eng_small["instances"], eng_small["detected"]) == (ref_small["instances"], ref_small["detected"])
        t_big = best(big["times"])
        r_big = big["instances"] / t_big
        r_es = eng_small["instances"] / best(eng_small["times"])
        r_ref = ref_small["instances"] / ref_small["times"][0]
        mem_txt = f"{w['mem']['words']}x{w['mem']['bits']}"
        sm_txt = f"{small['words']}x{small['bits']}"
        print(f"== {w['name']}")
        print(f"   engine    {mem_txt:>9}: {fmt_n(big['instances']):>15} instances, "
              f"best {t_big:.3f} s (median {statistics.median(big['times']):.3f} s), "
              f"{fmt_rate(r_big)}, detected {fmt_n(big['detected'])}, peak RSS {big['rss_mb']:.0f} MB")
        print(f"   engine    {sm_txt:>9}: {fmt_n(eng_small['instances']):>15} instances, "
              f"best {best(eng_small['times']):.4f} s, {fmt_rate(r_es)}")
        print(f"   reference {sm_txt:>9}: {fmt_n(ref_small['instances']):>15} instances, "
              f"{ref_small['times'][0]:.3f} s, {fmt_rate(r_ref)}; "
              f"totals agree with the engine: {'yes' if agree else 'NO'}")
        print(f"   speed-up, same size ({sm_txt}, engine rate / reference rate): {r_es / r_ref:,.0f}x")
        print(f"   speed-up, big vs small (engine rate at {mem_txt} / reference rate at {sm_txt}): "
              f"{r_big / r_ref:,.0f}x")
        if w.get("sample", True):
            samp = in_child("sample", dict(base, mem=w["mem"], budget=10 if args.quick else 30))
            r_samp = samp["instances"] / samp["times"][0]
            print(f"   reference {mem_txt:>9}: a random sample of {samp['instances']} instances of this workload, "
                  f"{samp['times'][0]:.1f} s, {fmt_rate(r_samp)}; engine verdicts on them agree: "
                  f"{'yes' if samp['agree'] else 'NO'}")
            print(f"   speed-up, same workload ({mem_txt}, engine rate / reference rate on its sample): "
                  f"{r_big / r_samp:,.0f}x")
        else:
            print(f"   reference {mem_txt:>9}: not sampled (one instance takes the reference about 400 s here)")
        if not args.no_cli:
            cli = run_cli(w["cli"])
            if cli is None:
                print("   CLI: marchkit/cli/cmd_grade.py or the marchkit script is missing; not timed")
            elif "error" in cli:
                print(f"   CLI: marchkit grade ... --json failed after {cli['seconds']:.2f} s: {cli['error']}")
            else:
                same = "yes" if (cli["instances"], cli["detected"]) == (big["instances"], big["detected"]) else "NO"
                shown = " ".join(f"'{a}'" if " " in a else a for a in w["cli"])
                print(f"   CLI whole process (marchkit grade {shown} --json): {cli['seconds']:.2f} s, "
                      f"{fmt_n(cli['instances'])} instances (same counts as above: {same}), "
                      f"peak RSS {cli['rss_mb']:.0f} MB")
        print()

    if not args.no_cli:
        for name, argv in EXTRA_CLI:
            r = run_process(argv)
            print(f"== CLI whole process, {name}: {r['seconds']:.2f} s, exit {r['status']}, "
                  f"peak RSS {r['rss_mb']:.0f} MB" + (f"; says: {r['stderr']}" if r["status"] else ""))
        print()

    print("== scaling: March SS, static primitives, all ordered pairs, bits 1 (engine)")
    print(f"   {'words':>6} {'instances':>16} {'best s':>8} {'median s':>9} {'instances/s':>12} {'time / time@64':>15}")
    t64 = None
    for n in SCALING_WORDS:
        r = in_child("engine", dict(test="March SS", faults="static", pairs="all",
                                    mem=dict(words=n, bits=1), repeat=repeat))
        t = best(r["times"])
        t64 = t64 or t
        want = 12 * n + 36 * n * (n - 1)          # 12 one-cell + 36 two-cell primitives
        flag = "" if r["instances"] == want else f"  (expected {fmt_n(want)}!)"
        print(f"   {n:>6} {fmt_n(r['instances']):>16} {t:>8.3f} {statistics.median(r['times']):>9.3f} "
              f"{r['instances'] / t:>12.3g} {t / t64:>15.2f}{flag}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
