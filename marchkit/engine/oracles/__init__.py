"""The literal semantics of each fault family (one module per family, named after it).

Each module defines ``Fault``, a :class:`marchkit.engine.core.OracleFault`.  The reference
simulator runs them; the fast paths are tested against them.  Never import a fast path here.
"""
