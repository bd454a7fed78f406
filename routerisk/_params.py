"""Errors that name parameters: library errors naming command-line options, renamed."""

from __future__ import annotations

import contextlib
import re
from collections.abc import Iterator, Mapping

from routerisk.errors import RouteriskError


def param_name(flag: str) -> str:
    """Return the parameter name of a command-line option (``--max-extra-time``: max_extra_time)."""
    return flag[2:].replace("-", "_") if flag.startswith("--") else flag


@contextlib.contextmanager
def parameters(names: Mapping[str, str] | None = None) -> Iterator[None]:
    """Re-raise a library error that names command-line options with the parameter names.

    ``names`` maps an option to its parameter where the plain rule (``--hours-per-day`` ->
    ``hours_per_day``) does not give it.
    """
    try:
        yield
    except RouteriskError as exc:
        table = dict(names or {})

        def swap(m: re.Match[str]) -> str:
            return table.get(m.group(0), param_name(m.group(0)))

        flag = re.compile(r"(?<![\w-])--[a-z][a-z0-9-]*")
        field = exc.field
        new_field = None if field is None else flag.sub(swap, field)
        message = flag.sub(swap, exc.message)
        if new_field == field and message == exc.message:
            raise
        raise type(exc)(message, path=exc.path, field=new_field) from exc
