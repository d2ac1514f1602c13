"""Make the small demo data in this folder (seeded, deterministic).

Run with the project's Python from anywhere::

    .venv/bin/python sample_volumes/make_samples.py

It writes only into the folder that holds this script: ``beads.tif``, ``beads_mask.npy``,
``beads_roi.npy``, ``foam.tif``, ``foam_mask.npy`` and ``film.tif``. Every value comes from
``numpy.random.default_rng`` with fixed seeds, so two runs give identical arrays.
The scenario is invented (see README.md); the data are for the demo, never the expected
value of a check.
"""

from __future__ import annotations

import uuid
from pathlib import Path

import numpy as np
import tifffile
from scipy import ndimage
from scipy.spatial import cKDTree

HERE = Path(__file__).resolve().parent

#: Voxel sizes written into the files' metadata.
BEADS_VOXEL_UM = 2.5
FOAM_VOXEL_UM = 4.0
FILM_PIXEL_UM = 0.05          # 50 nm

BEADS_SHAPE = (96, 96, 96)
#: Radius of the filter disc (voxels); its axis runs along z through the middle of the view.
DISC_RADIUS = 44.0
#: Closest approach of two beads as a fraction of the sum of their radii (a sintering neck).
NECK = 0.9
FOAM_SHAPE = (80, 80, 80)
FILM_SHAPE = (256, 256)

#: Fixed OME identifiers, so that the files are byte for byte the same on every run.
FOAM_UUID = str(uuid.uuid5(uuid.NAMESPACE_URL, "voxtopo/sample_volumes/foam.tif"))
CREATOR = "voxtopo sample_volumes/make_samples.py"


# --- beads: a sintered glass filter disc seen by micro-CT -------------------------------
def _ball(radius: float) -> np.ndarray:
    r = int(np.ceil(radius))
    z, y, x = np.ogrid[-r:r + 1, -r:r + 1, -r:r + 1]
    return z * z + y * y + x * x <= radius * radius


def _stamp(volume: np.ndarray, centre, radius: float, value: bool) -> None:
    """Set the voxels of a ball to ``value``, clipped at the volume's border."""
    ball = _ball(radius)
    r = ball.shape[0] // 2
    lo = [int(round(c)) - r for c in centre]
    src, dst = [], []
    for start, size in zip(lo, volume.shape):
        a, b = max(start, 0), min(start + 2 * r + 1, size)
        if a >= b:
            return
        dst.append(slice(a, b))
        src.append(slice(a - start, b - start))
    view = volume[tuple(dst)]
    view[ball[tuple(src)]] = value


def beads_mask(seed: int = 2026) -> tuple[np.ndarray, list[tuple[np.ndarray, float]]]:
    """Solid beads in a disc: returns (pore mask, list of (centre, radius) of the beads).

    The disc is a cylinder along z (radius 44 voxels) that fills the field of view in z.
    150 beads of radius 7-10 voxels are dropped at random and pushed apart until no two
    overlap by more than a sintering neck (centres at least NECK times the sum of radii
    apart). A few beads get a small closed pore inside them.
    """
    rng = np.random.default_rng(seed)
    nz, ny, nx = BEADS_SHAPE
    disc_radius = DISC_RADIUS
    axis = np.array([(ny - 1) / 2, (nx - 1) / 2])
    count = 150
    radii = rng.uniform(7.0, 10.0, size=count)
    rho = (disc_radius - radii) * np.sqrt(rng.uniform(size=count))
    phi = rng.uniform(0, 2 * np.pi, size=count)
    centres = np.column_stack([rng.uniform(-4.0, nz + 3.0, size=count),
                               axis[0] + rho * np.sin(phi), axis[1] + rho * np.cos(phi)])
    # push overlapping beads apart until each pair overlaps by at most a sintering neck
    for _ in range(200):
        moved = False
        for i, j in cKDTree(centres).query_pairs(2 * 10.0 * NECK):
            gap = centres[j] - centres[i]
            dist = max(float(np.linalg.norm(gap)), 1e-6)
            target = NECK * (radii[i] + radii[j])
            if dist < target:
                shift = 0.5 * (target - dist) * gap / dist
                centres[i] -= shift
                centres[j] += shift
                moved = True
        # keep every bead inside the disc's wall
        off = centres[:, 1:] - axis
        rad = np.linalg.norm(off, axis=1)
        limit = disc_radius - radii
        out = rad > limit
        centres[out, 1:] = axis + off[out] * (limit[out] / rad[out])[:, None]
        if not moved:
            break
    solid = np.zeros(BEADS_SHAPE, dtype=bool)
    beads = [(centres[i], float(radii[i])) for i in range(count)]
    for centre, radius in beads:
        _stamp(solid, centre, radius, True)
    # closed pores: small voids well inside a few beads that lie wholly in the volume
    inside = [i for i, (c, r) in enumerate(beads) if r <= c[0] <= nz - 1 - r]
    for index in rng.choice(inside, size=6, replace=False):
        centre, radius = beads[index]
        pore_radius = float(rng.uniform(2.0, 3.0))
        offset = rng.normal(size=3)
        offset *= rng.uniform(0, radius - pore_radius - 3.0) / np.linalg.norm(offset)
        _stamp(solid, centre + offset, pore_radius, False)
    return ~solid, beads


def beads_roi() -> np.ndarray:
    """The region of interest of the bead disc: True inside the disc's cylinder (the sample),
    False in the air around it. The cylinder is one voxel wider than the disc because the
    last push of :func:`beads_mask` may leave a bead's rim up to a voxel past the wall."""
    nz, ny, nx = BEADS_SHAPE
    y, x = np.ogrid[:ny, :nx]
    disc = (y - (ny - 1) / 2) ** 2 + (x - (nx - 1) / 2) ** 2 <= (DISC_RADIUS + 1.0) ** 2
    return np.broadcast_to(disc, BEADS_SHAPE).copy()


def beads_volume(seed: int = 2026) -> tuple[np.ndarray, np.ndarray]:
    """(uint8 micro-CT-like volume, bool pore mask) of the sintered bead disc."""
    pore, _ = beads_mask(seed)
    rng = np.random.default_rng(seed + 1)
    gray = np.where(pore, 48.0, 178.0)
    gray = ndimage.gaussian_filter(gray, sigma=1.1)
    # a gentle radial brightening (beam hardening look) and photon noise
    nz, ny, nx = BEADS_SHAPE
    y, x = np.ogrid[:ny, :nx]
    r2 = ((y - (ny - 1) / 2) ** 2 + (x - (nx - 1) / 2) ** 2) / (ny / 2) ** 2
    gray += 10.0 * r2[None]
    gray += rng.normal(0.0, 11.0, size=gray.shape)
    return np.clip(np.rint(gray), 0, 255).astype(np.uint8), pore


# --- foam: an open-cell polymer foam --------------------------------------------------
def foam_volume(seed: int = 7) -> tuple[np.ndarray, np.ndarray]:
    """(uint8 volume, bool pore mask) of an open-cell foam.

    Cells grow from well-separated random seeds until they meet (a Voronoi tessellation);
    the cell faces are gone (open windows between merged cells) and only the struts along
    the cell edges stay: the voxels whose third-nearest seed is nearly as close as the
    nearest one. Struts thicken a little towards the nodes, as in real foams.
    """
    rng = np.random.default_rng(seed)
    shape = np.array(FOAM_SHAPE)
    seeds: list[np.ndarray] = []
    margin = 12.0
    while len(seeds) < 40:
        candidate = rng.uniform(-margin, shape - 1 + margin)
        if all(np.linalg.norm(candidate - s) >= 17.0 for s in seeds):
            seeds.append(candidate)
    tree = cKDTree(np.array(seeds))
    grid = np.indices(FOAM_SHAPE, dtype=np.float64).reshape(3, -1).T
    dist, _ = tree.query(grid, k=4)
    d1, d3, d4 = dist[:, 0], dist[:, 2], dist[:, 3]
    strut = (d3 - d1 < 2.4) | (d4 - d1 < 4.0)
    solid = strut.reshape(FOAM_SHAPE)
    pore = ~solid
    gray = np.where(pore, 30.0, 150.0)
    gray = ndimage.gaussian_filter(gray, sigma=0.9)
    gray += np.random.default_rng(seed + 1).normal(0.0, 9.0, size=gray.shape)
    return np.clip(np.rint(gray), 0, 255).astype(np.uint8), pore


# --- film: a phase-separated polymer blend film seen by AFM/SEM ------------------------
def film_image(seed: int = 11) -> np.ndarray:
    """uint16 2D micrograph of a phase-separated film (bicontinuous domains)."""
    rng = np.random.default_rng(seed)
    field = ndimage.gaussian_filter(rng.normal(size=FILM_SHAPE), sigma=6.0, mode="wrap")
    field /= field.std()
    phase = 1.0 / (1.0 + np.exp(-4.0 * (field - 0.15)))      # soft threshold
    image = 9000.0 + 30000.0 * phase
    image += rng.normal(0.0, 1800.0, size=FILM_SHAPE)
    return np.clip(np.rint(image), 0, 65535).astype(np.uint16)


def make_all() -> dict[str, np.ndarray]:
    """Every sample array by file name, computed in memory (nothing is written)."""
    beads, beads_pore = beads_volume()
    foam, foam_pore = foam_volume()
    return {"beads.tif": beads, "beads_mask.npy": beads_pore, "beads_roi.npy": beads_roi(),
            "foam.tif": foam,
            "foam_mask.npy": foam_pore, "film.tif": film_image()}


def write_all(folder: Path = HERE) -> list[Path]:
    """Write the sample files into ``folder`` (by default the folder of this script)."""
    folder = Path(folder)
    arrays = make_all()
    compression = {"compression": "zlib", "compressionargs": {"level": 9}}
    paths = []

    path = folder / "beads.tif"       # ImageJ hyperstack: spacing + unit in the metadata
    tifffile.imwrite(path, arrays["beads.tif"], imagej=True,
                     resolution=(1 / BEADS_VOXEL_UM, 1 / BEADS_VOXEL_UM),
                     metadata={"axes": "ZYX", "spacing": BEADS_VOXEL_UM, "unit": "um"},
                     **compression)
    paths.append(path)

    path = folder / "foam.tif"        # OME-TIFF: PhysicalSizeX/Y/Z in um
    tifffile.imwrite(path, arrays["foam.tif"], ome=True, photometric="minisblack",
                     metadata={"axes": "ZYX", "UUID": FOAM_UUID, "Creator": CREATOR,
                               "PhysicalSizeX": FOAM_VOXEL_UM, "PhysicalSizeXUnit": "µm",
                               "PhysicalSizeY": FOAM_VOXEL_UM, "PhysicalSizeYUnit": "µm",
                               "PhysicalSizeZ": FOAM_VOXEL_UM, "PhysicalSizeZUnit": "µm"},
                     **compression)
    paths.append(path)

    path = folder / "film.tif"        # plain TIFF: X/YResolution in pixels per centimetre
    per_cm = 1e4 / FILM_PIXEL_UM
    tifffile.imwrite(path, arrays["film.tif"], photometric="minisblack",
                     resolution=(per_cm, per_cm), resolutionunit="CENTIMETER",
                     **compression)
    paths.append(path)

    for name in ("beads_mask.npy", "beads_roi.npy", "foam_mask.npy"):
        np.save(folder / name, arrays[name].astype(bool), allow_pickle=False)
        paths.append(folder / name)
    return paths


if __name__ == "__main__":
    for written in write_all():
        print(f"wrote {written} ({written.stat().st_size / 1e6:.2f} MB)")
