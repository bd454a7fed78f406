"""Atomic output helpers: nothing half-written ever sits at a final path."""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from .errors import OutputExistsError


def sha256_file(path: str | Path, *, chunk: int = 1 << 20) -> str:
    """Return the hex SHA-256 of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while block := fh.read(chunk):
            h.update(block)
    return h.hexdigest()


def _umask_mode(mode: int) -> int:
    current = os.umask(0)
    os.umask(current)
    return mode & ~current


def check_target(path: str | Path, *, force: bool) -> Path:
    """Refuse an existing output unless ``force``; return the target as a Path."""
    target = Path(path)
    if target.exists() and not force:
        raise OutputExistsError("already exists; pass --force to replace it", path=target)
    return target


def write_text_atomic(path: str | Path, text: str, *, force: bool = True) -> Path:
    """Write ``text`` to a temporary file beside ``path`` and move it into place."""
    target = check_target(path, force=force)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, _umask_mode(0o666))
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise
    return target


def write_json_atomic(path: str | Path, data: Any, *, force: bool = True) -> Path:
    """Write ``data`` as stable, sorted, indented JSON atomically."""
    return write_text_atomic(path, dumps_json(data) + "\n", force=force)


def dumps_json(data: Any) -> str:
    """Serialise to JSON deterministically (sorted keys, fixed separators)."""
    return json.dumps(data, indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False)


@contextlib.contextmanager
def atomic_directory(path: str | Path, *, force: bool = False) -> Iterator[Path]:
    """Yield a temporary folder that replaces ``path`` only if the block completes.

    On any error (or a kill) the temporary folder is removed or left under a hidden
    ``.name.*.part`` name that no command accepts, and an existing ``path`` is untouched.
    """
    target = check_target(path, force=force)
    target.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent))
    os.chmod(tmp, _umask_mode(0o777))
    try:
        yield tmp
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    old = None
    if target.exists():
        old = target.with_name(f".{target.name}.old-{os.getpid()}")
        os.replace(target, old)
    os.replace(tmp, target)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
