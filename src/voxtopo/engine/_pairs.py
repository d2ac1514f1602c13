"""The plain result every persistence backend returns."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError

#: Whole numbers up to this magnitude are exact in float64 (a 53-bit significand); the
#: pairs keep their values in float64, so integers beyond it would round together.
LARGEST_EXACT_INTEGER = 2 ** 53


def check_exact_in_float64(values: np.ndarray, source: str) -> None:
    """Refuse 64-bit integer values that float64, the type of every pair's birth and death,
    cannot hold exactly.

    Two neighbouring values near 2^60 round to the same float64, and the pair they make
    would vanish with zero persistence; refusing says so instead of dropping it. Smaller
    integer types always fit.
    """
    if values.dtype.kind not in "iu" or values.dtype.itemsize < 8 or values.size == 0:
        return
    low, high = int(values.min()), int(values.max())
    if -LARGEST_EXACT_INTEGER <= low and high <= LARGEST_EXACT_INTEGER:
        return
    span = high - low
    remedy = (f"subtract an offset such as the minimum {low} first (the values span {span}, "
              f"which fits)" if span <= LARGEST_EXACT_INTEGER
              else "rescale them to a narrower range first")
    raise InputError(f"{source} holds {values.dtype} values from {low} to {high}, beyond "
                     f"2^53 where float64 (in which birth and death values are kept) stops "
                     f"holding every whole number, so neighbouring values would merge and "
                     f"their pairs vanish; {remedy}, or convert to float64 yourself if "
                     f"rounding is acceptable.")


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

    def at_levels(self, level_values: np.ndarray) -> "RawPairs":
        """These pairs, computed on level numbers, with the value of each level instead
        (``level_values[k]`` for level ``k``; essential deaths stay infinite)."""
        death = self.death.copy()
        finite = np.isfinite(death)
        death[finite] = level_values[death[finite].astype(np.int64)]
        return RawPairs(self.dim, level_values[self.birth.astype(np.int64)], death,
                        self.birth_index, self.death_index, self.engine, self.notes)
