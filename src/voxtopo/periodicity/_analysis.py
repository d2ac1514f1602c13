"""Score, period, p-value, amplitude and damping of many signals (SW1PerS-style).

::

    trace --detrend, normalise--> z --periodogram--> period (frames)
          --sliding windows (window from the period)--> cloud on the unit sphere
          --Rips H1 over Z/2 and Z/3--> longest bar / sqrt(3) = score
          --random-phase surrogates (smoothed spectrum), same steps--> p-value
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError
from ._embedding import DIMENSION, SQRT3, longest_h1, sliding_windows
from ._spectrum import amplitude, damping, detrend, normalise, spectral_period, surrogates

#: Columns of the per-signal table, in this order, and their units ({time} and {value}
#: are replaced by the time unit and the intensity unit).
COLUMNS = {
    "score": "longest H1 bar of the sliding-window cloud over Z/2, divided by sqrt(3); "
             "0 (no loop) to 1 (a round circle)",
    "score_z3": "the same over Z/3",
    "period": "{time}",
    "p_value": "Monte Carlo p-value of score against surrogates with random phases and "
               "the smoothed spectrum, (1 + #{{surrogate >= observed}}) / (1 + N)",
    "significant": "p_value <= alpha",
    "amplitude": "{value} (sqrt(2) x standard deviation of the detrended trace)",
    "damping": "1/{time} (decay rate of the envelope; e-folding time = 1 / damping)",
    "flat": "true when the trace does not vary (no score)",
}

#: Rows of sliding-window clouds built at once (bounds their memory).
CHUNK = 512


@dataclass(frozen=True)
class Method:
    """Settings of the periodicity measurement.

    Attributes
    ----------
    periods : (float, float) or None
        Shortest and longest period searched, in the time unit; None: from 2 frames to
        half the duration.
    points : int
        Windows per sliding-window cloud.
    dimension : int
        Embedding dimension M (M + 1 samples per window).
    surrogates : int
        Surrogates (random phases, smoothed spectrum) N behind each p-value (0: no p-values).
    alpha : float
        Level at which a p-value counts as significant.
    pooled : bool
        One null of N surrogates, each from a randomly chosen signal, shared by all
        signals (per-pixel maps), instead of N surrogates of every signal.
    fields : tuple of int
        Primes of the coefficient fields; the first gives ``score``.
    detrend_degree : int
        Degree of the polynomial trend removed from each trace.
    seed : int
        Seed of the surrogates.
    """

    periods: tuple[float, float] | None = None
    points: int = 60
    dimension: int = DIMENSION
    surrogates: int = 99
    alpha: float = 0.05
    pooled: bool = False
    fields: tuple[int, ...] = (2, 3)
    detrend_degree: int = 1
    seed: int = 0


def band_in_frames(periods, frames: int, frame_interval: float, time_unit: str = "s"):
    """(shortest, longest) period in frames, checked against the length of the signals.

    At least two periods must fit in the signal and a period must span two frames or more
    (the Nyquist limit).

    Parameters
    ----------
    periods : (float, float) or None
        Shortest and longest period in ``time_unit``; None: from two frames to half the
        series.
    frames : int
        Length of the signals.
    frame_interval : float
        Time between frames, in ``time_unit``.
    time_unit : str
        The unit of ``periods``, for the messages.

    Returns
    -------
    (float, float)
        Shortest and longest period in frames.

    Raises
    ------
    InputError
        When the series is too short or the band is not two increasing positive numbers
        that fit in it.

    Examples
    --------
    >>> band_in_frames(None, 100, 0.5)
    (2.0, 50.0)
    """
    if frames < 2:
        raise InputError(f"The time-lapse has {frames} frame; a rhythm needs a series of "
                         f"frames, at least two periods long.")
    duration = frames * frame_interval
    if periods is None:
        if frames < 4:
            raise InputError(f"The time-lapse has only {frames} frames; at least two periods "
                             f"of at least two frames each need 4 frames or more.")
        return 2.0, frames / 2.0
    try:
        shortest, longest = (float(v) for v in periods)
    except (TypeError, ValueError):
        raise InputError(f"periods must be two numbers (shortest, longest) in {time_unit}, "
                         f"got {periods!r}.") from None
    if not (np.isfinite(shortest) and np.isfinite(longest) and 0 < shortest < longest):
        raise InputError(f"periods {shortest:g}:{longest:g} must be two positive numbers, the "
                         f"shortest first.")
    if 2 * longest > duration:
        raise InputError(f"The time-lapse covers {duration:g} {time_unit} ({frames} frames at "
                         f"{frame_interval:g} {time_unit}) but the longest period asked for is "
                         f"{longest:g} {time_unit}; at least two periods must fit, so give a "
                         f"longest period of at most {duration / 2:g} {time_unit}.")
    if shortest < 2 * frame_interval:
        raise InputError(f"The shortest period {shortest:g} {time_unit} is shorter than two "
                         f"frames ({2 * frame_interval:g} {time_unit}); a rhythm faster than "
                         f"that cannot be seen at this frame rate.")
    return shortest / frame_interval, longest / frame_interval


def _check_method(method: Method) -> None:
    if method.points < 8 or method.dimension < 2:
        raise InputError(f"points must be at least 8 and dimension at least 2, got points="
                         f"{method.points}, dimension={method.dimension}.")
    if method.surrogates < 0:
        raise InputError(f"surrogates must be 0 or more, got {method.surrogates}.")
    if not 0 < method.alpha < 1:
        raise InputError(f"The significance level must lie between 0 and 1, got "
                         f"{method.alpha}.")
    if not method.fields or any(p not in (2, 3, 5, 7, 11, 13) for p in method.fields):
        raise InputError(f"fields must be small primes such as (2, 3), got {method.fields}.")


def _cloud_scores(z, period_frames, method: Method, fields, progress=None,
                  phase: str = "") -> np.ndarray:
    """Longest H1 bar / sqrt(3) of the cloud of every row, shape (rows, len(fields))."""
    rows = len(z)
    out = np.zeros((rows, len(fields)))
    for start in range(0, rows, CHUNK):
        stop = min(start + CHUNK, rows)
        clouds = sliding_windows(z[start:stop], period_frames[start:stop], method.points,
                                 method.dimension)
        for k, p in enumerate(fields):
            out[start:stop, k] = longest_h1(clouds, p) / SQRT3
        if progress is not None:
            progress(phase, stop / rows)
    return out


def measure(traces, frame_interval: float = 1.0, method: Method | None = None,
            time_unit: str = "s", progress=None) -> pd.DataFrame:
    """Periodicity score, period, p-value, amplitude and damping of each trace.

    Parameters
    ----------
    traces : ndarray, shape (n, frames)
        One signal per row (mean intensity over time).
    frame_interval : float
        Time between frames, in ``time_unit``.
    method : Method, optional
        Settings; the defaults of :class:`Method`.
    time_unit : str
        Unit of ``frame_interval`` and of the periods ("s", or "frame" when unknown).
    progress : callable, optional
        ``progress(phase, fraction)``; may raise :class:`~voxtopo.Cancelled` to stop.

    Returns
    -------
    DataFrame
        One row per trace, the columns of ``COLUMNS`` (units there).

    Notes
    -----
    Each trace loses a straight-line trend and is scaled to unit standard deviation. Its
    period is the highest periodogram peak within ``method.periods``; the sliding windows
    span ``period * M / (M + 1)`` (Perea & Harer 2015). The score is the SW1PerS score
    (Perea, Deckard, Haase & Harer 2015): the longest H1 bar of the Rips complex of the
    centred, normalised cloud over sqrt(3). Each surrogate goes through the same steps
    (its own period, its own window), so the search for the best period is part of the
    null. p = (1 + #{surrogate score >= observed}) / (1 + N) (Besag & Clifford 1989).

    References
    ----------
    Perea & Harer (2015), Found. Comput. Math. 15. Perea, Deckard, Haase & Harer (2015),
    BMC Bioinformatics 16. Theiler et al. (1992), Physica D 58.

    Examples
    --------
    >>> t = np.arange(200)
    >>> table = measure(np.cos(2 * np.pi * t / 20.0)[None], method=Method(surrogates=0))
    >>> round(float(table["period"][0]), 1), bool(table["score"][0] > 0.9)
    (20.0, True)
    """
    method = method or Method()
    _check_method(method)
    traces = np.atleast_2d(np.asarray(traces, dtype=np.float64))
    if not np.isfinite(traces).all():
        bad = np.unique(np.nonzero(~np.isfinite(traces))[1])
        raise InputError(f"The signals hold NaN or infinite values at frame"
                         f"{'s' if len(bad) > 1 else ''} {', '.join(map(str, bad[:5]))}"
                         f"{' ...' if len(bad) > 5 else ''}; drop or fill those frames first.")
    frames = traces.shape[1]
    band = band_in_frames(method.periods, frames, frame_interval, time_unit)
    report = progress or (lambda phase, fraction: None)
    detrended = detrend(traces, method.detrend_degree)
    z, flat = normalise(detrended)
    period_frames = spectral_period(z, band)
    live = np.flatnonzero(~flat)
    scores = np.full((len(traces), len(method.fields)), np.nan)
    scores[live] = _cloud_scores(z[live], period_frames[live], method, method.fields,
                                 report, "sliding-window persistence")
    p_values = np.full(len(traces), np.nan)
    if method.surrogates > 0 and len(live):
        p_values[live] = _p_values(z[live], scores[live, 0], band, method, report)
    table = pd.DataFrame({
        "score": scores[:, 0],
        "score_z3": scores[:, method.fields.index(3)] if 3 in method.fields else np.nan,
        "period": np.where(flat, np.nan, period_frames * frame_interval),
        "p_value": p_values,
        "significant": p_values <= method.alpha,
        "amplitude": amplitude(detrended),
        "damping": np.where(flat, np.nan, damping(detrended, frame_interval)),
        "flat": flat,
    })
    return table[list(COLUMNS)]


def _p_values(z, observed, band, method: Method, report) -> np.ndarray:
    """Monte Carlo p-values (Besag & Clifford 1989) against surrogates with random phases
    and the signal's smoothed spectrum."""
    rng = np.random.default_rng(method.seed)
    count = method.surrogates
    if method.pooled:
        sources = rng.integers(0, len(z), size=count)
        fake = surrogates(z[sources], 1, rng)[:, 0]
        fake, _ = normalise(fake)
        null = _cloud_scores(fake, spectral_period(fake, band), method, method.fields[:1],
                             report, "surrogates (pooled)")[:, 0]
        ranked = np.sort(null)
        exceed = count - np.searchsorted(ranked, observed - 1e-12, side="left")
        return (1.0 + exceed) / (1.0 + count)
    exceed = np.zeros(len(z))
    step = max(1, CHUNK // count)     # signals whose surrogates fill about one chunk
    for start in range(0, len(z), step):
        block = slice(start, min(start + step, len(z)))
        fake = surrogates(z[block], count, rng).reshape(-1, z.shape[1])
        fake, _ = normalise(fake)
        null = _cloud_scores(fake, spectral_period(fake, band), method, method.fields[:1],
                             None)[:, 0].reshape(-1, count)
        exceed[block] = (null >= observed[block, None] - 1e-12).sum(axis=1)
        report("surrogates", block.stop / len(z))
    return (1.0 + exceed) / (1.0 + count)
