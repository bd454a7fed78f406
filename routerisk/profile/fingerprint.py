"""The fingerprint of a profile: a stable hash of its normalised content.

Every output records it, so a result can be traced to the exact profile (and rule polygon
files, whose hashes are passed in as ``extra_hash``) that produced it. Optional parts that
are unset are left out of the content, so adding an optional field to the schema does not
change the fingerprint of a profile that does not use it.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import asdict
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from routerisk.profile.schema import Profile

#: Optional fields of :class:`~routerisk.profile.Profile` left out of the content when unset.
OPTIONAL_FIELDS = ("baseline_time_profile", "crossing_time_profile", "likelihood", "uncertainty")


def content_of(profile: Profile) -> dict[str, Any]:
    """Return the normalised content of ``profile`` (what the fingerprint hashes)."""
    d = asdict(profile)
    d.pop("source")
    d.pop("extra_hash")
    for key in OPTIONAL_FIELDS:  # unset: the same content (and fingerprint) as before
        if d.get(key) is None:
            d.pop(key, None)
    for c in d["categories"]:
        if c.get("weight_range") is None:  # likewise plain weights
            c.pop("weight_range", None)
    return d


def fingerprint_of(content: dict[str, Any], extra_hash: str = "") -> str:
    """Return a stable 16-hex-digit hash of ``content`` (JSON, sorted keys) and ``extra_hash``."""
    text = json.dumps(
        content,
        sort_keys=True,
        separators=(",", ":"),
        default=lambda o: o.tolist() if hasattr(o, "tolist") else str(o),
    )
    return hashlib.sha256((text + extra_hash).encode()).hexdigest()[:16]
