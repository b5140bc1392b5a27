import os
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(autouse=True)
def _pinned_console_width(monkeypatch):
    """Every test sees 132 columns (the width for files and pipes) unless it pins its own, so
    printed text does not depend on the terminal pytest runs in, nor on pytest-xdist (which
    sets COLUMNS=80 in its workers)."""
    monkeypatch.setenv("COLUMNS", "132")


@pytest.fixture
def cli(capsys):
    """Run the command line in-process: returns (exit status, stdout, stderr)."""
    from marchkit.cli import main

    def run(*argv):
        try:
            code = main(list(argv))
        except SystemExit as e:  # argparse usage errors
            code = e.code
        out = capsys.readouterr()
        return code, out.out, out.err

    return run
