"""`marchkit check FILE…`: validate march test files (syntax and consistency)."""

from __future__ import annotations

import sys


def register(sub):
    p = sub.add_parser("check", help="validate march test files and memory files",
                       description="Check files of march tests (or notations starting with '{'): syntax, "
                       "and whether a fault-free memory passes each test.  A .toml file is checked as a "
                       "memory description.")
    p.add_argument("files", nargs="+", metavar="FILE")
    p.add_argument("--strict", action="store_true", help="treat warnings as errors")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..errors import PositionedError
    from ..notation import check_test, parse_file, parse_notation

    status = 0
    for spec in args.files:
        if spec.lower().endswith(".toml"):
            status = max(status, _check_memory(spec))
            continue
        try:
            tests = [parse_notation(spec, "<argument>")] if spec.lstrip().startswith("{") else parse_file(spec)
        except PositionedError as e:
            sys.stderr.write(e.render() + "\n")
            status = 2
            continue
        except Exception as e:  # InputError for unreadable files
            from ..errors import MarchkitError

            if not isinstance(e, MarchkitError):
                raise
            sys.stderr.write(e.render() + "\n")
            status = 2
            continue
        n_err = n_warn = 0
        for t in tests:
            for d in check_test(t):
                sys.stderr.write(d.render(t.text) + "\n")
                if d.severity == "error":
                    n_err += 1
                else:
                    n_warn += 1
        if n_err or (args.strict and n_warn):
            status = 2
        label = "<argument>" if spec.lstrip().startswith("{") else spec
        print(f"{label}: {len(tests)} test{'s' if len(tests) != 1 else ''}, {n_err} error{'s' if n_err != 1 else ''}, {n_warn} warning{'s' if n_warn != 1 else ''}")
    return status


def _check_memory(path: str) -> int:
    from ..errors import MarchkitError
    from ..model import load_memory_file
    from .cmd_grade import memory_line

    try:
        mem = load_memory_file(path)
    except MarchkitError as e:
        sys.stderr.write(e.render() + "\n")
        return 2
    print(f"{path}: memory {memory_line(mem)}")
    return 0
