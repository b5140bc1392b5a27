"""Building a :class:`Memory` from command-line values or a TOML file."""

from __future__ import annotations

import re
from dataclasses import dataclass, field, replace
from fractions import Fraction
from pathlib import Path

from ..errors import ModelError, PositionedError, SourcePos
from .geometry import Memory
from .timing import parse_frequency

@dataclass(frozen=True)
class Key:
    """One key a memory file may hold: the TOML types it accepts, the type of a list's items,
    whether :func:`make_memory` takes it (else it is a setting beside the memory), and a
    short description for messages."""

    types: tuple
    items: type | None = None
    memory: bool = True
    help: str = ""


# Every section and key a memory file knows (one line each; unknown ones are refused with a
# "did you mean").  A section of ``None`` takes any key (checked by its user: class weights).
MEMORY_KEYS: dict[str, Key] = {
    "name": Key((str,), help="the memory's name"),
    "words": Key((int,), help="number of words"),
    "bits": Key((int,), help="bits per word"),
    "mux": Key((int,), help="column mux: words per physical row"),
    "order": Key((str,), help="address order"),
    "backgrounds": Key((list, str), items=str, help="data backgrounds"),
    "clock": Key((str,), help='clock with its unit, e.g. "200MHz"'),
    "read_cycles": Key((int,), help="clock cycles per read"),
    "write_cycles": Key((int,), help="clock cycles per write"),
    "read_latency": Key((int,), help="pipelined reads: cycles from a read to its data, 0 to 64"),
    "scramble_bits": Key((list,), items=int, help="address bit order"),
    "scramble_xor": Key((int, str), help="address XOR mask"),
    "neighbours": Key((int,), help="4 or 8 physical neighbours"),
    "retention": Key((list, str), items=str, memory=False, help='DRF leakage times, e.g. ["5ms", "50ms"]'),
}
# DRAM keys (model/dram.py), kept in their own table
from .dram import DRAM_KEYS  # noqa: E402

MEMORY_KEYS.update({k: Key(v if isinstance(v, tuple) else (v,), help=f"DRAM: {k.replace('_', ' ')}")
                    for k, v in DRAM_KEYS.items()})
# the pins of the array as the tester sees them (export: STIL and VCD signal names, polarity,
# chip enable, byte enables, compare strobe); see marchkit.export.pins
PIN_KEYS: dict[str, Key] = {
    "clock": Key((str,), help="clock pin name"),
    "address": Key((str,), help="address bus name (pins NAME[0]..)"),
    "data_in": Key((str,), help="write data bus name"),
    "data_out": Key((str,), help="read data bus name"),
    "write_enable": Key((str,), help="write enable pin name"),
    "read_enable": Key((str,), help="read enable pin name"),
    "write_enable_active": Key((str,), help='"high" or "low"'),
    "read_enable_active": Key((str,), help='"high" or "low"'),
    "chip_enable": Key((str,), help="chip enable pin name (none when absent)"),
    "chip_enable_active": Key((str,), help='"high" or "low"'),
    "byte_enables": Key((str,), help="byte enable bus name (none when absent)"),
    "byte_enables_active": Key((str,), help='"high" or "low"'),
    "byte_bits": Key((int,), help="data bits per byte enable (default 8)"),
    "strobe": Key((int, float), help="compare strobe as a fraction of the period (default 0.75)"),
}
_PIN_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]{1,63}")


def pin_problem(key: str, value) -> str | None:
    """What is wrong with one [pins] value (None when it is fine).  Pin names are plain
    identifiers of 2 to 64 letters, digits and underscores, safe in STIL, VCD and Verilog
    (a one-letter name is refused: the semi-ate-stil reader takes it for a waveform
    character)."""
    import math as _m

    if key.endswith("_active"):
        return None if value in ("high", "low") else f'write "high" or "low", not {value!r}'
    if key == "strobe":
        ok = isinstance(value, (int, float)) and _m.isfinite(value) and 0 < value < 1
        return None if ok else f"a fraction of the clock period between 0 and 1 (got {value!r})"
    if key == "byte_bits":
        return None if isinstance(value, int) and 1 <= value <= 1024 else f"1 to 1024 (got {value!r})"
    if value in ("", "none") and key in ("chip_enable", "byte_enables"):
        return None
    return None if isinstance(value, str) and _PIN_NAME.fullmatch(value) else \
        f"{str(value)[:40]!r} is not a pin name (2 to 64 letters, digits and _, starting with a letter)"


SECTIONS: dict[str, dict[str, Key] | None] = {
    "memory": MEMORY_KEYS,
    "weights": None,        # class = weight (a number ≥ 0) for the class-weighted score
    "pins": PIN_KEYS,
}
TOML_KEYS = {k: v.types for k, v in MEMORY_KEYS.items()}     # (kept for older callers)
MAX_FILE_BYTES = 1 << 20


@dataclass(frozen=True)
class MemoryFile:
    """What a memory file says: the memory, and the settings that travel with it."""

    memory: Memory
    retention: tuple = ()               # Fractions (seconds)
    weights: dict = field(default_factory=dict)   # class name → float
    extras: dict = field(default_factory=dict)    # other known keys (memory=False), raw
    pins: dict = field(default_factory=dict)      # [pins], type-checked (marchkit.export.pins)


class MemoryFileError(PositionedError, ModelError):
    """A memory file that cannot be read."""


def parse_int_list(text: str) -> tuple[int, ...]:
    try:
        return tuple(int(x, 0) for x in text.replace(" ", "").split(",") if x)
    except ValueError:
        raise ModelError(f"{text!r} is not a comma-separated list of whole numbers") from None


def make_memory(words: int, bits: int = 1, *, mux: int = 1, order: str = "linear",
                backgrounds=("solid",), clock="100MHz", read_cycles: int = 1,
                write_cycles: int = 1, read_latency: int = 0, scramble_bits=None, scramble_xor=0,
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
        read_latency=int(read_latency),
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


def _key_pos(text: str, key: str, filename: str, section: str | None = None) -> SourcePos | None:
    """Where ``key =`` stands (in ``[section]`` when given, else anywhere)."""
    current = None
    for i, line in enumerate(text.split("\n"), 1):
        h = re.match(r"\s*\[\s*([^\]]*?)\s*\]", line)
        if h and not line.lstrip().startswith("[["):
            current = h.group(1).strip('"')
            if section is None or key != current:
                continue
        m = re.match(rf"\s*(\"?{re.escape(key)}\"?)\s*=", line)
        if m and (section is None or current == section or (current is None and section == "memory")):
            return SourcePos(i, m.start(1) + 1, filename, m.end(1) + 1)
    return None


def _section_pos(text: str, name: str, filename: str) -> SourcePos | None:
    for i, line in enumerate(text.split("\n"), 1):
        m = re.match(r"\s*\[+\s*\"?(" + re.escape(name) + r")\"?\s*\]", line)
        if m:
            return SourcePos(i, m.start(1) + 1, filename, m.end(1) + 1)
    return _key_pos(text, name, filename)


def did_you_mean(word: str, choices) -> str:
    import difflib

    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


def _read_text(p: Path) -> str:
    """The file's text: size-limited, UTF-8 (a leading byte-order mark is allowed), with the
    place of an undecodable byte."""
    try:
        size = p.stat().st_size
        if p.is_file() and size > MAX_FILE_BYTES:
            raise ModelError(f"{p}: a memory file is at most {MAX_FILE_BYTES // 1024} KiB (this one is "
                             f"{size:,} bytes)")
        with open(p, "rb") as f:
            raw = f.read(MAX_FILE_BYTES + 1)
    except OSError as e:
        raise ModelError(f"{p}: cannot read memory file: {e.strerror or e}") from None
    if len(raw) > MAX_FILE_BYTES:
        raise ModelError(f"{p}: a memory file is at most {MAX_FILE_BYTES // 1024} KiB")
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as e:
        before = raw[:e.start]
        line = before.count(b"\n") + 1
        col = len(before[before.rfind(b"\n") + 1:].decode("utf-8", "replace")) + 1
        shown = raw.decode("utf-8", "replace")
        raise MemoryFileError(f"byte 0x{raw[e.start]:02X} is not UTF-8 text (save the file as UTF-8)",
                              SourcePos(line, col, str(p)), shown) from None


# which file key a validation message is about: the first fragment found in the message wins
_MESSAGE_KEYS = (
    ("refresh scheme", ("refresh_scheme",)),
    ("refresh during", ("refresh_during_delays",)),
    ("refresh period", ("refresh",)),
    ("duration", ("refresh",)),
    ("page", ("page",)),
    ("reads and writes", ("read_cycles", "write_cycles")),
    ("read latency", ("read_latency",)),
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
    return read_memory_file(path, **overrides).memory


def read_memory_file(path: str | Path, **overrides) -> MemoryFile:
    """Read a memory file: the memory plus its retention times and class weights.  Every
    section and key is checked against :data:`SECTIONS`; errors carry the line and column."""
    import math
    import tomllib

    from .timing import parse_duration

    p = Path(path)
    fn = str(p)
    text = _read_text(p)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        msg = str(e)
        m = re.search(r"\(at line (\d+), column (\d+)\)", msg)
        pos = SourcePos(int(m.group(1)), int(m.group(2)), fn) if m else SourcePos(1, 1, fn)
        raise MemoryFileError(re.sub(r"\s*\(at .*?\)", "", msg), pos, text) from None
    except RecursionError:
        raise MemoryFileError("the file is nested too deeply for a memory file", SourcePos(1, 1, fn), text) from None

    def err(message, key=None, section="memory"):
        pos = _key_pos(text, key, fn, section) if key else None
        return MemoryFileError(message, pos or SourcePos(1, 1, fn), text)

    if "memory" in data:
        table = data["memory"]
        if not isinstance(table, dict):
            raise MemoryFileError("[memory] must be a table", SourcePos(1, 1, fn), text)
        others = {k: v for k, v in data.items() if k != "memory"}
    else:
        table = {k: v for k, v in data.items() if not (k in SECTIONS and isinstance(v, dict))}
        others = {k: v for k, v in data.items() if k in SECTIONS and isinstance(v, dict)}
    for name, value in others.items():
        if name not in SECTIONS or name == "memory":
            raise MemoryFileError(
                f"unknown section {name!r}" + did_you_mean(name, [s for s in SECTIONS if s != "memory"])
                + "; a memory file has the sections: " + ", ".join(f"[{s}]" for s in SECTIONS),
                _section_pos(text, name, fn), text)
        if not isinstance(value, dict):
            raise MemoryFileError(f"[{name}] must be a table", _section_pos(text, name, fn), text)
    kwargs, extras = {}, {}
    for key, value in table.items():
        spec = MEMORY_KEYS.get(key)
        if spec is None:
            where = "section" if isinstance(value, dict) else "key"
            raise err(f"unknown {where} {key!r}" + did_you_mean(key, list(MEMORY_KEYS) + list(SECTIONS))
                      + "; a memory file knows: " + ", ".join(sorted(MEMORY_KEYS)), key)
        if not isinstance(value, spec.types) or (isinstance(value, bool) and key != "refresh_during_delays"):
            hint = ' (write it with its unit, e.g. "200MHz")' if key == "clock" and isinstance(value, (int, float)) else ""
            raise err(f"{key} has the wrong type ({type(value).__name__}){hint}", key)
        if isinstance(value, list):
            bad = [x for x in value if not isinstance(x, spec.items) or isinstance(x, bool)]
            if bad:
                what = "whole numbers" if spec.items is int else "strings"
                raise err(f"{key} must list {what}, not {bad[0]!r}", key)
            if len(value) > 4096:
                raise err(f"{key} lists {len(value):,} items; at most 4096", key)
        if isinstance(value, str) and len(value) > 4096:
            raise err(f"{key} is {len(value):,} characters long; at most 4096", key)
        if spec.memory:
            kwargs[key] = value
        else:
            extras[key] = value
    retention = ()
    if "retention" in extras:
        items = extras.pop("retention")
        items = [x for x in items.split(",")] if isinstance(items, str) else items
        try:
            if not items or len(items) > 64:
                raise ModelError("retention lists 1 to 64 leakage times with units, e.g. [\"5ms\", \"50ms\"]")
            retention = tuple(parse_duration(x) for x in items)
        except ModelError as e:
            raise err(e.message, "retention") from None
    weights = {}
    for cls, w in (others.get("weights") or {}).items():
        if isinstance(w, bool) or not isinstance(w, (int, float)) or not math.isfinite(w) or w < 0:
            raise err(f"weight of {cls!r} must be a number ≥ 0 (got {w!r})", cls, "weights")
        weights[cls] = float(w)
    pins = {}
    for key, value in (others.get("pins") or {}).items():
        spec = PIN_KEYS.get(key)
        if spec is None:
            raise err(f"unknown key {key!r} in [pins]" + did_you_mean(key, PIN_KEYS) + "; [pins] knows: "
                      + ", ".join(PIN_KEYS), key, "pins")
        if not isinstance(value, spec.types) or isinstance(value, bool):
            raise err(f"pins {key} has the wrong type ({type(value).__name__}); {spec.help}", key, "pins")
        pins[key] = value
    if "words" not in kwargs and overrides.get("words") is None:
        raise MemoryFileError("a memory file needs 'words'", SourcePos(1, 1, fn), text)
    from_file = [k for k in kwargs if overrides.get(k) is None]
    for k, v in overrides.items():
        if v is not None:
            kwargs[k] = v
    kwargs.setdefault("name", p.stem)
    try:
        if "clock" in from_file:
            from .timing import parse_frequency

            parse_frequency(kwargs["clock"], require_unit=True)
        mem = make_memory(**kwargs)
    except ModelError as e:
        key = _message_key(e.message, from_file, kwargs)
        pos = _key_pos(text, key, fn) if key else None
        if pos:
            raise MemoryFileError(e.message, pos, text) from None
        raise
    for key, value in pins.items():
        problem = pin_problem(key, value)
        if problem:
            raise err(f"pins {key}: {problem}", key, "pins")
    return MemoryFile(mem, retention, weights, extras, pins)


def with_changes(mem: Memory, **changes) -> Memory:
    return replace(mem, **changes).validate()
