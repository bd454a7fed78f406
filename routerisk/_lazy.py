"""A module imported on first use, so that start-up loads only what a command needs."""

from __future__ import annotations

import importlib
from typing import Any


class _LazyModule:
    """Stand-in for a module: the first attribute read imports it (then ``sys.modules`` serves)."""

    def __init__(self, name: str) -> None:
        self._name = name

    def __getattr__(self, attr: str) -> Any:
        return getattr(importlib.import_module(self._name), attr)

    def __repr__(self) -> str:
        return f"<module {self._name!r}, imported on first use>"


def lazy_module(name: str) -> Any:
    """Return a stand-in for module ``name`` that imports it on the first attribute read."""
    return _LazyModule(name)
