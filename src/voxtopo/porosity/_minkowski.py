"""Minkowski functionals of the pore phase per unit volume, from a marching-cubes mesh.

The pore/solid interface is the level-0.5 iso-surface of the mask (Lorensen & Cline 1987),
built with the scan's spacing so that lengths are physical. The scan's outer faces are not
interface: the mesh is open where the pore phase meets the border.

Integral mean curvature of a triangle mesh is the sum over its interior edges of
``length * dihedral angle / 2``, with the angle positive where the pore phase is convex
(a spherical pore of radius R gives 4 pi R, a cube of side a gives 3 pi a). Edges on the
open border of the mesh have one triangle only and carry no angle.
"""

from __future__ import annotations

import numpy as np
from numba import njit
from scipy import ndimage

from ..errors import Cancelled

#: voxels of the cells one slab of :func:`interface_measures` counts as its own, at most:
#: a slab's mesh and the kernel's edge lists take at most MESH_BYTES_PER_VOXEL, so
#: at most 0.7 GB at this size (8 planes of 1024 x 1024)
SLAB_VOXELS = 1 << 23

#: bytes of mesh and curvature tables per voxel of a slab, an upper bound: 78 measured on
#: 256 x 256 x 34 of a bead packing with an earlier kernel that paired edges in a hash
#: table; the edge lists of :func:`owned_terms` need about a quarter less (growth of the
#: peak resident memory on that slab: 40 bytes per voxel against 54). They follow the
#: interface's area, which a finer structure raises.
MESH_BYTES_PER_VOXEL = 80


def slab_planes(shape) -> int:
    """Planes of cells per slab of :func:`interface_measures` for a volume of ``shape``: at
    most SLAB_VOXELS and an eighth of the volume (so a small volume's mesh stays small
    beside its other arrays), at least two."""
    by_size = SLAB_VOXELS // (int(shape[1]) * int(shape[2]))
    return max(2, min(by_size, -(-int(shape[0]) // 8)))


def slab_bytes(shape) -> int:
    """Bytes of one slab's mesh (the planes it meshes, with one more on each side)."""
    planes = min(slab_planes(shape) + 2, int(shape[0]))
    return planes * int(shape[1]) * int(shape[2]) * MESH_BYTES_PER_VOXEL


def interface_mesh(pore: np.ndarray, spacing):
    """(vertices, faces) of the level-0.5 surface of ``pore`` (3D; 1 in the pore phase,
    0 in the solid, or a lightly smoothed version of it), with the faces wound so that the
    right-hand normal points from the pore phase into the solid."""
    from skimage.measure import marching_cubes

    if pore.max() <= 0.5 or pore.min() >= 0.5:
        return np.zeros((0, 3)), np.zeros((0, 3), dtype=np.int64)
    vertices, faces, _, _ = marching_cubes(np.asarray(pore, dtype=np.float32), level=0.5,
                                           spacing=tuple(float(s) for s in spacing),
                                           allow_degenerate=False)
    # marching_cubes winds its faces the other way round for this orientation
    return vertices, faces[:, ::-1].astype(np.int64)


def surface_area(vertices: np.ndarray, faces: np.ndarray) -> float:
    """Total area of the mesh (skimage.measure.mesh_surface_area)."""
    from skimage.measure import mesh_surface_area

    if len(faces) == 0:
        return 0.0
    return float(mesh_surface_area(vertices, faces))


def integral_mean_curvature(vertices: np.ndarray, faces: np.ndarray) -> float:
    """Sum over interior edges of edge length times signed dihedral angle, halved.

    The sign is taken from the faces' own orientation: with normals pointing out of the
    pore phase, an edge where the surface bends away from the normal side is convex (+).
    The twin of the kernel :func:`owned_terms`, vectorised and easy to read.
    """
    return float(np.sum(edge_curvature_terms(vertices, faces)[2]))


def edge_curvature_terms(vertices: np.ndarray, faces: np.ndarray):
    """(face_a, face_b, term) of every interior edge: its two faces and its share
    ``length * dihedral angle / 2`` of the integral mean curvature."""
    if len(faces) == 0:
        empty = np.zeros(0, np.int64)
        return empty, empty, np.zeros(0)
    tri = vertices[faces]
    normals = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    lengths = np.linalg.norm(normals, axis=1)
    normals = normals / np.where(lengths > 0, lengths, 1.0)[:, None]
    # each directed edge (a -> b) of a face; its twin (b -> a) belongs to the neighbour face
    starts = faces.ravel()
    ends = faces[:, [1, 2, 0]].ravel()
    owner = np.repeat(np.arange(len(faces)), 3)
    n_vertices = len(vertices)
    key = starts * n_vertices + ends
    twin_key = ends * n_vertices + starts
    order = np.argsort(key)
    sorted_keys = key[order]
    position = np.searchsorted(sorted_keys, twin_key)
    position = np.minimum(position, len(sorted_keys) - 1)
    has_twin = sorted_keys[position] == twin_key
    # count each interior edge once, from the directed edge with the smaller start
    use = has_twin & (starts < ends)
    face_a = owner[use]
    face_b = owner[order[position[use]]]
    edge = vertices[ends[use]] - vertices[starts[use]]
    edge_length = np.linalg.norm(edge, axis=1)
    n_a, n_b = normals[face_a], normals[face_b]
    sine = np.einsum("ij,ij->i", np.cross(n_a, n_b), edge / np.where(edge_length > 0,
                                                                       edge_length, 1.0)[:, None])
    cosine = np.einsum("ij,ij->i", n_a, n_b)
    angle = np.arctan2(sine, cosine)
    return face_a, face_b, 0.5 * edge_length * angle


def faces_in_sample(vertices: np.ndarray, faces: np.ndarray, sample: np.ndarray,
                    spacing) -> np.ndarray:
    """The faces whose centroid lies in a voxel of ``sample`` (a region of interest)."""
    if len(faces) == 0:
        return faces
    voxel = np.rint(vertices[faces].mean(axis=1) / np.asarray(spacing, dtype=np.float64))
    voxel = np.clip(voxel.astype(np.int64), 0, np.array(sample.shape) - 1)
    return faces[sample[tuple(voxel.T)]]


def boundary_length_2d(mask: np.ndarray, spacing, sample=None) -> float:
    """Length of the level-0.5 contours of a 2D mask, in physical units (open at the border).

    With ``sample`` (a region of interest) only the contour steps whose midpoint lies in a
    sample pixel count."""
    from skimage.measure import find_contours

    total = 0.0
    scale = np.asarray(spacing, dtype=np.float64)
    for contour in find_contours(mask.astype(np.float32), 0.5):
        steps = np.linalg.norm(np.diff(contour * scale, axis=0), axis=1)
        if sample is not None:
            middle = np.rint(0.5 * (contour[1:] + contour[:-1])).astype(np.int64)
            middle = np.clip(middle, 0, np.array(sample.shape) - 1)
            steps = steps[sample[tuple(middle.T)]]
        total += float(np.sum(steps))
    return total


def interface_measures(mask: np.ndarray, spacing, smoothing: float,
                       sample=None, stop=None) -> tuple[float, float]:
    """(area, integral mean curvature) of the pore/solid interface of a 3D mask, meshed
    slab by slab along z.

    The mask is smoothed with a Gaussian of ``smoothing`` voxels (mode "nearest"), each
    slab with a halo as wide as the filter's reach, so the values are the same as the
    whole volume's; each slab is meshed with one more cell on each side, and counts the
    triangles whose centroid lies in its own cells and, of each interior edge, half for
    each of its two triangles it counts (:func:`owned_terms`), so every triangle and every
    interior edge counts once. With
    ``sample`` only the triangles whose centroid lies in a sample voxel count. ``stop`` (a
    threading.Event), once set, ends the work before the next slab with Cancelled: the
    analysis it was part of has stopped.
    """
    spacing = tuple(float(s) for s in spacing)
    reach = int(4.0 * smoothing + 0.5)  # gaussian_filter's radius at its default truncate=4
    nz = mask.shape[0]
    area = curvature = 0.0
    planes = slab_planes(mask.shape)
    for first in range(0, nz - 1, planes):
        if stop is not None and stop.is_set():
            raise Cancelled("The interface measures were stopped with the analysis.")
        last = min(first + planes, nz - 1)  # this slab's cells: first .. last - 1
        low, high = max(first - 1, 0), min(last + 1, nz - 1)  # planes meshed
        read_low, read_high = max(low - reach, 0), min(high + 1 + reach, nz)
        soft = ndimage.gaussian_filter(mask[read_low:read_high].astype(np.float32),
                                       sigma=smoothing, mode="nearest")
        soft = soft[low - read_low:high + 1 - read_low]
        vertices, faces = interface_mesh(soft, spacing)
        if len(faces) == 0:
            continue
        if sample is not None:
            shifted = vertices + np.array([low * spacing[0], 0.0, 0.0])
            faces = faces_in_sample(shifted, faces, sample, spacing)
        vertices = vertices.astype(np.float64)
        owned = faces_in_cells(vertices, faces, first - low, last - low, spacing[0])
        slab_area, slab_curvature = owned_terms(vertices, faces, owned)
        area += slab_area
        curvature += slab_curvature
    return area, curvature


@njit(cache=True, nogil=True)
def faces_in_cells(vertices, faces, first_cell, stop_cell, step):
    """The faces of a slab's mesh whose centroid lies in the cells ``first_cell`` to
    ``stop_cell`` (exclusive) along z (voxel size ``step``; cell k lies between voxel
    planes k and k + 1 of the slab, and a point on plane k belongs to cell k: the small
    margin keeps it there despite the rounding of ``(i + t) * step / step``)."""
    owned = np.zeros(faces.shape[0], np.bool_)
    for f in range(faces.shape[0]):
        centroid = (vertices[faces[f, 0], 0] + vertices[faces[f, 1], 0]
                    + vertices[faces[f, 2], 0]) / 3.0
        cell = np.int64(np.floor(centroid / step + 1e-6))
        owned[f] = first_cell <= cell < stop_cell
    return owned


@njit(cache=True, nogil=True)
def owned_terms(vertices, faces, owned):
    """(area, integral mean curvature) of the part of a mesh that is a block's own.

    The area is that of the ``owned`` faces (:func:`surface_area`'s); each interior edge
    gives half its term ``length * dihedral angle / 2`` (:func:`edge_curvature_terms`, the
    vectorised twin) for each of its two faces that is owned. Blocks that own every face
    once, and mesh one more cell around the faces they own so that their edges are
    interior, thus count each edge's whole term once.

    The edges are listed under their lower vertex (a counting sort), where an interior
    edge's two faces meet: the lists are short and follow the mesh's own order, so the
    pass stays in cache. Assumes a manifold, consistently wound mesh (marching cubes: at
    most two faces per edge). ``vertices`` are float64.
    """
    n_faces = faces.shape[0]
    n_vertices = vertices.shape[0]
    normals = np.zeros((n_faces, 3))
    area = 0.0
    for f in range(n_faces):
        a, b, c = faces[f, 0], faces[f, 1], faces[f, 2]
        u0, u1, u2 = (vertices[b, 0] - vertices[a, 0], vertices[b, 1] - vertices[a, 1],
                      vertices[b, 2] - vertices[a, 2])
        w0, w1, w2 = (vertices[c, 0] - vertices[a, 0], vertices[c, 1] - vertices[a, 1],
                      vertices[c, 2] - vertices[a, 2])
        n0, n1, n2 = u1 * w2 - u2 * w1, u2 * w0 - u0 * w2, u0 * w1 - u1 * w0
        length = np.sqrt(n0 * n0 + n1 * n1 + n2 * n2)
        if owned[f]:
            area += 0.5 * length
        scale = 1.0 / length if length > 0 else 1.0
        normals[f, 0], normals[f, 1], normals[f, 2] = n0 * scale, n1 * scale, n2 * scale
    # each undirected edge, listed under its lower vertex with its higher vertex and the
    # face it came from (negative, -f - 1, when the face runs it from high to low); an
    # interior edge is listed twice, once from each of its two faces
    listed = np.zeros(n_vertices + 1, np.int64)
    for f in range(n_faces):
        for k in range(3):
            listed[min(faces[f, k], faces[f, (k + 1) % 3]) + 1] += 1
    for v in range(n_vertices):
        listed[v + 1] += listed[v]
    filled = listed[:-1].copy()
    higher = np.empty(3 * n_faces, np.int64)
    owner = np.empty(3 * n_faces, np.int64)
    for f in range(n_faces):
        for k in range(3):
            start, end = faces[f, k], faces[f, (k + 1) % 3]
            low = min(start, end)
            higher[filled[low]] = max(start, end)
            owner[filled[low]] = f if start < end else -f - 1
            filled[low] += 1
    total = 0.0
    for low in range(n_vertices):
        for i in range(listed[low], listed[low + 1]):
            high = higher[i]
            for j in range(i + 1, listed[low + 1]):
                if higher[j] != high:
                    continue
                # the face whose directed edge runs from the lower vertex to the higher is a
                face_i = owner[i] if owner[i] >= 0 else -owner[i] - 1
                face_j = owner[j] if owner[j] >= 0 else -owner[j] - 1
                fa, fb = (face_i, face_j) if owner[i] >= 0 else (face_j, face_i)
                share = 0.5 * (np.float64(owned[fa]) + np.float64(owned[fb]))
                if share == 0.0:
                    break
                e0, e1, e2 = (vertices[high, 0] - vertices[low, 0],
                              vertices[high, 1] - vertices[low, 1],
                              vertices[high, 2] - vertices[low, 2])
                edge_length = np.sqrt(e0 * e0 + e1 * e1 + e2 * e2)
                if edge_length > 0:
                    e0, e1, e2 = e0 / edge_length, e1 / edge_length, e2 / edge_length
                a0, a1, a2 = normals[fa, 0], normals[fa, 1], normals[fa, 2]
                b0, b1, b2 = normals[fb, 0], normals[fb, 1], normals[fb, 2]
                sine = ((a1 * b2 - a2 * b1) * e0 + (a2 * b0 - a0 * b2) * e1
                        + (a0 * b1 - a1 * b0) * e2)
                cosine = a0 * b0 + a1 * b1 + a2 * b2
                total += share * edge_length * np.arctan2(sine, cosine)
                break
    return area, 0.5 * total
