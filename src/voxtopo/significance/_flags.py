"""Per-pair p-values and flags on a Diagram: significant (gray-value sweeps) and robust
(distance sweeps)."""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..diagram import Diagram
from ..errors import InputError
from ._noise import NoiseModel
from ._null import NullDistribution

#: Said beside every count of significant features.
SIGNIFICANCE_METHOD = "family-wise Monte Carlo test against simulated noise"
ROBUST_METHOD = ("persistence above twice the boundary tolerance plus a voxel diagonal "
                 "(stability theorem)")

#: The per-pair flag columns a verdict writes, in the order they are looked for:
#: ``significant`` (gray-value sweeps) and ``robust`` (distance sweeps).
FLAG_COLUMNS = ("significant", "robust")

#: The summary.json section that says how each flag was decided.
VERDICT_SECTIONS = {"significant": "significance", "robust": "robustness"}


def recorded_verdict(summary: dict) -> tuple[str | None, dict]:
    """The flag a summary.json holds a verdict for, and that verdict's section.

    Parameters
    ----------
    summary : dict
        The content of a result folder's summary.json.

    Returns
    -------
    (str or None, dict)
        "significant" or "robust" (looked for in the order of :data:`FLAG_COLUMNS`) and
        its non-empty section; ``(None, {})`` when the summary holds neither.

    Examples
    --------
    >>> recorded_verdict({"robustness": {"boundary_tolerance": 1.0}})
    ('robust', {'boundary_tolerance': 1.0})
    >>> recorded_verdict({"counts": {"0": 3}})
    (None, {})
    """
    for flag in FLAG_COLUMNS:
        section = summary.get(VERDICT_SECTIONS[flag])
        if section:
            return flag, section
    return None, {}


def check_alpha(alpha: float) -> float:
    """The level as a float, refused outside (0, 1).

    Parameters
    ----------
    alpha : float or str
        The family-wise significance level the user gave.

    Returns
    -------
    float
        ``alpha``, strictly between 0 and 1.

    Raises
    ------
    InputError
        For a value that is not a number or not strictly between 0 and 1.

    Examples
    --------
    >>> check_alpha("0.05")
    0.05
    """
    try:
        alpha = float(alpha)
    except (TypeError, ValueError):
        raise InputError(f"The significance level should be a number between 0 and 1, "
                         f"got {alpha!r}.") from None
    if not 0 < alpha < 1:
        raise InputError(f"The significance level should lie strictly between 0 and 1 "
                         f"(0.05 is usual), got {alpha:g}.")
    return alpha


@dataclass(frozen=True)
class Significance:
    """Everything needed to say which features of a gray-value sweep are significant."""

    noise: NoiseModel
    null: NullDistribution
    alpha: float

    def thresholds(self) -> dict[int, float]:
        """Persistence above which a feature is significant, per dimension."""
        return {d: self.null.threshold(d, self.alpha) for d in range(self.null.maxima.shape[1])}

    def describe(self, diagram: Diagram) -> dict:
        """summary.json entry: noise, level, simulations, thresholds and counts.

        Parameters
        ----------
        diagram : Diagram
            The diagram with a ``significant`` column (:func:`with_p_values`); its unit
            names the thresholds' unit for a distance sweep.

        Returns
        -------
        dict
            ``method``, ``alpha``, ``noise``, ``simulations``, ``null``, ``threshold``
            per dimension (None when no simulated maximum exceeds it), its unit,
            ``significant`` per dimension and what happens to essential classes.
        """
        unit = "Anscombe units" if self.noise.model == "poisson" else (
            diagram.unit if diagram.values == "distance" else "gray value")
        counts = significant_counts(diagram)
        return {"method": SIGNIFICANCE_METHOD, "alpha": self.alpha,
                "noise": self.noise.describe(),
                "simulations": self.null.simulations,
                "null": self.null.describe(self.alpha),
                "threshold": {str(d): (v if math.isfinite(v) else None)
                              for d, v in self.thresholds().items()},
                "threshold_unit": unit,
                "significant": {str(d): n for d, n in counts.items()},
                "essential_classes": "never die; always counted as features (p_value empty)"}


def with_p_values(diagram: Diagram, significance: Significance) -> Diagram:
    """The diagram with columns ``p_value`` and ``significant`` for every pair.

    A finite pair gets the family-wise p-value of its persistence under the null; it is
    significant when ``p_value <= alpha``. An essential class (a feature that never dies,
    such as the one component every scan has) is not tested: ``p_value`` NaN and
    ``significant`` True, so it is always counted as a feature.

    Parameters
    ----------
    diagram : Diagram
        The diagram of the scan that ``significance`` was made for.
    significance : Significance
        Noise model, null distribution and level.

    Returns
    -------
    Diagram
        A copy with the two columns added.
    """
    pairs = diagram.pairs.copy(deep=False)  # new columns only: the table is not copied
    p_value = np.full(len(pairs), np.nan)
    dims = pairs["dim"].to_numpy()
    lifetimes = pairs["persistence"].to_numpy(dtype=np.float64)
    finite = np.isfinite(lifetimes)
    for d in np.unique(dims):
        chosen = finite & (dims == d)
        p_value[chosen] = significance.null.p_value(int(d), lifetimes[chosen])
    pairs["p_value"] = p_value
    pairs["significant"] = ~finite | (p_value <= significance.alpha)
    return replace(diagram, pairs=pairs)


def robust_flags(diagram: Diagram, boundary_tolerance: float | None = None) -> Diagram:
    """The diagram of a distance sweep with a column ``robust``.

    Moving the mask's boundary by at most ``delta`` changes the signed distance to the
    boundary by at most ``delta`` (then, by Cohen-Steiner, Edelsbrunner & Harer 2007,
    every feature with persistence above twice the change keeps a partner). On the voxel
    grid the signed distance is measured between voxel centres; it differs from the
    distance to the boundary (on the voxel faces) by at most half a voxel diagonal,
    h sqrt(d) / 2, before and after the move, so the change can reach
    ``delta + h sqrt(d)``::

        solid  solid | pore          solid | pore   pore     (boundary moved by h)
         +2     +1   |  -1     ->     +1   |  -1     -2       change at the moved voxel: 2h

    A feature is robust when its persistence exceeds ``2 (delta + h sqrt(d))``;
    essential classes are robust. The guarantee assumes the boundary moves (Hausdorff
    distance at most delta); a dilation that closes a solid wall thinner than 2 delta
    changes the distances more than that.

    Parameters
    ----------
    diagram : Diagram
        Of a signed distance transform (values in the scan's unit).
    boundary_tolerance : float, optional
        delta in the scan's unit; default one voxel (the largest spacing).
    """
    pairs = diagram.pairs.copy(deep=False)  # new columns only: the table is not copied
    lifetimes = pairs["persistence"].to_numpy(dtype=np.float64)
    pairs["robust"] = ~np.isfinite(lifetimes) | (lifetimes > robust_threshold(
        diagram, boundary_tolerance))
    return replace(diagram, pairs=pairs)


def robust_threshold(diagram: Diagram, boundary_tolerance: float | None = None) -> float:
    """Persistence above which a feature of a distance sweep is robust:
    ``2 (delta + h sqrt(d))`` in the scan's unit, h the largest spacing, d the number of
    dimensions (see :func:`robust_flags`).

    Parameters
    ----------
    diagram : Diagram
        A diagram of a distance sweep (its spacing and number of dimensions are used).
    boundary_tolerance : float, optional
        delta, how far the segmented boundary may be off, in the scan's unit; default
        one voxel (the largest spacing).

    Returns
    -------
    float
        The threshold in the scan's unit.
    """
    delta = boundary_tolerance_of(diagram, boundary_tolerance)
    return 2.0 * (delta + float(max(diagram.spacing)) * math.sqrt(diagram.ndim))


def boundary_tolerance_of(diagram: Diagram, boundary_tolerance: float | None) -> float:
    """delta in the scan's unit: the given one, or one voxel (the largest spacing).

    Parameters
    ----------
    diagram : Diagram
        The diagram whose spacing and unit are used.
    boundary_tolerance : float or None
        The tolerance the user gave, or None.

    Returns
    -------
    float
        delta, 0 or more.

    Raises
    ------
    InputError
        For a negative or non-finite tolerance.
    """
    if boundary_tolerance is None:
        return float(max(diagram.spacing))
    if not (np.isfinite(boundary_tolerance) and boundary_tolerance >= 0):
        raise InputError(f"The boundary tolerance must be a length of at least 0 "
                         f"{diagram.unit}, got {boundary_tolerance}.")
    return float(boundary_tolerance)


def significant_counts(diagram: Diagram, flag: str = "significant") -> dict[int, int]:
    """Pairs per dimension whose ``flag`` column is true.

    Parameters
    ----------
    diagram : Diagram
        A diagram with the ``flag`` column.
    flag : str
        "significant" or "robust".

    Returns
    -------
    dict
        Dimension (0 to ndim - 1) -> count.
    """
    pairs = diagram.pairs
    chosen = pairs[flag].to_numpy(dtype=bool)
    dims = pairs["dim"].to_numpy()
    return {d: int(np.count_nonzero(chosen & (dims == d))) for d in range(diagram.ndim)}
