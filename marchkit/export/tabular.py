"""``csv`` and ``jsonl``: one line per clock cycle.

CSV: exactly one header row, then one row per cycle, nothing else::

    cycle,run,element,op,action,we,re,address,wdata,expect,mask
    0,0,0,0,w0,1,0,00,0,0,0
    ...
    12,0,,,idle,0,0,00,0,0,0

JSONL: one JSON object per cycle, with the same keys in the same order::

    {"cycle":0,"run":0,"element":0,"op":0,"action":"w0","we":1,"re":0,"address":"00","wdata":"0","expect":"0","mask":"0"}
    {"cycle":12,"run":0,"element":null,"op":null,"action":"idle","we":0,"re":0,"address":"00","wdata":"0","expect":"0","mask":"0"}

``cycle``, ``run``, ``element``, ``op``, ``we`` and ``re`` are decimal numbers; ``address``,
``wdata``, ``expect`` and ``mask`` are hexadecimal (lower case, no prefix, bit 0 of the word
is the lowest bit of the number), zero-padded to the width of the field: ``ceil(A/4)`` digits
for ``A`` address bits, ``ceil(B/4)`` for ``B``-bit words.  An idle cycle has no element and
no op (empty in CSV, ``null`` in JSONL).  The meaning of each field is in
:mod:`marchkit.export.stream`.  With pipelined reads (``read_latency`` L > 0) ``expect`` and
``mask`` are on the compare cycle, L cycles after the read's last cycle, beside whatever
operation is issued then (0 on the read's own cycles); the last rows may be idle drain cycles
that only compare.
"""

from __future__ import annotations

import numpy as np

from .stream import chunk_size, decimal_digits, next_pow10
from .text import Row, hex_text, hex_width, put_address, put_data, put_rows, put_slotwise, strip_mask, table

FIELDS = ("cycle", "run", "element", "op", "action", "we", "re", "address", "wdata", "expect", "mask")


class Csv:
    name = "csv"
    header = (",".join(FIELDS) + "\n").encode()
    op_offset = 0          # where the op number starts in a slot text

    def op_row(self, dc, run, element, ws, ha, wd) -> Row:
        return (Row().field("cycle", dc).lit(f",{run},{element},").field("slot", ws).lit(",")
                .field("address", ha).lit(",").field("data", wd).lit("\n"))

    def slot_text(self, op, wop, action, we, re) -> str:
        return f"{op:0{wop}d},{action},{we},{re}"

    def data_text(self, word, z, ones, kind) -> str:
        return (f"{word},{z},{z}", f"{z},{word},{z}", f"{z},{word},{ones}")[kind]

    def idle_row(self, dc, run, za, z) -> Row:
        return Row().field("cycle", dc).lit(f",{run},,,idle,0,0,{za},{z},{z},{z}\n")

    # pipelined reads: the "expect,mask" part of the data text, and where it starts in it
    def cmp_text(self, expect, mask) -> str:
        return f"{expect},{mask}"

    def cmp_offset(self, hd: int) -> int:
        return hd + 1

    def idle_text(self, cycle, run, za, z, cmp) -> str:
        return f"{cycle},{run},,,idle,0,0,{za},{z},{cmp}\n"


class Jsonl(Csv):
    name = "jsonl"
    header = b""
    op_offset = len('"op":')

    def op_row(self, dc, run, element, ws, ha, wd) -> Row:
        return (Row().lit('{"cycle":').field("cycle", dc).lit(f',"run":{run},"element":{element},')
                .field("slot", ws).lit(',"address":"').field("address", ha).lit('",')
                .field("data", wd).lit("}\n"))

    def slot_text(self, op, wop, action, we, re) -> str:
        return f'"op":{op:0{wop}d},"action":"{action}","we":{we},"re":{re}'

    def data_text(self, word, z, ones, kind) -> str:
        return (f'"wdata":"{word}","expect":"{z}","mask":"{z}"',
                f'"wdata":"{z}","expect":"{word}","mask":"{z}"',
                f'"wdata":"{z}","expect":"{word}","mask":"{ones}"')[kind]

    def idle_row(self, dc, run, za, z) -> Row:
        return (Row().lit('{"cycle":').field("cycle", dc).lit(
            f',"run":{run},"element":null,"op":null,"action":"idle","we":0,"re":0,'
            f'"address":"{za}","wdata":"{z}","expect":"{z}","mask":"{z}"}}\n'))

    def cmp_text(self, expect, mask) -> str:
        return f'"expect":"{expect}","mask":"{mask}"'

    def cmp_offset(self, hd: int) -> int:
        return len('"wdata":"",') + hd

    def idle_text(self, cycle, run, za, z, cmp) -> str:
        return (f'{{"cycle":{cycle},"run":{run},"element":null,"op":null,"action":"idle","we":0,"re":0,'
                f'"address":"{za}","wdata":"{z}",{cmp}}}\n')


def idle_chunks(start: int, count: int, chunk: int | None = None):
    """(first cycle, cycles) pieces of an idle run, none crossing a power of ten."""
    chunk = chunk or chunk_size()
    c, end = start, start + count
    while c < end:
        e = min(end, c + chunk, next_pow10(c))
        yield c, e - c
        c = e


def write_rows(plan, f, dialect) -> int:
    """Write the whole pattern as lines; returns the number of lines after the header."""
    ha = hex_width(plan.address_bits)
    hd = hex_width(plan.bits)
    za, z = "0" * ha, "0" * hd
    ones = hex_text([plan.all_ones], plan.bits)[0].decode()
    if dialect.header:
        f.write(dialect.header)
    data_tabs: dict[int, np.ndarray] = {}
    seg_cache: dict = {}
    lines = 0
    pipe = None
    if plan.latency:            # pipelined reads: expect/mask come from the Pipeline
        from .stream import Pipeline

        pipe = Pipeline(plan)
        ctexts = [dialect.cmp_text(z, z)] + [dialect.cmp_text(w.decode(), ones)
                                             for w in hex_text(plan.cmp_words, plan.bits)]
        ctab = table(ctexts)
        coff = dialect.cmp_offset(hd)
    for b in plan.blocks():
        if b.is_idle:
            start, count = b.start, b.count
            if pipe is not None:
                head = pipe.idle(count)
                if head.any():
                    f.write("".join(dialect.idle_text(start + i, b.run, za, z, ctexts[int(c)])
                                    for i, c in enumerate(head)).encode())
                    lines += len(head)
                    start, count = start + len(head), count - len(head)
            for c0, n in idle_chunks(start, count):
                row = dialect.idle_row(decimal_digits(c0), b.run, za, z)
                buf = row.buffer(n)
                row.put_counter(buf, "cycle", c0)
                f.write(buf)
                lines += n
            continue
        seg = b.seg
        if seg.run not in data_tabs:
            words = hex_text(plan.words[seg.run], plan.bits)
            data_tabs[seg.run] = table(
                (dialect.data_text(w.decode(), z, ones, k) if pipe is None or k == 0
                 else dialect.data_text(z, z, ones, 0)).encode()        # pipelined: nothing on the read
                for w in words for k in range(3)
            )
        dtab = data_tabs[seg.run]
        dc = decimal_digits(b.start)
        key = (seg.index, dc)
        if key not in seg_cache:
            seg_cache.clear()
            wop = decimal_digits(seg.ops - 1)
            stab = table(
                dialect.slot_text(int(seg.slot_op[s]), wop, seg.slot_action[s],
                                  int(seg.slot_we[s]), int(seg.slot_re[s])).encode()
                for s in range(seg.per_address)
            )
            row = dialect.op_row(dc, seg.run, seg.element, stab.shape[1], ha, dtab.shape[1])
            skeep = None
            if wop > 1:     # drop the zeros in front of op numbers below 10^(wop-1)
                skeep = np.ones(stab.shape, bool)
                strip_mask(skeep, dialect.op_offset, wop, seg.slot_op)
            seg_cache[key] = (row, stab, skeep)
        row, stab, skeep = seg_cache[key]
        buf = row.buffer(b.count)
        row.put_counter(buf, "cycle", b.start)
        put_slotwise(row, buf, "slot", b, stab)
        put_address(row, buf, "address", b, "hex")
        put_data(row, buf, "data", b, dtab)
        if pipe is not None:
            put_rows(buf, row.off["data"] + coff, ctab, pipe.op(b))
        if skeep is None:
            f.write(buf)
        else:
            keep = np.ones(buf.shape, bool)
            put_rows(keep.view(np.uint8), row.off["slot"], skeep.view(np.uint8), b.slot_index)
            f.write(buf[keep])
        lines += b.count
    return lines


def write_csv(plan, f, **_) -> dict:
    return {"lines": write_rows(plan, f, Csv()) + 1}


def write_jsonl(plan, f, **_) -> dict:
    return {"lines": write_rows(plan, f, Jsonl())}
