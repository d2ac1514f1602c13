"""Patch spaces: high-contrast k x k patches of images as a point cloud, and its topology.

The workflow (Lee, Pedersen & Mumford 2003; Carlsson, Ishkhanov, de Silva & Zomorodian
2008; de Silva & Carlsson 2004)::

    images --sample--> Patches (unit sphere in DCT coordinates)
           --core-->   densest points (k-th neighbour distance)
           --persistence--> max-min landmarks, Rips or witness complex, bars over Z/p

>>> import numpy as np
>>> from voxtopo import patches
>>> rng = np.random.default_rng(0)
>>> cloud = patches.sample(rng.random((80, 80)), k=3)
>>> dense = patches.core(cloud, k_neighbour=10, density_percent=50)
>>> result = patches.persistence(dense, landmarks=40, max_dimension=1)
>>> sorted(result.pairs.columns)
['birth', 'death', 'dim', 'field', 'persistence']
"""

from ._basis import dct_basis
from ._core import core
from ._rips import PatchPersistence, persistence
from ._sample import ORIGIN_COLUMNS, Patches, sample

__all__ = ["sample", "core", "persistence", "dct_basis", "Patches",
           "PatchPersistence", "ORIGIN_COLUMNS"]
