"""Porosity and connectivity of segmented scans.

Pore bodies and throats from the persistence of the signed distance transform, solid
grains likewise, loops and enclosed voids, percolation radius and connected porosity per
axis, Euler characteristic and connectivity density of each phase, and the Minkowski
functionals of the pore phase. :func:`analyse` measures, :func:`regions_of` labels each
pore's region by its id; the pores job (:mod:`voxtopo.jobs.pores`) writes the result
folder.

>>> import numpy as np
>>> from voxtopo.porosity import analyse
>>> cavity = np.zeros((16, 16, 16), bool)
>>> cavity[5:11, 5:11, 5:11] = True                   # one closed pore in solid
>>> result = analyse(cavity, spacing=(2.0, 2.0, 2.0), unit="um")
>>> result.summary["counts"]["pores"], result.summary["percolates"]["x"]
(1, 'no')
"""

from ._analysis import (COMPLEMENT, PoreAnalysis, analyse, cautions, is_binary_mask,
                        size_column)
from ._regions import pore_regions, regions_of

__all__ = ["analyse", "PoreAnalysis", "cautions", "COMPLEMENT", "size_column",
           "pore_regions", "regions_of", "is_binary_mask"]
