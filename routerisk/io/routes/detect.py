"""Tell the kind of a route file, and refuse files that are not route files.

:func:`_detect_format` picks GeoJSON, GPX or CSV from the extension and, for other names,
from the first bytes; :func:`_refuse_other_kinds` refuses, with a message that says what the
file looks like, OSM extracts (for ``routerisk build``), binary files and YAML files.
"""

from __future__ import annotations

import re
from pathlib import Path

from routerisk.errors import InputFileError

_EXPECTED = "expected a route file: GeoJSON, GPX or CSV with route,lat,lon"
_YAML_KEY = re.compile(rb"^(?:---\s*$|[A-Za-z_][\w-]*:(?:\s|$))")


def _refuse_other_kinds(path: Path, raw: bytes) -> None:
    """Name, by content, a file that is clearly not a route file (whatever its extension)."""
    head = raw[:4096]
    if b"OSMHeader" in head[:64] or b"OSMData" in head[:64]:
        raise InputFileError(
            f"this looks like an OpenStreetMap extract (PBF, for `routerisk build`); {_EXPECTED}",
            path=path,
        )
    if head[:2] == b"\x1f\x8b" or head[:3] == b"BZh":
        raise InputFileError(
            f"this is a compressed file (gzip or bzip2; an OpenStreetMap "
            f"extract is for `routerisk build`); {_EXPECTED}",
            path=path,
        )
    if b"\x00" in head and head[:2] not in (b"\xff\xfe", b"\xfe\xff"):
        raise InputFileError(f"this is a binary file, not text; {_EXPECTED}", path=path)
    text = head.lstrip(b"\xef\xbb\xbf")
    if re.search(rb"<osm[\s>]", text[:1024]):
        raise InputFileError(
            f"this looks like an OpenStreetMap extract (OSM XML, for "
            f"`routerisk build`); {_EXPECTED}",
            path=path,
        )
    lines = [ln.strip() for ln in text.splitlines()]
    lines = [ln for ln in lines if ln and not ln.startswith(b"#")]
    if lines and _YAML_KEY.match(lines[0]):
        if any(ln.startswith(b"runs:") for ln in lines):
            raise InputFileError(
                f"this looks like a YAML runs file (for `routerisk plan`); {_EXPECTED}", path=path
            )
        raise InputFileError(f"this looks like a YAML file; {_EXPECTED}", path=path)


def _detect_format(path: Path, raw: bytes) -> str:
    ext = path.suffix.lower()
    if ext in (".geojson", ".json"):
        return "geojson"
    if ext in (".gpx", ".xml"):
        return "gpx"
    if ext in (".csv", ".txt"):
        return "csv"
    head = raw.lstrip()[:1]
    if head in (b"{", b"["):
        return "geojson"
    if head == b"<":
        return "gpx"
    return "csv"
