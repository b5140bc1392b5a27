"""Hostile and readability checks of the newer commands (generate, bist, diagnose, repair,
plan) from the outside: exit status, the printed text, nothing half-written.  Each test names
the fact it rests on; facts of the command line are common practice, no source."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
EX = ROOT / "examples"


@pytest.fixture
def die12(tmp_path):
    """The example memory and fail log, copied so tests may rename them."""
    mem = tmp_path / "kestrel_l1_sram.toml"
    shutil.copy(EX / "kestrel_l1_sram.toml", mem)
    log = tmp_path / "kestrel_die12_fails.csv"
    shutil.copy(EX / "kestrel_die12_fails.csv", log)
    return mem, log


# ---- names that look like console markup are printed as written -------------------------------

def test_diagnose_prints_markup_like_names_literally(die12, cli, monkeypatch):
    # common practice, no source: a memory may be named anything; "[/]" once crashed the console
    monkeypatch.setenv("COLUMNS", "80")
    mem, log = die12
    mem.write_text(mem.read_text().replace('name = "kestrel_l1_sram"', 'name = "[/]kestrel[bold]"'))
    code, out, err = cli("diagnose", "March C-", "--memory", str(mem), "--fails", str(log), "--top", "1",
                         "--no-hint")
    assert code == 0, err
    assert "Traceback" not in err
    assert "[/]kestrel[bold]: 1024 × 16 bits" in out
    # the member notation is explained under the table
    flat = " ".join(out.split())
    assert "wW.bB is word W (decimal) bit B" in flat and "a= the aggressor, v= the victim" in flat


def test_repair_prints_markup_like_file_name_literally(tmp_path, cli):
    bm = tmp_path / "die[red]31.csv"
    shutil.copy(EX / "kestrel_die31_bitmap.csv", bm)
    code, out, err = cli("repair", "--bitmap", str(bm), "--rows", "256", "--cols", "64",
                         "--spare-rows", "4", "--spare-cols", "4")
    assert code == 0, err
    assert "die[red]31.csv: 187 failing cells in a 256 × 64 array" in out


# ---- limits before work ----------------------------------------------------------------------

def test_repair_refuses_an_absurd_array_side(tmp_path, cli):
    # a 10^11-row bitmap once reached numpy and died with a 745 GiB allocation traceback
    pic = tmp_path / "huge.png"
    code, out, err = cli("repair", "--bitmap", str(EX / "kestrel_die31_bitmap.csv"), "--rows", "99999999999",
                         "--cols", "64", "--spare-rows", "4", "--spare-cols", "4", "--picture", str(pic))
    assert code == 2
    assert "error: --rows 99,999,999,999 --cols 64: an array side is at most 16,777,216" in err
    assert "Traceback" not in err and out == ""
    assert not pic.exists()


def test_repair_picture_title_tells_spares_used_of_available(tmp_path, cli):
    # Kuo & Fuchs (IEEE D&T 1987): the die-31 bitmap (one row, one column, five single cells)
    # needs 2 spare rows and 4 spare columns; the title said "with 4+4 spares" before
    pic = tmp_path / "r.svg"
    code, out, err = cli("repair", "--bitmap", str(EX / "kestrel_die31_bitmap.csv"), "--rows", "256",
                         "--cols", "9999999", "--spare-rows", "4", "--spare-cols", "4", "--picture", str(pic))
    assert code == 0, err
    assert f"picture written to {pic}" in out
    svg = pic.read_text()
    assert "repairable: uses 2 of 4 spare rows, 4 of 4 columns" in svg
    assert str(EX) not in svg                     # the file's name, not its whole path
    assert "each pixel 1 row(s) × 19,532 column(s)" in svg     # in the subtitle, not over the axis label
    assert "2,000,000" in svg and "1e6" not in svg


# ---- bist --force replaces only a controller directory --------------------------------------

def test_bist_force_keeps_a_directory_it_did_not_write(tmp_path, cli, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "work").mkdir()
    (tmp_path / "work" / "notes.txt").write_text("mine")
    code, out, err = cli("bist", "March C-", "--memory", "demo", "-o", "work", "--force")
    assert code == 2
    assert "error: work holds files bist did not write (notes.txt)" in err
    assert (tmp_path / "work" / "notes.txt").read_text() == "mine"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["work"]     # no temporary left over


@pytest.mark.parametrize("target, message", [
    ("", "error: give the output directory a name (-o DIR)"),
    (".", "error: . is the working directory or holds it; --force will not replace it"),
    ("..", "error: .. is the working directory or holds it; --force will not replace it"),
])
def test_bist_force_never_replaces_the_working_directory(tmp_path, cli, monkeypatch, target, message):
    work = tmp_path / "w"
    work.mkdir()
    monkeypatch.chdir(work)
    (work / "keep.v").write_text("// mine\n")
    code, out, err = cli("bist", "March C-", "--memory", "demo", "-o", target, "--force")
    assert code == 2
    assert message in err and "Traceback" not in err
    assert sorted(p.name for p in work.iterdir()) == ["keep.v"]


def test_bist_force_replaces_its_own_directory(tmp_path, cli, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert cli("bist", "March C-", "--memory", "demo", "-o", "ctl")[0] == 0
    (tmp_path / "ctl" / "sim.vvp").write_text("simulation output")
    code, out, err = cli("bist", "March C-", "--memory", "demo", "-o", "ctl", "--force")
    assert code == 0, err
    assert sorted(p.name for p in (tmp_path / "ctl").iterdir()) == ["mbist.v", "mbist_tb.v"]


# ---- fail logs and bitmaps that are not text files ------------------------------------------

@pytest.mark.parametrize("command", ["diagnose", "repair"])
def test_fail_inputs_that_are_not_text_files(tmp_path, cli, command):
    # common practice, no source: one line naming the file and the reason, exit status 2
    binary = tmp_path / "log.csv"
    binary.write_bytes(b"\xff\xfe\x00cycle")
    mem = str(EX / "kestrel_l1_sram.toml")
    what, opt = ("fail log", "--fails") if command == "diagnose" else ("bitmap file", "--bitmap")
    tail = (["March C-", "--memory", mem] if command == "diagnose"
            else ["--rows", "4", "--cols", "4", "--spare-rows", "1", "--spare-cols", "1"])
    for path, reason in ((binary, "is not text: byte 0xff at offset 0 is not UTF-8"),
                         (tmp_path, ": it is a directory"),
                         (Path("/dev/zero"), ": not a file or a pipe")):
        code, out, err = cli(command, *tail, opt, str(path))
        assert code == 2, (path, err)
        assert err.startswith("error: ") and reason in err and what in err
        assert "Errno" not in err and "codec" not in err and "Traceback" not in err
        assert len(err.strip().splitlines()) == 1


# ---- Ctrl-C with a local Dask cluster --------------------------------------------------------

def test_ctrl_c_reaches_only_the_main_process(tmp_path):
    # POSIX: a terminal's Ctrl-C sends SIGINT to the whole foreground process group; the local
    # cluster's workers used to print one KeyboardInterrupt traceback each
    import os
    import signal
    import subprocess
    import sys

    script = (
        "import sys, time\n"
        "from marchkit.cli import main\n"
        "from marchkit.errors import MarchkitError\n"
        "from marchkit.plan.cluster import open_client\n"
        "try:\n"
        "    with open_client(workers=1) as c:\n"
        "        assert c.submit(sum, [1, 2]).result() == 3\n"
        "        print('ready', flush=True)\n"
        "        time.sleep(60)\n"
        "except KeyboardInterrupt:\n"
        "    print('interrupted', file=sys.stderr)\n"
        "    sys.exit(130)\n"
    )
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    p = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                         env=env, cwd=tmp_path, start_new_session=True, text=True)
    try:
        assert p.stdout.readline().strip() == "ready"
        os.killpg(p.pid, signal.SIGINT)
        out, err = p.communicate(timeout=60)
    finally:
        if p.poll() is None:
            os.killpg(p.pid, signal.SIGKILL)
    assert p.returncode == 130
    assert err.strip() == "interrupted", err


def test_generate_counts_in_words(cli, tmp_path):
    # common practice, no source: "1 node", not "1 nodes".  SAF alone needs 4n: every cell
    # must be written and read with both values (van de Goor, Testing Semiconductor Memories,
    # 1991, the stuck-at detection condition), and one element ⇕(w0,r0,w1,r1) does that
    code, out, err = cli("generate", "--faults", "SAF", "--words", "8", "--workers", "0")
    assert code == 0, err
    assert "(1 node, 2 fault keys)" in out
    assert "{⇕(w0,r0,w1,r1)}" in out


# ---- names from the user's files in pictures and one-line places ----------------------------

TINY_SOC = """\
[soc]
name = "NAME"
faults = "static"
tests = ["MATS++", "March C-"]

[require]
SF = 100

[power]
budget = "24mW"

[domains]
core = "100MHz"

[types.buf]
words = 64
bits = 8
power = "5mW"

[[instances]]
name = "buf{}"
count = 2
type = "buf"
domain = "core"
group = "GROUP"
"""


def test_plan_names_with_dollars_and_markup(tmp_path, cli, monkeypatch):
    # matplotlib reads $…$ as a TeX formula and rich reads […] as markup: both used to crash
    # on names taken from the SoC file
    monkeypatch.setenv("MARCHKIT_CACHE", str(tmp_path / "cache"))
    monkeypatch.setenv("COLUMNS", "80")
    soc = tmp_path / "tiny.toml"
    soc.write_text(TINY_SOC.replace("NAME", r"Ouzel $\\frac{$ [/] test chip").replace("GROUP", "g$_$[/b]"))
    chart = tmp_path / "plan.svg"
    code, out, err = cli("plan", str(soc), "--workers", "1", "--gantt", str(chart))
    assert code == 0, err
    assert "Traceback" not in err
    assert r"Ouzel $\frac{$ [/] test chip: 2 memories of 1 type, 1 BIST group, 1 clock domain" in out
    assert "g$_$[/b]" in out
    assert "n: instances of the type; each: test time of one instance" in out
    assert max(len(line) for line in out.splitlines()) <= 80
    svg = chart.read_text()
    assert r"Ouzel $\frac{$ [/] test chip: 2 memories in 1 BIST group" in svg


def test_plan_refuses_a_name_on_two_lines(tmp_path, cli):
    soc = tmp_path / "two.toml"
    soc.write_text(TINY_SOC.replace("NAME", r"two\nlines").replace("GROUP", "g"))
    code, out, err = cli("plan", str(soc), "--workers", "1")
    assert code == 2 and out == ""
    assert f"{soc}:2:8: error: name must be one line of text, without line breaks" in err


def test_repair_picture_of_a_file_named_like_a_formula(tmp_path, cli):
    bm = tmp_path / "die$\\frac$.csv"
    shutil.copy(EX / "kestrel_die31_bitmap.csv", bm)
    pic = tmp_path / "d.svg"
    code, out, err = cli("repair", "--bitmap", str(bm), "--rows", "256", "--cols", "64",
                         "--spare-rows", "4", "--spare-cols", "4", "--picture", str(pic))
    assert code == 0, err
    assert "die$\\frac$.csv: repairable: uses 2 of 4 spare rows" in pic.read_text()


def test_bist_summary_speaks_like_the_other_commands(tmp_path, cli, monkeypatch):
    # grade, compare and plan write "51.2 µs" and "10,240 cycles"; bist wrote "51.2us", "10240".
    # March C- is 10n (van de Goor 1991): 10 × 1024 words = 10,240 operations, one per cycle
    monkeypatch.chdir(tmp_path)
    code, out, err = cli("bist", "March C-", "--memory", "demo", "-o", "ctl")
    assert code == 0, err
    assert "test: 10,240 cycles, 10,240 operations, 51.2 µs at 200 MHz (1 background run)" in out
    code, out, err = cli("bist", "March C-", "--memory", "demo", "--program-only", "-o", "p.hex")
    assert code == 0, err
    assert "for March C- on kestrel_demo_sram 1024 × 16 bits, 10,240 cycles" in out


def test_plan_generate_candidate_and_narrow_console(tmp_path, cli, monkeypatch):
    # issue 15 lists "generate" among the candidate tests; the command line used to refuse it
    # as missing from "this build".  SF alone needs a 4n test (every cell written and read
    # with both values; van de Goor 1991), shorter than March C- (10n), so it is chosen.
    # On a 60-column console a long type name folds; the numbers stay whole.
    from marchkit.plan.planner import check_generate
    from marchkit.plan.soc import SocFileError, read_soc

    monkeypatch.setenv("MARCHKIT_CACHE", str(tmp_path / "cache"))
    monkeypatch.setenv("COLUMNS", "60")
    text = (TINY_SOC.replace("NAME", "Ouzel").replace("GROUP", "g")
            .replace('tests = ["MATS++", "March C-"]', 'tests = ["generate", "March C-"]')
            .replace("types.buf", "types.line_buffer_with_a_very_long_name")
            .replace('type = "buf"', 'type = "line_buffer_with_a_very_long_name"'))
    soc = tmp_path / "gen.toml"
    soc.write_text(text)
    with pytest.raises(SocFileError, match="needs the test generator"):
        check_generate(read_soc(str(soc)), None)          # the library still needs one passed in
    code, out, err = cli("plan", str(soc), "--workers", "1")
    assert code == 0, err
    assert "Generated" in out and "4n-" in out      # the generated name folds in its column
    assert max(len(line) for line in out.splitlines()) <= 60
    # 4 operations × 64 words at 100 MHz = 2.56 µs per memory, two memories one after the other
    assert "2.56 µs" in out and "5 mW" in out and "100MHz" in out
    assert "total test time 5.12 µs" in out


# ---- the bitmap of a die with a row, a column, a block and lone cells ----------------------

def test_bitmap_block_is_a_cluster_and_lone_cells_are_circled(tmp_path, cli):
    # common practice of failure analysis, no source: a dense block is one cluster (it was
    # reported as 11 rows and 13 columns); in a binned picture lone cells get a circle
    lines = ["row,col"]
    lines += [f"1234,{c}" for c in range(1024)]                 # a whole row
    lines += [f"{r},777" for r in range(0, 4096, 3)]             # a column, every third cell
    lines += [f"{r},{c}" for r in range(2000, 2010) for c in range(100, 112)]     # a 10 × 12 block
    lone = [(17, 3), (400, 900), (3000, 40), (4090, 1000)]
    lines += [f"{r},{c}" for r, c in lone]
    bm = tmp_path / "die77.csv"
    bm.write_text("\n".join(lines) + "\n")
    pic = tmp_path / "die77.svg"
    code, out, err = cli("repair", "--bitmap", str(bm), "--rows", "4096", "--cols", "1024",
                         "--spare-rows", "16", "--spare-cols", "16", "--picture", str(pic))
    assert code == 0, err
    assert "repairable" in out
    import re

    words = " ".join(" ".join(re.findall(r"<text[^>]*>(.*?)</text>", pic.read_text(), re.S)).split())
    assert "multiple: 1 row, 1 column, 1 cluster, 4 single cells" in words
    assert "single failing cell (4)" in words


def test_two_shorted_rows_stay_rows():
    # two neighbouring rows failing along their whole length are two rows, not a cluster
    from marchkit.diagnose import bitmap_from_rc

    b = bitmap_from_rc(256, 64, [10] * 64 + [11] * 64, list(range(64)) * 2)
    assert [p.kind for p in b.parts] == ["row", "row"]
    b = bitmap_from_rc(256, 64, [10, 10, 11, 11, 12, 12], [5, 6, 5, 6, 5, 6])
    assert b.kind == "cluster" and b.detail == "6 failing cells within rows 10–12, columns 5–6"


@pytest.mark.parametrize("old, new, message, line, col", [
    ('budget = "24mW"', 'budget = "1e999mW"', "'1e999mW' is out of range for a power (1nW to 1000W)", 10, 10),
    ('budget = "24mW"', 'budget = "1e99999999999mW"', "is out of range for a power", 10, 10),
    ('power = "5mW"', 'power = "1e-30W"', "'1e-30W' is out of range for a power", 18, 9),
    ('power = "5mW"', 'access_energy = "1e999pJ"', "out of range for an energy per access (1e-18J to 1mJ)", 18, 17),
    ("SF = 100", "SF = nan", "a required coverage is a percentage from 0 to 100 (got nan)", 7, 6),
    ("SF = 100", "SF = inf", "a required coverage is a percentage from 0 to 100 (got inf)", 7, 6),
])
def test_plan_absurd_numbers_are_positioned_errors(tmp_path, cli, old, new, message, line, col):
    # each used to end in an OverflowError or ValueError traceback after the file was read
    text = TINY_SOC.replace("NAME", "Ouzel").replace("GROUP", "g")
    assert old in text
    soc = tmp_path / "bad.toml"
    soc.write_text(text.replace(old, new))
    code, out, err = cli("plan", str(soc), "--workers", "1")
    assert code == 2 and out == ""
    assert err.startswith(f"{soc}:{line}:{col}: error: ") and message in err, err
    assert "Traceback" not in err


def test_existing_picture_is_refused_before_the_diagnosis(die12, tmp_path, cli, monkeypatch):
    # limits before work (DEVELOPERS.md): the refusal used to come after the whole diagnosis
    import marchkit.diagnose

    def no_work(*a, **k):
        raise AssertionError("the diagnosis ran before the output was checked")

    monkeypatch.setattr(marchkit.diagnose, "diagnose", no_work)
    mem, log = die12
    pic = tmp_path / "old.png"
    pic.write_bytes(b"mine")
    code, out, err = cli("diagnose", "March C-", "--memory", str(mem), "--fails", str(log), "--picture", str(pic))
    assert code == 2 and err == f"error: {pic} exists; use --force to replace it\n"
    assert pic.read_bytes() == b"mine"
