"""The union-find kernels of the own engine: sweeps, neighbourhoods, counting sort.

External references named beside each check (see /work/shared/CHECKS.md):
gudhi (Maria, Boissonnat, Glisse & Yvinec 2014) for the pairs, scipy.ndimage for the
neighbourhoods and the number of components, numpy's stable argsort for the order.
"""

from collections import Counter

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from reference import gudhi_intervals
from scipy import ndimage

from voxtopo.engine import _union_find, own

SETTINGS = settings(max_examples=40, deadline=None)


@st.composite
def small_images(draw, max_side=5):
    """2D or 3D arrays with odd/unequal/one-voxel sides and few distinct values."""
    ndim = draw(st.sampled_from([2, 3]))
    side = max_side + 3 if ndim == 2 else max_side
    shape = tuple(draw(st.integers(1, side)) for _ in range(ndim))
    levels = draw(st.integers(1, 5))
    return draw(arrays(np.int16, shape, elements=st.integers(0, levels - 1)))


def _kernel_pairs(values, ascending, corners, with_outside):
    flat = np.ascontiguousarray(values).ravel()
    shape = np.array((1,) * (3 - values.ndim) + values.shape, dtype=np.int64)
    parent = np.empty(flat.size + 1, dtype=_union_find.index_dtype(flat.size))
    roots, voxels = own._sweep(flat, shape, values.ndim, ascending=ascending,
                               corners=corners, with_outside=values.ndim if with_outside
                               else 0, parent=parent, progress=None, phase="test")
    return list(zip(roots.tolist(), voxels.tolist()))


def _gudhi_pairs(values, construction, dim):
    """(birth, death) of dimension ``dim`` of the sublevel filtration, finite only."""
    pairs = gudhi_intervals(values, dim, construction=construction)
    return Counter((b, d) for b, d in pairs.tolist() if np.isfinite(d))


@SETTINGS
@given(small_images(max_side=6), st.booleans(), st.booleans(), st.booleans())
def test_kernel_equals_pure_python_twin(values, ascending, corners, with_outside):
    """The numba sweep and its readable twin leave the same pairs, in the same order."""
    twin = _union_find.sweep_reference(values, ascending, corners, with_outside)
    assert _kernel_pairs(values, ascending, corners, with_outside) == twin


@SETTINGS
@given(small_images(), st.sampled_from(["voxel", "vertex"]))
def test_ascending_sweep_gives_gudhi_dimension_zero(values, construction):
    """Check against gudhi (Maria, Boissonnat, Glisse & Yvinec 2014): finite dim-0 pairs."""
    flat = values.ravel()
    pairs = _kernel_pairs(values, True, construction == "voxel", False)
    ours = Counter((float(flat[r]), float(flat[v])) for r, v in pairs)
    assert ours == _gudhi_pairs(values, construction, 0)


@SETTINGS
@given(small_images(), st.sampled_from(["voxel", "vertex"]))
def test_dual_sweep_gives_gudhi_top_dimension(values, construction):
    """Check against gudhi (Maria, Boissonnat, Glisse & Yvinec 2014): the descending sweep in
    the other construction, with the outside as eldest node, gives dimension d-1 (duality
    of Garin, Heiss, Maggs, Bleile & Robins 2020)."""
    flat = values.ravel()
    pairs = _kernel_pairs(values, False, construction == "vertex", True)
    ours = Counter((float(flat[v]), float(flat[r])) for r, v in pairs)
    assert ours == _gudhi_pairs(values, construction, values.ndim - 1)


@pytest.mark.parametrize("ndim", [2, 3])
@pytest.mark.parametrize("corners", [False, True])
def test_neighbour_offsets_match_scipy_structuring_element(ndim, corners):
    """Check against scipy.ndimage.generate_binary_structure(ndim, 1 | ndim)."""
    structure = ndimage.generate_binary_structure(ndim, ndim if corners else 1)
    expected = {tuple(int(c) - 1 for c in idx) for idx in np.argwhere(structure)} - {(0,) * ndim}
    got = {tuple(row[3 - ndim:].tolist()) for row in _union_find.neighbour_offsets(ndim, corners)}
    assert got == expected


@SETTINGS
@given(small_images(max_side=6), st.booleans(), st.data())
def test_components_alive_equal_scipy_label_count(values, corners, data):
    """Check against scipy.ndimage.label with generate_binary_structure(ndim, 1 | ndim):
    the number of dim-0 classes alive at a threshold is the number of components."""
    flat = values.ravel()
    threshold = data.draw(st.sampled_from(sorted(set(flat.tolist()))))
    pairs = _kernel_pairs(values, True, corners, False)
    alive = 1 + sum(1 for r, v in pairs if flat[r] <= threshold < flat[v])
    structure = ndimage.generate_binary_structure(values.ndim, values.ndim if corners else 1)
    assert alive == ndimage.label(values <= threshold, structure=structure)[1]


@SETTINGS
@given(st.sampled_from([np.uint8, np.int8, np.uint16, np.int16, bool]), st.data())
def test_counting_sort_equals_numpy_stable_argsort(dtype, data):
    """Check against numpy's argsort(kind="stable") (ties keep the flat-index order)."""
    info = np.iinfo(dtype) if dtype is not bool else None
    elements = st.booleans() if info is None else st.integers(info.min, info.max)
    flat = data.draw(arrays(dtype, st.integers(1, 200), elements=elements))
    assert own.sorted_order(flat).tolist() == np.argsort(flat, kind="stable").tolist()


def test_sweep_resumes_when_pair_buffer_fills():
    """A buffer too small for all pairs is grown between chunks; no pair is lost.
    Expected count: every voxel of a checkerboard's low colour is its own component in
    the 4-neighbourhood (common practice, no source), all but one die."""
    board = (np.indices((256, 256)).sum(axis=0) % 2).astype(np.uint8)
    assert len(_kernel_pairs(board, True, False, False)) == 256 * 256 // 2 - 1


def _grow_by_definition(mask, corners):
    """Readable twin of the bit-parallel cube growth: every position within one step."""
    cells = [(b // 9 - 1, (b // 3) % 3 - 1, b % 3 - 1) for b in range(27)]
    grown = 0
    for b, here in enumerate(cells):
        if mask >> b & 1:
            for c, there in enumerate(cells):
                step = [abs(p - q) for p, q in zip(here, there)]
                if (max(step) if corners else sum(step)) <= 1 and c != 13:
                    grown |= 1 << c
    return grown


@settings(max_examples=200, deadline=None)
@given(st.integers(0, (1 << 27) - 1), st.booleans())
def test_cube_growth_equals_its_definition(mask, corners):
    """The shifted-mask growth in the 3x3x3 cube (centre excluded) reaches exactly the
    positions one 26- (or 6-) step away (common practice, no source: the definition of
    the neighbourhoods)."""
    mask &= ~(1 << 13)
    assert _union_find._grow(mask, corners) == _grow_by_definition(mask, corners)


def test_flat_indices_and_counts_past_2_31_voxels_in_a_thin_slab():
    """A uint8 image of 2^21 + 3 rows of 1024 voxels, just past 2^31 voxels, with a
    pattern in its last three rows (common practice, no source: flat indices must not
    wrap at 2^31). Proves, at the real size, that the engine switches to 64-bit indices
    there, that the counting sort's histogram counts more than 2^31 equal voxels exactly,
    and that the linking pass and the sweep give for the last rows the pairs of the same
    rows cut out as a small image, shifted by their flat offset. Only the last rows are
    ever written: the rest of the image and of the union-find stay untouched (zero pages),
    so the test holds a few megabytes, not the 19 GB it addresses."""
    width, rows = 1024, 2**21 + 3
    voxels = rows * width
    assert voxels > 2**31 and _union_find.index_dtype(voxels) == np.int64
    image = np.zeros((rows, width), dtype=np.uint8)
    pattern = np.random.default_rng(11).integers(1, 10, (3, width)).astype(np.uint8)
    image[-3:] = pattern
    flat = image.reshape(-1)
    counts = _union_find.value_histogram(flat, 0, 256, False)
    assert counts[0] == voxels - pattern.size
    assert np.array_equal(counts[1:10], np.bincount(pattern.ravel(), minlength=10)[1:])

    # a descending sweep over the pattern: the zero rows above come after every voxel of it
    shape = np.array((1, rows, width), dtype=np.int64)
    parent = np.empty(voxels + 1, dtype=_union_find.index_dtype(voxels))
    first = (rows - 3) * width
    _union_find.link_regular_voxels(flat, rows - 3, rows, False, shape,
                                    _union_find.neighbour_offsets(2, True), True, 0, parent)
    marked = first + np.flatnonzero(parent[first:voxels] == -1)
    order = marked[np.argsort(flat[marked], kind="stable")]
    roots = np.empty(4096, dtype=parent.dtype)
    dying_at = np.empty(4096, dtype=parent.dtype)
    step, count = _union_find.sweep(flat, order, 0, order.size, False, shape,
                                    _union_find.neighbour_offsets(2, True), 0, parent,
                                    roots, dying_at, 0)
    assert step == order.size and count > 0
    big = list(zip((roots[:count] - first).tolist(), (dying_at[:count] - first).tolist()))
    assert min(roots[:count].min(), dying_at[:count].min()) > 2**31
    assert big == _kernel_pairs(pattern, ascending=False, corners=True, with_outside=False)
