"""A long fuzz run over notations, memory files, names and command-line argument sets: a
script, not a test (the test suite runs a short hypothesis version, tests/test_fuzz.py).

    python benchmarks/fuzz_run.py [--inputs 100000] [--seed 1] [--hang 10] [--report FILE]

Every input runs in this process through the public entry points (``parse_notation`` /
``parse_file_text`` + the consistency check, ``read_memory_file``, and ``marchkit.cli.main``
with standard output and error captured).  Findings counted and printed:

* **traceback**: an exception escaped the entry point, or the command line printed
  "Traceback" or "internal error" (the guard's last net), or exited with a status other
  than 0, 2 (input error) or 3 (--require not met);
* **hang**: one input took longer than ``--hang`` seconds (SIGALRM stops it);
* **memory**: the process's peak resident size passed 2 GB (the address space is capped at
  3 GB so that a runaway input cannot take the machine down; a MemoryError is a finding);
* **injection**: a hostile name exported to VCD changed the signals an independent reader
  (vcdvcd) sees, or broke the STIL header (checked on a sample of the exports).

The mix: 45 % notations, 25 % memory files, 30 % command lines (2 % of those, ``--inject``,
followed by an export of a hostile test or memory name checked by the independent readers).
"""

from __future__ import annotations

import argparse
import contextlib
import io
import os
import random
import resource
import signal
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

ORDERS = ["⇑", "⇓", "⇕", "up", "down", "any", "↑", "x", ""]
OPS = ["r0", "r1", "w0", "w1", "r2", "w", "R0", "W1", "r0^3", "w1*2", "r0×70000", "r0^0"]
JUNK = ["{", "}", "(", ")", ";", ",", "Del", "Del(10ms)", "Del(1e999s)", "Del(0ns)", "\n", "\t", "\"",
        "\\", "$end", "\x00", "é", "\ufeff", "⇕", "test", "source", "length", "10n", "targets", "SAF", "#", "//"]
HOSTILE_NAMES = [
    'x\nmodule pwn; initial $display("INJECTED"); endmodule\n//', "a $end $var wire 1 ! clk $end b",
    r"a$\frac{$ b", "<script>alert(1)</script>", 'q "quoted", comma *} Ann {* x', "\u202e\u0000", "é" * 300,
]
MEM_KEYS = ["name", "words", "bits", "mux", "order", "backgrounds", "clock", "read_cycles", "write_cycles",
            "scramble_bits", "scramble_xor", "neighbours", "retention", "wrods", "clok", "refresh"]
VALUES = ["16", "0", "-1", "1e999", "nan", "inf", '"1GHz"', '"200"', '"1e9999999Hz"', '"fast"', "true",
          '["solid", "word"]', '["0x5"]', "[0, 1, 2, 3]", "[[[[1]]]]", '"stride:1e20"', '"random:5"', "2.5",
          '"5ms"', '["5ms", "50ms"]', '"' + "x" * 5000 + '"', "67108864", "1024", '"\\u0000"', "{a=1}"]
NUMBERS = ["0", "1", "2", "8", "16", "-3", "1e9", "2^62", str(2**62), "99999999999999999999", "0x10", "",
           "nan", "1_000", "64"]
FREQS = ["100MHz", "1e999", "1e-999MHz", "200", "0Hz", "1e9999999GHz", "nanHz", "5GHz", "500GHz", "", "1kHz"]
DURS = ["1ms", ",", "1e999s", "0s", "20000s", "5ms,,6ms", "forever", "1ns", "5ms,50ms", "1e-20s"]
TESTS = ["MATS+", "March C-", "IFA-9", "march-ss", "nosuch", "{⇕(w0); ⇑(r0,w1); ⇓(r1,w0)}", "{⇕(w0); ⇑(r1)}",
         "{", "", "{⇕(w0); Del(1000000000s); ⇑(r0)}"]


def notation(rng: random.Random) -> str:
    if rng.random() < 0.5:                      # near-valid
        els = []
        for _ in range(rng.randint(1, 8)):
            ops = ",".join(rng.choice(OPS[:4] if rng.random() < 0.8 else OPS) for _ in range(rng.randint(1, 5)))
            els.append(f"{rng.choice(ORDERS[:6] if rng.random() < 0.9 else ORDERS)}({ops})")
            if rng.random() < 0.1:
                els.append(rng.choice(["Del", "Del(5ms)", "Del(1e999s)", "del(3us)"]))
        text = "{" + "; ".join(els) + "}"
        for _ in range(rng.randint(0, 3)):       # mutate
            i = rng.randint(0, len(text))
            text = text[:i] + rng.choice(JUNK + OPS) + text[i + rng.randint(0, 2):]
        return text
    pieces = [rng.choice(JUNK + OPS + ORDERS) for _ in range(rng.randint(0, 40))]
    return "".join(pieces)


def test_file(rng: random.Random) -> str:
    out = []
    for i in range(rng.randint(1, 4)):
        name = rng.choice(HOSTILE_NAMES + [f"t{i}", ""]).replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n")
        out.append(f'test "{name}"\n  length {rng.randint(1, 30)}n\n  {notation(rng)}\n')
    text = "".join(out)
    if rng.random() < 0.3:
        i = rng.randint(0, len(text))
        text = text[:i] + rng.choice(JUNK) + text[i:]
    return text


def memory_file(rng: random.Random) -> bytes:
    lines = []
    if rng.random() < 0.8:
        lines.append(rng.choice(["[memory]", "[memory]", "[timing]", "[[memory]]", "[weights]"]))
    for _ in range(rng.randint(0, 7)):
        k = rng.choice(MEM_KEYS)
        v = rng.choice(VALUES) if rng.random() < 0.6 else rng.choice(["16", "8", '"100MHz"', '"linear"', "1"])
        lines.append(f"{k} = {v}")
    if rng.random() < 0.2:
        lines.append("[weights]\n" + rng.choice(["SAF = 2", "SAF = -1", "XYZ = 1", "DRF = nan", "SAF = \"x\""]))
    text = "\n".join(lines) + "\n"
    data = text.encode("utf-8")
    r = rng.random()
    if r < 0.05:
        data = b"\xef\xbb\xbf" + data
    elif r < 0.1:
        data = data.replace(b"16", b"\xe9", 1)
    elif r < 0.12:
        data = b"x = " + b"[" * 3000 + b"]" * 3000 + b"\n"
    return data


def cli_args(rng: random.Random, tmp: Path, files: dict) -> list[str]:
    cmd = rng.choice(["grade", "grade", "compare", "export", "export", "check", "faults", "show", "library"])
    args = [cmd]
    test = rng.choice(TESTS + [files["tests"]])
    if cmd in ("grade", "export", "show"):
        args.append(test)
    elif cmd == "compare":
        args += rng.sample(TESTS[:4] + [files["tests"]], rng.randint(0, 3))
        if rng.random() < 0.1:
            args.append("--library")
    elif cmd == "check":
        args.append(rng.choice([test, files["tests"], files["memory"]]))
    elif cmd == "faults":
        args.append(rng.choice(["static", "classic", "all", "dynamic", "SAF", "nonsense", ""]))
    opts = {
        "--words": lambda: rng.choice(NUMBERS[:5] + ["16", "32", "64"]) if rng.random() < 0.85 else rng.choice(NUMBERS),
        "--bits": lambda: rng.choice(["1", "2", "4", "8"]) if rng.random() < 0.85 else rng.choice(NUMBERS + ["1024"]),
        "--mux": lambda: rng.choice(["1", "2", "3", "4"]),
        "--order": lambda: rng.choice(["linear", "gray", "complement", "stride:1", "stride:1e20", "random:3",
                                        "stride:99999999999999999999", "sideways"]),
        "--backgrounds": lambda: rng.choice(["solid", "checkerboard", "word", "0x5", "solid,rows", "plaid", ","]),
        "--clock": lambda: rng.choice(FREQS),
        "--read-cycles": lambda: rng.choice(NUMBERS),
        "--write-cycles": lambda: rng.choice(NUMBERS),
        "--faults": lambda: rng.choice(["static", "classic", "SAF,DRF", "all", "dynamic", "CFid", "<0w1/0/->", "x"]),
        "--pairs": lambda: rng.choice(["neighbours", "all", "word", "sample:5", "sample:1000000000000", "sample:0", "x"]),
        "--retention": lambda: rng.choice(DURS),
        "--weights": lambda: rng.choice(["SAF=2", "SAF=-1", "XYZ=1", "SAF=nan", "", "SAF=1e999"]),
        "--require": lambda: rng.choice(["SAF=100", "SAF=101", "score=50", "CFid=99.5", "x=1", ","]),
        "--memory": lambda: rng.choice([files["memory"], "demo", str(tmp / "missing.toml")]),
        "--missed": lambda: rng.choice(["0", "2", "-1"]),
    }
    if cmd in ("grade", "compare", "export"):
        for k in rng.sample(list(opts), rng.randint(0, 5)):
            if cmd == "export" and k in ("--faults", "--pairs", "--retention", "--weights", "--require", "--missed"):
                continue
            if cmd == "compare" and k == "--missed":
                continue
            args += [k, opts[k]()]
        if "--words" not in args and "--memory" not in args:
            args += ["--words", rng.choice(["8", "16"])]
    if cmd == "export":
        fmt = rng.choice(["csv", "jsonl", "vcd", "stil", "hex"])
        target = rng.choice([str(tmp / f"out.{fmt}"), "-", "", str(tmp / "newdir") + "/", "/dev/null", str(tmp)])
        args += ["-o", target, "-f", fmt, "--force", "-q"]
    if cmd in ("grade", "compare") and rng.random() < 0.3:
        args.append("--json")
    if cmd == "compare" and rng.random() < 0.1:
        args += ["--csv", rng.choice([str(tmp / "c.csv"), "-", "", "/dev/null"]), "--force"]
    if cmd == "grade" and rng.random() < 0.05:
        args += ["--report", str(tmp / "r.html"), "--force"]
    return args


class Hang(Exception):
    pass


def _alarm(signum, frame):
    raise Hang


def run_cli(argv) -> tuple[int, str, str]:
    from marchkit.cli import main

    out, err = io.StringIO(), io.StringIO()

    class Bin(io.BytesIO):
        pass

    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        out.buffer = Bin()          # for writers of binary standard output
        try:
            code = main(argv)
        except SystemExit as e:
            code = e.code if isinstance(e.code, int) else 2
    return code, out.getvalue(), err.getvalue()


def injection_check(rng, tmp: Path, counts) -> bool:
    """Export a test with a hostile name to VCD and STIL; the independent readers must see the
    intended file.  True when something was injected."""
    name = rng.choice(HOSTILE_NAMES)
    esc = name.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n")
    tf = tmp / "hostile.march"
    tf.write_text(f'test "{esc}"\n  {{⇕(w0); ⇑(r0,w1)}}\n', encoding="utf-8")
    mf = tmp / "hostile.toml"
    mf.write_text(f'[memory]\nname = "{esc}"\nwords = 4\n', encoding="utf-8")
    bad = False
    try:
        import vcdvcd
        code, _, err = run_cli(["export", str(tf), "--memory", str(mf), "-o", str(tmp / "h.vcd"), "--force", "-q"])
        if code != 0:               # a name the file formats refuse (a NUL byte in TOML): nothing written
            return False
        v = vcdvcd.VCDVCD(str(tmp / "h.vcd"))
        want = {f"pattern.{n}" for n in ("clk", "address", "we", "re", "wdata", "expect", "mask", "run", "element", "op")}
        bad |= set(v.signals) != want
        counts["injection checks"] += 1
    except ImportError:
        pass
    try:
        from Semi_ATE.STIL.parsers.STILParser import STILParser
        code, _, err = run_cli(["export", str(tf), "--memory", str(mf), "-o", str(tmp / "h.stil"), "--force", "-q"])
        if code != 0:
            return False
        p = STILParser(str(tmp / "h.stil"))
        with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
            ok = p.parse_syntax() is not None
            if ok:
                p.parse_semantic()
                ok = p.is_parsing_done
        bad |= not ok
        counts["injection checks"] += 1
    except ImportError:
        pass
    return bad


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--inputs", type=int, default=100_000)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--hang", type=float, default=10.0)
    ap.add_argument("--report", help="append the findings' inputs to this file")
    ap.add_argument("--every", type=int, default=10000, help="print progress every N inputs")
    ap.add_argument("--inject", type=float, default=0.02, help="share of command lines followed by an injection check")
    ap.add_argument("--mix", default="0.45,0.25", help="shares of notations and memory files (the rest: command lines)")
    a = ap.parse_args()
    soft = 3 << 30
    resource.setrlimit(resource.RLIMIT_AS, (soft, resource.getrlimit(resource.RLIMIT_AS)[1]))
    os.environ["COLUMNS"] = "80"
    signal.signal(signal.SIGALRM, _alarm)
    stop = []

    def on_term(*_):                # stop early, still print the summary
        stop.append(1)

    signal.signal(signal.SIGTERM, on_term)
    from marchkit.errors import MarchkitError
    from marchkit.model import read_memory_file
    from marchkit.notation import check_test, parse_file_text, parse_notation

    rng = random.Random(a.seed)
    mix = [float(x) for x in a.mix.split(",")]
    counts = {"notation": 0, "memory file": 0, "command line": 0, "injection checks": 0}
    findings = {"traceback": [], "hang": [], "memory": [], "injection": []}
    slowest = (0.0, None)
    spent = {"notation": 0.0, "memory file": 0.0, "command line": 0.0}
    t_start = time.time()
    with tempfile.TemporaryDirectory() as d:
        tmp = Path(d)
        files = {"tests": str(tmp / "fuzz.march"), "memory": str(tmp / "fuzz.toml")}
        for i in range(a.inputs):
            r = rng.random()
            kind = "notation" if r < mix[0] else ("memory file" if r < mix[0] + mix[1] else "command line")
            counts[kind] += 1
            t0 = time.time()
            signal.setitimer(signal.ITIMER_REAL, a.hang)
            what = None
            try:
                if kind == "notation":
                    what = notation(rng) if rng.random() < 0.7 else test_file(rng)
                    try:
                        ts = parse_notation(what) if what.lstrip().startswith("{") else parse_file_text(what, "fuzz.march")
                        for t in (ts if isinstance(ts, list) else [ts]):
                            check_test(t)
                    except MarchkitError:
                        pass
                elif kind == "memory file":
                    what = memory_file(rng)
                    Path(files["memory"]).write_bytes(what)
                    try:
                        read_memory_file(files["memory"])
                    except MarchkitError:
                        pass
                else:
                    Path(files["tests"]).write_text(test_file(rng), encoding="utf-8")
                    Path(files["memory"]).write_bytes(memory_file(rng) if rng.random() < 0.5 else b"[memory]\nwords = 16\nbits = 2\n")
                    what = cli_args(rng, tmp, files)
                    code, out, err = run_cli(what)
                    signal.signal(signal.SIGTERM, on_term)    # export installs its own handler
                    if "internal error" in err and "Hang:" in err:   # the alarm went through the guard
                        raise Hang
                    if code not in (0, 2, 3) or "Traceback" in err or "internal error" in err:
                        findings["traceback"].append((what, code, err[-300:]))
                        print(f"  finding: {findings['traceback'][-1]!r}"[:800], flush=True)
                    if "out of memory" in err:
                        findings["memory"].append((what, code, err[-200:]))
                    if rng.random() < a.inject and injection_check(rng, tmp, counts):
                        findings["injection"].append((what, "hostile name changed the file"))
            except Hang:
                findings["hang"].append((what, time.time() - t0))
                print(f"  finding: hang {findings['hang'][-1]!r}"[:800], flush=True)
            except MemoryError:
                findings["memory"].append((what, "MemoryError"))
            except Exception as e:  # noqa: BLE001 - an escaped exception is a finding
                findings["traceback"].append((what, type(e).__name__, str(e)[:300]))
                print(f"  finding: {findings['traceback'][-1]!r}"[:800], flush=True)
            finally:
                try:
                    signal.setitimer(signal.ITIMER_REAL, 0)
                except Hang:            # the alarm fired just as the input ended
                    findings["hang"].append((what, time.time() - t0))
            dt = time.time() - t0
            spent[kind] += dt
            if dt > slowest[0]:
                slowest = (dt, what)
            if dt > a.hang / 2:
                print(f"  slow input ({dt:.1f} s): {what!r}"[:600], flush=True)
            if stop:
                break
            if (i + 1) % a.every == 0:
                print(f"  {i + 1:,} inputs, {time.time() - t_start:.0f} s, findings "
                      + ", ".join(f"{k} {len(v)}" for k, v in findings.items()), flush=True)
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    if peak_mb > 2048:
        findings["memory"].append(("peak resident size", peak_mb))
    total = sum(counts[k] for k in ("notation", "memory file", "command line"))
    print(f"inputs tried: {total:,} (notations and test files {counts['notation']:,}, memory files "
          f"{counts['memory file']:,}, command lines {counts['command line']:,}; "
          f"{counts['injection checks']:,} injection checks with vcdvcd / semi-ate-stil)")
    print("time per kind: " + ", ".join(f"{k} {v:.0f} s" for k, v in spent.items()))
    print(f"time: {time.time() - t_start:.0f} s; slowest input {slowest[0]:.2f} s; peak resident memory {peak_mb:.0f} MB")
    for k, v in findings.items():
        print(f"{k}: {len(v)}")
        for f in v[:5]:
            print(f"    {f!r}"[:400])
    if a.report:
        with open(a.report, "a", encoding="utf-8") as fh:
            for k, v in findings.items():
                for f in v:
                    fh.write(f"{k}\t{f!r}\n")
    return 1 if any(findings.values()) else 0


if __name__ == "__main__":
    sys.exit(main())
