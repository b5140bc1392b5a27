"""Building a :class:`Memory` from command-line values or a TOML file."""

from __future__ import annotations

import re
from dataclasses import replace
from fractions import Fraction
from pathlib import Path

from ..errors import ModelError, PositionedError, SourcePos
from .geometry import Memory
from .timing import parse_frequency

TOML_KEYS = {
    "name": str, "words": int, "bits": int, "mux": int, "order": str,
    "backgrounds": (list, str), "clock": (str, int, float), "read_cycles": int,
    "write_cycles": int, "scramble_bits": list, "scramble_xor": (int, str), "neighbours": int,
}
# DRAM keys (model/dram.py), kept in their own table
from .dram import DRAM_KEYS  # noqa: E402

TOML_KEYS.update(DRAM_KEYS)


class MemoryFileError(PositionedError, ModelError):
    """A memory file that cannot be read."""


def parse_int_list(text: str) -> tuple[int, ...]:
    try:
        return tuple(int(x, 0) for x in text.replace(" ", "").split(",") if x)
    except ValueError:
        raise ModelError(f"{text!r} is not a comma-separated list of whole numbers") from None


def make_memory(words: int, bits: int = 1, *, mux: int = 1, order: str = "linear",
                backgrounds=("solid",), clock="100MHz", read_cycles: int = 1,
                write_cycles: int = 1, scramble_bits=None, scramble_xor=0,
                neighbours: int = 8, name: str = "", refresh=0, refresh_scheme: str = "distributed",
                refresh_during_delays=False, page: str = "closed") -> Memory:
    """A validated memory.  ``clock`` may be a frequency text (``200MHz``) or Hz."""
    if isinstance(backgrounds, str):
        backgrounds = tuple(b for b in backgrounds.split(",") if b.strip())
    if isinstance(scramble_bits, str):
        scramble_bits = parse_int_list(scramble_bits)
    if isinstance(scramble_xor, str):
        try:
            scramble_xor = int(scramble_xor, 0)
        except ValueError:
            raise ModelError(f"XOR mask {scramble_xor!r} is not a number") from None
    clock_hz = clock if isinstance(clock, Fraction) else parse_frequency(clock)
    m = Memory(
        words=int(words), bits=int(bits), mux=int(mux),
        scramble_bits=tuple(scramble_bits) if scramble_bits is not None else None,
        scramble_xor=int(scramble_xor), order=order, backgrounds=tuple(backgrounds),
        clock_hz=clock_hz, read_cycles=int(read_cycles), write_cycles=int(write_cycles),
        neighbours=int(neighbours), name=name,
        **_dram_fields(refresh, refresh_scheme, refresh_during_delays, page),
    )
    return m.validate()


def _dram_fields(refresh, scheme, during, page) -> dict:
    from .dram import parse_refresh, parse_yes_no

    return dict(
        refresh=parse_refresh(refresh), refresh_scheme=str(scheme).strip().lower(),
        refresh_during_delays=parse_yes_no(during, "refresh during delays"),
        page=str(page).strip().lower(),
    )


def _key_pos(text: str, key: str, filename: str) -> SourcePos | None:
    for i, line in enumerate(text.splitlines(), 1):
        m = re.match(rf"\s*({re.escape(key)})\s*=", line)
        if m:
            return SourcePos(i, m.start(1) + 1, filename, m.end(1) + 1)
    return None


# which file key a validation message is about: the first fragment found in the message wins
_MESSAGE_KEYS = (
    ("refresh scheme", ("refresh_scheme",)),
    ("refresh during", ("refresh_during_delays",)),
    ("refresh period", ("refresh",)),
    ("duration", ("refresh",)),
    ("page", ("page",)),
    ("reads and writes", ("read_cycles", "write_cycles")),
    ("column mux", ("mux",)),
    ("XOR", ("scramble_xor",)),
    ("scrambl", ("scramble_bits",)),
    ("bits per word", ("bits",)),
    ("clock", ("clock",)),
    ("stride", ("order",)),
    ("address order", ("order",)),
    ("background", ("backgrounds",)),
    ("neighbours", ("neighbours",)),
    ("words", ("words",)),
)


def _message_key(message: str, file_keys, values) -> str | None:
    for fragment, keys in _MESSAGE_KEYS:
        if fragment in message:
            # of two candidates (read/write cycles) prefer the one holding a bad value
            keys = sorted(keys, key=lambda k: not (isinstance(values.get(k), int) and values[k] < 1))
            return next((k for k in keys if k in file_keys), None)
    return None


def load_memory_file(path: str | Path, **overrides) -> Memory:
    """Read a memory from a TOML file (a ``[memory]`` table or top-level keys).

    ``overrides`` (values not None) replace what the file says.
    """
    import tomllib

    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as e:
        raise ModelError(f"{p}: cannot read memory file: {e.strerror}") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        msg = str(e)
        m = re.search(r"\(at line (\d+), column (\d+)\)", msg)
        pos = SourcePos(int(m.group(1)), int(m.group(2)), str(p)) if m else SourcePos(1, 1, str(p))
        raise MemoryFileError(re.sub(r"\s*\(at .*?\)", "", msg), pos, text) from None
    table = data.get("memory", data)
    if not isinstance(table, dict):
        raise MemoryFileError("[memory] must be a table", SourcePos(1, 1, str(p)), text)
    kwargs = {}
    for key, value in table.items():
        if key not in TOML_KEYS:
            raise MemoryFileError(
                f"unknown key {key!r}; a memory file knows: " + ", ".join(sorted(TOML_KEYS)),
                _key_pos(text, key, str(p)), text,
            )
        want = TOML_KEYS[key]
        if not isinstance(value, want) or (isinstance(value, bool) and key != "refresh_during_delays"):
            raise MemoryFileError(f"{key} has the wrong type ({type(value).__name__})", _key_pos(text, key, str(p)), text)
        if isinstance(value, list):
            item = int if key == "scramble_bits" else str
            bad = [x for x in value if not isinstance(x, item) or isinstance(x, bool)]
            if bad:
                raise MemoryFileError(
                    f"{key} must list {'whole numbers' if item is int else 'strings'}, not {bad[0]!r}",
                    _key_pos(text, key, str(p)), text,
                )
        kwargs[key] = value
    if "words" not in kwargs and overrides.get("words") is None:
        raise MemoryFileError("a memory file needs 'words'", SourcePos(1, 1, str(p)), text)
    for k, v in overrides.items():
        if v is not None:
            kwargs[k] = v
    kwargs.setdefault("name", p.stem)
    try:
        return make_memory(**kwargs)
    except ModelError as e:
        key = _message_key(e.message, [k for k in table if overrides.get(k) is None], kwargs)
        pos = _key_pos(text, key, str(p)) if key else None
        if pos:
            raise MemoryFileError(e.message, pos, text) from None
        raise


def with_changes(mem: Memory, **changes) -> Memory:
    return replace(mem, **changes).validate()
