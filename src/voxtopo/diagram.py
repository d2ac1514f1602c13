"""The Diagram: persistence pairs with their voxel locations, and what follows from them."""

from __future__ import annotations

from dataclasses import dataclass, replace
from dataclasses import field as dataclass_field
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError

AXES_3D = ("z", "y", "x")

#: Optional columns written by voxtopo.significance: family-wise p-value and flag of a
#: gray-value sweep, robust flag of a distance sweep.
VERDICT_COLUMNS = ("p_value", "significant", "robust")


#: What the unit of a column that is neither a value nor a position says.
VOXEL_INDEX = "voxel index"


def position_columns(ndim: int) -> list[str]:
    """birth_z, birth_y, birth_x, death_z, ...: positions in the scan's unit (2D drops z).

    Examples
    --------
    >>> position_columns(2)
    ['birth_y', 'birth_x', 'death_y', 'death_x']
    """
    axes = AXES_3D[3 - ndim:]
    return [f"birth_{a}" for a in axes] + [f"death_{a}" for a in axes]


#: Bytes one pair takes at the peak of building a Diagram (the backend's RawPairs, 33,
#: and the table made from them with voxel and unit positions, about 172 measured on 4
#: million pairs of a 3D scan).
TABLE_BYTES_PER_PAIR = 210


def voxel_columns(ndim: int) -> list[str]:
    """birth_voxel_z, ..., death_voxel_x: the same places as voxel indices.

    Examples
    --------
    >>> voxel_columns(2)
    ['birth_voxel_y', 'birth_voxel_x', 'death_voxel_y', 'death_voxel_x']
    """
    axes = AXES_3D[3 - ndim:]
    return [f"birth_voxel_{a}" for a in axes] + [f"death_voxel_{a}" for a in axes]


def columns(ndim: int) -> list[str]:
    """The columns of ``Diagram.pairs`` for a scan of ``ndim`` dimensions."""
    return (["dim", "birth", "death", "persistence"] + position_columns(ndim)
            + voxel_columns(ndim))



def check_min_persistence(value) -> float:
    """``value`` as the shortest lifetime kept: a finite number >= 0, else InputError."""
    try:
        number = float(value)
    except (TypeError, ValueError):
        number = float("nan")
    if not (np.isfinite(number) and number >= 0):
        raise InputError(f"min_persistence should be a finite number >= 0 (the shortest "
                         f"lifetime kept, in the scan's values), got {value!r}.")
    return number

@dataclass(frozen=True)
class Diagram:
    """A persistence diagram of a scan.

    ``pairs`` is a DataFrame with one row per pair: ``dim, birth, death, persistence,
    birth_z, birth_y, birth_x, death_z, death_y, death_x`` (positions in the scan's unit,
    voxel index times spacing), then ``birth_voxel_z, ..., death_voxel_x`` (the same places
    as voxel indices, nullable integers); 2D drops the z columns. An essential class has
    ``death = inf`` (superlevel: ``-inf``), infinite persistence and no death location.

    Positions and voxel indices refer to the grid of the scan as read, also when the grid
    that was swept is a crop (it starts at the scan's voxel ``first_voxel``) or a block
    mean (``block`` voxels per side, see :meth:`placed_in_scan`); ``spacing`` and ``shape``
    are those of the swept grid. Empty ``first_voxel`` and ``block`` mean the swept grid
    is the scan's.

    The other fields say how the diagram was made, so it can be read on its own.
    """

    pairs: pd.DataFrame
    ndim: int
    shape: tuple[int, ...]
    superlevel: bool = False
    neighbourhood: int = 26
    spacing: tuple[float, ...] = ()
    unit: str = "px"
    values: str = "intensity"
    field: int = 2
    periodic: tuple[bool, ...] = ()
    engine: str = ""
    min_persistence: float = 0.0
    source: str = ""
    notes: tuple[str, ...] = ()
    seconds: float = float("nan")
    extra: dict = dataclass_field(default_factory=dict)
    first_voxel: tuple[int, ...] = ()
    block: tuple[int, ...] = ()

    # construction -----------------------------------------------------------------
    @classmethod
    def from_raw(cls, raw, scan, *, superlevel, neighbourhood, field, periodic,
                 min_persistence=0.0, notes=(), seconds=float("nan")) -> "Diagram":
        """Build a Diagram from a backend's RawPairs and the scan it came from.

        The rows are put in the table's order (:func:`_sorted`) before the columns are
        made, and each column is made once, so that a large diagram is never held twice.
        """
        ndim = scan.ndim
        persistence = np.abs(raw.death - raw.birth)
        kept = np.flatnonzero(persistence > min_persistence)
        # the order of _sorted (stable: equal keys keep the engine's order), on the arrays
        rows = kept[np.lexsort((raw.birth[kept], -persistence[kept], raw.dim[kept]))]
        del kept
        frame = {"dim": raw.dim[rows].astype(np.int64), "birth": raw.birth[rows],
                 "death": raw.death[rows], "persistence": persistence[rows]}
        del persistence
        axes = AXES_3D[3 - ndim:]
        for a, coord in zip(axes, np.unravel_index(raw.birth_index[rows], scan.shape)):
            frame[f"birth_voxel_{a}"] = pd.array(coord, dtype="Int64")
        death_index = raw.death_index[rows]
        essential = death_index < 0
        for a, coord in zip(axes, np.unravel_index(np.maximum(death_index, 0), scan.shape)):
            column = pd.array(coord, dtype="Int64")
            column[essential] = pd.NA
            frame[f"death_voxel_{a}"] = column
        del death_index, essential, rows
        pairs = _with_positions(pd.DataFrame(frame, copy=False), ndim, scan.spacing)
        return cls(pairs=pairs, ndim=ndim, shape=tuple(scan.shape), superlevel=superlevel,
                   neighbourhood=neighbourhood, spacing=tuple(scan.spacing), unit=scan.unit,
                   values=scan.values, field=field, periodic=tuple(periodic),
                   engine=raw.engine, min_persistence=float(min_persistence),
                   source=scan.source, notes=tuple(notes), seconds=seconds)

    def _with_pairs(self, pairs: pd.DataFrame) -> "Diagram":
        return replace(self, pairs=pairs.reset_index(drop=True))

    # selection ----------------------------------------------------------------------
    def __len__(self) -> int:
        return len(self.pairs)

    def dimension(self, dim: int) -> "Diagram":
        """Only the pairs of homological dimension ``dim``.

        Parameters
        ----------
        dim : int
            Homology dimension.

        Returns
        -------
        Diagram
        """
        return self._with_pairs(self.pairs[self.pairs["dim"] == dim])

    def above(self, min_persistence: float) -> "Diagram":
        """Only the pairs whose persistence is strictly greater than ``min_persistence``.

        Parameters
        ----------
        min_persistence : float
            The shortest lifetime kept is just above this, in the diagram's units.

        Returns
        -------
        Diagram
        """
        return self._with_pairs(self.pairs[self.pairs["persistence"] > min_persistence])

    def finite(self) -> "Diagram":
        """Only the pairs that die (no essential classes)."""
        return self._with_pairs(self.pairs[np.isfinite(self.pairs["death"])])

    def intervals(self, dim: int) -> np.ndarray:
        """(n, 2) array of (birth, death) in dimension ``dim``.

        Parameters
        ----------
        dim : int
            Homology dimension.

        Returns
        -------
        ndarray of float64, shape (n, 2)
            Essential classes have death ``inf`` (superlevel: ``-inf``).
        """
        rows = self.pairs[self.pairs["dim"] == dim]
        return rows[["birth", "death"]].to_numpy(dtype=np.float64)

    def most_persistent(self, n: int = 10, dim: int | None = None) -> pd.DataFrame:
        """The ``n`` longest-lived pairs (per dimension when ``dim`` is None).

        Parameters
        ----------
        n : int
            Pairs per dimension.
        dim : int, optional
            Only this dimension.

        Returns
        -------
        DataFrame
            Rows of ``pairs``, by dimension and then longest first.
        """
        rows = self.pairs if dim is None else self.pairs[self.pairs["dim"] == dim]
        return (rows.sort_values(["dim", "persistence"], ascending=[True, False], kind="stable")
                .groupby("dim", group_keys=False).head(n))

    def counts(self, min_persistence: float | None = None) -> dict[int, int]:
        """Number of pairs per dimension (above ``min_persistence`` when given).

        Parameters
        ----------
        min_persistence : float, optional
            Count only pairs whose persistence is strictly greater.

        Returns
        -------
        dict
            Dimension (0 to ndim - 1) -> number of pairs.
        """
        rows = self.pairs if min_persistence is None else \
            self.pairs[self.pairs["persistence"] > min_persistence]
        return {d: int((rows["dim"] == d).sum()) for d in range(self.ndim)}

    # Betti and Euler ------------------------------------------------------------------
    def _alive(self, level: float) -> np.ndarray:
        b = self.pairs["birth"].to_numpy()
        d = self.pairs["death"].to_numpy()
        if self.superlevel:
            return (b >= level) & (d < level)
        return (b <= level) & (d > level)

    def betti(self, level: float) -> list[int]:
        """Betti numbers [b0, b1, (b2)] of the swept set at ``level``.

        Sublevel: the set {value <= level}; superlevel: {value >= level}.

        Parameters
        ----------
        level : float
            The level of the sweep, in the diagram's units.

        Returns
        -------
        list of int
            One Betti number per dimension.
        """
        alive = self._alive(level)
        dims = self.pairs["dim"].to_numpy()
        return [int(np.count_nonzero(alive & (dims == k))) for k in range(self.ndim)]

    def betti_curve(self, levels) -> pd.DataFrame:
        """Betti numbers at each level: columns ``level, betti_0, betti_1, (betti_2)``.

        Parameters
        ----------
        levels : array_like
            Levels of the sweep, in the diagram's units.

        Returns
        -------
        DataFrame
            One row per level, in the order given.
        """
        levels = np.asarray(levels, dtype=np.float64)
        b = self.pairs["birth"].to_numpy()
        d = self.pairs["death"].to_numpy()
        dims = self.pairs["dim"].to_numpy()
        out = {"level": levels}
        for k in range(self.ndim):
            bk, dk = b[dims == k], d[dims == k]
            if self.superlevel:
                # alive when birth >= level > death
                born = len(bk) - np.searchsorted(np.sort(bk), levels, side="left")
                dead = len(dk) - np.searchsorted(np.sort(dk), levels, side="left")
            else:
                born = np.searchsorted(np.sort(bk), levels, side="right")
                dead = np.searchsorted(np.sort(dk), levels, side="right")
            out[f"betti_{k}"] = (born - dead).astype(np.int64)
        return pd.DataFrame(out)

    def euler_curve(self, levels) -> pd.DataFrame:
        """Euler characteristic (alternating sum of Betti numbers) at each level.

        Parameters
        ----------
        levels : array_like
            Levels of the sweep, in the diagram's units.

        Returns
        -------
        DataFrame
            Columns ``level, euler_characteristic``.
        """
        curve = self.betti_curve(levels)
        chi = sum((-1) ** k * curve[f"betti_{k}"] for k in range(self.ndim))
        return pd.DataFrame({"level": curve["level"], "euler_characteristic": chi})

    def level_grid(self, n: int = 256) -> np.ndarray:
        """n levels spanning every finite birth and death.

        Parameters
        ----------
        n : int
            Number of levels.

        Returns
        -------
        ndarray of float64
            Increasing levels from the lowest to the highest finite value; one level when
            all values are equal, ``[0.]`` when there is none.
        """
        vals = self.pairs[["birth", "death"]].to_numpy(dtype=np.float64).ravel()
        vals = vals[np.isfinite(vals)]
        if len(vals) == 0:
            return np.zeros(1)
        lo, hi = float(vals.min()), float(vals.max())
        if not hi > lo:
            return np.array([lo])
        if np.isfinite((hi - lo) * n):  # Python floats: an overflow gives inf, no warning
            return np.linspace(lo, hi, n)
        # linspace's steps would overflow float64 (values near +-1.8e308): weigh the ends
        weight = np.linspace(0.0, 1.0, n)
        return lo * (1.0 - weight) + hi * weight

    # positions ------------------------------------------------------------------------
    def positions(self, which: str = "birth") -> np.ndarray:
        """(n, ndim) positions of the birth or death voxels in the scan's unit (NaN where
        none).

        Parameters
        ----------
        which : {"birth", "death"}
            Which voxel of each pair.

        Returns
        -------
        ndarray of float64, shape (n, ndim)
            The ``birth_z ..`` (or ``death_z ..``) columns: positions on the scan's grid
            (:meth:`placed_in_scan`), in the diagram's unit, (z, y, x) order.
        """
        axes = AXES_3D[3 - self.ndim:]
        return self.pairs[[f"{which}_{a}" for a in axes]].to_numpy(dtype=np.float64,
                                                                   na_value=np.nan)

    def voxels(self, which: str = "birth") -> np.ndarray:
        """(n, ndim) voxel indices of the birth or death voxels on the scan's grid (-1
        where none); :meth:`swept_voxels` gives them on the swept grid."""
        axes = AXES_3D[3 - self.ndim:]
        return (self.pairs[[f"{which}_voxel_{a}" for a in axes]].fillna(-1)
                .to_numpy(dtype=np.int64))

    def placed_in_scan(self, first_voxel, block) -> "Diagram":
        """This diagram of a swept grid, its places put on the grid of the scan as read.

        The swept grid is the scan cropped from voxel ``first_voxel`` and then averaged
        in blocks of ``block`` voxels per axis. Swept voxel ``i`` is the block whose first
        scan voxel is ``c = first_voxel + i * block``; its place is the block's centre::

            position     (c + (block - 1) / 2) * scan spacing    (exact centre)
            voxel index  c + (block - 1) // 2                    (centre voxel, rounded down)

            scan voxels  |  c  | c+1 | c+2 | c+3 |      a block of 4: position c + 1.5,
                         |<------ swept voxel i ---->|      voxel index c + 1

        so a feature found after downsampling is placed within half a block of where it
        sits in the scan. Call it once, on a diagram whose places are on the swept grid
        (as the engine returns it).

        Parameters
        ----------
        first_voxel : sequence of int
            The scan voxel of the swept grid's first voxel (the crop's corner; 0 without).
        block : sequence of int
            Block side per axis (1 without downsampling).

        Returns
        -------
        Diagram
            The same pairs, in the same order, with ``birth_z .. death_x`` and
            ``birth_voxel_z .. death_voxel_x`` on the scan's grid.
        """
        first = np.asarray(first_voxel, dtype=np.int64).reshape(self.ndim)
        sides = np.asarray(block, dtype=np.int64).reshape(self.ndim)
        placed = replace(self, first_voxel=tuple(int(v) for v in first),
                         block=tuple(int(v) for v in sides))
        if not first.any() and (sides == 1).all():
            return placed  # the swept grid is the scan's: every place is already there
        scan_spacing = np.asarray(self.spacing, dtype=np.float64) / sides
        # a shallow copy: only the place columns are made anew (a table of millions of
        # pairs is never copied whole)
        pairs = self.pairs.copy(deep=False)
        axes = AXES_3D[3 - self.ndim:]
        for which in ("birth", "death"):
            for k, a in enumerate(axes):
                swept = pairs[f"{which}_voxel_{a}"].to_numpy(dtype=np.float64, na_value=np.nan)
                corner = first[k] + swept * sides[k]
                pairs[f"{which}_{a}"] = (corner + (sides[k] - 1) / 2) * scan_spacing[k]
                index = pd.array(np.nan_to_num(corner + (sides[k] - 1) // 2, nan=-1)
                                 .astype(np.int64), dtype="Int64")
                index[np.isnan(swept)] = pd.NA
                pairs[f"{which}_voxel_{a}"] = index
        return replace(placed, pairs=pairs)

    @property
    def origin(self) -> tuple[float, ...]:
        """Position, in the scan's unit, of the swept grid's first voxel (the centre of
        its block); zeros when the swept grid is the scan's."""
        first, sides = self._frame()
        return tuple(float(v) for v in (first + (sides - 1) / 2)
                     * np.asarray(self.spacing, dtype=np.float64) / sides)

    def swept_voxels(self, which: str = "birth") -> np.ndarray:
        """(n, ndim) voxel indices on the swept grid (-1 where none): where the birth or
        death sits in the prepared field the engine saw, for work on that field (pore
        regions, layers drawn on it)."""
        first, sides = self._frame()
        scan_index = self.voxels(which)
        swept = (scan_index - first - (sides - 1) // 2) // sides
        return np.where(scan_index < 0, -1, swept)

    def _frame(self) -> tuple[np.ndarray, np.ndarray]:
        first = np.asarray(self.first_voxel or (0,) * self.ndim, dtype=np.int64)
        sides = np.asarray(self.block or (1,) * self.ndim, dtype=np.int64)
        return first, sides

    def placement_note(self) -> str:
        """How positions and voxel indices relate to the scan, for summary.json."""
        first, sides = self._frame()
        note = ("positions (birth_z ...) are in the scan's unit and voxel indices "
                "(birth_voxel_z ...) on the grid of the scan as read, counted from its first "
                "voxel")
        if (first != 0).any():
            note += f"; the crop starts at scan voxel {first.tolist()}"
        if (sides != 1).any():
            note += (f"; after downsampling by blocks of {sides.tolist()} voxels a position "
                     f"is the centre of its block and a voxel index the block's centre voxel "
                     f"(rounded down), good to half a block")
        return note

    @property
    def value_unit(self) -> str:
        """The unit of birth, death and persistence: the scan's unit for a distance sweep,
        gray values otherwise."""
        return self.unit if self.values == "distance" else "gray value"

    def column_units(self, value_unit: str | None = None) -> dict:
        """Column -> unit of :attr:`pairs` as written to pairs.csv ("" for counts and
        flags); ``value_unit`` overrides :attr:`value_unit` (Anscombe units, say)."""
        values = value_unit or self.value_unit
        units = {"dim": "", "birth": values, "death": values, "persistence": values}
        units.update({c: self.unit for c in position_columns(self.ndim)})
        units.update({c: VOXEL_INDEX for c in voxel_columns(self.ndim)})
        units.update({"p_value": "", "significant": "", "robust": ""})
        return {c: units.get(c, "") for c in self.pairs.columns}

    def without_outside(self, outside_level: float) -> "Diagram":
        """The diagram of the region of interest alone, from the diagram of a field whose
        outside voxels all hold ``outside_level`` (after every inside value of the sweep,
        :func:`voxtopo.filtration.outside_last`): pairs born outside are dropped, and a
        class that dies when the outside enters never dies within the region.

        Below the outside level the sweep of the whole field is the sweep of the region's
        own cubical complex, so every pair born and dead inside is the region's; what is
        still alive when the outside enters lives for ever in the region alone.
        """
        pairs = self.pairs
        sign = -1.0 if self.superlevel else 1.0
        born_outside = sign * pairs["birth"].to_numpy(dtype=np.float64) >= sign * outside_level
        pairs = pairs[~born_outside].copy()
        dies_outside = sign * pairs["death"].to_numpy(dtype=np.float64) >= sign * outside_level
        pairs.loc[dies_outside, "death"] = sign * np.inf
        pairs.loc[dies_outside, "persistence"] = np.inf
        for column in pairs.columns:
            if column.startswith("death_"):
                pairs.loc[dies_outside, column] = np.nan if column in position_columns(
                    self.ndim) else pd.NA
        return self._with_pairs(_sorted(pairs))

    # files ----------------------------------------------------------------------------
    def description(self) -> dict:
        """How the diagram was made, as JSON values."""
        return {
            "ndim": self.ndim, "shape": list(self.shape), "superlevel": self.superlevel,
            "neighbourhood": self.neighbourhood, "spacing": list(self.spacing),
            "unit": self.unit, "values": self.values, "field": self.field,
            "periodic": list(self.periodic), "engine": self.engine,
            "min_persistence": self.min_persistence, "source": self.source,
            "notes": list(self.notes), "first_voxel": list(self.first_voxel),
            "block": list(self.block), "positions": self.placement_note(),
        }

    def save(self, folder, name: str = "pairs.csv") -> None:
        """Write ``pairs.csv`` and the diagram's description into ``summary.json``
        (merged under the key ``"diagram"`` when summary.json exists), with the unit of
        every column under ``"columns"`` unless the summary already gives them.

        Parameters
        ----------
        folder : str or Path
            An existing folder (a result folder being filled).
        name : str
            The file name of the pairs table.
        """
        folder = Path(folder)
        from .io.results import read_summary, write_summary

        self.pairs.to_csv(folder / name, index=False)
        summary = read_summary(folder) if (folder / "summary.json").exists() else {}
        summary["diagram"] = self.description()
        summary.setdefault("columns", {}).setdefault(name, self.column_units())
        write_summary(folder, summary)

    @classmethod
    def load(cls, folder, name: str = "pairs.csv") -> "Diagram":
        """Read a Diagram back from a result folder written by :meth:`save`."""
        folder = Path(folder)
        pairs_path, summary_path = folder / name, folder / "summary.json"
        if not pairs_path.is_file() or not summary_path.is_file():
            raise InputError(f"{folder} is not a voxtopo result folder: it needs {name} "
                             f"and summary.json.")
        from .io.results import read_summary

        meta = read_summary(folder).get("diagram")
        if meta is None:
            raise InputError(f"{summary_path} has no 'diagram' entry; it was not written "
                             f"by voxtopo analyse.")
        ndim = int(meta["ndim"])
        pairs = pd.read_csv(pairs_path)
        if not set(voxel_columns(ndim)) & set(pairs.columns):
            # before positions in the scan's unit were written, birth_z ... death_x held
            # the voxel indices: read them as such and work the positions out
            pairs = pairs.rename(columns=dict(zip(position_columns(ndim),
                                                  voxel_columns(ndim))))
            pairs = _with_positions(pairs, ndim, meta["spacing"])
        missing = set(columns(ndim)) - set(pairs.columns)
        if missing:
            raise InputError(f"{pairs_path} lacks the columns {sorted(missing)}.")
        verdicts = [c for c in VERDICT_COLUMNS if c in pairs.columns]
        pairs = pairs[columns(ndim) + verdicts].copy()
        pairs["dim"] = pairs["dim"].astype(np.int64)
        for c in verdicts:
            pairs[c] = pairs[c].astype(np.float64 if c == "p_value" else bool)
        for c in ["birth", "death", "persistence"] + position_columns(ndim):
            pairs[c] = pairs[c].astype(np.float64)
        for c in voxel_columns(ndim):
            pairs[c] = pairs[c].astype("Int64")
        return cls(pairs=pairs, ndim=ndim, shape=tuple(meta["shape"]),
                   superlevel=bool(meta["superlevel"]), neighbourhood=int(meta["neighbourhood"]),
                   spacing=tuple(meta["spacing"]), unit=meta["unit"], values=meta["values"],
                   field=int(meta["field"]), periodic=tuple(meta["periodic"]),
                   engine=meta["engine"], min_persistence=float(meta["min_persistence"]),
                   source=meta["source"], notes=tuple(meta.get("notes", ())),
                   first_voxel=tuple(meta.get("first_voxel", ())),
                   block=tuple(meta.get("block", ())))


def _with_positions(pairs: pd.DataFrame, ndim: int, spacing) -> pd.DataFrame:
    """``pairs`` (with voxel columns) given its positions in the scan's unit, columns in
    the order of :func:`columns` and any further columns after them."""
    axes = AXES_3D[3 - ndim:]
    for which in ("birth", "death"):
        for a, step in zip(axes, spacing):
            index = pairs[f"{which}_voxel_{a}"].to_numpy(dtype=np.float64, na_value=np.nan)
            pairs[f"{which}_{a}"] = index * float(step)
    return pairs[columns(ndim) + [c for c in pairs.columns if c not in columns(ndim)]]


def _sorted(pairs: pd.DataFrame) -> pd.DataFrame:
    """Dimension, then longest-lived first; a stable, documented order for files."""
    return pairs.sort_values(["dim", "persistence", "birth"], ascending=[True, False, True],
                             kind="stable").reset_index(drop=True)
