"""Noise models of a scan: level and spatial correlation, estimated or given.

The noise is modelled as a stationary Gaussian field: white Gaussian noise smoothed by a
Gaussian kernel of ``correlation_voxels`` voxels (standard deviation) and scaled to a
standard deviation ``sigma`` in gray units. Both numbers are read off the scan from the
finest-scale differences ``x[i + k] - x[i]`` along every axis at the lags k = 1, 2, 3::

    D(k) = Var(x[i + k] - x[i]) = 2 sigma^2 (1 - rho(k))

where rho is the correlation of the smoothed noise at lag k. Each D(k) is measured robustly
by the median absolute deviation (Donoho & Johnstone 1994): edges of the structure are rare
among all differences and do not move the median. The correlation length is the kernel
width whose rho fits the three D(k) best; sigma follows from it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from ..errors import InputError
from ..scan import Scan, as_scan

#: Lags (voxels) of the differences whose spread gives the level and the correlation.
RESIDUAL_LAGS = (1, 2, 3)

#: Standard deviation of a Gaussian over its median absolute deviation (1 / Phi^-1(3/4)).
MAD_TO_SIGMA = 1.482602218505602

#: Candidate correlation lengths (kernel sigma, voxels). Beyond about 4 voxels the
#: differences at lags 1..3 all grow like k^2 and no longer tell lengths apart.
CORRELATION_GRID = np.round(np.arange(0.0, 4.05, 0.05), 2)

#: At most this many differences per axis and lag enter a median (a regular sub-grid of
#: the other axes is taken beyond), so estimating stays cheap on large scans; the
#: relative error of each spread is then about sqrt(5.44 / 2^20), a quarter percent.
MAX_DIFFERENCES = 1 << 20

#: Relative sampling variance of a variance from the median absolute deviation of n
#: Gaussian values is about MAD_VARIANCE_ERROR / n (4 x 1.36, the MAD's efficiency);
#: fits within FIT_TOLERANCE such variances of the best count as equally good (about
#: the 95 percent point of a chi-square with two degrees of freedom).
MAD_VARIANCE_ERROR = 5.44
FIT_TOLERANCE = 6.0

NOISE_MODELS = ("gaussian", "poisson")

#: Poisson model: noise is simulated at the count of this percentile of the scan.
POISSON_REFERENCE_PERCENTILE = 10
LEAST_REFERENCE_COUNT = 1.0


@dataclass(frozen=True)
class NoiseModel:
    """A stationary Gaussian noise field, in the units of the values that are swept.

    Attributes
    ----------
    model : {"gaussian", "poisson"}
        "poisson": counts went through the Anscombe transform first; ``sigma`` is then in
        transformed units (1 for pure photon counts).
    method : str
        How ``sigma`` was found: "estimated" (median absolute deviation of the finest-scale
        differences), "given" (by the user) or "poisson" (1 after the Anscombe transform).
    sigma : float
        Standard deviation of the noise in gray units (Anscombe units for "poisson").
    correlation_voxels : float
        Standard deviation, in voxels, of the Gaussian kernel that turns white noise into
        this noise (0 = white).
    spacing, unit : voxel size of the scan, for lengths in the scan's unit.
    notes : tuple of str
    reference_count : float
        "poisson" only: the photon count at which noise is simulated (Anscombe-transformed
        Poisson counts, whose tails are heavier than a Gaussian's at low counts).
    """

    model: str
    method: str
    sigma: float
    correlation_voxels: float
    spacing: tuple[float, ...]
    unit: str
    notes: tuple[str, ...] = ()
    reference_count: float = 0.0

    @property
    def correlation_length(self) -> tuple[float, ...]:
        """The kernel width along each axis in the scan's unit."""
        return tuple(self.correlation_voxels * s for s in self.spacing)

    def describe(self) -> dict:
        """The model as JSON values, lengths in the scan's unit."""
        return {"model": self.model, "method": self.method, "level": self.sigma,
                "level_unit": "Anscombe units" if self.model == "poisson" else "gray value",
                "correlation_length": list(self.correlation_length),
                "correlation_length_voxels": self.correlation_voxels,
                "correlation_length_unit": self.unit,
                "correlation_kind": "Gaussian kernel sigma applied to white noise",
                **({"reference_count": self.reference_count} if self.model == "poisson"
                   else {}),
                "notes": list(self.notes)}


def anscombe(scan_or_array) -> Scan:
    """Variance-stabilising transform of photon counts: ``2 sqrt(x + 3/8)``.

    Poisson counts with a mean above a few counts become close to Gaussian with unit
    variance (Anscombe 1948). The order of the values is kept, so a sweep meets the same
    features in the same order; only the gray scale changes.

    Parameters
    ----------
    scan_or_array : Scan or ndarray
        Counts, at least 0.

    Returns
    -------
    Scan
        float32 values in Anscombe units.

    References
    ----------
    Anscombe, F. J. (1948). The transformation of Poisson, binomial and negative-binomial
    data. Biometrika 35, 246-254.

    Examples
    --------
    >>> float(anscombe(np.array([[0.0, 3.625]])).data[0, 1])   # 2 sqrt(4)
    4.0
    """
    scan = as_scan(scan_or_array)
    data = scan.data
    lowest = float(data.min())
    if lowest < 0:
        raise InputError(f"{scan.source or 'The scan'} has values down to {lowest:g}, but the "
                         f"Poisson noise model needs photon counts of at least 0; use the "
                         f"gaussian noise model for this scan.")
    stabilised = 2.0 * np.sqrt(data.astype(np.float32) + np.float32(3 / 8))
    return scan.with_data(stabilised.astype(np.float32, copy=False),
                          metadata={**scan.metadata, "anscombe": True})


def _kernel_correlation(correlation_voxels: float, lags) -> np.ndarray:
    """Correlation at ``lags`` of white noise smoothed by the discrete Gaussian kernel that
    :func:`simulate_noise` uses (so estimate and simulation agree on the grid)."""
    lags = np.asarray(lags)
    if correlation_voxels == 0:
        return (lags == 0).astype(np.float64)
    radius = int(4 * correlation_voxels + 0.5) + int(lags.max()) + 1
    impulse = np.zeros(2 * radius + 1)
    impulse[radius] = 1.0
    weights = ndimage.gaussian_filter1d(impulse, correlation_voxels, mode="constant")
    norm = np.dot(weights, weights)
    return np.array([np.dot(weights[:len(weights) - k], weights[k:]) / norm for k in lags])


def _differences_per_lag(data: np.ndarray) -> int:
    """About how many differences enter each D(k) (all axes, before sub-sampling)."""
    return int(min(data.size * data.ndim, MAX_DIFFERENCES * data.ndim))


def _spread_of_differences(data: np.ndarray, axis: int, lag: int,
                           sample: np.ndarray | None = None) -> float:
    """Robust variance of ``x[i + lag] - x[i]`` along ``axis`` (MAD, scaled), over the
    pairs of voxels that both lie in ``sample`` when it is given."""
    step = 1
    others = data.size // max(data.shape[axis], 1)
    while others // step ** (data.ndim - 1) * data.shape[axis] > MAX_DIFFERENCES:
        step += 1
    thinned = tuple(slice(None) if a == axis else slice(None, None, step)
                    for a in range(data.ndim))
    view = data[thinned]
    if view.shape[axis] <= lag:
        return np.nan
    ahead = tuple(slice(lag, None) if a == axis else slice(None) for a in range(data.ndim))
    behind = tuple(slice(None, -lag) if a == axis else slice(None) for a in range(data.ndim))
    differences = np.subtract(view[ahead], view[behind], dtype=np.float32)
    if sample is not None:
        inside = sample[thinned]
        differences = differences[inside[ahead] & inside[behind]]
        if differences.size == 0:
            return np.nan
    differences = differences.ravel()
    deviations = np.abs(differences - np.median(differences))
    return float((MAD_TO_SIGMA * np.median(deviations)) ** 2)


def _fit_correlation(spreads: np.ndarray, differences: int) -> tuple[float, float]:
    """(correlation_voxels, sigma) of the kernel whose D(k) = 2 sigma^2 (1 - rho(k)) fits
    the measured D(k) best; white noise (0) when it fits as well as the best within the
    sampling error of ``differences`` values per D(k).

    Preferring white noise when it fits keeps sampling noise in small scans from being
    read as a slight correlation (which would make the simulated noise too tame); any
    other length is the best fit, which is not biased towards short lengths."""
    weights = 1.0 / spreads ** 2
    fits = []
    for length in CORRELATION_GRID:
        shape = 2.0 * (1.0 - _kernel_correlation(float(length), RESIDUAL_LAGS))
        variance = np.sum(weights * spreads * shape) / np.sum(weights * shape ** 2)
        misfit = float(np.sum(weights * (spreads - variance * shape) ** 2))
        fits.append((misfit, float(length), float(np.sqrt(variance))))
    best = min(fit[0] for fit in fits)
    allowed = best + FIT_TOLERANCE * MAD_VARIANCE_ERROR / max(differences, 1)
    white = fits[0]
    _, length, sigma = white if white[0] <= allowed else min(fits)
    return length, sigma


def estimate_noise(scan_or_array, *, noise: float | None = None,
                   noise_model: str = "gaussian", sample: np.ndarray | None = None
                   ) -> NoiseModel:
    """Noise level and correlation length of a scan, read off the scan itself.

    Parameters
    ----------
    scan_or_array : Scan or ndarray
        The scan as it will be swept, before any smoothing (after the Anscombe transform
        for ``noise_model="poisson"``).
    noise : float, optional
        The noise's standard deviation in gray units, when known; the correlation length
        is still read off the scan.
    noise_model : {"gaussian", "poisson"}
        "poisson": the scan holds Anscombe-transformed photon counts, whose noise is white
        with unit variance (``noise`` must then be left out).
    sample : ndarray of bool, optional
        The region of interest: only differences between two voxels of the region count,
        and the Poisson reference level is read off the region's voxels.

    Returns
    -------
    NoiseModel

    Notes
    -----
    The differences at lags 1, 2 and 3 along every axis are pooled (the correlation is
    taken the same in voxel units along every axis). Structure on the scale of the noise's
    correlation cannot be told from noise, and a correlation length beyond about four
    voxels is reported as four.

    References
    ----------
    Donoho, D. L. & Johnstone, I. M. (1994). Ideal spatial adaptation by wavelet
    shrinkage. Biometrika 81, 425-455.

    Examples
    --------
    >>> field = np.random.default_rng(1).normal(0, 5, (256, 256))
    >>> model = estimate_noise(field)
    >>> round(model.sigma), model.correlation_voxels < 0.5
    (5, True)
    """
    scan = as_scan(scan_or_array)
    if noise_model not in NOISE_MODELS:
        raise InputError(f"The noise model should be one of {list(NOISE_MODELS)}, "
                         f"got {noise_model!r}.")
    if noise is not None and not (np.isfinite(noise) and noise > 0):
        raise InputError(f"The noise level must be a positive number of gray units, "
                         f"got {noise}.")
    if noise is not None and noise_model == "poisson":
        raise InputError("A noise level cannot be given with the Poisson noise model (its "
                         "level follows from the counts); leave out the noise level or use "
                         "the gaussian noise model.")
    source = scan.source or "The scan"
    if noise_model == "poisson":
        counted = scan.data if sample is None else scan.data[sample]
        dim_level = float(np.percentile(counted, POISSON_REFERENCE_PERCENTILE))
        count = max((dim_level / 2.0) ** 2 - 3 / 8, LEAST_REFERENCE_COUNT)
        return NoiseModel("poisson", "poisson", 1.0, 0.0, scan.spacing, scan.unit,
                          ("photon counts: independent voxels with variance equal to the "
                           "mean, unit variance after the Anscombe transform; simulated as "
                           f"transformed Poisson counts of mean {count:.3g} (the scan's "
                           f"{POISSON_REFERENCE_PERCENTILE}th percentile: dimmer counts have "
                           "heavier tails, so brighter parts are tested conservatively)",),
                          count)
    data = scan.data
    values = data if sample is None else data[sample]
    constant = values.size == 0 or values.min() == values.max()
    if constant and noise is None:
        where = "" if sample is None else " within the region of interest"
        raise InputError(f"{source} is constant{where} ({values.flat[0]} everywhere): there is no "
                         f"noise to estimate and no feature to test; give the noise level "
                         f"(--noise SIGMA) or list every pair (--min-persistence 0).")
    spreads = np.array([np.nanmean([_spread_of_differences(data, axis, lag, sample)
                                    for axis in range(data.ndim)])
                        for lag in RESIDUAL_LAGS])
    notes = []
    if constant or not np.all(np.isfinite(spreads) & (spreads > 0)):
        if noise is None:
            raise InputError(f"{source} varies by less than one gray step between most "
                             f"neighbouring voxels, so its noise cannot be estimated; give "
                             f"the noise level (--noise SIGMA) or list every pair "
                             f"(--min-persistence 0).")
        notes.append("correlation could not be read off the scan: white noise assumed")
        return NoiseModel("gaussian", "given", float(noise), 0.0, scan.spacing, scan.unit,
                          tuple(notes))
    length, sigma = _fit_correlation(spreads, _differences_per_lag(data))
    if length >= CORRELATION_GRID[-1]:
        notes.append(f"correlation length at least {CORRELATION_GRID[-1]:g} voxels: lags "
                     f"1 to 3 cannot resolve longer ones, so the level may be low")
    if noise is not None:
        return NoiseModel("gaussian", "given", float(noise), length, scan.spacing, scan.unit,
                          tuple(notes))
    return NoiseModel("gaussian", "estimated", sigma, length, scan.spacing, scan.unit,
                      tuple(notes))


def simulate_noise(shape, noise: NoiseModel, rng: np.random.Generator) -> np.ndarray:
    """One noise-only field of ``shape`` under ``noise`` (float32, mean 0).

    White Gaussian noise is smoothed by the model's Gaussian kernel (wrapping around the
    edges, so the field is stationary right up to them) and scaled to ``noise.sigma``
    through the kernel's own norm, not through the field's sample deviation. The Poisson
    model draws counts of mean ``noise.reference_count`` and applies the Anscombe
    transform instead.

    Parameters
    ----------
    shape : tuple of int
        Shape of the field.
    noise : NoiseModel
        The model (:func:`estimate_noise`).
    rng : numpy.random.Generator
        The source of randomness (seeded by the caller).

    Returns
    -------
    ndarray of float32
        The field, mean 0.

    Examples
    --------
    >>> model = NoiseModel("gaussian", "given", 2.0, 1.5, (1.0, 1.0), "px")
    >>> field = simulate_noise((512, 512), model, np.random.default_rng(0))
    >>> round(float(field.std()), 1)
    2.0
    """
    if noise.model == "poisson":
        counts = rng.poisson(noise.reference_count, tuple(shape))
        return anscombe(counts).data - np.float32(2 * np.sqrt(noise.reference_count + 3 / 8))
    white = rng.standard_normal(tuple(shape), dtype=np.float32)
    if noise.correlation_voxels == 0:
        return white * np.float32(noise.sigma)
    smoothed = ndimage.gaussian_filter(white, noise.correlation_voxels, mode="wrap")
    norm = _kernel_norm(noise.correlation_voxels) ** len(shape)
    return smoothed * np.float32(noise.sigma / np.sqrt(norm))


def _kernel_norm(correlation_voxels: float) -> float:
    """Sum of the squared weights of the 1D discrete Gaussian kernel."""
    radius = int(4 * correlation_voxels + 0.5) + 1
    impulse = np.zeros(2 * radius + 1)
    impulse[radius] = 1.0
    weights = ndimage.gaussian_filter1d(impulse, correlation_voxels, mode="constant")
    return float(np.dot(weights, weights))
