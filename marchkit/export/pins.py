"""The pins of the array as a tester sees them, for the STIL and VCD writers.

A pin map gives the signal names (clock, address bus, data in, data out, write and read
enable), the polarity of the enables (``high`` or ``low`` active), an optional chip enable
(active on every operation cycle, inactive on idle cycles: the array is deselected during a
retention pause), optional byte enables (one per ``byte_bits`` data bits, all active on write
cycles, inactive otherwise) and the compare strobe (a fraction of the clock period).  It comes
from the ``[pins]`` table of the memory file or ``export --pins KEY=VALUE,...``.

The stimulus itself stays logical (1 = active); the polarity is applied where each format
allows it: in STIL by the waveform table (an active-low pin drives ``U`` for ``0`` and ``D``
for ``1``), in VCD by writing the pin's electrical value.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

from ..errors import OutputError

DEFAULTS = dict(clock="CLK", address="ADR", data_in="DI", data_out="DO", write_enable="WE",
                read_enable="RE", write_enable_active="high", read_enable_active="high",
                chip_enable="", chip_enable_active="low", byte_enables="", byte_enables_active="high",
                byte_bits=8, strobe=0.75)


@dataclass(frozen=True)
class PinMap:
    clock: str = "CLK"
    address: str = "ADR"
    data_in: str = "DI"
    data_out: str = "DO"
    write_enable: str = "WE"
    read_enable: str = "RE"
    write_enable_active: str = "high"
    read_enable_active: str = "high"
    chip_enable: str = ""
    chip_enable_active: str = "low"
    byte_enables: str = ""
    byte_enables_active: str = "high"
    byte_bits: int = 8
    strobe: float = 0.75

    def byte_count(self, bits: int) -> int:
        return -(-bits // self.byte_bits) if self.byte_enables else 0

    def names(self) -> list[str]:
        out = [self.clock, self.address, self.data_in, self.data_out, self.write_enable, self.read_enable]
        return out + [n for n in (self.chip_enable, self.byte_enables) if n]

    @property
    def is_default(self) -> bool:
        return self == PinMap()


def pin_map(values: dict | None = None, option: str | None = None) -> PinMap:
    """A checked pin map: the memory file's ``[pins]`` values, then ``--pins KEY=VALUE,...``."""
    from ..model.build import PIN_KEYS, did_you_mean, pin_problem

    kw = dict(values or {})
    if option:
        for item in option.split(","):
            k, eq, v = item.partition("=")
            k, v = k.strip(), v.strip()
            if not eq or k not in PIN_KEYS:
                raise OutputError(f"--pins {item.strip()[:40]!r}: write KEY=VALUE with a key of: "
                                  + ", ".join(PIN_KEYS) + (did_you_mean(k, PIN_KEYS) if not eq or k else ""))
            if k == "strobe":
                try:
                    kw[k] = float(v)
                except ValueError:
                    raise OutputError(f"--pins strobe={v[:20]!r}: a fraction of the period, e.g. 0.75") from None
            elif k == "byte_bits":
                kw[k] = int(v) if v.isdigit() and len(v) < 6 else -1
            else:
                kw[k] = v
    for k, v in kw.items():
        p = pin_problem(k, v)
        if p:
            raise OutputError(f"pins {k}: {p}")
    for k in ("chip_enable", "byte_enables"):
        if kw.get(k) == "none":
            kw[k] = ""
    pm = PinMap(**{f.name: kw.get(f.name, getattr(PinMap, f.name)) for f in fields(PinMap)})
    names = pm.names()
    reserved = {"ADDR", "DIN", "DOUT", "BEN"} & set(names)
    if reserved:
        raise OutputError(f"pins: {sorted(reserved)[0]!r} is the name of a STIL signal group; choose another")
    dup = {n for n in names if names.count(n) > 1}
    if dup:
        raise OutputError(f"pins: the name {sorted(dup)[0]!r} is given to two signals")
    return pm
