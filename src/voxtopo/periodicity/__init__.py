"""Rhythms in time-lapse stacks: sliding-window persistence of mean-intensity signals.

::

    TimeLapse --signals--> traces (pixels, bins, tiles or regions)
              --measure--> score, period, p_value, amplitude, damping per signal
    TimeLapse --field_rhythm--> whole-field periodicity and quasi-periodicity

>>> import numpy as np
>>> from voxtopo import periodicity
>>> t = np.arange(150)
>>> stack = np.cos(2 * np.pi * t / 15.0)[:, None, None] * np.ones((1, 4, 4))
>>> signals = periodicity.tile_signals(stack, tiles=2)
>>> table = periodicity.measure(signals.traces, method=periodicity.Method(surrogates=0))
>>> table["period"].round(1).tolist()
[15.0, 15.0, 15.0, 15.0]
"""

from ._analysis import COLUMNS, Method, band_in_frames, measure
from ._field import FieldRhythm, field_rhythm
from ._embedding import DIMENSION, rips_bars, sliding_windows, window_length
from ._signals import Signals, pixel_signals, region_signals, tile_signals
from ._spectrum import amplitude, damping, detrend, normalise, spectral_period, surrogates

__all__ = ["COLUMNS", "DIMENSION", "FieldRhythm", "Method", "Signals", "amplitude",
           "band_in_frames", "damping", "detrend", "field_rhythm", "measure", "normalise",
           "pixel_signals", "region_signals", "rips_bars", "sliding_windows",
           "spectral_period", "surrogates", "tile_signals", "window_length"]
