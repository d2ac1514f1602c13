"""The null distribution of the largest persistence of noise, and p-values from it.

Noise-only fields of the scan's noise model go through the scan's own preparation
(smoothing, neighbourhood, sweep direction, field, engine) and :func:`voxtopo.persistence`;
the largest finite persistence in each dimension of each field is one draw of the null.

Two ways, chosen by the size of the scan::

    small scan (<= FULL_SHAPE_VOXELS)     fields of the scan's full shape, N of them;
                                          p = (1 + #{null >= x}) / (1 + N)
                                          (Besag & Clifford 1989), exact
    larger scan                           fields of a block shape v < V, N of them;
                                          a Gumbel law (mu, beta) fitted to the block
                                          maxima; the scan's maximum is taken as the
                                          largest of V / v independent blocks:
                                          P(max >= x) = 1 - G(x)^(V/v)
                                          location mu + beta log(V / v)

Each dimension is tested on its own and the p-values are multiplied by the number of
dimensions D (Bonferroni), so "any significant feature in any dimension" happens in at
most a fraction alpha of noise-only scans.

The block scaling is conservative: a real scan is not made of independent blocks (its
neighbouring blocks are correlated, which lowers the chance of an extreme), and a feature
cut by a block's edge lives at least as long inside the block as in the whole scan.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from .. import filtration as filt
from ..engine import persistence
from ..errors import InputError
from ..scan import Scan
from ._noise import NoiseModel, simulate_noise

#: Scans up to this many voxels are simulated at their full shape (exact Monte Carlo).
FULL_SHAPE_VOXELS = 1 << 16

#: Least number of full-shape simulations: with 39, p can reach 1/40 = 0.025 < 0.05.
LEAST_FULL_SHAPE_SIMULATIONS = 39

#: Block simulations to which the Gumbel law is fitted.
BLOCK_SIMULATIONS = 64

#: Edge of a simulated block (voxels) by number of dimensions: the simulations together
#: cover about the scan's own volume, within these bounds, and widened for long
#: correlations and smoothing (at least BLOCK_WIDTHS kernel widths per edge).
BLOCK_EDGE = {2: 160, 3: 40}
LEAST_BLOCK_EDGE = {2: 64, 3: 24}
BLOCK_WIDTHS = 10


def simulations_for(alpha: float, ndim: int) -> int:
    """Full-shape simulations needed so that a p-value of ``alpha / (2 ndim)`` can be
    reached (alpha 0.05: 79 in 2D, 119 in 3D).

    Parameters
    ----------
    alpha : float
        The family-wise level.
    ndim : int
        2 or 3: the p-values are multiplied by the number of dimensions tested.

    Returns
    -------
    int
        At least :data:`LEAST_FULL_SHAPE_SIMULATIONS`.

    Examples
    --------
    >>> simulations_for(0.05, 2), simulations_for(0.05, 3)
    (79, 119)
    """
    return max(LEAST_FULL_SHAPE_SIMULATIONS, math.ceil(2.0 * ndim / alpha) - 1)


@dataclass(frozen=True)
class NullDistribution:
    """Largest finite persistence per dimension of simulated noise-only fields.

    Attributes
    ----------
    maxima : ndarray, shape (simulations, ndim)
        Column d holds the largest finite persistence of dimension d of each field
        (0 where a field has no finite pair of that dimension).
    method : {"full shape", "blocks"}
    block_shape : tuple of int
        Shape of each simulated field.
    blocks_per_scan : float
        V / v, the scan's voxels over a block's (1 for "full shape").
    gumbel : tuple of (location, scale) per dimension, or ()
        The law fitted to the block maxima ("blocks" only).
    seed : int
    """

    maxima: np.ndarray
    method: str
    block_shape: tuple[int, ...]
    blocks_per_scan: float
    gumbel: tuple[tuple[float, float], ...] = ()
    seed: int = 0

    @property
    def simulations(self) -> int:
        return int(self.maxima.shape[0])

    @property
    def dimensions(self) -> int:
        return int(self.maxima.shape[1])

    def p_value(self, dim: int, persistence) -> np.ndarray:
        """Family-wise p-value (over the scan and its dimensions) of features of
        dimension ``dim`` with this persistence.

        Parameters
        ----------
        dim : int
            Homology dimension.
        persistence : float or array_like
            Finite lifetimes, in the units of the simulated maxima.

        Returns
        -------
        ndarray
            p-values in (0, 1], one per lifetime.
        """
        return np.minimum(1.0, self.dimensions * self._p_one_dimension(dim, persistence))

    def _p_one_dimension(self, dim, persistence) -> np.ndarray:
        persistence = np.asarray(persistence, dtype=np.float64)
        if self.method == "full shape":
            null = np.sort(self.maxima[:, dim])
            at_least = len(null) - np.searchsorted(null, persistence, side="left")
            return (1.0 + at_least) / (1.0 + len(null))
        location, scale = self.gumbel[dim]
        with np.errstate(over="ignore"):
            exceed = self.blocks_per_scan * np.exp(-(persistence - location) / scale)
        return -np.expm1(-exceed)

    def threshold(self, dim: int, alpha: float) -> float:
        """Persistence above which a feature of dimension ``dim`` is significant at
        ``alpha`` (inf when no persistence could be, with too few simulations).

        Parameters
        ----------
        dim : int
            Homology dimension.
        alpha : float
            The family-wise level (shared by the dimensions, Bonferroni).

        Returns
        -------
        float
            The threshold, or ``inf``.
        """
        alpha = alpha / self.dimensions
        if self.method == "full shape":
            null = np.sort(self.maxima[:, dim])[::-1]
            allowed = int(np.floor(alpha * (1 + len(null)) + 1e-9)) - 1
            if allowed < 0:
                return math.inf
            # p <= alpha  <=>  at most `allowed` null maxima reach the persistence
            return float(null[allowed])
        location, scale = self.gumbel[dim]
        return float(location + scale * (math.log(self.blocks_per_scan)
                                         - math.log(-math.log1p(-alpha))))

    def describe(self, alpha: float) -> dict:
        """How the null was made, as JSON values.

        Parameters
        ----------
        alpha : float
            The family-wise level, for the thresholds reported.

        Returns
        -------
        dict
            Simulations, method, simulated shape, blocks per scan, seed, how a p-value
            is computed, for blocks the fitted Gumbel laws, and the threshold per
            dimension at ``alpha``.
        """
        out = {"simulations": self.simulations, "method": self.method,
               "simulated_shape": list(self.block_shape),
               "blocks_per_scan": self.blocks_per_scan, "seed": self.seed,
               "p_value": ("Monte Carlo, (1 + #{null maxima >= persistence}) / (1 + N), "
                           "Besag & Clifford 1989" if self.method == "full shape" else
                           "1 - G(persistence)^(V/v), G the Gumbel law fitted to the block "
                           "maxima, V/v the scan's voxels over a block's") +
               f"; times {self.dimensions} dimensions (Bonferroni)"}
        if self.gumbel:
            out["gumbel"] = {str(d): {"location": loc, "scale": scale}
                             for d, (loc, scale) in enumerate(self.gumbel)}
        out["threshold"] = {str(d): _json_number(self.threshold(d, alpha))
                            for d in range(self.maxima.shape[1])}
        return out


def _json_number(value: float):
    return value if math.isfinite(value) else None


def _block_shape(shape, noise: NoiseModel, smoothing_voxels) -> tuple[int, ...]:
    ndim = len(shape)
    width = noise.correlation_voxels + max(smoothing_voxels, default=0.0)
    covering = int((math.prod(shape) / BLOCK_SIMULATIONS) ** (1 / ndim))
    edge = min(BLOCK_EDGE[ndim], max(LEAST_BLOCK_EDGE[ndim], covering))
    edge = max(edge, int(math.ceil(BLOCK_WIDTHS * width)))
    return tuple(min(n, edge) for n in shape)


def _fit_gumbel(sample: np.ndarray) -> tuple[float, float]:
    spread = float(np.std(sample))
    if spread == 0:
        # every block gave the same maximum (often no pair at all): a step law at it
        return float(sample[0]), max(abs(float(sample[0])), 1.0) * 1e-9
    location, scale = stats.gumbel_r.fit(sample)
    return float(location), float(scale)


def null_distribution(shape, noise: NoiseModel, *, smoothing: float | None = None,
                      superlevel: bool = False, neighbourhood: int | None = None,
                      periodic=False, field: int = 2, engine: str = "auto",
                      alpha: float = 0.05, simulations: int | None = None,
                      block_shape=None, seed: int = 0, progress=None,
                      sample: np.ndarray | None = None) -> NullDistribution:
    """Simulate the largest persistence of noise-only fields prepared like the scan.

    Parameters
    ----------
    shape : tuple of int
        Shape of the scan as it is swept.
    noise : NoiseModel
        The scan's noise (its spacing and unit are the scan's).
    smoothing : float, optional
        The Gaussian smoothing applied to the scan, sigma in the scan's unit.
    superlevel, neighbourhood, periodic, field, engine
        As given to :func:`voxtopo.persistence` for the scan.
    alpha : float
        Level the p-values will be read at; sets the number of full-shape simulations.
    simulations : int, optional
        Number of simulated fields (default: :func:`simulations_for` at full shape,
        ``BLOCK_SIMULATIONS`` with blocks).
    block_shape : tuple of int, optional
        Simulate blocks of this shape even for a small scan (the default picks the full
        shape up to FULL_SHAPE_VOXELS voxels, else blocks of BLOCK_EDGE voxels per edge).
    seed : int
        Seed of the random generator (the same seed gives the same null).
    progress : callable(phase, fraction), optional
    sample : ndarray of bool, optional
        The region of interest the scan was swept in: full-shape simulations are swept in
        the same region (outside voxels are not part of the complex,
        :func:`voxtopo.filtration.outside_last`), and blocks stand for the region's voxels
        only.

    Returns
    -------
    NullDistribution

    References
    ----------
    Besag, J. & Clifford, P. (1989). Generalized Monte Carlo significance tests.
    Biometrika 76, 633-642.
    """
    shape = tuple(int(n) for n in shape)
    if not 0 < alpha < 1:
        raise InputError(f"The significance level alpha must lie between 0 and 1, got {alpha}.")
    smoothing_voxels = [smoothing / s for s in noise.spacing] if smoothing else []
    voxels = math.prod(shape)
    if block_shape is None:
        block_shape = shape if voxels <= FULL_SHAPE_VOXELS else \
            _block_shape(shape, noise, smoothing_voxels)
    block_shape = tuple(int(n) for n in block_shape)
    full = block_shape == shape
    if simulations is None:
        simulations = simulations_for(alpha, len(shape)) if full else BLOCK_SIMULATIONS
    if simulations < 2:
        raise InputError(f"The null distribution needs at least 2 simulations, got "
                         f"{simulations}.")
    rng = np.random.default_rng(seed)
    ndim = len(shape)
    maxima = np.zeros((simulations, ndim))
    for run in range(simulations):
        block = Scan(simulate_noise(block_shape, noise, rng), spacing=noise.spacing,
                     unit=noise.unit, source="simulated noise")
        if smoothing:
            block = filt.smooth(block, smoothing)
        if full and sample is not None:
            block, outside = filt.outside_last(block, sample, superlevel=superlevel)
        diagram = persistence(block, superlevel=superlevel, neighbourhood=neighbourhood,
                              periodic=periodic if full else False, field=field,
                              engine=engine)
        if full and sample is not None:
            diagram = diagram.without_outside(outside)
        pairs = diagram.pairs
        lifetimes = pairs["persistence"].to_numpy()
        dims = pairs["dim"].to_numpy()
        finite = np.isfinite(lifetimes)
        for d in range(ndim):
            chosen = lifetimes[finite & (dims == d)]
            maxima[run, d] = chosen.max() if len(chosen) else 0.0
        if progress is not None:
            progress("significance: noise simulations", (run + 1) / simulations)
    if full:
        return NullDistribution(maxima, "full shape", block_shape, 1.0, (), seed)
    gumbel = tuple(_fit_gumbel(maxima[:, d]) for d in range(ndim))
    # a block stands for as many voxels of the field as were swept: the region's only
    swept = voxels if sample is None else int(np.count_nonzero(sample))
    return NullDistribution(maxima, "blocks", block_shape, swept / math.prod(block_shape),
                            gumbel, seed)
