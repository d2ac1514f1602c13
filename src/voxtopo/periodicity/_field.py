"""Whole-field rhythm: sliding windows of whole frames after PCA (Tralie & Perea 2018).

::

    frames (t, pixels) --detrend, PCA--> (t, k) coordinates
        --sliding windows of all k at once, centred and normalised--> cloud
        --Rips over Z/2 and Z/3--> H1 (periodicity) and H2 (quasi-periodicity)

A periodic video traces a loop (one long H1 bar). Two incommensurate rhythms trace a
torus: two long H1 bars and one H2 bar over every field (Hatcher 2002), where a Klein
bottle or a projective plane would differ between Z/2 and Z/3.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError
from ..patches import persistence
from ._analysis import band_in_frames
from ._embedding import CANDIDATES, DIMENSION, GOLDEN, SQRT3, _catmull_rom, maxmin_batch, \
    window_length
from ._spectrum import detrend, spectral_period

#: Landmarks of the H1 computation that runs to the sphere's diameter (2): the full Rips
#: complex of 100 points takes about a second; more would take minutes.
LOOP_POINTS = 100


@dataclass(frozen=True)
class FieldRhythm:
    """Periodicity of the whole field of view.

    Attributes
    ----------
    period : float
        Period of the first principal component's highest spectral peak, in the time unit.
    components : int
        Principal components kept.
    explained : float
        Fraction of the variance over time that they hold.
    pairs : DataFrame
        ``dim, birth, death, persistence, field, max_edge``: Rips bars of the
        sliding-window cloud (scales: Euclidean distance on the unit sphere). Dimension 1
        appears twice: first from the first ``LOOP_POINTS`` landmarks up to the diameter 2
        (``max_edge`` 2), then with every landmark up to ``max_edge``, the run that also
        gives dimensions 0 and 2.
    score : float
        Longest H1 bar over Z/2 (full scale) divided by sqrt(3): 0 (no loop) to 1.
    longest : dict
        Field -> {"h1_full_scale": 3 longest, "h1": 3 longest, "h2": 2 longest}
        persistences (counted up to ``max_edge``): one long H1 bar is a loop, two long H1
        bars and one long H2 bar a torus (two incommensurate rhythms).
    points : int
        Landmarks of the cloud.
    max_edge : float
        Largest scale of the run that gives dimension 2.
    """

    period: float
    components: int
    explained: float
    pairs: pd.DataFrame
    score: float
    longest: dict
    points: int
    max_edge: float

    def summary(self) -> dict:
        return {"period": self.period, "components": self.components,
                "explained_variance": self.explained, "score": self.score,
                "longest_bars": {str(k): v for k, v in self.longest.items()},
                "landmarks": self.points, "max_edge": self.max_edge}


def principal_components(stack, components: int, detrend_degree: int = 1):
    """(t, k) coordinates of the frames on their first ``components`` principal axes, and
    the fraction of the variance they hold (from the t x t Gram matrix, so pixels may be
    many)."""
    stack = np.asarray(stack)
    frames = stack.shape[0]
    flat = detrend(stack.reshape(frames, -1).T.astype(np.float64), detrend_degree).T
    gram = flat @ flat.T
    values, vectors = np.linalg.eigh(gram)
    values, vectors = values[::-1], vectors[:, ::-1]
    k = int(min(components, frames - 1))
    total = float(values.clip(min=0).sum())
    explained = float(values[:k].clip(min=0).sum() / total) if total > 0 else 0.0
    return vectors[:, :k] * np.sqrt(values[:k].clip(min=0)), explained


def field_rhythm(stack, frame_interval: float = 1.0, periods=None, components: int = 8,
                 points: int = 200, dimension: int = DIMENSION, fields=(2, 3),
                 time_unit: str = "s", seed: int = 0) -> FieldRhythm:
    """Periodicity and quasi-periodicity of a whole time-lapse (Tralie & Perea 2018).

    Parameters
    ----------
    stack : ndarray, shape (t, y, x) or (t, z, y, x)
    frame_interval : float
        Time between frames, in ``time_unit``.
    periods : (float, float), optional
        Shortest and longest period searched, in ``time_unit``.
    components : int
        Principal components of the frames kept.
    points : int
        Landmarks of the sliding-window cloud (max-min).
    dimension : int
        Embedding dimension M: each window holds M + 1 frames (interpolated).
    fields : tuple of int
        Primes p of the coefficient fields Z/p.

    Returns
    -------
    FieldRhythm

    References
    ----------
    Tralie & Perea (2018), "(Quasi)periodicity quantification in video data, using
    topology", SIAM J. Imaging Sci. 11.
    """
    stack = np.asarray(stack)
    if stack.ndim not in (3, 4):
        raise InputError(f"A time-lapse must be (t, y, x) or (t, z, y, x), got shape "
                         f"{stack.shape}.")
    if not np.isfinite(stack).all():
        raise InputError("The time-lapse holds NaN or infinite values; drop or fill those "
                         "frames first.")
    frames = stack.shape[0]
    band = band_in_frames(periods, frames, frame_interval, time_unit)
    coordinates, explained = principal_components(stack, components)
    if explained == 0.0:
        raise InputError("The time-lapse does not change over time; there is no rhythm to "
                         "measure.")
    period = float(spectral_period(coordinates[:, 0][None], band)[0])
    window = float(window_length(period, dimension))
    tau = window / dimension
    candidates = max(CANDIDATES * points, frames)
    starts = max(frames - 1 - window, 0.0) * ((np.arange(candidates) * GOLDEN) % 1.0)
    times = starts[:, None] + tau * np.arange(dimension + 1)[None, :]
    k = coordinates.shape[1]
    windows = _catmull_rom(coordinates.T, np.broadcast_to(np.clip(times, 0, frames - 1.0),
                                                          (k,) + times.shape))
    windows -= windows.mean(axis=2, keepdims=True)
    cloud = windows.transpose(1, 0, 2).reshape(candidates, -1)
    norms = np.linalg.norm(cloud, axis=1, keepdims=True)
    cloud = np.divide(cloud, norms, out=np.zeros_like(cloud), where=norms > 1e-12)
    keep = maxmin_batch(cloud[None], min(points, candidates))[0]
    cloud = cloud[keep]
    # H1 to the diameter of the sphere, so that a round loop's bar is not cut short...
    loops = persistence(cloud[:min(LOOP_POINTS, len(cloud))], landmarks=None,
                        max_dimension=1, field=tuple(fields), max_edge=2.0, seed=seed)
    # ... and H2 with all the landmarks, up to the scale gudhi can afford
    shells = persistence(cloud, landmarks=None, max_dimension=2, field=tuple(fields),
                         seed=seed)
    longest = {}
    for p in shells.fields:
        longest[p] = {"h1_full_scale": _top(loops.bars(1, p), 3),
                      "h1": _top(shells.bars(1, p), 3), "h2": _top(shells.bars(2, p), 2)}
    pairs = pd.concat([loops.pairs[loops.pairs["dim"] == 1].assign(max_edge=loops.max_edge),
                       shells.pairs[shells.pairs["dim"] != 1].assign(max_edge=shells.max_edge),
                       shells.pairs[shells.pairs["dim"] == 1].assign(
                           max_edge=shells.max_edge)], ignore_index=True)
    score = longest[shells.fields[0]]["h1_full_scale"][0] / SQRT3
    return FieldRhythm(period=period * frame_interval, components=k, explained=explained,
                       pairs=pairs, score=float(score), longest=longest, points=len(keep),
                       max_edge=float(shells.max_edge))


def _top(bars: pd.DataFrame, count: int) -> list[float]:
    lengths = [float(v) for v in bars["persistence_to_max_edge"].head(count)]
    return lengths + [0.0] * (count - len(lengths))
