"""The demo synthesizer: a physical forward model that writes a format-v1 archive.

``write_archive(outdir, seed, size, hemisphere)`` writes the archive under ``outdir``
and the truth it was made from in the sibling folder ``<outdir>.truth/`` (never inside
the archive). The same seed gives the same bytes.

What is written
---------------
- ``deployments.csv``, ``scenes.csv``.
- ``profiles/``: CF DSG ``featureType = profile`` NetCDF in the orthogonal, incomplete
  and contiguous ragged layouts, and CSV; one deployment carries conductivity
  (``sea_water_electrical_conductivity``, S m-1) instead of practical salinity.
- ``icemass/``: thermistor strings as NetCDF (``time`` x ``sensor``; temperature with
  ``role = "string_temperature"``; ``depth`` positive down from the ``reference``;
  optional ``ice_bottom_depth`` and ``heated_temperature_rise``) or CSV (``T_<cm>``).
- ``shortwave/``: hourly interval means ``surface_downwelling_shortwave_flux_in_air``
  (W m-2) with ``time_bnds`` in monthly files, one month as accumulated
  ``integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air`` (J m-2); one
  deployment has a CSV ``time, sw_down_W_m2`` (interval ending at ``time``).
- ``concentration/``: daily ``sea_ice_area_fraction`` on 25 km cells of the working CRS,
  monthly files alternating units ``1`` (float, land 1.2 out of range, NaN missing) and
  ``%`` (uint8, ``flag_values`` 254 land, 255 missing).
- ``bathymetry/``: ``sea_floor_depth_below_geoid`` on the same grid.
- ``scenes/masks/``: uint8 ice/water masks (0 water, 1 ice, 255 no data) as tiled,
  deflate-compressed GeoTIFF or CF NetCDF (``x``/``y`` in metres, ``crs`` grid mapping,
  variable ``ice_water_mask`` with ``flag_values`` and ``role = "ice_water_mask"``).
- ``scenes/backscatter/``: calibrated sigma0 of some of the same acquisitions.

Backscatter band convention
---------------------------
GeoTIFF: band descriptions name each band, in this order for two-polarisation files:
``HH``, ``HV``, ``incidence_angle`` (degree), ``noise_equivalent_sigma0_HH``,
``noise_equivalent_sigma0_HV``; units per band (``dB`` or ``degree``) are set as band
units; NaN is no data. A single-polarisation file holds ``<pol>``, ``incidence_angle``,
``noise_equivalent_sigma0_<pol>``, and its scenes.csv row gives ``band`` and the
``acquisition_id`` shared with the other polarisation. NetCDF: variables of the same
names, sigma0 with ``standard_name =
surface_backwards_scattering_coefficient_of_radar_wave``, ``units = "dB"``,
``role = "sigma0"`` and ``polarisation``; ``incidence_angle`` with
``role = "incidence_angle"``; noise floors with ``role = "noise_equivalent_sigma0"`` and
``polarisation``. Every scene file also carries ``time_coverage_start`` and
``content`` (GeoTIFF tags or global attributes) so that it can be indexed without
scenes.csv.

Truth (``<outdir>.truth/``)
---------------------------
``truth.json``: scenario meta, conventions (truth radius, bulk law, heat-content rule)
and per deployment the prescribed transmittance, window and season terms in MJ m-2;
``truth_<deployment_id>.nc``: noise-free time series, scene-time circle fractions,
profiles and string temperatures. See :mod:`floeheat.synth.archive`.
"""

from __future__ import annotations

from .archive import truth_dir_for, write_archive
from .sizes import SIZES, SizeSpec

__all__ = ["SIZES", "SizeSpec", "write_archive", "truth_dir_for"]
