"""Detrending, normalisation, the spectral period, amplitude, damping and surrogates.

All functions take many signals at once, one per row, and are vectorised over rows.
"""

from __future__ import annotations

import numpy as np
from scipy.ndimage import median_filter
from scipy.signal import hilbert

#: Zero padding of the periodogram: the peak is searched on a grid this many times finer
#: than the natural 1 / duration, then refined by a parabola through the log powers.
PADDING = 4

#: Rows handled at once by the FFTs (bounds the memory of the padded spectra).
BATCH = 4096

#: Surrogate spectra are the signal's periodogram smoothed by a running median over this
#: fraction of the frequency bins (at least MIN_SMOOTHING bins).
SMOOTHING_FRACTION = 0.15
MIN_SMOOTHING = 7


def detrend(traces, degree: int = 1) -> np.ndarray:
    """Remove a least-squares polynomial trend (default a straight line) from each row.

    A low-degree polynomial takes out slow drift (bleaching, focus) without touching an
    oscillation that lasts a few periods, so a damped oscillation keeps its shape.

    Parameters
    ----------
    traces : array_like, shape (..., frames)
        Signals over time, one per row.
    degree : int
        Degree of the trend (0: the mean only).

    Returns
    -------
    ndarray of float64
        The residuals, of the shape of ``traces``.

    Examples
    --------
    >>> bool(np.allclose(detrend(np.array([[1.0, 2.0, 3.0, 4.0]])), 0))
    True
    """
    traces = np.asarray(traces, dtype=np.float64)
    frames = traces.shape[-1]
    time = np.linspace(-1.0, 1.0, frames)
    basis, _ = np.linalg.qr(np.vander(time, min(degree + 1, frames), increasing=True))
    return traces - (traces @ basis) @ basis.T


def normalise(traces) -> tuple[np.ndarray, np.ndarray]:
    """Rows scaled to unit standard deviation, and a mask of the rows that do not vary.

    Rows that do not vary (standard deviation zero up to rounding) are left at zero.

    Parameters
    ----------
    traces : array_like, shape (rows, frames)
        Signals over time, one per row (usually detrended).

    Returns
    -------
    scaled : ndarray of float64
        Each row over its standard deviation; flat rows all zero.
    flat : ndarray of bool, shape (rows,)
        The rows that do not vary.

    Examples
    --------
    >>> scaled, flat = normalise(np.array([[1.0, -1.0], [2.0, 2.0]]))
    >>> scaled.tolist(), flat.tolist()
    ([[1.0, -1.0], [0.0, 0.0]], [False, True])
    """
    traces = np.asarray(traces, dtype=np.float64)
    scale = traces.std(axis=-1)
    reference = np.abs(traces).max(axis=-1)
    flat = scale <= 1e-12 * np.maximum(reference, 1e-300)
    safe = np.where(flat, 1.0, scale)
    out = traces / safe[:, None]
    out[flat] = 0.0
    return out, flat


def spectral_period(traces, band: tuple[float, float]) -> np.ndarray:
    """Period (in frames) of the highest periodogram peak between ``band`` = (shortest,
    longest) period in frames, one per row.

    The rows are tapered with a Hann window, zero padded ``PADDING`` times, and the peak
    is refined by a parabola through the logarithms of the three powers around it.

    Parameters
    ----------
    traces : array_like, shape (rows, frames) or (frames,)
        Signals over time.
    band : (float, float)
        Shortest and longest period searched, in frames.

    Returns
    -------
    ndarray of float64, shape (rows,)
        Periods in frames, within ``band``.

    Examples
    --------
    >>> t = np.arange(200)
    >>> float(spectral_period(np.cos(2 * np.pi * t / 17.0)[None], (4, 100))[0]).__round__(1)
    17.0
    """
    traces = np.atleast_2d(np.asarray(traces, dtype=np.float64))
    frames = traces.shape[1]
    size = PADDING * frames
    frequencies = np.fft.rfftfreq(size)
    shortest, longest = band
    allowed = np.flatnonzero((frequencies >= 1.0 / longest) & (frequencies <= 1.0 / shortest))
    taper = np.hanning(frames)
    periods = np.empty(len(traces))
    for start in range(0, len(traces), BATCH):
        block = traces[start:start + BATCH]
        power = np.abs(np.fft.rfft(block * taper, n=size, axis=1)) ** 2
        peak = allowed[np.argmax(power[:, allowed], axis=1)]
        left = np.log(power[np.arange(len(block)), np.maximum(peak - 1, 0)] + 1e-300)
        middle = np.log(power[np.arange(len(block)), peak] + 1e-300)
        right = np.log(power[np.arange(len(block)),
                             np.minimum(peak + 1, len(frequencies) - 1)] + 1e-300)
        curvature = left - 2 * middle + right
        shift = np.where(curvature < 0, 0.5 * (left - right) / np.where(curvature < 0,
                                                                        curvature, -1.0), 0.0)
        shift = np.clip(shift, -0.5, 0.5)
        frequency = (peak + shift) / size
        frequency = np.clip(frequency, 1.0 / longest, 1.0 / shortest)
        periods[start:start + BATCH] = 1.0 / frequency
    return periods


def amplitude(detrended) -> np.ndarray:
    """sqrt(2) times the standard deviation of each detrended row: the amplitude of a
    sinusoid, in the signal's own units.

    Parameters
    ----------
    detrended : array_like, shape (..., frames)
        Detrended signals, one per row.

    Returns
    -------
    ndarray
        One amplitude per row.

    Examples
    --------
    >>> t = np.arange(400)
    >>> round(float(amplitude(3 * np.sin(2 * np.pi * t / 20)[None])[0]), 6)
    3.0
    """
    return np.sqrt(2.0) * np.asarray(detrended).std(axis=-1)


def damping(detrended, frame_interval: float = 1.0) -> np.ndarray:
    """Decay rate of each row's envelope, per time unit (1 / e-folding time).

    The envelope is the modulus of the analytic signal (Hilbert transform); its logarithm
    is fitted by a straight line over the middle 80 percent of the frames (the transform
    rings at the ends). Positive: the oscillation dies away; near zero: it keeps its
    amplitude; negative: it grows.

    Parameters
    ----------
    detrended : array_like, shape (rows, frames) or (frames,)
        Detrended signals.
    frame_interval : float
        Time between frames, in the time unit the rate is given in.

    Returns
    -------
    ndarray of float64, shape (rows,)
        Decay rates, per time unit.

    Examples
    --------
    >>> t = np.arange(400.0)
    >>> trace = np.exp(-t / 100) * np.cos(2 * np.pi * t / 20)
    >>> round(float(damping(trace[None])[0]), 3)
    0.01
    """
    detrended = np.atleast_2d(np.asarray(detrended, dtype=np.float64))
    frames = detrended.shape[1]
    envelope = np.abs(hilbert(detrended, axis=1))
    keep = slice(frames // 10, frames - frames // 10)
    logs = np.log(np.maximum(envelope[:, keep], 1e-300))
    time = np.arange(frames, dtype=np.float64)[keep]
    time = time - time.mean()
    slope = (logs * time).sum(axis=1) / (time ** 2).sum()
    return -slope / frame_interval


def surrogates(traces, count: int, rng: np.random.Generator) -> np.ndarray:
    """Random-phase surrogates of each row's smoothed spectrum: shape (rows, count, frames).

    Each surrogate has random phases and Gaussian (Rayleigh-modulus) Fourier coefficients
    whose power follows the row's periodogram smoothed by a running median across
    frequencies. The smoothing keeps the broad colour of the noise (slow drift, blur over
    time) but not a narrow spectral peak: a surrogate of a rhythm is noise of the same
    colour, not the same rhythm with shuffled phases (which, for a sinusoid, would be the
    sinusoid again and make the test powerless). For white noise the surrogates are white
    noise, so the p-values of white noise are uniform.

    Parameters
    ----------
    traces : array_like, shape (rows, frames) or (frames,)
        Signals over time (detrended).
    count : int
        Surrogates per row.
    rng : numpy.random.Generator
        The source of randomness (seeded by the caller).

    Returns
    -------
    ndarray of float64, shape (rows, count, frames)

    References
    ----------
    Theiler, Eubank, Longtin, Galdrikian & Farmer (1992), "Testing for nonlinearity in
    time series: the method of surrogate data", Physica D 58.
    """
    traces = np.atleast_2d(np.asarray(traces, dtype=np.float64))
    rows, frames = traces.shape
    spectrum = np.fft.rfft(traces, axis=1)
    power = np.abs(spectrum) ** 2
    bins = power.shape[1]
    width = max(MIN_SMOOTHING, round(SMOOTHING_FRACTION * bins) | 1)
    smooth = median_filter(power[:, 1:], size=(1, width), mode="reflect")
    scale = np.sqrt(smooth / 2.0)
    out = np.empty((rows, count, frames))
    for k in range(count):
        noise = rng.standard_normal((rows, bins - 1)) + 1j * rng.standard_normal((rows, bins - 1))
        coefficients = np.zeros((rows, bins), dtype=complex)
        coefficients[:, 1:] = scale * noise
        if frames % 2 == 0:
            coefficients[:, -1] = coefficients[:, -1].real * np.sqrt(2.0)
        out[:, k] = np.fft.irfft(coefficients, n=frames, axis=1)
    return out
