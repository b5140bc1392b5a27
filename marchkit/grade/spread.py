"""A spread of retention times: which weak cells a test catches, on average.

A spread is a list of retention times (each equally likely) or a log-normal distribution
given by its median and its spread σ (of the natural logarithm), sampled at K points of
equal probability (the midpoints of K probability bins: τ_i = median·exp(σ·Φ⁻¹((i + ½)/K)),
rounded to 3 significant digits).
The expected fraction of weak cells caught is the mean, over those τ, of the coverage of the
retention kinds at that τ (each τ's coverage counts both lost values).  Log-normal retention
distributions of DRAM cells: common practice, no source.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

from ..errors import InputError

MAX_POINTS = 64


@dataclass(frozen=True)
class Spread:
    taus: tuple[Fraction, ...]       # seconds, one per point
    text: str


def parse_spread(text: str) -> Spread:
    """``lognormal:MEDIAN:SIGMA[:POINTS]`` (e.g. ``lognormal:200ms:0.5``) or a comma list of
    times (``20ms,50ms,200ms``)."""
    from statistics import NormalDist

    from ..model import parse_duration

    s = text.strip()
    if s.lower().startswith("lognormal:"):
        parts = s.split(":")
        if len(parts) not in (3, 4):
            raise InputError(f"retention spread {text!r}: write lognormal:MEDIAN:SIGMA[:POINTS], e.g. lognormal:200ms:0.5")
        median = parse_duration(parts[1])
        try:
            sigma = float(parts[2])
            points = int(parts[3]) if len(parts) == 4 else 15
        except ValueError:
            raise InputError(f"retention spread {text!r}: SIGMA is a number and POINTS a whole number") from None
        if median <= 0 or not 0 < sigma <= 10:
            raise InputError(f"retention spread {text!r}: the median must be positive and 0 < SIGMA ≤ 10")
        if not 1 <= points <= MAX_POINTS:
            raise InputError(f"retention spread {text!r}: 1 to {MAX_POINTS} points")
        import math

        nd = NormalDist()
        # each point rounded to 3 significant digits (readable kind names; the spread is a model)
        taus = tuple(
            Fraction(f"{float(median) * math.exp(sigma * nd.inv_cdf((i + 0.5) / points)):.3g}")
            for i in range(points))
        return Spread(taus, s)
    taus = tuple(parse_duration(t) for t in s.split(",") if t.strip())
    if not taus:
        raise InputError("give at least one retention time")
    return Spread(taus, s)


@dataclass(frozen=True)
class TauRow:
    tau: Fraction
    instances: int
    detected: int

    @property
    def coverage(self) -> float:
        return self.detected / self.instances if self.instances else 1.0


def per_tau(kinds) -> list[TauRow]:
    """Retention results grouped by τ (both lost values together), in τ order."""
    by: dict = {}
    for r in kinds:
        if r.kind.tau is None:
            continue
        n, d = by.get(r.kind.tau, (0, 0))
        by[r.kind.tau] = (n + r.instances, d + r.detected)
    return [TauRow(t, n, d) for t, (n, d) in sorted(by.items())]


def expected_caught(rows: list[TauRow], taus) -> float:
    """Mean coverage over the spread's points (a point repeated counts as often)."""
    cov = {r.tau: r.coverage for r in rows}
    return sum(cov[Fraction(t)] for t in taus) / len(taus)
