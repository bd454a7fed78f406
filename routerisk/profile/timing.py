"""Weekly time windows and time profiles: multipliers or masks by minute of the week.

Minute 0 is Monday 00:00; a week has :data:`MINUTES_PER_WEEK` minutes. A :class:`Window`
covers some days from a start to an end time (past midnight when the end is earlier), a
:class:`TimeProfile` gives a multiplier for every minute of the week.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

DAYS = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")
MINUTES_PER_WEEK = 7 * 24 * 60


@dataclass(frozen=True)
class Window:
    """A weekly time window: the given days, from ``start`` to ``end`` (minutes of day).

    An ``end`` at or before ``start`` runs past midnight into the next day.
    """

    days: tuple[str, ...]
    start: int
    end: int
    multiplier: float = 1.0

    def minutes(self) -> np.ndarray:
        """Return the minutes of the week (0 = Monday 00:00) this window covers."""
        out = []
        span = (self.end - self.start) % (24 * 60) or 24 * 60
        for day in self.days:
            first = DAYS.index(day) * 1440 + self.start
            out.append((first + np.arange(span)) % MINUTES_PER_WEEK)
        return np.concatenate(out) if out else np.zeros(0, dtype=int)


@dataclass(frozen=True)
class TimeProfile:
    """Multipliers by minute of the week: ``default`` outside every window."""

    name: str
    default: float
    windows: tuple[Window, ...]

    @cached_property
    def by_minute(self) -> np.ndarray:
        """Return a float array of 10,080 multipliers, one per minute of the week."""
        arr = np.full(MINUTES_PER_WEEK, self.default, dtype=float)
        for w in self.windows:
            arr[w.minutes()] = w.multiplier
        return arr
