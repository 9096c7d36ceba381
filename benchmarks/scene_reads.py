"""Target 1: windowed scene reads cost what the circle needs, not what the file holds.

Writes the same mask pattern as a small and a large scene (the buoy and its 15 km
circle at the same place relative to the scene centre), in three layouts: tiled
GeoTIFF (the synthesizer's writer), chunked CF NetCDF (the synthesizer's writer) and a
strip-organised GeoTIFF. Times the radar stage's per-(scene, buoy) work (open the
scene, find the circle's window, read it, count the fractions for every radius) with
calls interleaved, and counts the bytes read through the file API (/proc/self/io
rchar) against the compressed bytes of the tiles or chunks the circle touches.
"""

from __future__ import annotations

import numpy as np

from benchmarks._common import Result, interleaved_medians, rchar, say

RES_M = 50.0
RADII_M = np.array([2000.0, 4000.0, 8000.0, 15000.0])
CRS = "EPSG:3413"


def _pattern(px: int, seed: int = 5) -> np.ndarray:
    """A floe-and-lead mask (0 water, 1 ice)."""
    rng = np.random.default_rng(seed)
    cells = -(-px // 16)
    coarse = rng.random((cells, cells)) < 0.12
    mask = np.repeat(np.repeat(coarse, 16, 0), 16, 1)[:px, :px]
    fine = rng.integers(0, 33, (px, px), dtype=np.uint8) == 0  # 3 % scattered water
    return np.where(mask | fine, 0, 1).astype(np.uint8)


def write_tiled(path, px: int) -> None:
    """A tiled GeoTIFF mask of ``px`` x ``px`` (the synthesizer's writer)."""
    from floeheat.synth.writers import write_geotiff

    tags = {"time_coverage_start": "2020-06-01T00:00:00Z", "content": "mask"}
    write_geotiff(path, [_pattern(px)], CRS, -px * RES_M / 2, px * RES_M / 2, RES_M,
                  ["ice_water_mask"], tags, nodata=255)


def peak_rss_of_one(path) -> float:
    """Peak resident memory [MB] of a fresh process doing one (scene, buoy)."""
    import subprocess
    import sys

    # VmHWM (not ru_maxrss, which keeps the parent's peak across fork and exec)
    code = ("import pathlib; from benchmarks.scene_reads import _one; "
            f"_one({str(path)!r}); "
            "print([ln for ln in pathlib.Path('/proc/self/status').read_text().splitlines()"
            " if ln.startswith('VmHWM')][0].split()[1])")
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True,
                         text=True)
    return int(out.stdout.split()[-1]) / 1024.0


def _write(scratch, px: int, pattern: np.ndarray) -> dict:
    import rasterio
    from affine import Affine

    from floeheat.synth.writers import cf_grid_mapping, write_geotiff, write_netcdf

    off = (pattern.shape[0] - px) // 2
    mask = np.ascontiguousarray(pattern[off:off + px, off:off + px])
    x0, y0 = -px * RES_M / 2, px * RES_M / 2
    paths = {"tiled GeoTIFF": scratch / f"tiled_{px}.tif",
             "chunked NetCDF": scratch / f"chunked_{px}.nc",
             "strip GeoTIFF": scratch / f"strip_{px}.tif"}
    tags = {"time_coverage_start": "2020-06-01T00:00:00Z", "content": "mask"}
    write_geotiff(paths["tiled GeoTIFF"], [mask], CRS, x0, y0, RES_M, ["ice_water_mask"],
                  tags, nodata=255)
    xc = x0 + RES_M * (np.arange(px) + 0.5)
    yc = y0 - RES_M * (np.arange(px) + 0.5)
    write_netcdf(paths["chunked NetCDF"], {"y": px, "x": px}, [
        ("x", ("x",), xc, {"standard_name": "projection_x_coordinate", "units": "m"}),
        ("y", ("y",), yc, {"standard_name": "projection_y_coordinate", "units": "m"}),
        ("crs", (), np.int32(0), cf_grid_mapping(CRS), {"dtype": "i4"}),
        ("ice_water_mask", ("y", "x"), mask,
         {"grid_mapping": "crs", "flag_values": np.array([0, 1, 255], np.uint8),
          "flag_meanings": "open_water sea_ice no_data"},
         {"dtype": "u1", "chunks": (min(512, px), min(512, px))}),
    ], {"Conventions": "CF-1.8", "content": "mask",
        "time_coverage_start": "2020-06-01T00:00:00Z"})
    with rasterio.open(paths["strip GeoTIFF"], "w", driver="GTiff", width=px, height=px,
                       count=1, dtype="uint8", crs=CRS,
                       transform=Affine(RES_M, 0, x0, 0, -RES_M, y0), tiled=False,
                       compress="deflate", nodata=255) as dst:
        dst.write(mask, 1)
    return paths


def _buoy():
    """A buoy 3 km east and 2 km north of the scene centre (same for every size)."""
    return 3000.0, 2000.0


def _one(path):
    """The radar stage's work for one (scene, buoy): open, window, read, count."""
    from floeheat import openwater
    from floeheat.io.scenes import open_scene

    x, y = _buoy()
    with open_scene(path, "mask") as sc:
        radii = openwater.projected_radius(RADII_M, sc.crs, -45.0, 85.0)
        window = openwater.circle_window(sc.transform, sc.shape, x, y, float(radii.max()))
        pixels = sc.read_window(*window)
        stats = openwater.circle_fractions(pixels, window[0].start, window[1].start,
                                           sc.transform, sc.shape, x, y, radii)
    return stats


def _touched_bytes(path, px: int) -> tuple[int, int, int]:
    """Compressed bytes of the blocks (tiles, strips or chunks) the largest circle
    touches; also (blocks touched, blocks in the file)."""
    from floeheat import openwater

    x, y = _buoy()
    r = float(openwater.projected_radius(RADII_M[-1:], CRS, -45.0, 85.0)[0])
    x0, y0 = -px * RES_M / 2, px * RES_M / 2
    rows = np.arange(px)
    dy = (y0 - RES_M * (rows + 0.5)) - y
    inside = np.abs(dy) <= r
    h = np.sqrt(np.maximum(r * r - dy * dy, 0.0))
    lo = np.ceil((x - h - x0) / RES_M - 0.5).astype(int)
    hi = np.floor((x + h - x0) / RES_M - 0.5).astype(int)
    if path.suffix == ".tif":
        import rasterio

        with rasterio.open(path) as src:
            bh, bw = src.block_shapes[0]
            nby, nbx = -(-px // bh), -(-px // bw)
            blocks = {(i // bh, j // bw) for i in rows[inside]
                      for j in range(max(lo[i], 0) // bw * bw, min(hi[i], px - 1) + 1, bw)}
            blocks |= {(i // bh, min(hi[i], px - 1) // bw) for i in rows[inside]}
            total = sum(src.block_size(1, bi, bj) for bi, bj in blocks)
        return total, len(blocks), nby * nbx
    import h5py

    with h5py.File(path, "r") as f:
        ds = f["ice_water_mask"]
        bh, bw = ds.chunks
        blocks = {(i // bh, j // bw) for i in rows[inside]
                  for j in range(max(lo[i], 0) // bw * bw, min(hi[i], px - 1) + 1, bw)}
        blocks |= {(i // bh, min(hi[i], px - 1) // bw) for i in rows[inside]}
        total = sum(ds.id.get_chunk_info_by_coord((bi * bh, bj * bw)).size
                    for bi, bj in blocks)
        n_all = ds.id.get_num_chunks()
    return total, len(blocks), n_all


def run(scratch, scale: str) -> Result:
    scratch.mkdir(parents=True, exist_ok=True)
    small, large = (2000, 10000) if scale == "full" else (1000, 4000)
    repeat = 15 if scale == "full" else 9
    say(f"target 1: writing {small} and {large} px scenes")
    pattern = _pattern(large)  # the small scene is its centre: the same circle
    files = {px: _write(scratch, px, pattern) for px in (small, large)}
    notes = []
    ratios = {}
    bytes_ok = True
    for layout in files[small]:
        a, b = files[small][layout], files[large][layout]
        _one(a), _one(b)  # warm the page cache and imports
        fa, fb = _one(a).f_ow, _one(b).f_ow
        if not np.allclose(fa, fb, equal_nan=True):
            notes.append(f"{layout}: f_ow differs between sizes ({fa} vs {fb})")
        t = interleaved_medians({"small": lambda a=a: _one(a), "large": lambda b=b: _one(b)},
                                repeat)
        from floeheat.io.scenes import open_scene

        r0 = rchar()
        _one(b)
        read = rchar() - r0
        r0 = rchar()
        open_scene(b, "mask").close()
        at_open = rchar() - r0
        touched, n_touched, n_all = _touched_bytes(b, large)
        ratios[layout] = t["large"] / t["small"]
        if layout != "strip GeoTIFF":
            bytes_ok &= read <= 2 * touched
        notes.append(f"{layout:15s}: {large} px {t['large'] * 1e3:7.1f} ms / {small} px "
                     f"{t['small'] * 1e3:7.1f} ms = {ratios[layout]:.2f}x; bytes read "
                     f"{read / 1e6:.2f} MB / touched blocks {touched / 1e6:.2f} MB "
                     f"({n_touched} of {n_all} blocks) = {read / max(touched, 1):.2f}x "
                     f"(target <= 2: {'holds' if read <= 2 * touched else 'DOES NOT HOLD'}); "
                     f"of which {at_open / 1e6:.3f} MB on opening the file")
    notes.append("strip GeoTIFF: each strip spans the full scene width, so a window "
                 "decompresses whole rows: its cost grows with the scene's width")
    worst = max(ratios["tiled GeoTIFF"], ratios["chunked NetCDF"])
    sizes = (f"{small} x {small} and {large} x {large} px uint8 masks, {RES_M:g} m pixels, "
             f"radii {', '.join(f'{r / 1e3:g}' for r in RADII_M)} km, median of {repeat}")
    return Result(1, "Windowed scene reads (ratio: worst of tiled GeoTIFF and chunked "
                  "NetCDF; second condition: bytes read <= 2x touched blocks)", worst, 1.5,
                  sizes, notes, also=bytes_ok)
