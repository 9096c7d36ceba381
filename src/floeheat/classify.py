"""Ice/water masks from calibrated radar backscatter.

A scene's sigma0 bands (HH, HV or both, in dB or linear) become a uint8 mask in the
package's coding (0 open water, 1 ice, 255 no data) in four steps:

1. **Preparation, per pixel.** Where a noise-equivalent sigma0 is given it can be
   subtracted in linear units (``subtract_noise``); an optional speckle filter (Lee-type
   from :func:`scipy.ndimage.uniform_filter`, or a median) runs in linear units; values
   go to dB, floored at ``db_floor``; brightness is normalised across the swath by a
   linear dB-per-degree slope in the incidence angle, fitted per scene and band
   (least squares on the subsample) or configured (``incidence_slope_dB_per_deg``).
2. **Global statistics from a bounded subsample.** Histogram methods need the whole
   scene's distribution, so they are fitted on at most ``sample_max_pixels`` pixels:
   the whole scene when it is that small, otherwise up to ``sample_max_pixels //
   sample_tile_px**2`` contiguous square tiles of ``sample_tile_px`` pixels on a
   regular grid over the scene (contiguous so that neighbourhood statistics mean the
   same on the sample as on the scene). Only those tiles are computed.
3. **Chunk-wise application.** The fitted thresholds or class models are applied
   block by block with :func:`dask.array.map_overlap`; the overlap covers every
   neighbourhood operation, so a scene of any size runs in bounded memory and the
   result does not depend on the chunking. Beyond the scene's edge pixels count as no
   data (not mirrored).
4. **Clean-up.** Water specks of at most ``speck_max_px`` pixels become ice
   (:func:`skimage.morphology.remove_small_objects`, 8-connected; inside the overlap).
   No data stays no data: a pixel is 255 when any sigma0 band (or the incidence angle,
   when given) is NaN.

Methods
-------
``"multiotsu"``
    Two-band multi-Otsu (:func:`skimage.filters.threshold_multiotsu`, three classes per
    band) on the normalised, speckle-filtered dB values. Water is the darkest HV class;
    when the water so found is brighter than the ice in HH (wind-roughened open water)
    the brightest HH class is added, otherwise the darkest HH class must agree. With a
    single band, water is its darkest class. Optional binary opening/closing
    (``morphology_radius_px``, :mod:`skimage.morphology`).
``"contextual"`` (default)
    A two-class Gaussian mixture in the normalised dB bands, class means linear in the
    incidence angle (so each class gets its own residual dB-per-degree slope), fitted
    by expectation-maximisation on the subsample, initialised from the multi-Otsu
    classes. The prior of each pixel is not one number for the scene but
    ``(1 - w) * pi + w * c``, where ``c`` is the mean water posterior of its valid
    neighbours within ``context_radius_px`` (itself excluded, a normalised convolution
    with :func:`scipy.ndimage.convolve`), iterated ``context_iterations`` times: leads
    come in networks, so a pixel next to water is more likely water. A pixel is water
    where its posterior exceeds a threshold chosen on the subsample so that the number
    of water pixels equals the sum of the posteriors (``decision="count"``), which
    keeps the open-water fraction unbiased; ``decision="map"`` uses 0.5. With
    ``incidence_model="scaled"`` each class's feature is divided by ``exp(beta dth)``
    instead (mean and spread scale together), with its Jacobian in the likelihood.

Choice by measured accuracy
---------------------------
Measured by ``benchmarks/classify_accuracy.py`` on the backscatter acquisitions of
synthetic archives: two-band HH/HV, 4-look speckle, calm and wind-roughened water, two
acquisitions per seed. The settings were first tuned on seeds 1-5 of the size "tiny"
(200 x 200 pixels of 200 m over a floe pattern of 50 m, so most leads are narrower than
a pixel and appear as scattered specks); the accuracy targets are measured at the demo's
resolution, ``ACCURACY_SIZE`` of the benchmark (400 x 400 pixels of 80 m over an 80 m
pattern: leads of one or two pixels that run on). Means (and the worst acquisition) over
the 26 acquisitions of seeds 1-3, 11-13 and 21-25: water-class intersection-over-union
and F1 with the true mask, and the 15 km open-water fraction error over the 33 buoy
circles the scenes cover:

==============================================  ============  ============  ========  =======
method (80 m pixels)                             IoU (worst)   F1 (worst)    |df_ow|   bias
==============================================  ============  ============  ========  =======
multiotsu (Lee 3x3)                              0.665 (0.56)  0.797 (0.72)  0.0180   +0.0053
contextual (Lee 3x3)                             0.598 (0.53)  0.747 (0.69)  0.0493   +0.0493
contextual, no context prior                     0.718 (0.53)  0.833 (0.69)  0.0181   -0.0181
contextual, MAP decision                         0.864 (0.83)  0.927 (0.90)  0.0029   -0.0027
contextual, no speck removal (former default)    0.852 (0.79)  0.920 (0.88)  0.0035   +0.0033
contextual, scaled incidence                     0.861 (0.81)  0.925 (0.90)  0.0018   -0.0016
contextual, scaled incidence, no speck removal   0.850 (0.79)  0.919 (0.88)  0.0012   +0.0003
contextual, the default                          0.868 (0.83)  0.929 (0.91)  0.0022   +0.0011
==============================================  ============  ============  ========  =======

The default meets the targets (IoU >= 0.8 and F1 >= 0.9) on every one of the 26
acquisitions; removing the isolated water pixels (``speck_max_px = 1``) is what lifts
the worst ones, whose specks are speckle. On the "tiny" size the same default loses
(IoU 0.698, 15 km fraction bias -0.0105 over 37 circles) because there a third of the
true water pixels are isolated; with ``speck_max_px = 0`` it gives IoU 0.775 (worst
0.69), F1 0.873, and a 15 km fraction within 0.0033 on average (bias -0.0001), which is
the setting for products whose leads are narrower than a pixel. There no local
classifier reaches the targets: a naive-Bayes classifier with per-band histograms per
incidence bin fitted on the truth itself, with the same neighbourhood prior, reaches a
mean IoU of 0.79 (worst 0.69), and a logistic model of the truth-fitted likelihood
ratios in a 7 x 7 neighbourhood 0.73-0.84.

Earlier measurements on "tiny" (seeds 1-5): Gaussian class densities (instead of
Student's t, 10 degrees of freedom) gave IoU 0.69 and a bias of +0.015; dB features
(instead of the cube root) a bias of +0.07; gamma class densities in linear intensity
(log-linear in the angle) an IoU of 0.64, the noise floor making the dark classes far
from gamma. Any speckle filter or opening blurs the one-pixel leads and costs more than
the variance it removes, so the defaults use none; the neighbourhood prior is the
spatial smoothing that keeps thin leads. Noise subtraction hurts here because the
synthesizer's noise is zero-mean (see ``subtract_noise``).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import dask.array as da
import numpy as np
from scipy import ndimage
from skimage import filters, morphology

from floeheat.constants import MASK_CODES

__all__ = ["ClassifySettings", "classify_scene", "fit_scene_model", "SceneModel",
           "lee_filter", "to_db", "fit_incidence_slope", "sample_windows",
           "water_iou_f1"]

_WATER = np.uint8(MASK_CODES["water"])
_ICE = np.uint8(MASK_CODES["ice"])
_NODATA = np.uint8(MASK_CODES["nodata"])
_POLS_ORDER = ("HH", "HV", "VV", "VH")


@dataclass(frozen=True)
class ClassifySettings:
    """Settings of :func:`classify_scene`; every default says where it comes from.

    Attributes
    ----------
    method : {'contextual', 'multiotsu'}
        Separation method. Default 'contextual': chosen by measured accuracy (module
        docstring).
    feature_scale : {'cbrt', 'dB'}
        Scale of the mixture's features (contextual): the cube root of linear
        intensity (gamma speckle close to Gaussian, Wilson & Hilferty 1931) or dB.
        Default 'cbrt': measured (module docstring).
    speckle_filter : {'none', 'lee', 'median'}
        Speckle reduction before classification, in linear units. Default 'none':
        measured (module docstring).
    speckle_size_px : int
        Side of the speckle filter window [pixels], odd. Default 3: common practice,
        no source.
    looks : float
        Equivalent number of looks for the Lee filter [1]. Default 4: common practice
        for medium-resolution multi-looked products, no source.
    subtract_noise : bool
        Subtract the noise-equivalent sigma0 (linear units) where it is given. Default
        False: measured on the synthetic scenes, whose noise is zero-mean, subtraction
        imprints the noise pattern (scalloping) and lowers the water IoU (module
        docstring); set True for products whose noise floor adds power.
    db_floor : float
        Lowest dB value kept [dB]; non-positive linear values (after noise subtraction
        or from noise) take it. Default -40 dB: common practice, no source (below any
        sensor's noise floor).
    incidence_slope_dB_per_deg : float or None
        Brightness slope across the swath [dB per degree]; None fits it per scene and
        band (least squares on the subsample). Default None: per-scene fit.
    incidence_ref_deg : float
        Incidence angle the brightness is normalised to [degrees]. Default 30: common
        practice, no source (mid-swath).
    sample_max_pixels : int
        Largest subsample for the global fits [pixels]. Default 2**20: common practice,
        no source (tens of MB).
    sample_tile_px : int
        Side of a subsample tile [pixels]. Default 256: common practice, no source.
    context_radius_px : int
        Radius of the neighbourhood prior [pixels] (contextual). Default 2: tuned on
        synthetic seeds 1-5, no source.
    context_weight : float
        Weight w of the neighbourhood in the prior [1] (contextual). Default 1: tuned
        on synthetic seeds 1-5, no source.
    context_iterations : int
        Passes of the neighbourhood prior [1] (contextual). Default 4: tuned on
        synthetic seeds 1-5, no source.
    em_iterations : int
        Expectation-maximisation passes on the subsample (contextual). Default 25:
        common practice, no source (converged on every synthetic scene tried).
    tail_dof : float or None
        Degrees of freedom of the Student's t class densities (contextual); None for
        Gaussian. Default 10: tuned on synthetic seeds 1-5 (3, 6, 10, 14, 20, 30 and
        Gaussian tried; 10 gives the smallest open-water-fraction bias), no source.
    decision : {'count', 'map'}
        Posterior threshold (contextual): 'count' preserves the expected number of
        water pixels (unbiased fraction), 'map' is 0.5. Default 'count': measured
        (lower open-water-fraction bias).
    morphology_radius_px : int
        Radius of a binary opening then closing of the water class [pixels]; 0 skips it.
        Default 0: measured (one-pixel leads vanish under any opening).
    incidence_model : {'scaled', 'additive'}
        How each class's brightness follows the incidence angle (contextual): 'scaled'
        multiplies the class's feature by ``exp(beta * dth)`` (mean and spread scale
        together, as speckle does: intensity is the class sigma0 times unit-mean noise,
        and sigma0 is linear in dB against the angle), with the Jacobian in the
        likelihood; 'additive' shifts the class mean by ``b * dth`` at a constant
        spread. Default 'scaled': measured (module docstring: unbiased 15 km fractions
        where calm water darkens across the swath).
    speck_max_px : int
        Water components of at most this many pixels (8-connected) become ice after the
        decision (:func:`skimage.morphology.remove_small_objects`); 0 keeps them.
        Default 1: measured (isolated water pixels are mostly speckle at the demo's
        resolution; set 0 where leads are narrower than a pixel, module docstring).
    chunk_px : int
        Side of the dask chunks when numpy input is processed lazily [pixels]. Default
        2048: common practice, no source.
    """

    method: str = "contextual"
    feature_scale: str = "cbrt"
    speckle_filter: str = "none"
    speckle_size_px: int = 3
    looks: float = 4.0
    subtract_noise: bool = False
    db_floor: float = -40.0
    incidence_slope_dB_per_deg: float | None = None
    incidence_ref_deg: float = 30.0
    sample_max_pixels: int = 2**20
    sample_tile_px: int = 256
    context_radius_px: int = 2
    context_weight: float = 1.0
    context_iterations: int = 4
    em_iterations: int = 25
    tail_dof: float | None = 10.0
    decision: str = "count"
    morphology_radius_px: int = 0
    incidence_model: str = "additive"
    speck_max_px: int = 1
    chunk_px: int = 2048

    def __post_init__(self):
        if self.method not in ("contextual", "multiotsu"):
            raise ValueError(f"method must be 'contextual' or 'multiotsu', not {self.method!r}")
        if self.speckle_filter not in ("none", "lee", "median"):
            raise ValueError("speckle_filter must be 'none', 'lee' or 'median'")
        if self.feature_scale not in ("cbrt", "dB"):
            raise ValueError("feature_scale must be 'cbrt' or 'dB'")
        if self.decision not in ("count", "map"):
            raise ValueError("decision must be 'count' or 'map'")
        if self.speckle_size_px < 1 or self.speckle_size_px % 2 == 0:
            raise ValueError("speckle_size_px must be a positive odd integer")
        if self.incidence_model not in ("scaled", "additive"):
            raise ValueError("incidence_model must be 'scaled' or 'additive'")
        if self.speck_max_px < 0:
            raise ValueError("speck_max_px must be 0 or more")

    def depth_px(self) -> int:
        """Overlap needed between chunks [pixels] for every neighbourhood operation.

        Examples
        --------
        >>> ClassifySettings().depth_px()
        11
        """
        d = self.speckle_size_px // 2 if self.speckle_filter != "none" else 0
        if self.method == "contextual":
            d += self.context_radius_px * self.context_iterations
        if self.speck_max_px > 0:
            d += self.speck_max_px + 1
        return d + 2 * self.morphology_radius_px + 1


@dataclass(frozen=True)
class SceneModel:
    """What is fitted once per scene on the subsample and applied to every chunk.

    Attributes
    ----------
    pols : tuple of str
        Band order of the features.
    slopes : tuple of float
        Brightness slope per band [dB per degree] (0 without incidence angle).
    thresholds : tuple of tuple of float
        Multi-Otsu thresholds per band [dB, normalised].
    water_bright : tuple of bool
        Per band: whether water is brighter than ice.
    means, slopes_class, sds : numpy.ndarray or None
        Mixture parameters, shape (2 classes [water, ice], n_band) (contextual): class
        mean and spread of the feature at the reference angle, and its change with the
        angle (per degree; additive, or the log-rate ``beta`` of the 'scaled' model).
    scaled : bool
        Whether ``slopes_class`` are the log-rates of the 'scaled' incidence model.
    prior : float
        Scene water fraction of the mixture [1].
    cut : float
        Posterior threshold [1].
    """

    pols: tuple
    slopes: tuple
    thresholds: tuple
    water_bright: tuple
    means: np.ndarray | None = None
    slopes_class: np.ndarray | None = None
    sds: np.ndarray | None = None
    prior: float = 0.1
    cut: float = 0.5
    scaled: bool = False


# --------------------------------------------------------------------------- helpers


def to_db(x_linear, floor_db: float = -40.0):
    """Linear sigma0 to dB, with a floor for non-positive values.

    Parameters
    ----------
    x_linear : numpy.ndarray
        sigma0 [1, linear]; NaN stays NaN.
    floor_db : float
        Value given to non-positive (or tiny) inputs [dB].

    Returns
    -------
    numpy.ndarray of float32
        sigma0 [dB].

    Examples
    --------
    >>> to_db(np.array([0.01, 1.0, -0.1, np.nan]), -40.0).round(3).tolist()
    [-20.0, 0.0, -40.0, nan]
    """
    x = np.asarray(x_linear, dtype=np.float32)
    floor_lin = np.float32(10.0 ** (floor_db / 10.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        out = 10.0 * np.log10(np.maximum(x, floor_lin))
    return np.where(np.isnan(x), np.nan, out).astype(np.float32)


def _valid_mean(x, size):
    """Mean of valid (finite) values in a size x size window; NaN where none."""
    ok = np.isfinite(x)
    num = ndimage.uniform_filter(np.where(ok, x, 0.0).astype(np.float64), size, mode="constant")
    den = ndimage.uniform_filter(ok.astype(np.float64), size, mode="constant")
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / den, np.nan)


def lee_filter(x_linear, size: int = 3, looks: float = 4.0) -> np.ndarray:
    """Lee-type speckle filter of linear intensity (local statistics, uniform window).

    ``x_hat = m + k (x - m)`` with local mean ``m`` and variance ``v`` over the window
    and ``k = max(0, (v - m^2 Cu^2) / (v (1 + Cu^2)))``, ``Cu^2 = 1 / looks`` (Lee 1980,
    IEEE Trans. PAMI 2, 165). NaN pixels are left out of the statistics and stay NaN.

    Parameters
    ----------
    x_linear : numpy.ndarray, shape (h, w)
        Intensity [1, linear].
    size : int
        Window side [pixels].
    looks : float
        Equivalent number of looks [1].

    Returns
    -------
    numpy.ndarray of float32, shape (h, w)

    Examples
    --------
    >>> x = np.full((5, 5), 2.0)
    >>> float(lee_filter(x)[2, 2])
    2.0
    """
    x = np.asarray(x_linear, dtype=np.float64)
    m = _valid_mean(x, size)
    v = np.maximum(_valid_mean(x * x, size) - m * m, 0.0)
    cu2 = 1.0 / looks
    with np.errstate(invalid="ignore", divide="ignore"):
        k = np.where(v > 0, np.maximum(0.0, (v - m * m * cu2) / (v * (1.0 + cu2))), 0.0)
    out = m + k * (x - m)
    return np.where(np.isnan(x), np.nan, out).astype(np.float32)


def _median(x, size):
    filled = np.where(np.isnan(x), np.nanmedian(x) if np.isfinite(x).any() else 0.0, x)
    return np.where(np.isnan(x), np.nan, ndimage.median_filter(filled, size=size))


def fit_incidence_slope(sigma0_db, incidence_deg) -> float:
    """Least-squares slope of sigma0 against incidence angle across a scene.

    Parameters
    ----------
    sigma0_db : numpy.ndarray
        sigma0 [dB]; NaN ignored.
    incidence_deg : numpy.ndarray
        Incidence angle [degrees], same shape.

    Returns
    -------
    float
        Slope [dB per degree]; 0 when the angle does not vary.

    Examples
    --------
    >>> th = np.linspace(20, 45, 50)
    >>> round(fit_incidence_slope(-15 - 0.2 * (th - 30), th), 6)
    -0.2
    """
    s, t = np.asarray(sigma0_db, float).ravel(), np.asarray(incidence_deg, float).ravel()
    ok = np.isfinite(s) & np.isfinite(t)
    if ok.sum() < 3 or np.ptp(t[ok]) == 0:
        return 0.0
    return float(np.polyfit(t[ok], s[ok], 1)[0])


def sample_windows(shape, tile_px: int = 256, max_pixels: int = 2**20) -> list:
    """Windows of the bounded subsample used for the global fits.

    The whole scene when it has at most ``max_pixels`` pixels; otherwise up to
    ``max_pixels // tile_px**2`` (at least one) square tiles on a regular grid.

    Parameters
    ----------
    shape : tuple of int
        Scene (rows, cols).
    tile_px : int
        Tile side [pixels].
    max_pixels : int
        Largest total [pixels].

    Returns
    -------
    list of (slice, slice)

    Examples
    --------
    >>> sample_windows((100, 100))
    [(slice(0, 100, None), slice(0, 100, None))]
    >>> len(sample_windows((10000, 10000), 256, 4 * 256 * 256))
    4
    """
    h, w = int(shape[0]), int(shape[1])
    if h * w <= max_pixels:
        return [(slice(0, h), slice(0, w))]
    th, tw = min(tile_px, h), min(tile_px, w)
    n = max(1, max_pixels // (th * tw))
    per_row = max(1, int(np.floor(np.sqrt(n * w / h))))
    per_col = max(1, n // per_row)
    r0 = np.linspace(0, h - th, per_col).round().astype(int) if per_col > 1 else [(h - th) // 2]
    c0 = np.linspace(0, w - tw, per_row).round().astype(int) if per_row > 1 else [(w - tw) // 2]
    return [(slice(int(r), int(r) + th), slice(int(c), int(c) + tw)) for r in r0 for c in c0]


# --------------------------------------------------------------------------- features


def _linear(sig, nesz, units, settings):
    """Noise handling and speckle filter of one band, in linear units (one block)."""
    x = np.asarray(sig, dtype=np.float32)
    lin = np.power(np.float32(10), x / np.float32(10)) if units == "dB" else x
    if nesz is not None and settings.subtract_noise:
        n = np.asarray(nesz, dtype=np.float32)
        n = np.power(np.float32(10), n / np.float32(10)) if units == "dB" else n
        lin = lin - np.where(np.isfinite(n), n, 0)
    if settings.speckle_filter == "lee":
        lin = lee_filter(lin, settings.speckle_size_px, settings.looks)
    elif settings.speckle_filter == "median":
        lin = _median(lin, settings.speckle_size_px)
    return lin


def _features(block, pols, units, settings, slopes, scale="dB"):
    """Normalised features (n_band, h, w), validity and angle offset of a block.

    ``scale`` 'dB' gives floored dB; 'cbrt' the cube root of linear intensity, which
    makes gamma-distributed speckle close to Gaussian (Wilson & Hilferty 1931, PNAS 17,
    684) and keeps the sign of noise-dominated values. The swath normalisation
    multiplies the linear intensity by ``10**(-slope * (theta - theta_ref) / 10)``,
    which is the dB shift for positive values and defined for all.
    """
    feats = []
    valid = np.ones(np.shape(block[pols[0]]), dtype=bool)
    inc = block.get("__inc")
    dth = None
    if inc is not None:
        inc = np.asarray(inc, dtype=np.float32)
        valid &= np.isfinite(inc)
        dth = np.where(np.isfinite(inc), inc - np.float32(settings.incidence_ref_deg),
                       0).astype(np.float32)
    for k, p in enumerate(pols):
        sig = np.asarray(block[p], dtype=np.float32)
        valid &= np.isfinite(sig)
        lin = _linear(sig, block.get("__noise_" + p), units, settings)
        if dth is not None and slopes is not None and slopes[k] != 0:
            lin = lin * np.power(np.float32(10), -np.float32(slopes[k]) * dth / np.float32(10))
        feats.append(to_db(lin, settings.db_floor) if scale == "dB" else np.cbrt(lin))
    feats = np.stack(feats).astype(np.float32)
    feats[:, ~valid] = np.nan
    if dth is None:
        dth = np.zeros(valid.shape, np.float32)
    return feats, valid, np.where(valid, dth, 0).astype(np.float32)


# --------------------------------------------------------------------------- models


def _multiotsu_fit(feats, valid, pols):
    thresholds, bright = [], []
    for k in range(len(pols)):
        v = feats[k][valid]
        v = v[np.isfinite(v)]
        try:
            t = tuple(float(a) for a in filters.threshold_multiotsu(v, classes=3))
        except ValueError:  # too few distinct values
            t = (float(np.min(v)), float(np.max(v))) if v.size else (0.0, 0.0)
        thresholds.append(t)
    ref = pols.index("HV") if "HV" in pols else (pols.index("VH") if "VH" in pols else None)
    if ref is None or len(pols) == 1:
        return tuple(thresholds), tuple(False for _ in pols)
    water0 = valid & (feats[ref] < thresholds[ref][0])
    for k in range(len(pols)):
        if k == ref:
            bright.append(False)
            continue
        fw = feats[k][water0]
        fi = feats[k][valid & ~water0]
        bright.append(bool(fw.size and fi.size and np.median(fw) > np.median(fi)))
    return tuple(thresholds), tuple(bright)


def _multiotsu_apply(feats, valid, model):
    pols = model.pols
    ref = pols.index("HV") if "HV" in pols else (pols.index("VH") if "VH" in pols else 0)
    with np.errstate(invalid="ignore"):
        water = feats[ref] < model.thresholds[ref][0]
        for k in range(len(pols)):
            if k == ref:
                continue
            if model.water_bright[k]:
                water |= feats[k] > model.thresholds[k][1]
            else:
                water &= feats[k] < model.thresholds[k][1]
    return water & valid


def _ring_kernel(radius):
    yy, xx = np.mgrid[-radius:radius + 1, -radius:radius + 1]
    k = (yy * yy + xx * xx <= radius * radius + radius).astype(np.float64)  # near-disc
    k[radius, radius] = 0.0
    return k


def _loglik(feats, dth, model, nu=None):
    """Log-likelihood of water and ice per pixel, shape (2, h, w).

    Gaussian when ``nu`` is None, otherwise Student's t with ``nu`` degrees of freedom
    and the same scale (heavier tails: a pixel far out in both classes' tails is not
    forced into the wider class).
    """
    out = np.zeros((2,) + feats.shape[1:], dtype=np.float64)
    for c in range(2):
        for k in range(feats.shape[0]):
            b = model.slopes_class[c, k]
            if model.scaled:      # f exp(-b dth) has a fixed law; log-Jacobian -b dth
                z = (feats[k] * np.exp(-b * dth) - model.means[c, k]) / model.sds[c, k]
                out[c] -= b * dth
            else:
                z = (feats[k] - model.means[c, k] - b * dth) / model.sds[c, k]
            if nu is None:
                out[c] -= 0.5 * z * z + np.log(model.sds[c, k])
            else:
                out[c] -= 0.5 * (nu + 1) * np.log1p(z * z / nu) + np.log(model.sds[c, k])
    return out


def _posterior(ll, prior):
    prior = np.clip(prior, 1e-6, 1 - 1e-6)
    a = ll[0] + np.log(prior)
    b = ll[1] + np.log1p(-prior)
    with np.errstate(over="ignore"):
        return 1.0 / (1.0 + np.exp(np.clip(b - a, -700, 700)))


def _context_posterior(ll, valid, model, settings):
    """Water posterior with the neighbourhood prior, iterated."""
    gamma = _posterior(ll, model.prior)
    if settings.context_iterations <= 0 or settings.context_weight <= 0:
        return np.where(valid, gamma, 0.0)
    kern = _ring_kernel(settings.context_radius_px)
    vf = valid.astype(np.float64)
    den = ndimage.convolve(vf, kern, mode="constant")
    for _ in range(settings.context_iterations):
        num = ndimage.convolve(np.where(valid, gamma, 0.0), kern, mode="constant")
        with np.errstate(invalid="ignore", divide="ignore"):
            local = np.where(den > 0, num / den, model.prior)
        prior = (1 - settings.context_weight) * model.prior + settings.context_weight * local
        gamma = _posterior(ll, prior)
    return np.where(valid, gamma, 0.0)


def _m_step(feats, valid, dth, resp, n_band, scaled=False):
    means = np.zeros((2, n_band))
    slopes = np.zeros((2, n_band))
    sds = np.ones((2, n_band))
    t = dth[valid].astype(np.float64)
    for c in range(2):
        w = resp[c][valid]
        sw = w.sum() + 1e-12
        st, stt = (w * t).sum(), (w * t * t).sum()
        for k in range(n_band):
            y = feats[k][valid].astype(np.float64)
            sy, sty = (w * y).sum(), (w * t * y).sum()
            det = sw * stt - st * st
            if det > 1e-9 * sw * sw:
                b = (sw * sty - st * sy) / det
            else:
                b = 0.0
            a = (sy - b * st) / sw
            if scaled:            # log-rate from the line at the reference angle
                b = b / a if a > 0 else 0.0
                y = y * np.exp(-b * t)
                a = (w * y).sum() / sw
            r = y - a - (0.0 if scaled else b * t)
            means[c, k], slopes[c, k] = a, b
            sds[c, k] = max(np.sqrt((w * r * r).sum() / sw), 1e-6)
    return means, slopes, sds


def _contextual_fit(feats, valid, dth, water, model, settings):
    """EM of the two-class mixture on the sample tiles (lists of arrays).

    ``water`` holds the initial (multi-Otsu) water class of each tile.
    """
    n_band = feats[0].shape[0]
    cat = lambda arrs: np.concatenate([a.reshape(a.shape[0], -1) if a.ndim == 3  # noqa: E731
                                       else a.reshape(1, -1) for a in arrs], axis=1)
    F, V, T = cat(feats), cat(valid)[0], cat(dth)[0]
    gam = [np.where(wt, 0.9, 0.1) * v for wt, v in zip(water, valid)]
    prior = float(np.clip(cat(water)[0][V].mean() if V.any() else 0.1, 0.005, 0.5))
    scaled = settings.incidence_model == "scaled"
    m = replace(model, scaled=scaled)
    for _ in range(settings.em_iterations):
        G = cat(gam)[0]
        means, slopes, sds = _m_step(F, V, T, np.stack([G, 1 - G]), n_band, scaled)
        prior = float(np.clip(G[V].mean(), 1e-4, 0.5))
        m = replace(m, means=means, slopes_class=slopes, sds=sds, prior=prior)
        gam = [_context_posterior(_loglik(f, t, m, settings.tail_dof), v, m, settings)
               for f, v, t in zip(feats, valid, dth)]
    G = cat(gam)[0][V]
    cut = 0.5
    if settings.decision == "count" and G.size:
        n_exp = int(round(G.sum()))
        cut = float(np.sort(G)[::-1][n_exp - 1]) if 0 < n_exp <= G.size else 0.5
        cut = float(np.nextafter(cut, 0.0))  # ">" keeps the n_exp largest
    return replace(m, cut=cut)


def _morph(water, valid, radius):
    if radius <= 0:
        return water
    fp = morphology.disk(radius)
    water = ndimage.binary_opening(water, structure=fp)
    water = ndimage.binary_closing(water, structure=fp, border_value=0)
    return water & valid


def _classify_block(block, pols, units, settings, model):
    scale = "dB" if settings.method == "multiotsu" else settings.feature_scale
    feats, valid, dth = _features(block, pols, units, settings, model.slopes, scale)
    if settings.method == "multiotsu":
        water = _multiotsu_apply(feats, valid, model)
    else:
        ll = _loglik(feats, dth, model, settings.tail_dof)
        gamma = _context_posterior(ll, valid, model, settings)
        water = gamma > model.cut
    water = _morph(water & valid, valid, settings.morphology_radius_px)
    if settings.speck_max_px > 0:
        water = morphology.remove_small_objects(water & valid, max_size=settings.speck_max_px,
                                                connectivity=2)
    return np.where(valid, np.where(water, _WATER, _ICE), _NODATA).astype(np.uint8)


# --------------------------------------------------------------------------- public


def _order(pols):
    return tuple(sorted(pols, key=lambda p: (_POLS_ORDER.index(p) if p in _POLS_ORDER
                                             else len(_POLS_ORDER), p)))


def _as_inputs(bands, incidence_angle, noise):
    if not bands:
        raise ValueError("bands must hold at least one polarisation")
    pols = _order(bands)
    arrays = {p: bands[p] for p in pols}
    if incidence_angle is not None:
        arrays["__inc"] = incidence_angle
    for p, n in (noise or {}).items():
        if p in arrays and n is not None:
            arrays["__noise_" + p] = n
    shapes = {tuple(np.shape(a)) for a in arrays.values()}
    if len(shapes) != 1 or len(next(iter(shapes))) != 2:
        raise ValueError(f"every band must be 2-D with one shape, got {shapes}")
    return pols, arrays, next(iter(shapes))


def _window_np(a, win):
    return np.asarray(a[win[0], win[1]], dtype=np.float32)


def fit_scene_model(bands, incidence_angle=None, noise=None, units: str = "dB",
                    settings: ClassifySettings | None = None) -> SceneModel:
    """Fit the global thresholds / class model of a scene on its bounded subsample.

    Parameters
    ----------
    bands : dict of str to array_like, shape (h, w)
        sigma0 per polarisation (numpy or dask) [``units``], NaN no data.
    incidence_angle : array_like, shape (h, w), optional
        Incidence angle [degrees].
    noise : dict of str to array_like, optional
        Noise-equivalent sigma0 per polarisation [``units``].
    units : {'dB', 'linear'}
        Scale of ``bands`` and ``noise``.
    settings : ClassifySettings, optional

    Returns
    -------
    SceneModel

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> hv = np.where(rng.random((64, 64)) < 0.2, -30.0, -22.0) + rng.normal(0, 1, (64, 64))
    >>> m = fit_scene_model({"HV": hv})
    >>> m.pols, round(m.prior, 2)                      # 20 % of the pixels are dark
    (('HV',), 0.2)
    """
    settings = settings or ClassifySettings()
    if units not in ("dB", "linear"):
        raise ValueError("units must be 'dB' or 'linear'")
    pols, arrays, shape = _as_inputs(bands, incidence_angle, noise)
    wins = sample_windows(shape, settings.sample_tile_px, settings.sample_max_pixels)
    tiles = [{k: a[w[0], w[1]] for k, a in arrays.items()} for w in wins]
    if any(isinstance(a, da.Array) for a in arrays.values()):
        tiles = list(da.compute(*tiles))
    tiles = [{k: np.asarray(v, dtype=np.float32) for k, v in t.items()} for t in tiles]
    raw = [_features(t, pols, units, settings, None) for t in tiles]
    has_inc = incidence_angle is not None
    if settings.incidence_slope_dB_per_deg is not None:
        slopes = tuple(float(settings.incidence_slope_dB_per_deg) for _ in pols)
    elif has_inc:
        slopes = tuple(fit_incidence_slope(
            np.concatenate([f[k][v] for f, v, _ in raw]),
            np.concatenate([t[v] for (_, v, t) in raw])) for k in range(len(pols)))
    else:
        slopes = tuple(0.0 for _ in pols)
    fv = [_features(t, pols, units, settings, slopes) for t in tiles]
    feats, valid, dth = [f for f, _, _ in fv], [v for _, v, _ in fv], [t for _, _, t in fv]
    allf = np.concatenate([f[:, v] for f, v in zip(feats, valid)], axis=1)
    allv = np.ones(allf.shape[1], bool)
    thresholds, bright = _multiotsu_fit(allf[:, None, :], allv[None, :], pols)
    model = SceneModel(pols=pols, slopes=slopes, thresholds=thresholds, water_bright=bright)
    if settings.method == "contextual":
        water = [_multiotsu_apply(f, v, model) for f, v in zip(feats, valid)]
        if settings.feature_scale != "dB":
            feats = [_features(t, pols, units, settings, slopes, settings.feature_scale)[0]
                     for t in tiles]
        model = _contextual_fit(feats, valid, dth, water, model, settings)
    return model


def classify_scene(bands, incidence_angle=None, noise=None,
                   settings: ClassifySettings | None = None, units: str = "dB",
                   model: SceneModel | None = None):
    """Classify a radar scene into open water, ice and no data.

    Global statistics come from a bounded subsample (:func:`fit_scene_model`, see the
    module docstring); they are then applied chunk by chunk with
    :func:`dask.array.map_overlap` (overlap ``settings.depth_px()``), so memory is
    bounded by the chunk size whatever the scene size.

    Parameters
    ----------
    bands : dict of str to numpy or dask array, shape (h, w)
        sigma0 per polarisation ('HH', 'HV', ...) [dB, or linear with
        ``units='linear'``]; NaN no data.
    incidence_angle : numpy or dask array, shape (h, w), optional
        Incidence angle [degrees]; NaN no data. Without it no swath normalisation.
    noise : dict of str to numpy or dask array, optional
        Noise-equivalent sigma0 per polarisation [same units as ``bands``].
    settings : ClassifySettings, optional
        Defaults from :class:`ClassifySettings`.
    units : {'dB', 'linear'}
        Scale of ``bands`` and ``noise``.
    model : SceneModel, optional
        A model already fitted (e.g. on another scene); fitted here by default.

    Returns
    -------
    numpy.ndarray or dask.array.Array of uint8, shape (h, w)
        0 open water, 1 ice, 255 no data; dask when any input is dask (lazy), numpy
        otherwise.

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> truth = np.zeros((60, 60), bool)
    >>> truth[:, 28:32] = True                              # a lead 4 pixels wide
    >>> hv = np.where(truth, -31.0, -24.0) + rng.normal(0, 1.0, truth.shape)
    >>> hv[0, 0] = np.nan
    >>> mask = classify_scene({"HV": hv})
    >>> int(mask[0, 0]), float(((mask == 0) == truth)[1:].mean()) > 0.97
    (255, True)
    """
    settings = settings or ClassifySettings()
    pols, arrays, shape = _as_inputs(bands, incidence_angle, noise)
    if model is None:
        model = fit_scene_model(bands, incidence_angle, noise, units, settings)
    names = list(arrays)
    depth = settings.depth_px()
    lazy = any(isinstance(a, da.Array) for a in arrays.values())

    def block_fn(*blocks):
        return _classify_block(dict(zip(names, blocks)), pols, units, settings, model)

    if not lazy:
        padded = [np.pad(np.asarray(arrays[n], dtype=np.float32), depth,
                         constant_values=np.nan) for n in names]
        out = block_fn(*padded)
        return out[depth:depth + shape[0], depth:depth + shape[1]]
    first = next(a for a in arrays.values() if isinstance(a, da.Array))
    chunks = first.chunks
    dask_arrays = [da.asarray(arrays[n]).astype(np.float32).rechunk(chunks) for n in names]
    return da.map_overlap(block_fn, *dask_arrays, depth=depth, boundary=np.nan,
                          trim=True, dtype=np.uint8, meta=np.empty((0, 0), np.uint8))


def water_iou_f1(predicted, truth, codes=None) -> tuple[float, float]:
    """Water-class intersection-over-union and F1 score of a mask against the truth.

    Pixels that are no data in either mask are left out.

    Parameters
    ----------
    predicted, truth : array_like of uint8
        Masks (0 water, 1 ice, 255 no data by default).
    codes : dict, optional
        Mask codes (default ``constants.MASK_CODES``).

    Returns
    -------
    tuple of float
        (IoU, F1) of the water class [1]; NaN when neither has water.

    Examples
    --------
    >>> water_iou_f1(np.array([0, 0, 1, 1]), np.array([0, 1, 1, 1]))
    (0.5, 0.6666666666666666)
    """
    codes = dict(MASK_CODES if codes is None else codes)
    p, t = np.asarray(predicted), np.asarray(truth)
    ok = np.isin(p, [codes["water"], codes["ice"]]) & np.isin(t, [codes["water"], codes["ice"]])
    pw, tw = (p == codes["water"]) & ok, (t == codes["water"]) & ok
    inter, union = int((pw & tw).sum()), int((pw | tw).sum())
    if union == 0:
        return float("nan"), float("nan")
    iou = inter / union
    return iou, 2 * iou / (1 + iou)
