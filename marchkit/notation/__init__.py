"""Layer 1: march notation — grammar, frozen dataclasses, printer, checks, library."""

from .ast import MAX_REPEAT, Delay, Element, Hammer, MarchTest, Op
from .check import check_test, ensure_consistent
from .library import find_in_library, library, name_key, resolve_test, resolve_tests
from .parser import parse_file, parse_file_text, parse_notation
from .printer import format_file, format_notation

__all__ = [
    "MAX_REPEAT", "Delay", "Element", "Hammer", "MarchTest", "Op", "check_test", "ensure_consistent",
    "find_in_library", "library", "name_key", "resolve_test", "resolve_tests", "parse_file",
    "parse_file_text", "parse_notation", "format_file", "format_notation",
]
