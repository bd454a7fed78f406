"""Atomic output helpers: nothing half-written ever sits at a final path."""

from __future__ import annotations

import contextlib
import ctypes
import errno
import functools
import hashlib
import json
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from routerisk.errors import OutputError, OutputExistsError


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


def check_target(path: str | Path, *, force: bool, folder: bool | None = None) -> Path:
    """Refuse an existing output unless ``force``; return the target as a Path.

    With ``folder`` True (False), an existing file (folder) at the path is refused even with
    ``force``: replacing one kind by the other is never what was meant.
    """
    target = Path(path)
    if target.exists() or target.is_symlink():
        if folder is True and not target.is_dir():
            raise OutputExistsError("is a file; give a folder name for this output", path=target)
        if folder is False and target.is_dir():
            raise OutputExistsError("is a folder; give a file name for this output", path=target)
        if not force:
            raise OutputExistsError("already exists; pass --force to replace it", path=target)
    for parent in target.parents:
        if parent.exists():
            if not parent.is_dir():
                raise OutputError("cannot be written: a file is in the way", path=parent)
            break
    return target


def _mkdir_parent(target: Path) -> None:
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot create the folder ({exc.strerror})", path=target.parent) from exc


def write_text_atomic(path: str | Path, text: str, *, force: bool = True) -> Path:
    """Write ``text`` to a temporary file beside ``path`` and move it into place."""
    return write_bytes_atomic(path, text.encode("utf-8"), force=force)


def write_bytes_atomic(path: str | Path, data: bytes, *, force: bool = True) -> Path:
    """Write ``data`` to a hidden temporary file beside ``path`` and move it into place.

    The temporary file is ``.name.*.part``; it is removed on any error, so the final path
    holds either its old content or the complete new one.
    """
    target = check_target(path, force=force, folder=False)
    _mkdir_parent(target)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    except OSError as exc:
        raise OutputError(f"cannot be written ({exc.strerror})", path=target) from exc
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, _umask_mode(0o666))
        os.replace(tmp, target)
    except BaseException as exc:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        if isinstance(exc, OSError):
            raise OutputError(f"cannot be written ({exc.strerror})", path=target) from exc
        raise
    return target


def write_json_atomic(path: str | Path, data: Any, *, force: bool = True) -> Path:
    """Write ``data`` as stable, sorted, indented JSON atomically."""
    return write_text_atomic(path, dumps_json(data) + "\n", force=force)


def dumps_json(data: Any) -> str:
    """Serialise to JSON deterministically (sorted keys, fixed separators)."""
    return json.dumps(data, indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False)


_RENAME_EXCHANGE = 2  # linux/fs.h


@functools.cache
def _renameat2() -> Any:
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        fn = libc.renameat2
    except (OSError, AttributeError):  # not glibc >= 2.28, or not Linux
        return None
    fn.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    fn.restype = ctypes.c_int
    return fn


def _exchange(a: Path, b: Path) -> bool:
    """Swap two paths in one atomic step (Linux renameat2); False where unsupported."""
    fn = _renameat2()
    if fn is None:
        return False
    at_fdcwd = -100
    if fn(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), _RENAME_EXCHANGE) == 0:
        return True
    err = ctypes.get_errno()
    if err in (errno.EINVAL, errno.ENOSYS, errno.ENOTSUP, errno.EXDEV):
        return False
    raise OSError(err, os.strerror(err), str(b))


def _remove(path: Path) -> None:
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path, ignore_errors=True)
    else:
        with contextlib.suppress(FileNotFoundError):
            path.unlink()


@contextlib.contextmanager
def atomic_directory(path: str | Path, *, force: bool = False) -> Iterator[Path]:
    """Yield a temporary folder that replaces ``path`` only if the block completes.

    On any error (or a kill) the temporary folder is removed or left under a hidden
    ``.name.*.part`` name that no command accepts, and an existing ``path`` is untouched.
    An existing folder (with ``force``) is swapped for the new one in one atomic step where
    the system allows it (Linux), so the path always holds the old or the new folder.
    """
    target = check_target(path, force=force, folder=True)
    _mkdir_parent(target)
    try:
        tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent))
    except OSError as exc:
        raise OutputError(f"cannot be written ({exc.strerror})", path=target) from exc
    os.chmod(tmp, _umask_mode(0o777))
    try:
        yield tmp
        # the target may have appeared while the block ran
        check_target(target, force=force, folder=True)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    old = None
    try:
        if target.exists() and _exchange(tmp, target):
            shutil.rmtree(tmp, ignore_errors=True)  # now the old folder
            return
        if target.exists():
            old = target.with_name(f".{target.name}.old-{os.getpid()}.part")
            os.replace(target, old)
        os.replace(tmp, target)
    except OSError as exc:
        if old is not None and not target.exists():
            os.replace(old, target)  # put the old folder back
        shutil.rmtree(tmp, ignore_errors=True)
        raise OutputError(f"cannot be moved into place ({exc.strerror})", path=target) from exc
    if old is not None:
        _remove(old)


# ----------------------------------------------------------------------------- provenance


def file_record(path: str | Path) -> dict[str, Any]:
    """Return ``{"name", "sha256"}`` of an input file, or of a folder's files.

    A folder's checksum is the SHA-256 of the sorted ``relative name, file checksum`` lines
    of every file in it; the name is the base name only, so outputs do not depend on where
    the inputs sit.
    """
    p = Path(path)
    if p.is_dir():
        h = hashlib.sha256()
        files = sorted(f for f in p.rglob("*") if f.is_file())
        for f in files:
            h.update(f"{f.relative_to(p).as_posix()}  {sha256_file(f)}\n".encode())
        return {"name": p.name, "files": len(files), "sha256": h.hexdigest()}
    return {"name": p.name, "sha256": sha256_file(p)}


def provenance(
    *, profile: str | None, network: Any = None, inputs: dict[str, str | Path | None] | None = None
) -> dict[str, Any]:
    """Return what every output records: tool version, profile fingerprint, input checksums.

    Parameters
    ----------
    profile
        The profile fingerprint.
    network
        A :class:`routerisk.network.folder.Network`: its OSM source (name, checksum) and overlay.
    inputs
        Role -> input file or folder (None entries are left out).
    """
    from routerisk import __version__

    recs: dict[str, Any] = {}
    if network is not None:
        meta = network.meta
        recs["network_source"] = {
            "name": meta.get("source_name"),
            "sha256": meta.get("source_sha256"),
        }
        if meta.get("overlay_sha256"):
            recs["overlay"] = {"sha256": meta["overlay_sha256"]}
    for role, path in (inputs or {}).items():
        if path is not None:
            recs[role] = file_record(path)
    return {"routerisk_version": __version__, "profile": profile, "inputs": recs}


def provenance_line(prov: dict[str, Any]) -> str:
    """Return the provenance as one line of text (for CSV comments and captions)."""
    ins = "; ".join(
        f"{role} {r.get('name') or ''} sha256 {r.get('sha256')}".replace("  ", " ")
        for role, r in sorted(prov["inputs"].items())
    )
    return f"routerisk {prov['routerisk_version']}; profile {prov['profile']}" + (
        f"; inputs: {ins}" if ins else ""
    )
