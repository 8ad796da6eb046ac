"""The precision each figure carries on the wire: decimals, as numpy rounds them.

The engine keeps its sums exact (integer micro-units) and rounds only the
snapshot it builds, so every path (live, Redis, replay, ``pacewire analyze``,
reports, exports) shows the same digits, and a delta carries a leaf only when
it changed at this precision. The precisions are those the bench page and the
reports display: digits below them change every second and carry nothing a
tracking system can resolve (distance error 2-4 %, speed RMSE 0.25-0.41 m/s;
Linke et al. 2018). Decimals <= 0 give whole numbers (JSON integers): -2 is
to the nearest hundred.
"""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Precision:
    """Decimals per kind of figure (``round(value, decimals)``)."""

    distance: int = 0  # m: distance_m, hsr_m, sprint_m, high_power_m, zones, possession (1 m)
    energy: int = -2  # J/kg: energy_jkg (100 J/kg = 0.1 kJ/kg, as the bench page shows it)
    power: int = 1  # W/kg: metabolic_power_wkg (0.1 W/kg)
    rate: int = 0  # m/min: m_per_min (1 m/min)
    minutes: int = 1  # min: minutes on the pitch (0.1 min = 6 s)
    speed: int = 2  # m/s: speed_ms, max_speed_ms (0.01 m/s)
    share: int = 2  # 0-1: coverage (1 %)
    seconds: int = 0  # s: span_s, start_s (1 s)
    # team averages per player (teams.{id}.outfield.per_90min and per_min)
    per_90_count: int = 1  # counts per 90 minutes on the pitch (0.1)
    per_min_distance: int = 1  # m per minute on the pitch (0.1 m)
    per_min_energy: int = 0  # J/kg per minute on the pitch (1 J/kg)
    per_min_count: int = 2  # counts per minute on the pitch (0.01)

    def unit(self, kind: str) -> float:
        """The step of a kind of figure, in its unit (0.1 for one decimal, 100 for -2)."""
        return float(10.0 ** -getattr(self, kind))


WIRE = Precision()
# The digits every figure carried before the precisions above (benchmarks compare delta sizes with them).
FINE = Precision(distance=1, energy=1, power=2, rate=1, minutes=2, speed=2, share=3, seconds=1)
