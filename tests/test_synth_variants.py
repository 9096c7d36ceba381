"""Tests of the synthesizer's scenario variants (shelf bank geometry)."""

from __future__ import annotations

import numpy as np
import pytest

from floeheat.synth import gridded, write_archive


def _grid(depth=3500.0):
    x = np.arange(-200_000.0, 200_001.0, 5000.0)
    y = np.arange(200_000.0, -200_001.0, -5000.0)
    z = np.full((y.size, x.size), depth)
    z[0, 0] = np.nan  # a cell without data stays without data
    return gridded.PMGrid(day_start=np.array([], "datetime64[ns]"), x=x, y=y,
                          conc=np.zeros((0, y.size, x.size)), land=np.isnan(z), depth_m=z)


def test_bank_crosses_the_isobath_at_its_stated_radius():
    pm = gridded.with_shelf(_grid(), (0.0, 0.0))
    X, Y = np.meshgrid(pm.x, pm.y)
    r = np.hypot(X, Y)
    r_iso = gridded.shelf_isobath_radius_m(1000.0)
    # linear slope: 150 m at 20 km, 3600 m at 100 km (scenario parameters), so
    # 1000 m lies at 20 km + 80 km * 850 / 3450 = 39.71 km
    assert r_iso == pytest.approx(20_000.0 + 80_000.0 * 850.0 / 3450.0)
    assert np.all(pm.depth_m[r < r_iso - 100.0] < 1000.0)
    assert np.all(pm.depth_m[(r > r_iso + 100.0) & np.isfinite(pm.depth_m)] > 1000.0)
    assert np.nanmin(pm.depth_m) == gridded.SHELF_DEPTH_M
    assert np.isnan(pm.depth_m[0, 0])


def test_bank_never_deepens_the_basin():
    shallow = _grid(depth=500.0)
    pm = gridded.with_shelf(shallow, (0.0, 0.0))
    assert np.nanmax(pm.depth_m) == 500.0


def test_unknown_variant_is_refused(tmp_path):
    with pytest.raises(ValueError, match="variant"):
        write_archive(tmp_path / "a", seed=1, size="tiny", variant="fjord")
