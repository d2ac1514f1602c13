"""The lifetime colour scheme: how long a feature lives, as colour and point size.

Short-lived features (noise, as a rule) are drawn small and in a quiet ash grey; the longer
a feature lives the larger it grows and the warmer it turns, through a harbour blue to amber::

    lifetime   0 ........ half of the longest ........ the longest (or never dies)
    colour     ash #c5ccd0  ->  harbour blue #2f7f9e  ->  amber #f0a202

Lifetimes are scaled by the longest finite persistence in the result, so the colours of
every layer of one result, the diagram panel and its legend agree. Features that never die
take the top of the scale.
"""

from __future__ import annotations

import numpy as np

__all__ = ["RAMP_STOPS", "longest_finite", "lifetime_fraction", "lifetime_colours",
           "lifetime_sizes", "lifetime_colormap"]

#: (position, hex colour) of the ramp.
RAMP_STOPS = ((0.0, "#c5ccd0"), (0.5, "#2f7f9e"), (1.0, "#f0a202"))


def _rgb(hex_colour: str) -> np.ndarray:
    hex_colour = hex_colour.lstrip("#")
    return np.array([int(hex_colour[i:i + 2], 16) / 255.0 for i in (0, 2, 4)])


def longest_finite(persistence) -> float:
    """The longest finite persistence (1.0 when there is none, so fractions stay defined)."""
    values = np.asarray(persistence, dtype=np.float64)
    finite = values[np.isfinite(values)]
    return float(finite.max()) if len(finite) and finite.max() > 0 else 1.0


def lifetime_fraction(persistence, longest: float) -> np.ndarray:
    """Persistence as a fraction of ``longest``, clipped to [0, 1]; infinite -> 1."""
    values = np.asarray(persistence, dtype=np.float64)
    return np.clip(np.where(np.isfinite(values), values / longest, 1.0), 0.0, 1.0)


def lifetime_colours(fraction) -> np.ndarray:
    """RGBA colours (n, 4) of the ramp at the given lifetime fractions."""
    fraction = np.asarray(fraction, dtype=np.float64)
    positions = np.array([p for p, _ in RAMP_STOPS])
    stops = np.array([_rgb(c) for _, c in RAMP_STOPS])
    rgb = np.stack([np.interp(fraction, positions, stops[:, k]) for k in range(3)], axis=-1)
    return np.concatenate([rgb, np.ones(rgb.shape[:-1] + (1,))], axis=-1)


def lifetime_sizes(fraction, shape) -> np.ndarray:
    """Point diameters in voxels: from one to four size units, growing as the square root
    of the lifetime so that the few long-lived features stand out without hiding the rest.
    A size unit is one voxel per 48 voxels of the longest axis (at least one voxel)."""
    unit = max(1.0, max(shape) / 48.0)
    return unit * (1.0 + 3.0 * np.sqrt(np.asarray(fraction, dtype=np.float64)))


def lifetime_colormap():
    """The ramp as a matplotlib colormap (for the diagram panel and its legend)."""
    from matplotlib.colors import LinearSegmentedColormap

    return LinearSegmentedColormap.from_list("voxtopo lifetime",
                                             [(p, c) for p, c in RAMP_STOPS])
