"""The one reader of a drives folder (routerisk.io.drives) and MatchedRoute.rows.

Sample data: the invented town of Corvane shipped with routerisk (sample_area/drives).
"""

from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest

from routerisk import datasets
from routerisk.errors import InputFileError
from routerisk.io.drives import drive_files, read_drive_routes


def test_drive_files_sorted_and_filtered(tmp_path):
    for name in ("b.gpx", "a.CSV", "c.geojson", "notes.txt"):
        (tmp_path / name).write_text("", encoding="utf-8")
    assert [p.name for p in drive_files(tmp_path)] == ["a.CSV", "b.gpx", "c.geojson"]


def test_drive_files_errors_name_the_option(tmp_path):
    with pytest.raises(InputFileError) as err:
        drive_files(tmp_path / "missing")
    assert err.value.field == "--drives" and "not found" in str(err.value)
    (tmp_path / "notes.txt").write_text("x", encoding="utf-8")
    with pytest.raises(InputFileError) as err:
        drive_files(tmp_path)
    assert err.value.field == "--drives" and "no .gpx" in str(err.value)


def test_read_drive_routes_reads_every_file_in_name_order(tmp_path):
    src = datasets.get_path("drives")
    for name in ("drive-02.gpx", "drive-01.gpx"):
        shutil.copy(src / name, tmp_path / name)
    drives = read_drive_routes(tmp_path, default_tz="Etc/GMT+3")
    assert [d.source.split("/")[-1] for d in drives] == ["drive-01.gpx", "drive-02.gpx"]
    assert all(d.times is not None for d in drives)


def test_matched_route_rows_looks_edges_up_in_the_index():
    from routerisk.matching.common import MatchedRoute

    index = pd.MultiIndex.from_tuples([(1, 2, 0), (2, 3, 0), (3, 1, 0)], names=["u", "v", "key"])
    m = MatchedRoute(
        name="r",
        source="",
        method="join",
        edges=((2, 3, 0), (3, 1, 0), (9, 9, 0)),
        fractions=np.ones(3),
        start_offset=0.0,
        end_offset=1.0,
        length_m=0.0,
        time_s=0.0,
        piece_starts=(0,),
        breaks=(),
        point_edge=np.zeros(0, dtype=int),
        point_offset=np.zeros(0),
    )
    assert m.rows(index).tolist() == [1, 2, -1]
