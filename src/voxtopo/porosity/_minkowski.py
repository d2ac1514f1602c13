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


def interface_mesh(pore: np.ndarray, spacing):
    """(vertices, faces) of the level-0.5 surface of ``pore`` (3D; 1 in the pore phase,
    0 in the solid, or a lightly smoothed version of it), with the faces wound so that the
    right-hand normal points from the pore phase into the solid."""
    from skimage.measure import marching_cubes

    if pore.max() <= 0.5 or pore.min() >= 0.5:
        return np.zeros((0, 3)), np.zeros((0, 3), dtype=np.int64)
    vertices, faces, _, _ = marching_cubes(pore.astype(np.float32), level=0.5,
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
