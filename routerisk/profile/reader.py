"""Reading a nested profile mapping: keys, numbers, texts, clock times and time windows.

Every check raises a :class:`~routerisk.errors.ProfileError` naming the file and the key path
(``categories.school.radius_m``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from routerisk.errors import ProfileError
from routerisk.profile.schema import MAX_FACTOR
from routerisk.profile.timing import DAYS, MINUTES_PER_WEEK, Window


class Reader:
    """Walk a nested mapping, checking keys and types, with errors naming file and key."""

    def __init__(self, path: str) -> None:
        self.path = path

    def fail(self, key: str, message: str) -> ProfileError:
        """Return the error for ``key`` (the caller raises it)."""
        return ProfileError(message, path=self.path, field=key)

    def mapping(self, value: Any, key: str, allowed: set[str], required: set[str] = frozenset()):
        """Check that ``value`` is a mapping with only ``allowed`` and every ``required`` key."""
        if not isinstance(value, Mapping):
            raise self.fail(key or "(top level)", f"must be a mapping, got {type(value).__name__}")
        unknown = sorted(set(map(str, value)) - allowed)
        if unknown:
            raise self.fail(
                f"{key}.{unknown[0]}" if key else unknown[0],
                f"unknown key; allowed keys are {', '.join(sorted(allowed))}",
            )
        missing = sorted(required - set(value))
        if missing:
            raise self.fail(f"{key}.{missing[0]}" if key else missing[0], "required key missing")
        return value

    def number(
        self,
        value: Any,
        key: str,
        *,
        low: float = 0.0,
        strict: bool = False,
        high: float = math.inf,
    ) -> float:
        """Return ``value`` as a finite float from ``low`` (excluded if ``strict``) to ``high``."""
        if isinstance(value, bool) or not isinstance(value, int | float):
            hint = ""
            if isinstance(value, str):
                try:
                    float(value)
                    hint = (
                        " (read as text: YAML needs a sign in the exponent, "
                        "e.g. 1.0e+3, or a plain number)"
                    )
                except ValueError:
                    pass
            raise self.fail(key, f"must be a number, got {value!r}{hint}")
        v = float(value)
        if not math.isfinite(v):
            raise self.fail(key, f"must be finite, got {value!r}")
        if v < low or (strict and v == low):
            raise self.fail(key, f"must be {'>' if strict else '>='} {low:g}, got {value!r}")
        if v > high:
            raise self.fail(key, f"must be <= {high:g}, got {value!r}")
        return v

    def text(self, value: Any, key: str) -> str:
        """Return ``value`` as a non-empty string."""
        if not isinstance(value, str) or not value.strip():
            raise self.fail(key, f"must be a non-empty string, got {value!r}")
        return value

    def clock(self, value: Any, key: str) -> int:
        """Return the minute of day of a time ``'HH:MM'`` (00:00 to 24:00)."""
        if not isinstance(value, str) or len(value.split(":")) != 2:
            raise self.fail(key, f"must be a time 'HH:MM', got {value!r}")
        hh, mm = value.split(":")
        if (
            not (hh.isdigit() and mm.isdigit())
            or int(mm) > 59
            or int(hh) > 24
            or (int(hh) == 24 and int(mm) != 0)
        ):
            raise self.fail(key, f"must be a time 'HH:MM' between 00:00 and 24:00, got {value!r}")
        return int(hh) * 60 + int(mm)

    def windows(self, value: Any, key: str, *, with_multiplier: bool) -> tuple[Window, ...]:
        """Return a list of weekly windows (non-overlapping when they carry multipliers)."""
        if not isinstance(value, list):
            raise self.fail(key, "must be a list of windows")
        out = []
        allowed = {"days", "start", "end"} | ({"multiplier"} if with_multiplier else set())
        required = {"days", "start", "end"} | ({"multiplier"} if with_multiplier else set())
        for i, w in enumerate(value):
            k = f"{key}[{i}]"
            self.mapping(w, k, allowed, required)
            days = w["days"]
            if not isinstance(days, list) or not days or any(d not in DAYS for d in days):
                raise self.fail(f"{k}.days", f"must be a list of {', '.join(DAYS)}, got {days!r}")
            if len(set(days)) != len(days):
                raise self.fail(f"{k}.days", "lists a day twice")
            start = self.clock(w["start"], f"{k}.start")
            end = self.clock(w["end"], f"{k}.end")
            if start == end:
                raise self.fail(f"{k}.end", "window has zero length (start equals end)")
            mult = (
                self.number(w["multiplier"], f"{k}.multiplier", high=MAX_FACTOR)
                if with_multiplier
                else 1.0
            )
            out.append(Window(tuple(days), start, end % 1440 if end == 1440 else end, mult))
        if with_multiplier:
            seen = np.full(MINUTES_PER_WEEK, -1)
            for i, win in enumerate(out):
                mins = win.minutes()
                clash = seen[mins]
                if (clash >= 0).any():
                    j = int(clash[clash >= 0][0])
                    raise self.fail(f"{key}[{i}]", f"overlaps window {key}[{j}]")
                seen[mins] = i
        return tuple(out)
