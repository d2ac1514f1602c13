"""The plain result every persistence backend returns."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass
class RawPairs:
    """Persistence pairs as flat arrays, before they become a Diagram.

    Values are in the input's own units: for a superlevel filtration the birth is the
    higher value and the death the lower, and an essential class has death -inf
    (sublevel: +inf). ``birth_index`` and ``death_index`` are C-order flat indices into
    the input array (the voxel whose value is the birth / death); ``death_index`` is -1
    for an essential class. Pairs of zero persistence are not included.
    """

    dim: np.ndarray          # int8
    birth: np.ndarray        # float64
    death: np.ndarray        # float64
    birth_index: np.ndarray  # int64
    death_index: np.ndarray  # int64
    engine: str = ""
    notes: tuple[str, ...] = ()

    def __post_init__(self):
        self.dim = np.asarray(self.dim, dtype=np.int8)
        self.birth = np.asarray(self.birth, dtype=np.float64)
        self.death = np.asarray(self.death, dtype=np.float64)
        self.birth_index = np.asarray(self.birth_index, dtype=np.int64)
        self.death_index = np.asarray(self.death_index, dtype=np.int64)

    def __len__(self) -> int:
        return len(self.dim)
