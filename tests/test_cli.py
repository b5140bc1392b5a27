"""The command line as a user meets it: exit codes and the text printed."""

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def test_version(cli):
    from marchkit import __version__

    code, out, err = cli("--version")
    assert code == 0 and out.strip() == f"marchkit {__version__}"


def test_library_lists_the_published_tests(cli):
    code, out, err = cli("library")
    assert code == 0
    for name in ("MATS+", "March C-", "March SS", "March LR", "IFA-9", "March G", "PMOVI"):
        assert name in out
    assert "10n" in out and "22n" in out


def test_library_json(cli):
    code, out, _ = cli("library", "--json")
    rows = json.loads(out)
    assert len(rows) >= 22
    cminus = next(r for r in rows if r["name"] == "March C-")
    assert cminus["ops_per_cell"] == 10  # van de Goor 1991 (10n)


def test_show_both_spellings(cli):
    code, out, _ = cli("show", "march-c-")
    assert code == 0 and "{⇕(w0); ⇑(r0,w1); ⇑(r1,w0); ⇓(r0,w1); ⇓(r1,w0); ⇕(r0)}" in out and "10n" in out
    code, out, _ = cli("show", "March C-", "--ascii")
    assert "{any(w0); up(r0,w1); up(r1,w0); down(r0,w1); down(r1,w0); any(r0)}" in out


def test_show_notation_argument(cli):
    code, out, _ = cli("show", "{any(w0); up(r0,w1); down(r1,w0,r0)}")
    assert code == 0 and "{⇕(w0); ⇑(r0,w1); ⇓(r1,w0,r0)}" in out and "6n" in out


def test_syntax_error_in_a_file(cli, tmp_path):
    f = tmp_path / "mine.march"
    f.write_text('test "ours"\n  length 4n\n  {⇕(w0); ⇑(r0,w1) ⇓(r1)}\n', encoding="utf-8")
    code, out, err = cli("check", str(f))
    assert code == 2
    assert f"{f}:3:20: error:" in err
    assert "    {⇕(w0); ⇑(r0,w1) ⇓(r1)}" in err
    assert err.splitlines()[2].index("^") == 4 + 19   # column 20, under the ⇓
    assert "Traceback" not in err


def test_inconsistent_test_is_rejected(cli):
    code, out, err = cli("grade", "{⇕(w0); ⇑(r1)}", "--words", "8")
    assert code == 2
    assert "<argument>:1:11: error:" in err and "M1 " in err and "op 0 " in err
    assert "Traceback" not in err


def test_check_reports_warnings_and_passes(cli, tmp_path):
    f = tmp_path / "w.march"
    f.write_text("{⇑(r0); ⇕(w1); ⇕(r1)}\n", encoding="utf-8")
    code, out, err = cli("check", str(f))
    assert code == 0 and "warning:" in err and "1 warning" in out
    code, out, err = cli("check", "--strict", str(f))
    assert code == 2


def test_check_the_library_file(cli):
    code, out, err = cli("check", str(ROOT / "patterns" / "published.march"))
    assert code == 0, err
    assert "0 errors" in out


def test_unknown_test_name(cli):
    code, out, err = cli("show", "March Q-")
    assert code == 2 and "not a test in the library" in err and "Did you mean" in err


@pytest.mark.parametrize("argv,needle", [
    (["--words", "10", "--mux", "4"], "does not divide"),
    (["--words", "1"], "argument --words: 1 is outside 2 to 67,108,864"),
    (["--order", "sideways"], "unknown address order"),
    (["--backgrounds", "plaid"], "unknown background"),
    (["--clock", "fast"], "not a frequency"),
    (["--faults", "nonsense"], "unknown fault selection"),
    (["--pairs", "some"], "unknown pair scope"),
    (["--retention", "forever"], "not a duration"),
    (["--words", "12", "--scramble-xor", "3"], "power-of-two"),
])
def test_bad_memory_and_fault_options(cli, argv, needle):
    code, out, err = cli("grade", "MATS+", *argv)
    assert code == 2, (code, err)
    assert needle in err and "Traceback" not in err


def test_memory_file_errors_are_positioned(cli, tmp_path):
    f = tmp_path / "mem.toml"
    f.write_text('[memory]\nwords = 64\ncolour = "blue"\n', encoding="utf-8")
    code, out, err = cli("grade", "MATS+", "--memory", str(f))
    assert code == 2 and f"{f}:3:1: error: unknown key 'colour'" in err and "^" in err


def test_grade_terminal_view(cli):
    code, out, err = cli("grade", "March C-", "--words", "32", "--faults", "static,classic", "--pairs", "all")
    assert code == 0
    assert "WDF" in out and " 0%" in out and "non-transition" in out
    assert "320 operations" in out and "320 cycles" in out
    assert "total" in out


def test_grade_usage_error(cli):
    code, out, err = cli("grade")
    assert code == 2 and "usage:" in err


def test_demo_runs(cli):
    code, out, err = cli("demo")
    assert code == 0 and "March SS" in out and "kestrel_demo_sram" in out


def test_console_script_runs_without_traceback_on_bad_input(tmp_path):
    # the installed entry point, as a new user runs it
    f = tmp_path / "bad.march"
    f.write_bytes(b"{\xff\xfe}")
    p = subprocess.run([sys.executable, "-m", "marchkit", "check", str(f)], capture_output=True, text=True)
    assert p.returncode == 2 and "Traceback" not in p.stderr and "UTF-8" in p.stderr


@pytest.mark.slow
def test_non_editable_install_works_outside_the_repository(tmp_path):
    """Build the wheel, install it in a fresh venv (dependencies from this environment),
    and run it from another directory: grammars/ and patterns/ must come along."""
    # no PYTHONPATH in the children: the checkout (with the egg-info a wheel build leaves) must not
    # stand in for the installed copy
    env = {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}
    wheel_dir = tmp_path / "wheels"
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q",
                    "-w", str(wheel_dir), str(ROOT)], check=True, capture_output=True)
    wheel = next(wheel_dir.glob("marchkit-*.whl"))
    venv = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True)
    py = venv / "bin" / "python"
    # The dependencies come from the environment running the tests — a user's venv as well as a
    # system-wide install (a --system-site-packages venv would only see the base interpreter's):
    # its site directories are appended to the new venv's path by a .pth file, after the venv's
    # own site-packages, so the installed wheel is the marchkit found.
    import site
    import sysconfig

    parent = [p for p in dict.fromkeys(site.getsitepackages() + [site.getusersitepackages(),
                                        sysconfig.get_paths()["purelib"], sysconfig.get_paths()["platlib"]])
              if os.path.isdir(p)]
    own = subprocess.run([str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                         check=True, capture_output=True, text=True, env=env).stdout.strip()
    (Path(own) / "_test_parent_env.pth").write_text("\n".join(parent) + "\n", encoding="utf-8")
    subprocess.run([str(py), "-m", "pip", "install", "--no-deps", "-q", str(wheel)], check=True,
                   capture_output=True, env=env)
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    probe = subprocess.run([str(py), "-c", "import marchkit, sys; print(marchkit.__file__)"],
                           cwd=elsewhere, capture_output=True, text=True, env=env, check=True)
    assert str(venv) in probe.stdout, probe.stdout   # the installed copy, not the checkout
    exe = venv / "bin" / "marchkit"
    p = subprocess.run([str(exe), "library"], cwd=elsewhere, capture_output=True, text=True, env=env)
    assert p.returncode == 0 and "March SS" in p.stdout, p.stderr
    p = subprocess.run([str(exe), "grade", "March SS", "--words", "16", "--pairs", "all", "--json"],
                       cwd=elsewhere, capture_output=True, text=True, env=env)
    assert p.returncode == 0 and json.loads(p.stdout)["total"]["coverage"] == 1.0
    p = subprocess.run([str(exe), "show", "{⇕(w0); ⇑(r0"], cwd=elsewhere, capture_output=True, text=True, env=env)
    assert p.returncode == 2 and "<argument>:1:" in p.stderr and "Traceback" not in p.stderr


from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

NEAR = st.text(alphabet="{}();,⇑⇓⇕updownany rw01*^×Del ms\n#", min_size=0, max_size=40)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=st.one_of(NEAR.map(lambda s: "{" + s), st.text(max_size=30)))
def test_cli_never_shows_a_traceback(cli, text):
    # any argument, valid or not: exit 0 or 2 and a message, never an uncaught exception
    code, out, err = cli("show", text)
    assert code in (0, 2), (text, code, err)
    assert "Traceback" not in err
    if code == 2:
        assert "error:" in err


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.binary(max_size=60))
def test_check_random_files_never_crashes(cli, tmp_path_factory, data):
    f = tmp_path_factory.mktemp("fuzz") / "f.march"
    f.write_bytes(data)
    code, out, err = cli("check", str(f))
    assert code in (0, 2) and "Traceback" not in err


def test_faults_lists_the_catalogue_with_counts(cli):
    code, out, err = cli("faults", "static", "--words", "16", "--pairs", "all", "--json")
    rows = json.loads(out)
    assert code == 0 and len(rows) == 48   # van de Goor & Al-Ars, VTS 2000: 12 + 36
    assert sum(r["instances"] for r in rows) == 12 * 16 + 36 * 16 * 15
    code, out, err = cli("faults", "CFst")
    assert code == 0 and "while the aggressor holds 0, the victim cannot stay 0: it becomes 1" in " ".join(out.split())
    code, out, err = cli("faults", "bogus")
    assert code == 2 and "unknown fault selection" in err


def test_the_shipped_examples_work(cli):
    mem = str(ROOT / "examples" / "kestrel_l1_sram.toml")
    code, out, err = cli("check", str(ROOT / "examples" / "ours.march"), "--strict")
    assert code == 0, err
    code, out, err = cli("grade", f"{ROOT / 'examples' / 'ours.march'}:Kestrel quick", "--memory", mem,
                         "--faults", "SAF,DRF", "--retention", "5ms", "--json")
    assert code == 0, err
    data = json.loads(out)
    assert data["memory"]["words"] == 1024 and data["memory"]["backgrounds"] == ["solid", "checkerboard"]


def test_check_memory_files(cli, tmp_path):
    code, out, err = cli("check", str(ROOT / "examples" / "kestrel_l1_sram.toml"))
    assert code == 0 and "1024 × 16 bits, mux 4" in out
    bad = tmp_path / "bad.toml"
    bad.write_text("[memory]\nwords = 100\nmux = 3\n", encoding="utf-8")
    code, out, err = cli("check", str(bad))
    assert code == 2 and f"{bad}:3:1: error: column mux 3 does not divide 100 words" in err


def test_export_command_knows_every_format():
    from marchkit.cli.cmd_export import FORMAT_HELP
    from marchkit.export import FORMATS

    assert tuple(FORMAT_HELP) == FORMATS
