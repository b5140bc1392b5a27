"""The SoC file: memory types, instances, clock domains, BIST groups, required coverage,
candidate tests and the power budget (TOML; every table and key is documented in
DEVELOPERS.md, "The SoC file").

Reading is strict: an unknown table or key is refused with its ``file:line:col`` and the
closest known name; a bad value is refused at the value.  Memory types take the keys of a
memory file (:data:`marchkit.model.build.TOML_KEYS`, less ``name`` and ``clock``: the clock
comes from the instance's clock domain) and are validated by the same code.
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path

from ..errors import InputError, ModelError, PositionedError, SourcePos

MAX_INSTANCES = 20_000
MAX_COUNT = 4096
DEFAULT_FAULTS = "static,classic"
DEFAULT_PAIRS = "neighbours"
DEFAULT_TIME_LIMIT = Fraction(10)
MAX_TIME_LIMIT = Fraction(3600)
KINDS = ("sram", "regfile", "dram")
GENERATE = "generate"


class SocFileError(PositionedError):
    """An SoC file that cannot be used as written."""


# ---- units -------------------------------------------------------------------------------

_POWER = {"w": Fraction(1), "mw": Fraction(1, 10**3), "uw": Fraction(1, 10**6), "µw": Fraction(1, 10**6)}
_ENERGY = {"nj": Fraction(1, 10**9), "pj": Fraction(1, 10**12), "fj": Fraction(1, 10**15)}
_NUM = r"([0-9]+(?:\.[0-9]*)?(?:[eE][+-]?[0-9]+)?)"


# what a memory under test (or the whole SoC) can draw, and energy per access: limits checked
# before the exact fraction is made (Fraction("1e999999999") would take forever)
_LIMITS = {"a power": (Fraction(1, 10**9), Fraction(10**3), "1nW to 1000W"),
           "an energy per access": (Fraction(1, 10**18), Fraction(1, 10**3), "1e-18J to 1mJ")}


def _quantity(text, units: dict, what: str, example: str) -> Fraction:
    m = re.fullmatch(r"\s*" + _NUM + r"\s*([a-zA-Zµ]+)\s*", str(text)) if isinstance(text, str) else None
    if not m or m.group(2).lower() not in units or len(m.group(1)) > 40:
        raise ModelError(f"{text!r} is not {what} such as {example}")
    lo, hi, span = _LIMITS[what]
    unit = units[m.group(2).lower()]
    approx = float(m.group(1)) * float(unit)          # inf or 0.0 for absurd exponents
    if approx <= 0:
        raise ModelError(f"{what} must be positive (got {text!r})")
    if not float(lo) / 2 <= approx <= float(hi) * 2:
        raise ModelError(f"{text!r} is out of range for {what} ({span})")
    v = Fraction(m.group(1)) * unit
    if not lo <= v <= hi:
        raise ModelError(f"{text!r} is out of range for {what} ({span})")
    return v


def parse_power(text) -> Fraction:
    """``1.2W``, ``350mW``, ``80uW`` → watts (exact)."""
    return _quantity(text, _POWER, "a power", "350mW")


def parse_energy(text) -> Fraction:
    """``4.5pJ``, ``900fJ``, ``0.1nJ`` → joules (exact)."""
    return _quantity(text, _ENERGY, "an energy per access", "4.5pJ")


# ---- what the file says ------------------------------------------------------------------

@dataclass(frozen=True)
class MemoryType:
    name: str
    kind: str
    fields: dict                       # memory-file keys as written (no clock)
    power_w: Fraction | None           # fixed power while under test
    access_energy_j: Fraction | None   # or energy per access
    tests: tuple | None                # candidate specs (None: the SoC's default list)
    require: dict                      # class -> Fraction percent (merged over [require])
    pos: SourcePos | None = None

    def memory(self, clock_hz: Fraction):
        from ..model import make_memory

        return make_memory(name=self.name, clock=clock_hz, **self.fields)

    def power(self, mem) -> Fraction:
        """Watts drawn while under test: the fixed weight, or the energy per access at the
        highest access rate (one access every min(read, write) cycles)."""
        if self.power_w is not None:
            return self.power_w
        return self.access_energy_j * mem.clock_hz / min(mem.read_cycles, mem.write_cycles)


@dataclass(frozen=True)
class Instance:
    name: str
    type: str
    domain: str
    group: str
    pos: SourcePos | None = None


@dataclass(frozen=True)
class Candidate:
    spec: str                 # as written
    tests: tuple              # MarchTest objects ('generate': empty)
    pos: SourcePos | None = None

    @property
    def is_generate(self) -> bool:
        return self.spec.strip().lower() == GENERATE


@dataclass
class Soc:
    name: str
    path: str
    text: str
    faults: str
    pairs: str
    retention: tuple
    budget_w: Fraction
    time_limit: Fraction
    solver_threads: int
    domains: dict                     # name -> clock Hz
    types: dict                       # name -> MemoryType
    instances: list                   # Instance, in file order
    candidates: dict                  # spec -> Candidate (every spec named anywhere)
    default_tests: tuple
    require: dict                     # the SoC-wide requirement
    positions: object = field(default=None, repr=False)

    def error(self, message: str, where) -> SocFileError:
        return SocFileError(message, where, self.text)

    def type_tests(self, t: MemoryType) -> tuple:
        return t.tests if t.tests is not None else self.default_tests


# ---- positions in the TOML text ----------------------------------------------------------

_HEADER = re.compile(r"\s*(\[\[?)\s*([^\]]+?)\s*\]\]?\s*(?:#.*)?$")
_KEY = re.compile(r"\s*((?:\"[^\"]*\"|'[^']*'|[A-Za-z0-9_\-.]+))\s*=\s*")


def _split_dotted(key: str) -> tuple:
    parts = re.findall(r"\"([^\"]*)\"|'([^']*)'|([A-Za-z0-9_\-]+)", key)
    return tuple(a or b or c for a, b, c in parts)


class Positions:
    """Where tables and keys sit in the text (tomllib gives values only).

    Paths are tuples: ``("types", "l1d")`` for ``[types.l1d]``, ``("instances", 3, "name")``
    for the key ``name`` in the fourth ``[[instances]]`` block.
    """

    def __init__(self, text: str, filename: str):
        self.file = filename
        self.lines = text.split("\n")
        self.tables: dict = {}
        self.keys: dict = {}          # path -> (line, key col, key end col, value col)
        arrays: dict = {}
        cur: tuple = ()
        in_multi = None
        for n, line in enumerate(self.lines, 1):
            if in_multi:
                if in_multi in line:
                    in_multi = None
                continue
            m = _HEADER.match(line)
            if m and not line.lstrip().startswith("#"):
                path = _split_dotted(m.group(2))
                col = line.index("[") + 1
                if m.group(1) == "[[":
                    i = arrays.get(path, -1) + 1
                    arrays[path] = i
                    cur = path + (i,)
                else:
                    cur = path
                self.tables.setdefault(cur, (n, col, col + len(line.strip())))
                continue
            m = _KEY.match(line)
            if m:
                path = cur + _split_dotted(m.group(1))
                self.keys.setdefault(path, (n, m.start(1) + 1, m.end(1) + 1, m.end() + 1))
                rest = line[m.end():]
                for q in ('"""', "'''"):
                    if rest.count(q) == 1:
                        in_multi = q

    def key(self, path) -> SourcePos | None:
        path = tuple(path)
        if path in self.keys:
            n, c, e, _ = self.keys[path]
            return SourcePos(n, c, self.file, e)
        return self.table(path[:-1])

    def value(self, path, item: str | None = None) -> SourcePos | None:
        """The value of a key; with ``item``, that string inside it (a list element)."""
        path = tuple(path)
        if path not in self.keys:
            return self.table(path[:-1])
        n, _, _, v = self.keys[path]
        if item is not None:
            for k in range(n, min(n + 200, len(self.lines) + 1)):
                line = self.lines[k - 1]
                start = v - 1 if k == n else 0
                for quoted in (f'"{item}"', f"'{item}'"):
                    j = line.find(quoted, start)
                    if j >= 0:
                        return SourcePos(k, j + 1, self.file, j + 1 + len(quoted))
        line = self.lines[n - 1]
        end = len(line.split("#")[0].rstrip()) + 1
        return SourcePos(n, v, self.file, max(end, v + 1))

    def table(self, path) -> SourcePos | None:
        path = tuple(path)
        while path:
            if path in self.tables:
                n, c, e = self.tables[path]
                return SourcePos(n, c, self.file, e)
            # a table only ever defined by dotted keys or inline: its first key
            for k, (n, c, e, _) in self.keys.items():
                if k[:len(path)] == path:
                    return SourcePos(n, c, self.file, e)
            path = path[:-1]
        return SourcePos(1, 1, self.file)


# ---- reading ----------------------------------------------------------------------------

SECTIONS = ("soc", "require", "power", "solver", "domains", "types", "instances")
SOC_KEYS = ("name", "faults", "pairs", "retention", "tests")
POWER_KEYS = ("budget",)
SOLVER_KEYS = ("time_limit", "threads")
INSTANCE_KEYS = ("name", "type", "domain", "group", "count")
TYPE_EXTRA = ("kind", "power", "access_energy", "tests", "require")


def _memory_keys() -> tuple:
    from ..model.build import TOML_KEYS

    return tuple(k for k in TOML_KEYS if k not in ("name", "clock"))


def _did_you_mean(word: str, known) -> str:
    close = difflib.get_close_matches(str(word), list(known), n=1, cutoff=0.6)
    return f"; did you mean {close[0]!r}?" if close else ""


class _Reader:
    def __init__(self, text: str, filename: str):
        self.text = text
        self.file = filename
        self.pos = Positions(text, filename)

    def fail(self, message: str, where) -> SocFileError:
        return SocFileError(message, where, self.text)

    def check_keys(self, table: dict, path: tuple, known, what: str) -> None:
        for k in table:
            if k not in known:
                raise self.fail(f"unknown key {k!r} in {what}{_did_you_mean(k, known)} "
                                f"(known: {', '.join(known)})", self.pos.key(path + (k,)))

    def want(self, table: dict, path: tuple, key: str, typ, what: str, required=False, default=None):
        if key not in table:
            if required:
                raise self.fail(f"{_path_text(path)} needs '{key}' ({what})", self.pos.table(path))
            return default
        v = table[key]
        ok = isinstance(v, typ) and not isinstance(v, bool)
        if not ok:
            raise self.fail(f"{key} must be {what} (got {type(v).__name__} {v!r})", self.pos.value(path + (key,)))
        if isinstance(v, str) and any(ord(ch) < 32 or ord(ch) == 127 for ch in v):
            # a name reaches one-line places: terminal tables, the chart title, the report
            raise self.fail(f"{key} must be one line of text, without line breaks or control characters "
                            f"(got {v!r})", self.pos.value(path + (key,)))
        return v

    def value_error(self, path: tuple, key: str, err: Exception, item: str | None = None) -> SocFileError:
        msg = err.message if hasattr(err, "message") else str(err)
        return self.fail(msg, self.pos.value(path + (key,), item))


def _path_text(path: tuple) -> str:
    if not path:
        return "the file"
    if len(path) >= 2 and isinstance(path[1], int):
        return f"[[{path[0]}]] number {path[1] + 1}"
    return "[" + ".".join(str(p) for p in path) + "]"


def _percent(v) -> Fraction:
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise ModelError(f"a required coverage is a percentage from 0 to 100 (got {v!r})")
    if isinstance(v, float) and not math.isfinite(v):
        raise ModelError(f"a required coverage is a percentage from 0 to 100 (got {v})")
    f = Fraction(str(v)) if isinstance(v, float) else Fraction(v)
    if not 0 <= f <= 100:
        raise ModelError(f"a required coverage is a percentage from 0 to 100 (got {v})")
    return f


def _string_list(r: _Reader, table: dict, path: tuple, key: str, what: str) -> tuple:
    v = table[key]
    if isinstance(v, str):
        v = [v]
    if not isinstance(v, list) or not v or not all(isinstance(x, str) and x.strip() for x in v):
        raise r.fail(f"{key} must be a non-empty list of {what}", r.pos.value(path + (key,)))
    return tuple(v)


def _requirements(r: _Reader, table, path: tuple, classes) -> dict:
    if not isinstance(table, dict):
        raise r.fail("a requirement is a table of class = percent, e.g. { SAF = 100 }", r.pos.value(path))
    out = {}
    for cls, v in table.items():
        if cls not in classes:
            low = {c.lower(): c for c in classes}
            hint = (f"; did you mean {low[cls.lower()]!r}?" if cls.lower() in low
                    else _did_you_mean(cls, classes))
            raise r.fail(f"{cls!r} is not a fault class graded here (the faults are "
                         f"{', '.join(classes)}){hint}", r.pos.key(path + (cls,)))
        try:
            out[cls] = _percent(v)
        except ModelError as e:
            raise r.value_error(path, cls, e) from None
    return out


def _resolve_candidate(r: _Reader, spec: str, base: Path, where) -> "Candidate":
    from ..notation import ensure_consistent, resolve_tests

    s = spec.strip()
    if s.lower() == GENERATE:
        return Candidate(spec, (), where)
    if not s.startswith("{"):
        # files are named relative to the SoC file
        head, sep, tail = s.rpartition(":") if ":" in s else (s, "", "")
        for cand in ((s,) if not sep else (s, head)):
            p = Path(cand)
            if not p.is_absolute() and (base / p).exists():
                s = str(base / p) + ((":" + tail) if cand == head and sep else "")
                break
    try:
        tests = tuple(ensure_consistent(t) for t in resolve_tests(s))
    except PositionedError as e:
        # an error inside a test file or notation: show it there, and say which entry
        if e.pos is not None and e.pos.file not in ("<argument>",):
            raise
        raise r.fail(f"candidate {spec!r}: {e.message}", where) from None
    except InputError as e:
        raise r.fail(e.message, where) from None
    return Candidate(spec, tests, where)


def read_soc(path) -> Soc:
    """Read and check an SoC file completely (every test resolved, every memory type
    validated, every instance's type, domain and group known) before any work starts."""
    import tomllib

    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as e:
        raise InputError(f"{p}: cannot read the SoC file: {e.strerror}") from None
    except UnicodeDecodeError:
        raise InputError(f"{p}: the SoC file is not UTF-8 text") from None
    return parse_soc(text, str(p), base=p.parent)


def parse_soc(text: str, filename: str = "<soc>", base: Path | None = None) -> Soc:
    import tomllib

    from ..faults import parse_pairs, select_faults
    from ..model import parse_duration, parse_frequency

    base = Path(".") if base is None else base
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        msg = str(e)
        m = re.search(r"\(at line (\d+), column (\d+)\)", msg)
        pos = SourcePos(int(m.group(1)), int(m.group(2)), filename) if m else SourcePos(1, 1, filename)
        raise SocFileError(re.sub(r"\s*\(at .*?\)", "", msg), pos, text) from None
    r = _Reader(text, filename)
    for k in data:
        if k not in SECTIONS:
            raise r.fail(f"unknown table {k!r}{_did_you_mean(k, SECTIONS)} (an SoC file has: "
                         f"{', '.join(SECTIONS)})", r.pos.key((k,)) if (k,) in r.pos.keys else r.pos.table((k,)))
    for k in SECTIONS:
        if k in data and k != "instances" and not isinstance(data[k], dict):
            raise r.fail(f"{k} must be a table [{k}]", r.pos.key((k,)))

    # [soc]
    soc_t = data.get("soc", {})
    r.check_keys(soc_t, ("soc",), SOC_KEYS, "[soc]")
    soc_name = r.want(soc_t, ("soc",), "name", str, "a string", default=Path(filename).stem)
    faults = r.want(soc_t, ("soc",), "faults", str, "a fault selection such as \"static,classic\"",
                    default=DEFAULT_FAULTS)
    pairs = r.want(soc_t, ("soc",), "pairs", str, "a pair scope such as \"neighbours\"", default=DEFAULT_PAIRS)
    retention = ()
    if "retention" in soc_t:
        for t in _string_list(r, soc_t, ("soc",), "retention", "durations such as \"1ms\""):
            try:
                retention += (parse_duration(t),)
            except ModelError as e:
                raise r.value_error(("soc",), "retention", e, t) from None
    try:
        selection = select_faults(faults, retention) if retention else select_faults(faults)
    except InputError as e:
        raise r.value_error(("soc",), "faults", e) from None
    try:
        parse_pairs(pairs)
    except InputError as e:
        raise r.value_error(("soc",), "pairs", e) from None
    classes = selection.classes
    if not retention and "DRF" in classes:
        from ..faults import DEFAULT_RETENTION

        retention = tuple(DEFAULT_RETENTION)

    # [power], [solver]
    power_t = data.get("power", {})
    r.check_keys(power_t, ("power",), POWER_KEYS, "[power]")
    if "budget" not in power_t:
        raise r.fail("[power] needs 'budget', the most power the memories under test may draw at once "
                     "(e.g. budget = \"1.5W\")", r.pos.table(("power",)))
    try:
        budget = parse_power(r.want(power_t, ("power",), "budget", str, "a power such as \"1.5W\""))
    except ModelError as e:
        raise r.value_error(("power",), "budget", e) from None
    solver_t = data.get("solver", {})
    r.check_keys(solver_t, ("solver",), SOLVER_KEYS, "[solver]")
    time_limit = DEFAULT_TIME_LIMIT
    if "time_limit" in solver_t:
        try:
            time_limit = parse_duration(r.want(solver_t, ("solver",), "time_limit", str, "a duration such as \"10s\""))
        except ModelError as e:
            raise r.value_error(("solver",), "time_limit", e) from None
        if not 0 < time_limit <= MAX_TIME_LIMIT:
            raise r.fail(f"time_limit must be more than 0 s and at most {MAX_TIME_LIMIT} s",
                         r.pos.value(("solver", "time_limit")))
    threads = r.want(solver_t, ("solver",), "threads", int, "a whole number", default=2)
    if not 1 <= threads <= 64:
        raise r.fail("threads must be 1 to 64", r.pos.value(("solver", "threads")))

    # [require]
    require = _requirements(r, data.get("require", {}), ("require",), classes)

    # [domains]
    domains = {}
    for d, v in data.get("domains", {}).items():
        if not isinstance(v, str) and (isinstance(v, bool) or not isinstance(v, (int, float))):
            raise r.fail(f"domain {d!r} takes its clock, e.g. {d} = \"400MHz\"", r.pos.value(("domains", d)))
        try:
            domains[d] = parse_frequency(v)
        except ModelError as e:
            raise r.value_error(("domains",), d, e) from None
    if not domains:
        raise r.fail("the file declares no clock domain: add [domains] with name = \"frequency\" lines",
                     r.pos.table(("domains",)))

    # candidate tests, each resolved once
    candidates: dict = {}

    def candidates_of(table, path) -> tuple:
        specs = _string_list(r, table, path, "tests", "tests (library names, files, notations or \"generate\")")
        for s in specs:
            if s not in candidates:
                candidates[s] = _resolve_candidate(r, s, base, r.pos.value(path + ("tests",), s))
        return specs

    default_tests = candidates_of(soc_t, ("soc",)) if "tests" in soc_t else None

    # [types.NAME]
    mem_keys = _memory_keys()
    known_type_keys = mem_keys + TYPE_EXTRA
    types: dict = {}
    types_t = data.get("types", {})
    if not types_t:
        raise r.fail("the file declares no memory type: add a [types.NAME] table per kind of memory",
                     r.pos.table(("types",)))
    from ..model.build import TOML_KEYS, _message_key

    for tname, t in types_t.items():
        path = ("types", tname)
        if not isinstance(t, dict):
            raise r.fail(f"types.{tname} must be a table [types.{tname}]", r.pos.key(path))
        for k in t:
            if k == "clock":
                raise r.fail("a memory type has no clock: its instances take the clock of their domain "
                             "([domains])", r.pos.key(path + (k,)))
            if k not in known_type_keys:
                raise r.fail(f"unknown key {k!r} in [types.{tname}]{_did_you_mean(k, known_type_keys)}",
                             r.pos.key(path + (k,)))
        fields_ = {}
        for k in mem_keys:
            if k in t:
                v = t[k]
                want = TOML_KEYS[k]
                if not isinstance(v, want) or isinstance(v, bool):
                    raise r.fail(f"{k} has the wrong type ({type(v).__name__})", r.pos.value(path + (k,)))
                if isinstance(v, list):
                    item = int if k == "scramble_bits" else str
                    bad = [x for x in v if not isinstance(x, item) or isinstance(x, bool)]
                    if bad:
                        raise r.fail(f"{k} must list {'whole numbers' if item is int else 'strings'}, not {bad[0]!r}",
                                     r.pos.value(path + (k,)))
                fields_[k] = v
        if "words" not in fields_:
            raise r.fail(f"[types.{tname}] needs 'words'", r.pos.table(path))
        try:
            from ..model import make_memory

            make_memory(name=tname, **fields_)
        except ModelError as e:
            k = _message_key(e.message, list(fields_), fields_)
            raise r.fail(e.message, r.pos.value(path + (k,)) if k else r.pos.table(path)) from None
        kind = r.want(t, path, "kind", str, "one of " + ", ".join(KINDS), default="sram")
        if kind not in KINDS:
            raise r.fail(f"kind must be one of {', '.join(KINDS)}{_did_you_mean(kind, KINDS)}",
                         r.pos.value(path + ("kind",)))
        if ("power" in t) == ("access_energy" in t):
            raise r.fail(f"[types.{tname}] needs exactly one of 'power' (what one memory draws under test, "
                         "e.g. \"12mW\") or 'access_energy' (energy per access, e.g. \"3.5pJ\")",
                         r.pos.key(path + ("access_energy",)) if "access_energy" in t else r.pos.table(path))
        pw = en = None
        try:
            if "power" in t:
                pw = parse_power(r.want(t, path, "power", str, "a power such as \"12mW\""))
            else:
                en = parse_energy(r.want(t, path, "access_energy", str, "an energy such as \"3.5pJ\""))
        except ModelError as e:
            raise r.value_error(path, "power" if "power" in t else "access_energy", e) from None
        tests = candidates_of(t, path) if "tests" in t else None
        req = dict(require)
        if "require" in t:
            req.update(_requirements(r, t["require"], path + ("require",), classes))
        types[tname] = MemoryType(tname, kind, fields_, pw, en, tests, req, r.pos.table(path))

    if default_tests is None and any(t.tests is None for t in types.values()):
        missing = next(t for t in types.values() if t.tests is None)
        raise r.fail(f"no candidate tests for type {missing.name!r}: give [soc] tests = [...] "
                     "(or tests = [...] in the type)", missing.pos)

    # [[instances]]
    inst_t = data.get("instances", [])
    if not isinstance(inst_t, list) or not inst_t:
        raise r.fail("the file lists no memory instance: add [[instances]] blocks",
                     r.pos.key(("instances",)) if ("instances",) in r.pos.keys else SourcePos(1, 1, filename))
    instances: list = []
    seen: dict = {}
    group_domain: dict = {}
    for i, it in enumerate(inst_t):
        path = ("instances", i)
        if not isinstance(it, dict):
            raise r.fail("each instance is a table", r.pos.table(("instances",)))
        r.check_keys(it, path, INSTANCE_KEYS, "[[instances]]")
        name = r.want(it, path, "name", str, "a string", required=True)
        tname = r.want(it, path, "type", str, "the name of a [types.NAME] table", required=True)
        if tname not in types:
            raise r.fail(f"unknown memory type {tname!r}{_did_you_mean(tname, types)}", r.pos.value(path + ("type",)))
        dname = r.want(it, path, "domain", str, "the name of a clock domain", required=True)
        if dname not in domains:
            raise r.fail(f"unknown clock domain {dname!r}{_did_you_mean(dname, domains)} "
                         f"(declared: {', '.join(domains)})", r.pos.value(path + ("domain",)))
        count = r.want(it, path, "count", int, "a whole number", default=None)
        if count is not None and not 1 <= count <= MAX_COUNT:
            raise r.fail(f"count must be 1 to {MAX_COUNT}", r.pos.value(path + ("count",)))
        if count is not None and "{}" not in name:
            raise r.fail("with count, the name needs {} where the number goes (e.g. \"cpu{}_l1d\")",
                         r.pos.value(path + ("name",)))
        if count is None and "{}" in name:
            raise r.fail("{} in a name stands for the number of each copy: give count as well",
                         r.pos.value(path + ("name",)))
        group = r.want(it, path, "group", str, "the name of a BIST group", default=None)
        names = [name.replace("{}", str(k)) for k in range(count)] if count else [name]
        for k, n in enumerate(names):
            if not n.strip():
                raise r.fail("an instance needs a non-empty name", r.pos.value(path + ("name",)))
            g = group.replace("{}", str(k)) if group else n
            if n in seen:
                raise r.fail(f"instance {n!r} is named twice (first at line {seen[n].line})",
                             r.pos.value(path + ("name",)))
            where = r.pos.value(path + ("name",))
            seen[n] = where
            if g in group_domain and group_domain[g][0] != dname:
                raise r.fail(f"group {g!r} mixes clock domains {group_domain[g][0]!r} and {dname!r}; "
                             "a BIST controller runs in one clock domain",
                             r.pos.value(path + ("group",)) if group else where)
            group_domain.setdefault(g, (dname, where))
            instances.append(Instance(n, tname, dname, g, where))
        if len(instances) > MAX_INSTANCES:
            raise r.fail(f"more than {MAX_INSTANCES} instances", r.pos.table(path))

    # a memory that alone draws more than the budget can never be tested within it
    for tname, dname in dict.fromkeys((i.type, i.domain) for i in instances):
        t = types[tname]
        watts = t.power(t.memory(domains[dname]))
        if watts > budget:
            users = [i.name for i in instances if i.type == tname and i.domain == dname]
            key = "power" if t.power_w is not None else "access_energy"
            raise r.fail(f"memory type {tname!r} draws {float(watts) * 1e3:.4g} mW under test in domain "
                         f"{dname!r}, more than the whole power budget ({float(budget) * 1e3:.4g} mW): "
                         f"{', '.join(users[:4])}{' …' if len(users) > 4 else ''}",
                         r.pos.value(("types", tname, key)))
    soc = Soc(name=soc_name, path=filename, text=text, faults=faults, pairs=pairs, retention=tuple(retention),
              budget_w=budget, time_limit=time_limit, solver_threads=threads, domains=domains, types=types,
              instances=instances, candidates=candidates, default_tests=default_tests or (),
              require=require, positions=r.pos)
    return soc
