"""Which features are real: noise models, null distributions, p-values, robust flags.

Gray-value sweeps
    :func:`estimate_noise` reads the noise level and correlation length off the scan (or
    takes a given level); :func:`null_distribution` simulates noise-only fields through the
    scan's own preparation and sweep and keeps the largest persistence per dimension;
    :func:`with_p_values` gives every finite pair a family-wise p-value and a
    ``significant`` flag. :func:`assess` does the three in order.
Distance sweeps
    :func:`robust_flags`: persistence above twice the boundary tolerance plus a voxel
    diagonal (the voxel-centre signed distance is off the boundary by up to half of one).
Rips diagrams (point clouds)
    :func:`rips_significance` under the universal null of Bobrowski & Skraba 2023, and
    :func:`dominant_loop_stability` over resamples.

What "significant" means: a feature whose persistence is larger than pure noise of the
scan's own level and correlation would produce anywhere in a scan of this size, in all
but a fraction alpha of such scans. It cannot tell structure on the scale of the noise's
correlation from noise, and it says nothing about whether a segmentation or a smoothing
was right.
"""

from __future__ import annotations

from ..diagram import Diagram
from ._flags import (ROBUST_METHOD, SIGNIFICANCE_METHOD, Significance,
                     boundary_tolerance_of, check_alpha, robust_flags, robust_threshold,
                     significant_counts,
                     with_p_values)
from ._noise import NOISE_MODELS, NoiseModel, anscombe, estimate_noise, simulate_noise
from ._null import NullDistribution, null_distribution, simulations_for
from ._rips import (RIPS_SLOPE, UNIVERSAL_NULL, dominant_loop_stability, rips_significance,
                    universal_p_values)

__all__ = ["NoiseModel", "NullDistribution", "Significance", "NOISE_MODELS",
           "SIGNIFICANCE_METHOD", "ROBUST_METHOD", "UNIVERSAL_NULL", "RIPS_SLOPE",
           "estimate_noise", "anscombe", "simulate_noise", "null_distribution",
           "simulations_for", "with_p_values", "assess", "check_alpha", "robust_flags",
           "boundary_tolerance_of", "robust_threshold", "significant_counts", "rips_significance",
           "universal_p_values", "dominant_loop_stability"]


def assess(diagram: Diagram, unsmoothed, *, alpha: float = 0.05, noise: float | None = None,
           noise_model: str = "gaussian", smoothing: float | None = None,
           engine: str = "auto", seed: int = 0, simulations: int | None = None,
           block_shape=None, progress=None, sample=None) -> tuple[Diagram, Significance]:
    """p-values and ``significant`` flags for the pairs of a gray-value sweep.

    Parameters
    ----------
    diagram : Diagram
        The scan's diagram (its sweep direction, neighbourhood, field and periodic
        boundaries are used for the simulations).
    unsmoothed : Scan or ndarray
        The scan as swept but before smoothing (after the Anscombe transform for
        ``noise_model="poisson"``): its noise is estimated here.
    alpha : float
        Family-wise level, in (0, 1).
    noise : float, optional
        Noise level in gray units, instead of the estimate.
    noise_model : {"gaussian", "poisson"}
    smoothing : float, optional
        Gaussian smoothing sigma (scan's unit) applied before the sweep.
    engine, seed, simulations, block_shape, progress
        See :func:`null_distribution`.
    sample : ndarray of bool, optional
        The region of interest ``diagram`` was swept in (same grid as ``unsmoothed``): the
        noise is read off the region's voxels and the noise-only fields are swept in the
        same region.

    Returns
    -------
    (Diagram, Significance)

    Examples
    --------
    >>> import numpy as np, voxtopo
    >>> image = np.random.default_rng(0).normal(0, 1, (40, 40))
    >>> image[15:25, 15:25] += 12        # a bright square far above the noise
    >>> tested, how = assess(voxtopo.persistence(image), image)
    >>> int(tested.pairs["significant"].sum()) >= 2     # the component, the loop round the square
    True
    """
    alpha = check_alpha(alpha)
    model = estimate_noise(unsmoothed, noise=noise, noise_model=noise_model, sample=sample)
    null = null_distribution(diagram.shape, model, smoothing=smoothing,
                             superlevel=diagram.superlevel, neighbourhood=diagram.neighbourhood,
                             periodic=any(diagram.periodic), field=diagram.field,
                             engine=engine, alpha=alpha, simulations=simulations,
                             block_shape=block_shape, seed=seed, progress=progress,
                             sample=sample)
    significance = Significance(model, null, alpha)
    return with_p_values(diagram, significance), significance
