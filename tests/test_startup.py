"""Start-up: each command imports only what it uses (module sets, not timings)."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

from routerisk import cli, datasets
from routerisk.profile import DEFAULT_PROFILE, safe_load_yaml

ROOT = Path(__file__).resolve().parents[1]

#: Libraries no help text needs; each costs 0.2-1 s of start-up.
HEAVY = (
    "numpy",
    "pandas",
    "geopandas",
    "shapely",
    "pyogrio",
    "pyproj",
    "scipy",
    "networkx",
    "folium",
    "matplotlib",
    "osmnx",
    "osmium",
    "yaml",
    "highspy",
    "dask",
)


def _imported(*args: str, tmp: Path) -> set[str]:
    """Return ``sys.modules`` at the exit of ``python -m routerisk ARGS`` (run as a process)."""
    out = tmp / "modules.txt"
    code = (
        "import atexit, runpy, sys\n"
        f"atexit.register(lambda: open({str(out)!r}, 'w').write('\\n'.join(sorted(sys.modules))))\n"
        f"sys.argv = ['routerisk', *{list(args)!r}]\n"
        "runpy.run_module('routerisk', run_name='__main__', alter_sys=True)\n"
    )
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, env=env, cwd=ROOT, timeout=300
    )
    assert out.is_file(), proc.stderr[-2000:]
    return set(out.read_text().split())


def _heavy(names: set[str]) -> list[str]:
    return sorted(n for n in names if n.split(".")[0] in HEAVY)


@pytest.mark.parametrize("args", [("--help",), ("--version",)])
def test_top_level_help_imports_no_heavy_library(args, tmp_path):
    names = _imported(*args, tmp=tmp_path)
    assert "routerisk.cli" in names  # the parse did run
    assert _heavy(names) == []


def test_every_command_help_imports_no_heavy_library(tmp_path):
    for name in cli.COMMANDS:
        names = _imported(name, "--help", tmp=tmp_path)
        assert f"routerisk.cli.{name}" in names
        assert _heavy(names) == [], name


def test_score_without_outputs_draws_nothing(town_dir, tmp_path):
    """A score printed as a table loads no map or chart library."""
    names = _imported(
        "score", str(datasets.get_path("routes")), "--network", str(town_dir), tmp=tmp_path
    )
    assert "routerisk.analysis.scoring" in names
    drawn = [n for n in names if n.split(".")[0] in ("folium", "matplotlib", "branca")]
    assert drawn == []
    # matching works on the frames (RoadIndex.of_network); the severity curve is a build step
    assert [n for n in names if n.split(".")[0] in ("networkx", "osmnx")] == []
    assert "scipy.interpolate" not in names


def test_route_outputs_leave_the_matplotlib_backend_alone(tmp_path):
    """routemap draws its charts on the Agg canvas: pyplot is never imported, no backend set."""
    code = (
        "import sys, matplotlib\n"
        "before = matplotlib.rcParams._get_backend_or_none()\n"
        "import routerisk.render.routemap as rm\n"
        "assert 'folium' not in sys.modules and 'matplotlib.pyplot' not in sys.modules\n"
        "fig, ax = rm.plt.subplots(figsize=(2, 1)); ax.plot([0, 1], [0, 1])\n"
        "assert rm.png_data_uri(fig).startswith('data:image/png;base64,')\n"
        "assert 'matplotlib.pyplot' not in sys.modules\n"
        "assert matplotlib.rcParams._get_backend_or_none() == before\n"
        "print('ok')\n"
    )
    env = {**os.environ, "PYTHONPATH": str(ROOT), "MPLBACKEND": ""}
    env.pop("MPLBACKEND")
    proc = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=300
    )
    assert proc.stdout.strip() == "ok", proc.stderr[-2000:]


def test_libyaml_reading_gives_the_same_values_and_messages():
    # reference: PyYAML's own pure-Python safe_load
    text = DEFAULT_PROFILE.read_text(encoding="utf-8")
    assert safe_load_yaml(text) == yaml.safe_load(text)
    bad = "a: [1, 2\nb: c: d\n"
    with pytest.raises(yaml.YAMLError) as ours:
        safe_load_yaml(bad)
    with pytest.raises(yaml.YAMLError) as theirs:
        yaml.safe_load(bad)
    assert str(ours.value) == str(theirs.value)
