"""Reading a drives folder: the recorded drives (GPX, GeoJSON or CSV with times) in it.

One reader for every command that takes ``--drives`` (``watch``, ``evidence``) and for
:func:`routerisk.read_drives`; map-matching the drives happens in ``analysis/``.
"""

from __future__ import annotations

from datetime import tzinfo
from pathlib import Path

from routerisk.errors import InputFileError
from routerisk.io import routes

__all__ = ["drive_files", "read_drive_routes"]


def drive_files(folder: str | Path) -> list[Path]:
    """Return the .gpx, .geojson and .csv files of a drives folder, sorted by name."""
    d = Path(folder)
    if not d.is_dir():
        raise InputFileError("drives folder not found", path=d, field="--drives")
    files = sorted(p for p in d.iterdir() if p.suffix.lower() in (".gpx", ".geojson", ".csv"))
    if not files:
        raise InputFileError(
            "no .gpx, .geojson or .csv drives in the folder", path=d, field="--drives"
        )
    return files


def read_drive_routes(
    folder: str | Path, *, default_tz: str | tzinfo | None = None
) -> list[routes.PlannedRoute]:
    """Read every route of every drive file in ``folder``, files in name order."""
    return [r for f in drive_files(folder) for r in routes.read_routes(f, default_tz=default_tz)]
