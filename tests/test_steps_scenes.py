"""floeheat.steps.scenes.match_track: the reach prefilter changes no match."""

import numpy as np
import pandas as pd
from pyproj import CRS

from floeheat.steps.scenes import FOOTPRINT_COLUMNS, match_track
from floeheat.track import to_working_crs


def _footprints(n: int, seed: int = 0) -> pd.DataFrame:
    """Scenes of 400 x 400 px of 100 m spread over 1,500 km around the track (EPSG:3413)."""
    rng = np.random.default_rng(seed)
    wkt = CRS.from_epsg(3413).to_wkt()
    x0, y0 = to_working_crs(np.array([84.0]), np.array([-30.0]), "EPSG:3413")
    rows = []
    for k in range(n):
        # a third of the scenes straddle the track, the others lie anywhere in the basin
        spread = 30e3 if k % 3 == 0 else 750e3
        cx, cy = x0[0] + rng.uniform(-spread, spread), y0[0] + rng.uniform(-spread, spread)
        t = pd.Timestamp("2020-06-01") + pd.Timedelta(hours=int(rng.integers(0, 240)))
        rows.append((f"s{k:03d}", f"scenes/s{k:03d}.tif", t.isoformat() + "Z", "mask", "",
                     wkt, 100.0, 0.0, cx - 20e3, 0.0, -100.0, cy + 20e3, 400, 400))
    return pd.DataFrame(rows, columns=list(FOOTPRINT_COLUMNS))


def test_scenes_out_of_reach_are_left_out_exactly_as_the_full_coverage_would():
    times = pd.date_range("2020-06-01", periods=241, freq="h")
    track = pd.DataFrame({"time": times, "latitude": np.linspace(84.0, 84.1, 241),
                          "longitude": np.linspace(-30.0, -29.5, 241)})
    fp = _footprints(90)
    radii = [2000.0, 4000.0, 8000.0, 15000.0]
    fast = match_track(fp, track, "d1", radii_m=radii, coverage_threshold=0.1)
    # threshold 0 computes the coverage of every scene of the period (no prefilter)
    full = match_track(fp, track, "d1", radii_m=radii, coverage_threshold=0.0)
    full = full[full["footprint_coverage"] >= 0.1]
    assert len(fast) > 0 and fast["scene_id"].nunique() < len(fp)
    pd.testing.assert_frame_equal(fast.reset_index(drop=True), full.reset_index(drop=True))


class _Handle:
    """A stand-in for an open scene that records its closing."""

    def __init__(self, log: list, name: str):
        self.log, self.name = log, name
        log.append(("open", name))

    def close(self):
        self.log.append(("close", self.name))


def test_shared_scenes_open_each_scene_once_and_close_it_after_its_last_use():
    from collections import Counter

    from floeheat.steps.scenes import SharedScenes

    log: list = []
    shared = SharedScenes(Counter({"a": 3, "b": 1}))
    for _ in range(3):
        with shared.scene("a", lambda: _Handle(log, "a")):
            pass
    with shared.scene("b", lambda: _Handle(log, "b")):
        pass
    assert log == [("open", "a"), ("close", "a"), ("open", "b"), ("close", "b")]
    assert shared.n_opened == 2
    # a scene nobody counted (a deployment run on its own) is closed at once
    with shared.scene("c", lambda: _Handle(log, "c")):
        pass
    assert log[-1] == ("close", "c")


def test_shared_scenes_close_a_failed_handle_and_keep_no_more_than_max_open():
    from collections import Counter

    import pytest

    from floeheat.steps.scenes import SharedScenes

    log: list = []
    shared = SharedScenes(Counter({"a": 2, "b": 2, "c": 2}), max_open=2)
    for key in "abc":
        with shared.scene(key, lambda key=key: _Handle(log, key)):
            pass
    # a and b are kept for their second use; c finds no room and is closed
    assert log[-2:] == [("open", "c"), ("close", "c")]
    with pytest.raises(RuntimeError), shared.scene("a", lambda: _Handle(log, "a2")):
        raise RuntimeError("a damaged window")
    assert log[-1] == ("close", "a")      # the kept handle, closed on the failure
    shared.close()                         # b: counted use never made
    assert log[-1] == ("close", "b") and shared.n_opened == 3
