"""The library of published march tests (``patterns/*.march``) and TEST argument lookup."""

from __future__ import annotations

import re
from functools import lru_cache
from pathlib import Path

from ..errors import InputError, UnknownTestError
from .ast import MarchTest
from .parser import parse_file, parse_file_text, parse_notation


def patterns_dir() -> Path:
    try:
        from importlib.resources import files

        p = files("marchkit.patterns").joinpath("published.march")
        if p.is_file():
            return Path(str(p)).parent
    except (ModuleNotFoundError, TypeError, FileNotFoundError):
        pass
    return Path(__file__).resolve().parents[2] / "patterns"


def name_key(name: str) -> str:
    """Key for matching test names: case, spaces and punctuation do not count.

    A ``-`` that ends a word stands for "minus" (``March C-`` is not ``March C``), and ``+``
    for "plus", so ``march-c-``, ``March C-`` and ``MARCH_C-`` all give the same key.
    """
    s = name.strip().casefold()
    s = s.replace("+", " plus ")
    s = re.sub(r"-(?=$|[^0-9a-z])", " minus ", s)
    return re.sub(r"[^0-9a-z]+", "", s)


@lru_cache(maxsize=1)
def library() -> tuple[MarchTest, ...]:
    """Every published test the package ships, in file order."""
    tests: list[MarchTest] = []
    for f in sorted(patterns_dir().glob("*.march")):
        tests.extend(parse_file(f))
    return tuple(tests)


def find_in_library(name: str) -> MarchTest | None:
    key = name_key(name)
    for t in library():
        if name_key(t.name) == key:
            return t
    return None


def resolve_tests(spec: str) -> list[MarchTest]:
    """TEST on the command line: a notation (starts with ``{``), a file, or a library name.

    A file may hold several tests; ``FILE:NAME`` picks one of them.
    """
    s = spec.strip()
    if s.startswith("{"):
        return [parse_notation(s, filename="<argument>")]
    p = Path(spec)
    if p.is_file():
        return parse_file(p)
    if ":" in spec:
        fpart, _, tname = spec.rpartition(":")
        if Path(fpart).is_file():
            tests = parse_file(fpart)
            for t in tests:
                if name_key(t.name) == name_key(tname):
                    return [t]
            raise UnknownTestError(f"{fpart} has no test named {tname!r}; it has: " + ", ".join(t.name for t in tests))
    t = find_in_library(spec)
    if t is not None:
        return [t]
    close = _close_names(spec)
    hint = f" Did you mean: {', '.join(close)}?" if close else " `marchkit library` lists the published tests."
    if p.suffix or "/" in spec:
        raise UnknownTestError(f"no such file: {spec}.{hint if close else ''}")
    raise UnknownTestError(f"{spec!r} is not a test in the library, a file, or a notation starting with '{{'.{hint}")


def resolve_test(spec: str) -> MarchTest:
    tests = resolve_tests(spec)
    if len(tests) != 1:
        raise InputError(
            f"{spec} holds {len(tests)} tests; pick one as {spec}:NAME ("
            + ", ".join(t.name for t in tests) + ")"
        )
    return tests[0]


def _close_names(spec: str) -> list[str]:
    import difflib

    names = {name_key(t.name): t.name for t in library()}
    hits = difflib.get_close_matches(name_key(spec), list(names), n=3, cutoff=0.6)
    return [names[h] for h in hits]
