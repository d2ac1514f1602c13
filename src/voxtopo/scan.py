"""The Scan: a grayscale 2D image or 3D volume with its voxel size."""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from .errors import InputError


@dataclass(frozen=True)
class Scan:
    """A 2D image (y, x) or 3D volume (z, y, x) with its physical voxel size.

    Parameters
    ----------
    data : ndarray
        Gray values, 2D or 3D, indexed (y, x) or (z, y, x).
    spacing : float or tuple of float
        Size of one voxel along each axis, in the same order as ``data.shape`` (one number
        means the same size along every axis).
    unit : str
        Unit of ``spacing`` ("um", "nm", "mm", ...); "px" when unknown.
    source : str
        Where the data came from (a path, or a short description).
    values : str
        What the values mean: "intensity" for gray values, "distance" for a signed
        distance transform (then in ``unit``).
    metadata : dict
        Anything else the reader found (JSON-serialisable).
    """

    data: np.ndarray
    spacing: tuple[float, ...] = ()
    unit: str = "px"
    source: str = ""
    values: str = "intensity"
    metadata: dict = field(default_factory=dict)

    def __post_init__(self):
        data = np.asarray(self.data)
        if data.ndim not in (2, 3):
            raise InputError(
                f"A scan must be a 2D image or a 3D volume, got an array of shape {data.shape}"
                f"{' from ' + self.source if self.source else ''}."
            )
        object.__setattr__(self, "data", data)
        spacing = self.spacing or (1.0,)
        spacing = (spacing,) if np.isscalar(spacing) else tuple(spacing)
        if len(spacing) == 1:
            spacing = spacing * data.ndim
        spacing = tuple(float(s) for s in spacing)
        if len(spacing) != data.ndim:
            raise InputError(
                f"Spacing {spacing} has {len(spacing)} values but the scan is {data.ndim}D; "
                f"give one value per axis in (z, y, x) order."
            )
        if not all(np.isfinite(s) and s > 0 for s in spacing):
            raise InputError(f"Spacing must be positive numbers, got {spacing}.")
        object.__setattr__(self, "spacing", spacing)

    @property
    def ndim(self) -> int:
        return self.data.ndim

    @property
    def shape(self) -> tuple[int, ...]:
        return self.data.shape

    def with_data(self, data: np.ndarray, **changes) -> "Scan":
        """A copy of this scan with new values (and optionally new spacing etc.).

        Parameters
        ----------
        data : ndarray
            The new values.
        **changes
            Other fields to change (``spacing``, ``unit``, ``values``, ``metadata``, ...).

        Returns
        -------
        Scan
        """
        return replace(self, data=data, **changes)

    def describe(self) -> dict:
        """Shape, dtype, spacing, unit and source as plain JSON values, and the reader's
        notes (such as chunks a store did not hold) when there are any."""
        described = {
            "shape": list(self.shape),
            "dtype": str(self.data.dtype),
            "spacing": list(self.spacing),
            "unit": self.unit,
            "source": self.source,
            "values": self.values,
        }
        if self.metadata.get("notes"):
            described["notes"] = list(self.metadata["notes"])
        return described


def as_scan(scan_or_array, spacing=None, unit=None) -> Scan:
    """Wrap an array as a Scan (spacing 1 px) or pass a Scan through.

    ``spacing`` (one number for every axis, or one per axis) and ``unit``, when given, win
    over what the scan carries.

    Examples
    --------
    >>> as_scan(np.zeros((2, 3, 4)), spacing=2.5, unit="um").spacing
    (2.5, 2.5, 2.5)
    """
    if spacing is not None and np.ndim(spacing) == 0:
        spacing = (float(spacing),) * np.ndim(getattr(scan_or_array, "data", scan_or_array))
    if isinstance(scan_or_array, Scan):
        scan = scan_or_array
        changes = {}
        if spacing is not None:
            changes["spacing"] = tuple(spacing)
        if unit is not None:
            changes["unit"] = unit
        return replace(scan, **changes) if changes else scan
    return Scan(np.asarray(scan_or_array), spacing=tuple(spacing or ()), unit=unit or "px",
                source="array")


#: Time unit of a TimeLapse whose file gives no frame interval: periods are then in frames.
FRAME = "frame"


@dataclass(frozen=True)
class TimeLapse:
    """A time series of 2D images (t, y, x) or 3D volumes (t, z, y, x).

    Parameters
    ----------
    data : ndarray
        Gray values, indexed (t, y, x) or (t, z, y, x).
    frame_interval : float
        Time between two frames, in ``time_unit``.
    time_unit : str
        "s" when the interval is known, ``FRAME`` ("frame") when neither the file nor the
        caller gave it (then every time is counted in frames).
    spacing : float or tuple of float
        Size of one pixel or voxel along each spatial axis, (y, x) or (z, y, x) order.
    unit : str
        Unit of ``spacing``; "px" when unknown.
    source : str
        Where the data came from.
    metadata : dict
        Anything else the reader found (JSON-serialisable).
    """

    data: np.ndarray
    frame_interval: float = 1.0
    time_unit: str = FRAME
    spacing: tuple[float, ...] = ()
    unit: str = "px"
    source: str = ""
    metadata: dict = field(default_factory=dict)

    def __post_init__(self):
        data = np.asarray(self.data)
        where = f" from {self.source}" if self.source else ""
        if data.ndim not in (3, 4):
            raise InputError(f"A time-lapse must be (t, y, x) or (t, z, y, x), got an array of "
                             f"shape {data.shape}{where}.")
        object.__setattr__(self, "data", data)
        interval = float(self.frame_interval)
        if not (np.isfinite(interval) and interval > 0):
            raise InputError(f"The frame interval must be a positive number of seconds, got "
                             f"{self.frame_interval!r}{where}.")
        object.__setattr__(self, "frame_interval", interval)
        spatial = Scan(np.empty((1,) * (data.ndim - 1)), spacing=self.spacing)
        object.__setattr__(self, "spacing", spatial.spacing)

    @property
    def frames(self) -> int:
        return self.data.shape[0]

    @property
    def spatial_shape(self) -> tuple[int, ...]:
        return self.data.shape[1:]

    @property
    def duration(self) -> float:
        """Time covered by the frames, ``frames * frame_interval`` in ``time_unit``."""
        return self.frames * self.frame_interval

    def describe(self) -> dict:
        """Shape, dtype, spacing, frame interval and source as plain JSON values."""
        return {
            "shape": list(self.data.shape),
            "axes": "TYX" if self.data.ndim == 3 else "TZYX",
            "dtype": str(self.data.dtype),
            "spacing": list(self.spacing),
            "unit": self.unit,
            "frame_interval": self.frame_interval,
            "time_unit": self.time_unit,
            "source": self.source,
        }
