"""Pause Python's cyclic garbage collector while a stage makes millions of small objects.

Reading an OSM file and building frames create millions of shapely geometries, dicts and
arrays that all stay alive; each automatic collection walks every one of them again, which on
a large extract costs more than the work itself. None of that work leaves reference cycles
to reclaim, so the collector is paused for the stage and resumed after (reference counting
frees memory as usual meanwhile). Nested pauses resume only at the outermost one.
"""

from __future__ import annotations

import functools
import gc
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import ParamSpec, TypeVar

P = ParamSpec("P")
R = TypeVar("R")


@contextmanager
def collector_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector inside the block; resume it as it was."""
    was_on = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_on:
            gc.enable()


def bulk(func: Callable[P, R]) -> Callable[P, R]:
    """Decorate ``func`` to run with the cyclic garbage collector paused."""

    @functools.wraps(func)
    def run(*args: P.args, **kwargs: P.kwargs) -> R:
        with collector_paused():
            return func(*args, **kwargs)

    return run
