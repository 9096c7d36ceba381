"""The uncertainty ensemble in the workflow run on the tiny archive: intervals from the
members in seasonal.csv, the member dimension in budget.zarr, attribution table and
figure."""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr


def test_seasonal_intervals_come_from_the_ensemble(tiny_run):
    seasonal = pd.read_csv(tiny_run / "tables" / "seasonal.csv")
    done = seasonal[seasonal["complete"].astype(bool)]
    assert len(done) > 0
    assert np.isfinite(done[["t_ice_lo", "t_ice_hi"]].to_numpy()).all()
    assert (done["t_ice_lo"] <= done["t_ice"]).all() and (done["t_ice"] <= done["t_ice_hi"]).all()
    for dep in sorted(done["deployment_id"].unique()):
        ds = xr.open_zarr(tiny_run / "deployments" / dep / "budget.zarr")
        assert ds.sizes["member"] == 200  # the default size
        assert "Monte Carlo" in ds["t_season_lo"].attrs["method"]
        rows = done[done["deployment_id"] == dep]
        for row in rows.itertuples():
            t_m = ds["t_season_member"].sel(source=row.source, radius=row.radius_m).values
            assert row.t_ice_lo == np.float64(f"{np.nanpercentile(t_m, 5):.10g}")
        share = ds["variance_share"].sum("factor").values
        ok = np.isfinite(ds["t_season"].values)
        np.testing.assert_allclose(share[ok], 1.0)


def test_attribution_table_and_figure(tiny_run):
    table = pd.read_csv(tiny_run / "tables" / "attribution.csv")
    assert len(table) > 0
    shares = table[[c for c in table.columns if c.startswith("share_")]].fillna(0.0)
    np.testing.assert_allclose(shares.sum(axis=1), 1.0, atol=1e-9)
    assert (tiny_run / "figures" / "basin_attribution.png").is_file()
