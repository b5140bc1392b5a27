"""SoC memory test plans: read an SoC file, grade every candidate test once per memory type
(on Dask, through :mod:`marchkit.plan.cluster`, the only place Dask is imported), choose the
cheapest test meeting the required coverage, and schedule the tests under a power budget
(OR-Tools CP-SAT).  Importing this package imports nothing heavy."""


def read_soc(path):
    from .soc import read_soc as f

    return f(path)


def make_plan(soc, client=None, cache_dir="default", progress=None, generator=None):
    from .planner import make_plan as f

    return f(soc, client=client, cache_dir=cache_dir, progress=progress, generator=generator)


__all__ = ["read_soc", "make_plan"]
