"""Thermistor-string readings from the noise-free ice state.

The string hangs from about 1 m above its reference (the initial snow or ice surface)
through snow and ice into the ocean. Sensor depths are positive down from the
reference, which moves with the ice. True temperatures: air above the snow, linear
through the snow and through the ice (from the ice-surface temperature to the in-situ
freezing point at the base), and the mixed-layer temperature below the base. Readings
add sensor noise, one dead sensor and a few spikes. A heating cycle response is air >
snow > ice > water (scenario values, common practice, no source).
"""

from __future__ import annotations

import numpy as np

from .ocean import OceanIce
from .scenario import Deployment

__all__ = ["sensor_depths", "string_truth", "string_readings", "heated_rise"]


def sensor_depths(dep: Deployment, spacing_m: float) -> np.ndarray:
    """Sensor depths (m, positive down from the reference), 1 m of air to ~1.5 m of ocean.

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> d = SimpleNamespace(snow_m=0.2, ice_m=1.6, reference="initial snow surface")
    >>> z = sensor_depths(d, 0.05)
    >>> float(z[0]), bool(z[-1] > 0.2 + 1.6 + 1.4)
    (-1.0, True)
    """
    top = -1.0 if dep.reference == "initial snow surface" else -1.0 - round(dep.snow_m, 1)
    bottom = top + 1.0 + dep.snow_m + dep.ice_m + 1.6
    n = int(np.floor((bottom - top) / spacing_m)) + 1
    return np.round(top + spacing_m * np.arange(n), 4)


def string_truth(oi: OceanIce, node_idx, depths_m) -> np.ndarray:
    """Noise-free string temperatures (time, sensor), degC, at the given nodes."""
    k = np.asarray(node_idx)
    z = np.asarray(depths_m)[None, :]
    z_st = oi.z_snow_top_m[k][:, None]
    z_it = oi.z_ice_top_m[k][:, None]
    z_b = oi.z_bottom_m[k][:, None]
    t_air = oi.t_air_degC[k][:, None]
    t_top = oi.t_top_degC[k][:, None]
    t_fb = oi.t_freeze_degC[k][:, None]
    t_ml = oi.t_ml_degC[k][:, None]
    t_snow_top = np.minimum(t_air, 0.0)
    snow_frac = np.clip((z - z_st) / np.maximum(z_it - z_st, 1e-6), 0, 1)
    t_snow = t_snow_top + (t_top - t_snow_top) * snow_frac
    ice_frac = np.clip((z - z_it) / (z_b - z_it), 0, 1)
    t_ice = t_top + (t_fb - t_top) * ice_frac
    out = np.where(z < z_st, t_air, np.where(z < z_it, t_snow, np.where(z <= z_b, t_ice, t_ml)))
    return out


def string_readings(rng: np.random.Generator, truth: np.ndarray, dead: str = "constant"
                    ) -> tuple[np.ndarray, int]:
    """Add noise (0.02 K), one dead sensor and spikes; return readings and the dead index."""
    obs = truth + rng.normal(0.0, 0.02, truth.shape)
    n_t, n_s = truth.shape
    dead_idx = int(rng.integers(n_s // 4, 3 * n_s // 4))
    obs[:, dead_idx] = -0.0625 if dead == "constant" else np.nan
    n_spk = max(3, truth.size // 20000)
    ti = rng.integers(0, n_t, n_spk)
    si = rng.integers(0, n_s, n_spk)
    obs[ti, si] += rng.choice([-1, 1], n_spk) * rng.uniform(5, 25, n_spk)
    return np.round(obs, 4), dead_idx


def heated_rise(rng: np.random.Generator, oi: OceanIce, node_idx, depths_m) -> np.ndarray:
    """Temperature rise after a heating pulse (K), once a day, NaN at other times."""
    k = np.asarray(node_idx)
    z = np.asarray(depths_m)[None, :]
    z_st = oi.z_snow_top_m[k][:, None]
    z_it = oi.z_ice_top_m[k][:, None]
    z_b = oi.z_bottom_m[k][:, None]
    rise = np.where(z < z_st, 2.6, np.where(z < z_it, 1.8, np.where(z <= z_b, 0.8, 0.3)))
    rise = rise + rng.normal(0, 0.05, rise.shape)
    hour = (oi.node_time[k] - oi.node_time[k].astype("datetime64[D]")) / np.timedelta64(1, "h")
    rise[hour.astype(int) % 24 != 0, :] = np.nan
    return np.round(rise, 3)
