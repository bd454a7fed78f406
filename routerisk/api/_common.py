"""Checks shared by the top-level functions: profiles, departure times and shares."""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from routerisk._params import parameters
from routerisk.errors import OptionError

if TYPE_CHECKING:
    from routerisk.network.folder import Network
    from routerisk.profile import Profile


#: A departure: an aware datetime, or a naive one / ISO 8601 text read in the network's zone.
Departure = dt.datetime | str


def profile_of(profile: Profile | str | Path | None) -> Profile | None:
    """Return ``profile`` as a :class:`~routerisk.profile.Profile` (a file is read)."""
    from routerisk.profile import Profile, load_profile

    if profile is None or isinstance(profile, Profile):
        return profile
    return load_profile(profile)


def departures(net: Network, departs: Sequence[Departure] | Departure) -> list[dt.datetime]:
    """Return the departure times ``departs`` as aware datetimes in the network's zone."""
    from routerisk.analysis.scoring import parse_depart

    items = [departs] if isinstance(departs, str | dt.datetime) else list(departs)
    out = []
    for d in items:
        if not isinstance(d, str | dt.datetime):
            raise OptionError(
                f"must be datetimes or ISO 8601 text, got {type(d).__name__}", field="departs"
            )
        with parameters({"--depart": "departs"}):
            out.append(parse_depart(d if isinstance(d, str) else d.isoformat(), net.timezone))
    return out


def check_share(value: float | None, name: str) -> None:
    """Refuse a share that is not a number between 0 and 5 (the command's bound)."""
    if value is None:
        return
    if not isinstance(value, int | float) or not 0.0 <= float(value) <= 5.0:
        raise OptionError(
            f"must be a share between 0 and 5, got {value!r} (0.25 means 25 %)", field=name
        )
