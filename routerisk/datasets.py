"""Small example data carried in the package: the invented sample town of Corvane."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

_FILES = {
    "town": "corvane.osm",
    "routes": "routes.geojson",
    "area": "area.geojson",
    "runs": "runs.yaml",
    "drives": "drives",
    "events": "events.csv",
    "counts": "counts.csv",
}


def available() -> list[str]:
    """Return the names of the bundled datasets that exist."""
    return sorted(n for n in _FILES if _path(n).exists())


def _folder() -> Path:
    """Return the folder of the sample area: a source checkout's, else the installed one.

    A source tree's ``sample_area/`` beside the package comes first, so that a checkout run
    with ``PYTHONPATH`` (or a second worktree beside an editable install) reads its own files.
    """
    here = Path(__file__).resolve().parents[1] / "sample_area"
    if (here / _FILES["town"]).is_file():
        return here
    try:
        return Path(str(resources.files("routerisk.sample_area")))
    except ModuleNotFoundError:  # running from a source tree: sample_area/ beside the package
        return Path(__file__).resolve().parents[1] / "sample_area"


def _path(name: str) -> Path:
    return _folder() / _FILES[name]


def get_path(name: str) -> Path:
    """Return the path of a bundled sample file (``town``, ``routes``, ``area`` ...).

    Raises
    ------
    ValueError
        For an unknown name; the message lists the valid ones.
    """
    if name not in _FILES or not _path(name).exists():
        raise ValueError(f"unknown dataset {name!r}; available: {', '.join(available())}")
    return _path(name)
