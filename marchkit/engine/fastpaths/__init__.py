"""The exact fast path of each fault family (one module per family, named after it; each
defines ``FAST``, a :class:`~marchkit.engine.fastpaths.base.FastPath`).  Checked instance by
instance against the family's oracle by ``tests/test_engine.py``."""
