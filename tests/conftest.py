"""Shared fixtures: the real OSM extract from pyogrio and the sample town, built once."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

import pytest

from routerisk import datasets
from routerisk.network.folder import build_network, save_network
from routerisk.profile import load_profile

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="session")
def real_pbf() -> Path:
    """A real OSM extract (ODbL) shipped in pyogrio's test fixtures (see tests/data/README)."""
    p = Path(str(resources.files("pyogrio") / "tests" / "fixtures" / "sample.osm.pbf"))
    if not p.exists():  # pragma: no cover - pyogrio always ships it in the versions we pin
        pytest.skip("pyogrio's sample.osm.pbf is not installed")
    return p


@pytest.fixture(scope="session")
def default_profile():
    return load_profile()


@pytest.fixture(scope="session")
def town_net(default_profile):
    """The sample town tagged with the default profile (built once per session)."""
    return build_network(datasets.get_path("town"), profile=default_profile, timezone="Etc/GMT+3")


@pytest.fixture(scope="session")
def town_dir(town_net, tmp_path_factory) -> Path:
    """The sample town's saved network folder."""
    out = tmp_path_factory.mktemp("town") / "net"
    save_network(town_net, out)
    return out


def pytest_terminal_summary(terminalreporter):
    """Print how many browser tests ran, so a missing chromium is never silent."""
    from ._browser import CHROMIUM

    ran = [
        r
        for k in ("passed", "failed")
        for r in terminalreporter.stats.get(k, [])
        if "browser" in getattr(r, "keywords", {})
    ]
    terminalreporter.write_line(
        f"browser tests run: {len(ran)} (chromium: {CHROMIUM or 'not found, skipped'})"
    )
