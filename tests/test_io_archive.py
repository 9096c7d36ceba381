"""floeheat.io.archive: deployments.csv, scenes.csv and the scenes/ index."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from floeheat.errors import ArchiveError
from floeheat.io.archive import read_deployments, read_scene_table
from variant_files import scene_netcdf_mask, scene_tiff, write_csv


def _touch(root, *names):
    for name in names:
        (root / name).parent.mkdir(parents=True, exist_ok=True)
        (root / name).write_text("")


def test_deployments_minimal_and_full(tmp_path):
    _touch(tmp_path, "p/a.nc", "i/b.csv")
    write_csv(tmp_path / "deployments.csv",
              ["ice_type", "deployment_id", "profile_file", "icemass_file", "start", "note"],
              [["multiyear", "A-1", "p/a.nc", "", "2020-05-01T02:00:00+02:00", "x"],
               ["", "b_2", "", "i/b.csv", "2020-05-02T00:00Z", ""]])
    table = read_deployments(tmp_path)
    assert list(table.columns[:8]) == ["deployment_id", "array_id", "profile_file",
                                       "icemass_file", "shortwave_file", "start", "end",
                                       "ice_type"]
    assert table["note"].iloc[0] == "x"
    assert table["start"].dtype == np.dtype("datetime64[ns]")
    assert table["start"].iloc[0] == pd.Timestamp("2020-05-01T00:00")
    assert table["end"].isna().all()
    assert pd.isna(table["icemass_file"].iloc[0]) and pd.isna(table["array_id"].iloc[1])
    assert pd.isna(table["ice_type"].iloc[1])


@pytest.mark.parametrize(("rows", "message"), [
    ([["B1", "p.nc"], ["B1", "p.nc"]], "line 3, column deployment_id: duplicate ID 'B1'"),
    ([["B1", "p.nc"], ["../x", "p.nc"]], "line 3, column deployment_id: invalid ID '../x'"),
    ([["_B", "p.nc"]], "line 2, column deployment_id: invalid ID '_B'"),
    ([["B" * 65, "p.nc"]], "line 2, column deployment_id: invalid ID"),
    ([["B1", "missing.nc"]], "line 2, column profile_file: the file 'missing.nc' does not"),
    ([["B1", ""]], "line 2, columns profile_file/icemass_file"),
])
def test_deployment_errors_name_line_and_column(tmp_path, rows, message):
    _touch(tmp_path, "p.nc")
    write_csv(tmp_path / "deployments.csv", ["deployment_id", "profile_file"], rows)
    with pytest.raises(ArchiveError) as err:
        read_deployments(tmp_path)
    assert "deployments.csv: " + message in str(err.value)


def test_deployment_bad_values_all_reported(tmp_path):
    _touch(tmp_path, "p.nc")
    write_csv(tmp_path / "deployments.csv",
              ["deployment_id", "profile_file", "start", "end", "ice_type"],
              [["B1", "p.nc", "1 May 2020", "", "thin"],
               ["B2", "p.nc", "2020-06-01", "2020-05-01", "first-year"]])
    with pytest.raises(ArchiveError) as err:
        read_deployments(tmp_path)
    text = str(err.value)
    assert "line 2, column start: '1 May 2020' is not an ISO 8601 time" in text
    assert "line 2, column ice_type: 'thin' is not allowed" in text
    assert "line 3, columns start/end" in text
    assert len(err.value.problems) == 3


def test_missing_required_column(tmp_path):
    write_csv(tmp_path / "deployments.csv", ["id", "profile_file"], [["B1", "p.nc"]])
    with pytest.raises(ArchiveError, match=r"header \(line 1\): required column\(s\) "
                                           "deployment_id missing"):
        read_deployments(tmp_path)
    write_csv(tmp_path / "scenes.csv", ["scene_id", "path", "time"], [["s", "a.tif", "x"]])
    with pytest.raises(ArchiveError, match="content missing"):
        read_scene_table(tmp_path)


def test_scene_table_from_csv(tmp_path):
    _touch(tmp_path, "scenes/a.tif", "scenes/b.tif")
    write_csv(tmp_path / "scenes.csv", ["scene_id", "path", "time", "content", "band"],
              [["S2", "scenes/b.tif", "2020-06-02T00:00:00Z", "mask", ""],
               ["S1", "scenes/a.tif", "2020-06-01T12:00:00-03:00", "backscatter", "HH HV"]])
    table = read_scene_table(tmp_path)
    assert list(table["scene_id"]) == ["S1", "S2"]  # by time
    assert table["time"].iloc[0] == pd.Timestamp("2020-06-01T15:00")
    assert table["band"].iloc[0] == "HH HV" and pd.isna(table["acquisition_id"]).all()


@pytest.mark.parametrize(("row", "message"), [
    (["S1", "scenes/a.tif", "2020-06-01", "sar", ""], "line 2, column content: 'sar'"),
    (["S1", "scenes/a.tif", "", "mask", ""], "line 2, column time: the time is empty"),
    (["S1", "scenes/a.tif", "2020-06-01", "backscatter", "HH XX"], "line 2, column band"),
    (["S 1", "scenes/a.tif", "2020-06-01", "mask", ""],
     "line 2, column scene_id: invalid ID 'S 1'"),
])
def test_scene_table_errors(tmp_path, row, message):
    _touch(tmp_path, "scenes/a.tif")
    write_csv(tmp_path / "scenes.csv", ["scene_id", "path", "time", "content", "band"], [row])
    with pytest.raises(ArchiveError) as err:
        read_scene_table(tmp_path)
    assert "scenes.csv: " + message in str(err.value)


def test_scene_index_without_table(tmp_path):
    scene_tiff(tmp_path / "scenes" / "2020" / "sar_a.tif", size=(16, 16), extra=False)
    scene_netcdf_mask(tmp_path / "scenes" / "m1.nc")
    (tmp_path / "scenes" / "readme.txt").write_text("not a raster")
    table = read_scene_table(tmp_path)
    assert list(table["scene_id"]) == ["sar_a", "m1"]
    assert list(table["path"]) == ["scenes/2020/sar_a.tif", "scenes/m1.nc"]
    assert list(table["content"]) == ["backscatter", "mask"]
    assert table["band"].iloc[0] == "HH HV" and pd.isna(table["band"].iloc[1])
    assert table["time"].iloc[0] == pd.Timestamp("2020-06-01T06:30")


def test_scene_index_errors_name_the_file(tmp_path):
    scene_tiff(tmp_path / "scenes" / "x.tif", size=(16, 16), extra=False, time="")
    with pytest.raises(ArchiveError, match=r"scenes/x\.tif: attribute time_coverage_start"):
        read_scene_table(tmp_path)


def test_no_scenes_at_all(tmp_path):
    assert read_scene_table(tmp_path).empty
