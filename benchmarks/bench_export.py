"""Export throughput and memory: a script, not a test.

    python benchmarks/bench_export.py [--words 1048576] [--bits 8] [--test "March C-"]
                                      [--formats csv,jsonl,stil,vcd,hex] [--repeat 3] [--dir DIR]
                                      [--read-latency N]   (pipelined reads: compares N cycles later)

For each format it exports the test (default: March C-, 10n, on 2^20 words: 10,485,760
cycles) in a fresh process and measures

* the time of the export (the `marchkit.export.export` call: expansion, formatting,
  writing under a temporary name, renaming);
* the time to write the same number of bytes "raw" (a 1 MiB buffer written over and over
  to a plain file in the same directory, then closed), in another fresh process;
* the time of the export to /dev/null (no disk: what the formatting costs);
* the peak resident memory (VmHWM) of the export process.

Each run starts after ``sync`` (no dirty pages left by the previous one).  Both are timed
twice: into the page cache (``ratio``), and including ``fsync`` of the files (``ratio+sync``).

Runs alternate (export, raw, export, raw, …) so that both see the same state of the disk;
the median of ``--repeat`` runs is reported.  The export should take at most 3× the raw write
and stay under 200 MB.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time


def child_export(args) -> None:
    import resource

    from marchkit.export import export
    from marchkit.model import make_memory
    from marchkit.notation import resolve_test

    test = resolve_test(args.test)
    mem = make_memory(args.words, args.bits, read_latency=args.read_latency)
    base = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    t0 = time.perf_counter()
    res = export(test, mem, args.out, args.child, force=True, max_bytes=0)   # the benchmark writes gigabytes on purpose
    dt = time.perf_counter() - t0
    t0 = time.perf_counter()
    for p in res.files:
        if os.path.isfile(p):
            fd = os.open(p, os.O_RDONLY)
            os.fsync(fd)
            os.close(fd)
    flush = time.perf_counter() - t0
    print(json.dumps({"seconds": dt, "flush": flush, "bytes": res.bytes, "cycles": res.cycles,
                      "rss_kb": peak_rss_kb(), "rss_before_kb": base}))


def peak_rss_kb() -> int:
    """This process's own peak (VmHWM; ru_maxrss can include the parent's memory at fork)."""
    try:
        with open("/proc/self/status") as f:
            return int(next(line for line in f if line.startswith("VmHWM")).split()[1])
    except (OSError, StopIteration):
        import resource

        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss


def child_raw(args) -> None:
    buf = os.urandom(1 << 20)
    t0 = time.perf_counter()
    left = args.bytes
    with open(args.out, "wb") as f:
        while left > 0:
            n = min(left, len(buf))
            f.write(buf[:n] if n < len(buf) else buf)
            left -= n
    dt = time.perf_counter() - t0
    t0 = time.perf_counter()
    fd = os.open(args.out, os.O_RDONLY)
    os.fsync(fd)
    os.close(fd)
    print(json.dumps({"seconds": dt, "flush": time.perf_counter() - t0}))


def run_child(argv) -> dict:
    if hasattr(os, "sync"):
        os.sync()            # every run starts with no dirty pages of an earlier one
    r = subprocess.run([sys.executable, __file__] + argv, capture_output=True, text=True)
    if r.returncode:
        sys.exit(f"benchmark child failed:\n{r.stderr}")
    return json.loads(r.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--words", type=int, default=1 << 20)
    ap.add_argument("--bits", type=int, default=8)
    ap.add_argument("--test", default="March C-")
    ap.add_argument("--formats", default="csv,jsonl,stil,vcd,hex")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--read-latency", type=int, default=0)
    ap.add_argument("--dir", default=None, help="where the files are written (default: a temporary directory here)")
    ap.add_argument("--child", help=argparse.SUPPRESS)
    ap.add_argument("--raw", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--out", help=argparse.SUPPRESS)
    ap.add_argument("--bytes", type=int, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.raw:
        return child_raw(args)
    if args.child:
        return child_export(args)

    d = args.dir or tempfile.mkdtemp(prefix="bench_export.", dir=".")
    common = ["--words", str(args.words), "--bits", str(args.bits), "--test", args.test,
              "--read-latency", str(args.read_latency)]
    print(f"{args.test} on {args.words} words x {args.bits} bits, read latency {args.read_latency}; median of {args.repeat} runs; files in {d}")
    print("export s / raw s: writing into the page cache; +sync: including the flush to disk (fsync)")
    print(f"{'format':7} {'cycles':>10} {'MB':>7} {'export s':>9} {'MB/s':>6} {'raw s':>7} {'ratio':>6} "
          f"{'ratio+sync':>10} {'no-disk s':>9} {'peak RSS MB':>11}")
    try:
        for fmt in args.formats.split(","):
            out = os.path.join(d, f"bench.{fmt}")
            raw = os.path.join(d, "raw.bin")
            ex, rw, nd, rss, exs, rws = [], [], [], [], [], []
            info = None
            for _ in range(args.repeat):
                info = run_child(common + ["--child", fmt, "--out", out])
                ex.append(info["seconds"])
                exs.append(info["seconds"] + info["flush"])
                rss.append(info["rss_kb"])
                stem = os.path.splitext(out)[0]
                for p in [out] + ([stem + "_tb.v", stem + "_sram.v"] if fmt == "hex" else []):
                    os.unlink(p)
                r = run_child(["--raw", "--out", raw, "--bytes", str(info["bytes"])])
                rw.append(r["seconds"])
                rws.append(r["seconds"] + r["flush"])
                os.unlink(raw)
                nd.append(run_child(common + ["--child", fmt, "--out", "/dev/null"])["seconds"])
            e, r, n = statistics.median(ex), statistics.median(rw), statistics.median(nd)
            mb = info["bytes"] / 1e6
            rs = statistics.median(exs) / statistics.median(rws)
            print(f"{fmt:7} {info['cycles']:>10} {mb:>7.0f} {e:>9.2f} {mb / e:>6.0f} {r:>7.2f} {e / r:>6.2f} "
                  f"{rs:>10.2f} {n:>9.2f} {max(rss) / 1024:>11.0f}", flush=True)
    finally:
        if not args.dir:
            try:
                os.rmdir(d)
            except OSError:
                pass


if __name__ == "__main__":
    main()
