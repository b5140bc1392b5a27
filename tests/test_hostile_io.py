"""Hostile output targets and I/O failures: one clear line, a documented exit status, no
traceback, nothing under the target name, special files never replaced (issue 17)."""

from __future__ import annotations

import os
import resource
import signal
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def run(*argv, env=None, stdin=None, preexec=None, timeout=60, **kw):
    e = dict(os.environ, PYTHONPATH=str(ROOT), COLUMNS="80")
    e.update(env or {})
    kw.setdefault("stdout", subprocess.PIPE)
    return subprocess.run([sys.executable, "-m", "marchkit", *argv], stderr=subprocess.PIPE, text=True,
                          env=e, timeout=timeout, preexec_fn=preexec, **kw)


def no_traceback(p):
    assert "Traceback" not in p.stderr and "Traceback" not in p.stdout, p.stderr


def test_pipe_into_head_is_quiet_and_succeeds():
    # a reader that stops early: POSIX convention for filters, status 0 and no message
    e = dict(os.environ, PYTHONPATH=str(ROOT))
    for cmd in ("grade 'March C-' --words 64 --primitives", "library"):
        p = subprocess.run(f"{sys.executable} -m marchkit {cmd} | head -1; echo \"rc=${{PIPESTATUS[0]}}\"",
                           shell=True, executable="/bin/bash", capture_output=True, text=True, env=e, timeout=60)
        assert p.stdout.strip().endswith("rc=0"), p.stdout
        assert p.stderr == ""


def test_full_disk_on_stdout_is_one_line_exit_2():
    with open("/dev/full", "w") as full:
        p = run("grade", "March C-", "--words", "64", stdout=full)
    assert p.returncode == 2
    assert p.stderr.strip() == "error: cannot write standard output: No space left on device"


def test_ascii_terminal_gets_replacement_characters():
    p = run("grade", "March C-", "--words", "16", env={"PYTHONIOENCODING": "ascii"})
    no_traceback(p)
    assert p.returncode == 0
    assert "{?(w0); ?(r0,w1)" in p.stdout     # ⇕ ⇑ cannot be shown in ASCII


def _small_files():
    # the kernel refuses writes past 20 kB (EFBIG) instead of killing the process
    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    resource.setrlimit(resource.RLIMIT_FSIZE, (20000, 20000))


@pytest.mark.parametrize("fmt", ["csv", "jsonl", "vcd", "stil"])
def test_write_failure_during_export_leaves_nothing(tmp_path, fmt):
    out = tmp_path / f"big.{fmt}"
    p = run("export", "March C-", "--words", "1024", "-o", str(out), preexec=_small_files)
    no_traceback(p)
    assert p.returncode == 2
    assert p.stderr.strip() == f"error: cannot write {out}: File too large"
    assert list(tmp_path.iterdir()) == []


def test_write_failure_for_report_csv_and_plot(tmp_path):
    p = run("grade", "March C-", "--words", "4096", "--missed", "500", "--report", str(tmp_path / "r.html"),
            preexec=_small_files)
    no_traceback(p)
    assert p.returncode == 2 and "File too large" in p.stderr
    assert list(tmp_path.iterdir()) == []


def test_read_only_directory(tmp_path):
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    try:
        if os.access(ro, os.W_OK):
            pytest.skip("running as a user who can write anywhere")
        for argv in (["grade", "MATS+", "--words", "8", "--report", str(ro / "r.html")],
                     ["compare", "MATS+", "--words", "8", "--csv", str(ro / "c.csv")],
                     ["compare", "MATS+", "--words", "8", "--plot", str(ro / "c.png")]):
            p = run(*argv)
            no_traceback(p)
            assert p.returncode == 2
            assert f"directory {ro} is not writable" in p.stderr
    finally:
        ro.chmod(0o755)


def test_device_is_written_through_never_replaced(cli, tmp_path):
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    import threading

    got = []
    t = threading.Thread(target=lambda: got.append(open(fifo).read()))
    t.start()
    code, out, err = cli("compare", "MATS+", "--words", "8", "--csv", str(fifo), "--force")
    t.join(10)
    assert code == 0, err
    assert fifo.is_fifo()                     # still a FIFO, not replaced by a regular file
    assert got and got[0].startswith("test,")
    code, out, err = cli("grade", "MATS+", "--words", "8", "--report", "/dev/null", "--force")
    assert code == 0, err
    assert Path("/dev/null").is_char_device()


@pytest.mark.parametrize("target,msg", [
    ("", "error: the output file name is empty"),
    ("{d}/newdir/", "error: cannot write {d}/newdir/: no directory {d}/newdir (a name ending in / is a directory)"),
    ("{d}", "error: {d} is a directory"),
])
def test_odd_targets(cli, tmp_path, target, msg):
    t = target.format(d=tmp_path)
    for argv in (["export", "MATS+", "--words", "8", "-f", "hex", "-o", t],
                 ["compare", "MATS+", "--words", "8", "--csv", t],
                 ["grade", "MATS+", "--words", "8", "--report", t]):
        code, out, err = cli(*argv)
        assert code == 2, argv
        assert err.strip() == msg.format(d=tmp_path), argv
    assert sorted(p.name for p in tmp_path.iterdir()) == []


def test_dash_is_standard_output_for_compare_csv(cli, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, out, err = cli("compare", "MATS+", "--words", "8", "--csv", "-", "--json")
    assert code == 0
    assert not (tmp_path / "-").exists()


def test_dangling_symlink_target(cli, tmp_path):
    link = tmp_path / "out.csv"
    link.symlink_to(tmp_path / "missing" / "x.csv")
    code, out, err = cli("export", "MATS+", "--words", "8", "-o", str(link))
    assert code == 2
    assert "is a symbolic link to a missing file" in err


def test_stale_temporary_files_are_swept(cli, tmp_path):
    # a writer killed with SIGKILL leaves .NAME.PID.XXXXXX.part; a dead PID's file goes on the next run
    dead = subprocess.Popen(["true"])
    dead.wait()
    stale = tmp_path / f".out.csv.{dead.pid}.abc123.part"
    stale.write_text("half")
    other = tmp_path / f".out.csv.{os.getpid()}.zzz.part"     # a live writer's file stays
    other.write_text("busy")
    code, out, err = cli("export", "MATS+", "--words", "8", "-o", str(tmp_path / "out.csv"), "-q")
    assert code == 0
    assert not stale.exists() and other.exists()


def test_interrupt_during_start_up_is_one_line():
    # the signal arrives once the console-script entry point is importable (a SIGINT inside
    # Python's own start-up or its module search comes before any marchkit code can act),
    # while the command line builds its parser, reads its arguments and starts grading
    boot = ("import sys, marchkit.cli; sys.stderr.write('ready\\n'); sys.stderr.flush(); "
            "sys.argv = ['marchkit', 'grade', 'March C-', '--words', '4096']; marchkit.cli.entry()")
    # the later delays land while the finished process shuts down: Python restores the default
    # SIGINT action there, which once killed a complete run with -SIGINT (seen in CI)
    for delay in (0.05, 0.2, 0.35, 0.45, 0.55, 0.7):
        p = subprocess.Popen([sys.executable, "-c", boot], stderr=subprocess.PIPE, stdout=subprocess.PIPE,
                             text=True, env=dict(os.environ, PYTHONPATH=str(ROOT)))
        assert p.stderr.readline() == "ready\n"
        import time

        time.sleep(delay)
        p.send_signal(signal.SIGINT)
        out, err = p.communicate(timeout=60)
        assert "Traceback" not in err, err
        assert p.returncode in (130, 0), err
        if p.returncode == 130:
            assert err.strip() == "interrupted"
        else:
            assert "graded" in out.splitlines()[-1], out     # a run that exits 0 is complete
