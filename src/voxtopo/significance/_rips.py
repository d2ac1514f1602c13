"""p-values of Rips bars under the universal null distribution of Bobrowski & Skraba.

For a bar (birth b, death d) of dimension k >= 1 the multiplicative persistence is
pi = d / b. Over the bars of one diagram and dimension::

    l = A log(log(pi)) + B,     B = -lambda - A * mean(log(log(pi)))

with lambda the Euler-Mascheroni constant, and l follows the left-skewed Gumbel law
P(L >= l) = exp(-exp(l)) whatever the distribution of the points (the "universal" null).
A = 1 for Rips complexes (1/2 for Cech). The constants A, the form of B and the law are
written here from memory of the paper (Bobrowski & Skraba 2023, Scientific Reports 13);
the tests check the calibration on uniform random clouds instead of trusting them.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ._flags import check_alpha

EULER_MASCHERONI = 0.5772156649015329

#: Slope A of the universal null for Rips complexes (from memory of Bobrowski & Skraba).
RIPS_SLOPE = 1.0

UNIVERSAL_NULL = ("universal null distribution of Rips persistence (Bobrowski & Skraba "
                  "2023), left-skewed Gumbel of A log log(death / birth) + B, A = 1, "
                  "Bonferroni over the bars of a dimension")


def universal_p_values(birth, death, *, slope: float = RIPS_SLOPE) -> np.ndarray:
    """p-value of each bar of ONE dimension (>= 1) of a Rips diagram.

    Parameters
    ----------
    birth, death : array_like
        Scales of the bars of one dimension of one diagram (all of them: the mean of
        log log pi over them normalises the law).
    slope : float
        A of the universal null: 1 for Rips.

    Returns
    -------
    ndarray
        exp(-exp(l)) for every bar with 0 < birth < death < inf; NaN for the others
        (a bar born at 0 or never dying has no multiplicative persistence).

    References
    ----------
    Bobrowski, O. & Skraba, P. (2023). A universal null-distribution for topological data
    analysis. Scientific Reports 13, 12274.
    """
    birth = np.asarray(birth, dtype=np.float64)
    death = np.asarray(death, dtype=np.float64)
    usable = (birth > 0) & np.isfinite(death) & (death > birth)
    p_value = np.full(birth.shape, np.nan)
    if not usable.any():
        return p_value
    loglog = np.log(np.log(death[usable] / birth[usable]))
    intercept = -EULER_MASCHERONI - slope * loglog.mean()
    p_value[usable] = np.exp(-np.exp(slope * loglog + intercept))
    return p_value


def rips_significance(pairs: pd.DataFrame, alpha: float = 0.05, *,
                      slope: float = RIPS_SLOPE) -> pd.DataFrame:
    """The bars of a Rips diagram with ``p_value`` and ``significant`` columns.

    Each dimension >= 1 is tested on its own; a bar is significant when its p-value is at
    most alpha over the number of bars of its dimension (Bonferroni, family-wise).
    Dimension 0 (born at 0) and bars still alive at the largest scale are not tested:
    ``p_value`` NaN, ``significant`` False. The law is normalised by the mean over the
    bars of the dimension, so it needs many bars (tens): with a handful, a strong bar
    weighs on its own normalisation and loses significance.

    Parameters
    ----------
    pairs : DataFrame
        Columns ``dim, birth, death`` of ONE diagram (one coefficient field).
    alpha : float
    """
    alpha = check_alpha(alpha)
    out = pairs.copy()
    p_value = np.full(len(out), np.nan)
    significant = np.zeros(len(out), dtype=bool)
    dims = out["dim"].to_numpy()
    for d in np.unique(dims):
        if d < 1:
            continue
        chosen = dims == d
        p = universal_p_values(out["birth"].to_numpy()[chosen], out["death"].to_numpy()[chosen],
                               slope=slope)
        tested = np.count_nonzero(np.isfinite(p))
        p_value[chosen] = p
        significant[chosen] = np.isfinite(p) & (p <= alpha / max(tested, 1))
    out["p_value"] = p_value
    out["significant"] = significant
    return out


def dominant_loop_stability(run, seeds, alpha: float = 0.05) -> dict:
    """In how many reruns the dominant loop stays a significant, dominant loop.

    Parameters
    ----------
    run : callable(seed) -> DataFrame
        Computes the Rips diagram (columns ``dim, birth, death``, one field) of the data
        resampled with ``seed`` (voxtopo.patches passes its sampling seed).
    seeds : iterable of int
        One rerun per seed.
    alpha : float
        Family-wise level of the universal-null test.

    Returns
    -------
    dict
        ``reruns``, ``dominant`` (reruns whose loop of largest death / birth is
        significant), ``fraction`` and ``p_values`` (that loop's p-value in each rerun,
        NaN when a rerun has no loop).
    """
    alpha = check_alpha(alpha)
    p_values = []
    dominant = 0
    seeds = list(seeds)
    for seed in seeds:
        tested = rips_significance(run(seed), alpha)
        loops = tested[(tested["dim"] == 1) & np.isfinite(tested["p_value"])]
        if loops.empty:
            p_values.append(float("nan"))
            continue
        strongest = loops.loc[(loops["death"] / loops["birth"]).idxmax()]
        p_values.append(float(strongest["p_value"]))
        dominant += bool(strongest["significant"])
    return {"reruns": len(seeds), "dominant": dominant,
            "fraction": dominant / len(seeds) if seeds else float("nan"),
            "p_values": p_values, "seeds": seeds, "method": UNIVERSAL_NULL}
