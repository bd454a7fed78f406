"""Nothing lost: ``routerisk build`` killed at random points never leaves a half folder.

``python -m routerisk build`` runs as a subprocess on the sample town and gets SIGKILL (no
clean-up code can run) at seeded points spread over the run as measured first: a third
before the folder is being written, the rest while it is written and moved into place
(counted from the moment the hidden temporary folder appears, so machine load does not
shift them out of that phase). After each kill the target folder either does not exist or is refused by
``load_network`` (NetworkFolderError), or it loads as a complete, checksum-valid network.
When an existing complete folder is replaced with ``--force``, the folder is at every kill
either the old one or the new one, never missing and never a mix.
"""

from __future__ import annotations

import json
import os
import random
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from routerisk import datasets
from routerisk.errors import NetworkFolderError
from routerisk.network.folder import load_network

ROOT = Path(__file__).resolve().parents[1]
SEED = 20270309
TRIES = 4  # kills of a fresh build
FORCE_TRIES = 3  # kills of a --force replacement


def _start(out: Path, *extra: str) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    return subprocess.Popen(
        [
            sys.executable,
            "-m",
            "routerisk",
            "build",
            str(datasets.get_path("town")),
            "--out",
            str(out),
            *extra,
        ],
        cwd=ROOT,
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )


def _parts(out: Path) -> list[Path]:
    return [p for p in out.parent.glob(f".{out.name}.*") if p.name.endswith(".part")]


def _measure(out: Path) -> tuple[float, float]:
    """Run one whole build; return (seconds until the folder is being written, total)."""
    t0 = time.monotonic()
    proc = _start(out, "--timezone", "Etc/GMT+3")
    t_save = None
    while proc.poll() is None:
        if t_save is None and _parts(out):
            t_save = time.monotonic() - t0
        time.sleep(0.01)
    total = time.monotonic() - t0
    assert proc.returncode == 0, proc.stderr.read().decode()
    return (t_save if t_save is not None else 0.8 * total), total


def _delays(rng: random.Random, n: int, t_save: float, total: float) -> list[tuple[str, float]]:
    """Return n kill points, stratified: a third at [t_save / 2, t_save] from the start, the
    rest at [0, 1.2 x the writing time] after the hidden folder appears (so a slower or
    faster machine still kills while the folder is written and moved into place)."""
    first = n // 3
    out = [
        ("start", t_save / 2 + (t_save / 2) * (i + rng.random()) / max(first, 1))
        for i in range(first)
    ]
    rest = n - first
    writing = max(total - t_save, 0.05)
    out += [("writing", 1.2 * writing * (i + rng.random()) / rest) for i in range(rest)]
    return out


def _kill_at(proc: subprocess.Popen, out: Path, point: tuple[str, float]) -> bool:
    """SIGKILL ``proc`` (our own child, by its pid) at ``point``; True if it was killed.

    ``("start", s)``: s seconds after the start; ``("writing", s)``: s seconds after the
    hidden ``.name.*.part`` folder appears.
    """
    phase, delay = point
    if phase == "writing":
        while proc.poll() is None and not _parts(out):
            time.sleep(0.005)
    try:
        proc.wait(timeout=delay)
    except subprocess.TimeoutExpired:
        proc.send_signal(signal.SIGKILL)
    proc.wait()
    proc.stderr.close()
    return proc.returncode == -signal.SIGKILL


def _check_complete(folder: Path) -> dict:
    net = load_network(folder)  # verifies format version, completeness and the gpkg checksum
    meta = json.loads((folder / "meta.json").read_text())
    assert meta["complete"] is True
    assert net.summary()["edges"] == meta["summary"]["edges"] > 0
    return meta


@pytest.fixture(scope="module")
def timing(tmp_path_factory) -> tuple[Path, float, float]:
    """A complete folder built once, and how long the build took (measured here)."""
    out = tmp_path_factory.mktemp("measure") / "net"
    t_save, total = _measure(out)
    _check_complete(out)
    return out, t_save, total


def test_killed_build_leaves_no_folder_or_a_complete_one(timing, tmp_path):
    _, t_save, total = timing
    rng = random.Random(SEED)
    outcomes = []
    for i, point in enumerate(_delays(rng, TRIES, t_save, total)):
        out = tmp_path / f"try{i}" / "net"
        out.parent.mkdir()
        killed = _kill_at(_start(out, "--timezone", "Etc/GMT+3"), out, point)
        label = (point[0], round(point[1], 2))
        visible = sorted(p.name for p in out.parent.iterdir() if not p.name.startswith("."))
        assert visible in ([], ["net"]), visible  # nothing else in sight
        if out.exists():
            _check_complete(out)  # a folder at the final path is always a whole one
            outcomes.append((label, killed, "complete"))
        else:
            with pytest.raises(NetworkFolderError):
                load_network(out)
            outcomes.append((label, killed, "absent"))
    assert any(k for _, k, _ in outcomes), f"no try was killed mid-way: {outcomes}"


def test_killed_force_replacement_keeps_old_or_new(timing, tmp_path):
    old_src, t_save, total = timing
    rng = random.Random(SEED + 1)
    seen = []
    for i, point in enumerate(_delays(rng, FORCE_TRIES, t_save, total)):
        out = tmp_path / f"try{i}" / "net"
        out.parent.mkdir()
        shutil.copytree(old_src, out)
        old_sha = json.loads((out / "meta.json").read_text())["gpkg_sha256"]
        killed = _kill_at(_start(out, "--timezone", "UTC", "--force"), out, point)
        label = (point[0], round(point[1], 2))
        meta = _check_complete(out)  # never missing, never refused
        which = {"Etc/GMT+3": "old", "UTC": "new"}[meta["timezone"]]
        if which == "old":
            assert meta["gpkg_sha256"] == old_sha
        visible = sorted(p.name for p in out.parent.iterdir() if not p.name.startswith("."))
        assert visible == ["net"], visible
        seen.append((label, killed, which))
    assert any(k for _, k, _ in seen), f"no try was killed mid-way: {seen}"


# ------------------------------------------- an error half-way leaves nothing behind


class _BoomError(RuntimeError):
    pass


def _boom(*_a, **_k):
    raise _BoomError("failed half-way")


def _hidden(root: Path) -> list[str]:
    return sorted(p.name for p in root.rglob(".*") if p.name.endswith(".part"))


@pytest.mark.parametrize("case", ["score", "suggest", "review", "watch", "demo"])
def test_an_error_half_way_leaves_no_output(case, tmp_path, town_dir, monkeypatch):
    from routerisk.cli import main
    from routerisk.render import mapview, report, routemap

    out = tmp_path / "out"
    routes = str(datasets.get_path("routes"))
    if case == "score":  # the map fails after the table and the GeoJSON are made
        monkeypatch.setattr(routemap, "route_map", _boom)
        argv = ["score", routes, "--network", str(town_dir), "--out", str(out)]
    elif case == "suggest":  # rendering the page fails
        monkeypatch.setattr(mapview.page, "render", _boom)  # save() renders through it
        out = tmp_path / "alt.html"
        argv = ["suggest", routes, "--network", str(town_dir), "--map", str(out)]
    elif case == "review":  # the report fails after areas.csv and areas.json are written
        monkeypatch.setattr(report, "write_report", _boom)
        argv = [
            "review",
            str(datasets.get_path("area")),
            "--network",
            str(town_dir),
            "--out",
            str(out),
        ]
    elif case == "watch":  # the report page fails after the overlay, table and map
        monkeypatch.setattr(report, "page", _boom)
        argv = [
            "watch",
            str(datasets.get_path("events")),
            "--drives",
            str(datasets.get_path("drives")),
            "--network",
            str(town_dir),
            "--out",
            str(out),
        ]
    else:  # the first stage after the network folder was saved fails
        monkeypatch.setattr(routemap, "write_outputs", _boom)
        argv = ["demo", "--out", str(out)]
    with pytest.raises(_BoomError):
        main(argv)
    assert not out.exists()
    assert _hidden(tmp_path) == []
