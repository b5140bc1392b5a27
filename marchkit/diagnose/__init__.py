"""Diagnosis and repair: fail logs → fault candidates and fail bitmaps; spare allocation.

On the floor of :mod:`marchkit.grade`: imports the engine, faults, model and notation only.
:mod:`.faillog` reads and checks fail logs, :mod:`.diagnosis` ranks fault candidates in
equivalence classes, :mod:`.bitmap` classifies the fail bitmap on the physical array and
:mod:`.repair` allocates spare rows and columns (pure computation, no third-party solver).
"""

from .bitmap import Bitmap, bitmap_from_cells, bitmap_from_rc, classify
from .diagnosis import Candidate, Diagnosis, diagnose
from .faillog import CompareTable, Fail, FailLog, FailLogError, fail_log_csv, parse_fail_log, read_fail_log

__all__ = [
    "Bitmap", "bitmap_from_cells", "bitmap_from_rc", "classify", "Candidate", "Diagnosis", "diagnose",
    "CompareTable", "Fail", "FailLog", "FailLogError", "fail_log_csv", "parse_fail_log", "read_fail_log",
]
