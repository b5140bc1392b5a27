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


KNOWN_TARGET_WORDS = ("static", "classic", "retention", "dynamic", "linked", "all")


def _known_targets() -> set[str]:
    from ..faults.registry import FAMILIES

    classes = tuple(c for f in FAMILIES for c in f.classes)
    return {c.casefold() for c in classes + ("DRF",) + KNOWN_TARGET_WORDS}


def _test_warnings(t, spec_is_file: bool) -> list:
    """Warnings beyond the consistency checks: a user's test named like a library test (the
    name would no longer say which test ran), and targets marchkit does not know."""
    import difflib

    from ..errors import Diagnostic
    from ..notation import find_in_library

    out = []
    if spec_is_file and t.name:
        lib = find_in_library(t.name)
        if lib is not None and lib.items != t.items:
            out.append(Diagnostic("warning", f"test {t.name!r} has the name of the library's {lib.name!r} but "
                                  "different elements; rename it so results cannot be mistaken", t.name_pos or t.pos))
    known = _known_targets()
    for target, pos in zip(t.targets, t.target_pos or (None,) * len(t.targets)):
        if target.casefold() not in known:
            where = pos or t.pos
            close = difflib.get_close_matches(target, sorted(known), n=1, cutoff=0.6)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            out.append(Diagnostic("warning", f"unknown target {target!r}{hint}: marchkit grades the classes of "
                                  "`marchkit faults all`", where))
    return out


def run(args) -> int:
    from ..errors import MarchkitError, PositionedError
    from ..notation import check_test, parse_file, parse_notation
    from ..notation.recover import all_errors

    status = 0
    for spec in args.files:
        if spec.lower().endswith(".toml"):
            status = max(status, _check_memory(spec))
            continue
        is_notation = spec.lstrip().startswith("{")
        label = "<argument>" if is_notation else spec
        try:
            tests = [parse_notation(spec, "<argument>")] if is_notation else parse_file(spec)
        except PositionedError as e:
            # report every independent syntax error, not only the first
            errs = [e] if e.source is None else all_errors(e.source, e.pos.file if e.pos else label, not is_notation)
            for x in errs:
                sys.stderr.write(x.render() + "\n")
            status = 2
            print(f"{label}: {len(errs)} error{'s' if len(errs) != 1 else ''}, no test read")
            continue
        except MarchkitError as e:  # InputError for unreadable files
            sys.stderr.write(e.render() + "\n")
            status = 2
            continue
        n_err = n_warn = 0
        for t in tests:
            for d in check_test(t) + _test_warnings(t, not is_notation):
                sys.stderr.write(d.render(t.text) + "\n")
                if d.severity == "error":
                    n_err += 1
                else:
                    n_warn += 1
        if n_err or (args.strict and n_warn):
            status = 2
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
