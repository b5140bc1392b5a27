"""Layer 7: the command line.  The only place that prints errors.

Each command lives in its own module with ``register(subparsers)``; the module's ``run``
function is stored as the parser's default ``func`` and returns the exit status.
"""

from __future__ import annotations

import argparse
import signal
import sys

COMMANDS = ("library", "show", "check", "faults", "grade", "compare", "generate", "export", "bist", "diagnose", "repair", "plan", "demo")


class Parser(argparse.ArgumentParser):
    def error(self, message):  # usage errors: exit 2, one clear line, no traceback
        self.print_usage(sys.stderr)
        sys.stderr.write(f"{self.prog}: error: {message}\n")
        raise SystemExit(2)


def build_parser() -> argparse.ArgumentParser:
    from .. import __version__

    p = Parser(
        prog="marchkit",
        description="Write, fault-simulate, grade, compare and export march tests for embedded memories.",
    )
    p.add_argument("--version", action="version", version=f"marchkit {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=Parser)
    import importlib

    for name in COMMANDS:
        try:
            mod = importlib.import_module(f".cmd_{name}", __name__)
        except ModuleNotFoundError as e:
            if e.name and e.name.endswith(f"cmd_{name}"):
                continue
            raise
        mod.register(sub)
    return p


def main(argv=None) -> int:
    from .guard import run_guarded

    def body():
        parser = build_parser()
        args = parser.parse_args(argv)
        if not getattr(args, "func", None):
            parser.print_help()
            return 2
        return args.func(args)

    return run_guarded(body)


def entry() -> None:  # pragma: no cover
    try:
        code = main()
        _flush()
    except KeyboardInterrupt:
        sys.stderr.write("interrupted\n")
        code = 130
    # The work is done and its output flushed.  Python restores the default SIGINT action
    # while it shuts down, so a Ctrl-C arriving now would kill the process silently with
    # -SIGINT after a complete run; ignoring it keeps the exit status the run earned.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    sys.exit(code)


def _flush() -> None:
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):
            pass
