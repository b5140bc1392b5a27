"""Layer: generate — the shortest march test for a fault selection, with a minimality proof.

``generate(...)`` finds the shortest test (operations per address) that detects every
instance of the selected faults on a memory, says whether minimality is proven, and confirms
the result with the engine (:func:`marchkit.grade.grade`).  ``shorten(...)`` removes
operations from a given test while it keeps detecting what it detected.

The parallel part takes any executor with ``submit``/``gather`` (the command line passes a
dask.distributed client); this package imports no Dask.  How: :mod:`.keys` (the small memory
and why it represents every size), :mod:`.tables` (the search space, incremental evaluation),
:mod:`.search` (greedy, beam, IDA*).
"""

from .api import GenerateError, Generated, generate, shorten

__all__ = ["GenerateError", "Generated", "generate", "shorten"]
