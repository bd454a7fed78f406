"""The README's Python example runs as shown, and the API reference builds."""

from __future__ import annotations

import importlib.util
import re
from pathlib import Path

import folium
import geopandas as gpd
import pandas as pd

import routerisk

ROOT = Path(__file__).resolve().parents[1]


def _python_block(section: str) -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    start = text.index(f"## {section}\n")
    end = text.find("\n## ", start + 1)
    blocks = re.findall(r"```python\n(.*?)```", text[start:end], flags=re.S)
    assert len(blocks) == 1, f"expected one python block under {section!r}"
    return blocks[0]


def test_readme_python_example_runs(tmp_path, monkeypatch, capsys):
    code = _python_block("Use it from Python")
    assert len(code.strip().splitlines()) <= 12  # "about ten lines"
    monkeypatch.chdir(tmp_path)
    scope: dict[str, object] = {}
    exec(compile(code, "README.md", "exec"), scope)  # noqa: S102 - our own README
    out = capsys.readouterr().out
    # every line ran: the tables were printed, the frames and the map exist
    assert "school-run" in out and "alternative 1" in out
    scores = scope["scores"]
    assert isinstance(scores.to_frame(), pd.DataFrame)
    segments = scope["segments"]
    assert isinstance(segments, gpd.GeoDataFrame) and segments.crs.to_epsg() == 4326
    assert len(segments) > 0
    assert isinstance(scope["review"].to_map(), folium.Map)
    page = (tmp_path / "review.html").read_text(encoding="utf-8")
    assert "leaflet" in page.lower() and routerisk.CAUTION.split(";")[0] in page


def _build_module():
    spec = importlib.util.spec_from_file_location("build_api", ROOT / "docs" / "build_api.py")
    assert spec and spec.loader
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_api_reference_builds(tmp_path):
    pages = _build_module().build(tmp_path / "api")
    names = {p.relative_to(tmp_path / "api").as_posix() for p in pages}
    assert {"index.html", "routerisk.html", "routerisk/api.html", "routerisk/results.html"} <= names
    top = (tmp_path / "api" / "routerisk.html").read_text(encoding="utf-8")
    for name in routerisk.api.__all__:  # every top-level function has its entry ...
        assert f'id="{name}"' in top, name
    assert top.count("Parameters") >= len(routerisk.api.__all__)  # ... with its parameters


def test_api_examples_run(tmp_path, monkeypatch):
    import doctest
    import pkgutil

    from routerisk import api, inputs

    # the functions live in api's modules (doctest only finds a module's own functions)
    parts = [
        importlib.import_module(f"{api.__name__}.{m.name}")
        for m in pkgutil.iter_modules(api.__path__)
    ]
    assert {f.__module__ for f in map(api.__dict__.get, api.__all__)} <= {
        m.__name__ for m in parts
    } | {inputs.__name__}
    monkeypatch.chdir(tmp_path)
    attempted = 0
    for module in (*parts, inputs):
        result = doctest.testmod(module, optionflags=doctest.ELLIPSIS, verbose=False)
        assert result.failed == 0, module.__name__
        attempted += result.attempted
    assert attempted >= 3 * len(api.__all__)  # every function's example ran
