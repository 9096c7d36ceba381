"""Named archive sizes for the synthesizer, and the :class:`SizeSpec` that defines one.

A size fixes how much is written (deployments, arrays, days, scene pixels), never the
physics. Benchmarks may build their own ``SizeSpec`` (e.g. a 10000 px scene) and pass
it to :func:`floeheat.synth.write_archive`.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

__all__ = ["SizeSpec", "SIZES", "resolve_size"]


@dataclass(frozen=True)
class SizeSpec:
    """How large a synthetic archive is.

    Parameters
    ----------
    name : str
        Label written to the truth.
    n_arrays : int
        Number of arrays (floe clusters).
    deployments_per_array : tuple of int
        Deployments in each array, cycled over the arrays.
    record_days : float or None
        Length of the instrument records in days; None for the whole season.
    record_offset_days : float
        Days after the season start at which the records begin (``record_days`` set).
    window_margin_days : float
        When ``record_days`` is set, start/end in deployments.csv are set this many days
        inside the records; otherwise they are left empty for some deployments.
    array_spacing_m : float
        Distance between neighbouring arrays at deployment, metres.
    scene_px : int
        Side of a square radar scene, pixels.
    scene_res_m : float
        Pixel size of the scenes, metres.
    scene_every_days : float
        Mean time between scenes of one array, days.
    backscatter_count : int
        Number of acquisitions also written as calibrated backscatter.
    tile_res_m : float
        Resolution of the periodic floe-and-lead pattern, metres (at most the scene pixel).
    tile_n : int
        Side of the periodic pattern tile, cells.
    string_spacing_m : float
        Thermistor spacing, metres.
    string_step_h : int
        Thermistor-string sampling interval, hours.
    profile_step_h : int
        CTD profiling interval, hours.
    profile_max_dbar : float
        Deepest CTD sample, dbar.
    sw_dlat_deg, sw_dlon_deg : float
        Shortwave grid spacing, degrees.
    sw_margin_deg : float
        Shortwave grid margin around the tracks, degrees of latitude.
    pm_margin_m : float
        Passive-microwave grid margin around the tracks, metres.

    Examples
    --------
    >>> SIZES["tiny"].n_deployments
    3
    >>> SIZES["tiny"].with_scene_px(10000).scene_px
    10000
    """

    name: str
    n_arrays: int
    deployments_per_array: tuple[int, ...]
    record_days: float | None
    record_offset_days: float
    window_margin_days: float
    array_spacing_m: float
    scene_px: int
    scene_res_m: float
    scene_every_days: float
    backscatter_count: int
    tile_res_m: float
    tile_n: int
    string_spacing_m: float
    string_step_h: int
    profile_step_h: int
    profile_max_dbar: float
    sw_dlat_deg: float
    sw_dlon_deg: float
    sw_margin_deg: float
    pm_margin_m: float

    @property
    def n_deployments(self) -> int:
        """Total number of deployments."""
        per = self.deployments_per_array
        return sum(per[i % len(per)] for i in range(self.n_arrays))

    def with_scene_px(self, scene_px: int) -> SizeSpec:
        """Return a copy with another scene size in pixels (for benchmarks)."""
        return replace(self, scene_px=int(scene_px), name=f"{self.name}-px{int(scene_px)}")


SIZES: dict[str, SizeSpec] = {
    "tiny": SizeSpec(
        name="tiny", n_arrays=2, deployments_per_array=(2, 1), record_days=26.0,
        record_offset_days=54.0, window_margin_days=2.0, array_spacing_m=60_000.0,
        scene_px=200, scene_res_m=200.0, scene_every_days=1.0, backscatter_count=2,
        tile_res_m=50.0, tile_n=1024, string_spacing_m=0.02, string_step_h=1,
        profile_step_h=3, profile_max_dbar=120.0, sw_dlat_deg=0.25, sw_dlon_deg=1.0,
        sw_margin_deg=0.5, pm_margin_m=150_000.0,
    ),
    "demo": SizeSpec(
        name="demo", n_arrays=3, deployments_per_array=(3, 2, 2), record_days=None,
        record_offset_days=0.0, window_margin_days=0.0, array_spacing_m=55_000.0,
        scene_px=2000, scene_res_m=80.0, scene_every_days=2.0, backscatter_count=4,
        tile_res_m=80.0, tile_n=1024, string_spacing_m=0.02, string_step_h=1,
        profile_step_h=4, profile_max_dbar=150.0, sw_dlat_deg=0.5, sw_dlon_deg=2.0,
        sw_margin_deg=1.0, pm_margin_m=300_000.0,
    ),
    "basin": SizeSpec(
        name="basin", n_arrays=60, deployments_per_array=(4, 3, 5), record_days=None,
        record_offset_days=0.0, window_margin_days=0.0, array_spacing_m=90_000.0,
        scene_px=6000, scene_res_m=50.0, scene_every_days=2.0, backscatter_count=20,
        tile_res_m=50.0, tile_n=2048, string_spacing_m=0.02, string_step_h=1,
        profile_step_h=4, profile_max_dbar=150.0, sw_dlat_deg=0.5, sw_dlon_deg=2.0,
        sw_margin_deg=1.0, pm_margin_m=300_000.0,
    ),
}


def resolve_size(size: str | SizeSpec) -> SizeSpec:
    """Return the :class:`SizeSpec` for a name or pass a spec through.

    Examples
    --------
    >>> resolve_size("demo").n_arrays
    3
    """
    if isinstance(size, SizeSpec):
        return size
    try:
        return SIZES[size]
    except KeyError:
        raise ValueError(f"unknown size {size!r}; choose one of {sorted(SIZES)}") from None
