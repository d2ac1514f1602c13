"""Dimension 1 of 3D volumes by the implicit cohomology reduction (engine/_reduction.py).

External checks:
- gudhi (Maria, Boissonnat, Glisse & Yvinec 2014, "The Gudhi Library: Simplicial Complexes
  and Persistent Homology", ICMS): the multiset of finite dimension-1 (birth, death) pairs
  equals gudhi's CubicalComplex diagram, both constructions (top_dimensional_cells for
  the voxel construction, vertices for the vertex construction).
- Betti numbers (Hatcher 2002, "Algebraic Topology"): solid torus (1, 1, 0), torus surface
  (1, 2, 1); so a voxelised solid torus has one long dimension-1 bar and a thickened
  torus surface two.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from reference import gudhi_intervals, torus_distance

from voxtopo.engine._reduction import (
    pairs_dim1,
    pairs_dim1_explicit,
    reversed_order_values,
    scratch_size,
    voxel_order,
)
from voxtopo.errors import Cancelled, InputError

CONSTRUCTIONS = ["voxel", "vertex"]


def gudhi_dim1(values, construction):
    """Finite dimension-1 pairs of positive persistence from gudhi, sorted."""
    intervals = gudhi_intervals(values, 1, construction=construction)
    return sorted((float(b), float(d)) for b, d in intervals)


def as_sorted_pairs(birth, death):
    return sorted(zip(birth.tolist(), death.tolist()))


@st.composite
def small_volumes(draw, max_side=7):
    """Odd and unequal sides, one-voxel-thin axes, few distinct values (many ties) or
    many, integers and floats."""
    shape = draw(st.tuples(*(st.integers(1, max_side) for _ in range(3))))
    dtype = draw(st.sampled_from([np.uint8, np.uint16, np.int32, np.float32, np.float64]))
    levels = draw(st.sampled_from([2, 3, 5, 200]))
    codes = draw(arrays(np.int64, shape, elements=st.integers(0, levels - 1)))
    if np.issubdtype(dtype, np.floating):
        return (codes * 0.37 - 1.5).astype(dtype)
    return codes.astype(dtype)


@settings(max_examples=60, deadline=None)
@given(values=small_volumes(), construction=st.sampled_from(CONSTRUCTIONS))
def test_dim1_pairs_equal_gudhi(values, construction):
    """Check against gudhi (Maria, Boissonnat, Glisse & Yvinec 2014)."""
    birth, death, _, _ = pairs_dim1(values, construction)
    assert as_sorted_pairs(birth, death) == gudhi_dim1(values, construction)


@settings(max_examples=30, deadline=None)
@given(values=small_volumes(max_side=5), construction=st.sampled_from(CONSTRUCTIONS))
def test_kernel_equals_explicit_boundary_matrix_twin(values, construction):
    """The implicit kernel and the plain reduction of an explicit boundary matrix use the
    same documented filtration order, so they give the very same pairs, locations
    included. Internal consistency; gudhi is the external check above."""
    kernel = pairs_dim1(values, construction)
    twin = pairs_dim1_explicit(values, construction)
    assert sorted(zip(*(a.tolist() for a in kernel))) == sorted(zip(*(a.tolist() for a in twin)))


@settings(max_examples=30, deadline=None)
@given(values=small_volumes(), construction=st.sampled_from(CONSTRUCTIONS))
def test_locations_hold_the_pair_values(values, construction):
    birth, death, birth_index, death_index = pairs_dim1(values, construction)
    flat = values.reshape(-1)
    assert np.array_equal(flat[birth_index].astype(np.float64), birth)
    assert np.array_equal(flat[death_index].astype(np.float64), death)
    assert (death > birth).all()


def test_smooth_float_volume_equals_gudhi_in_both_constructions():
    """A 21x26x17 smooth random field has hundreds of loops and needs real reductions
    (not only apparent pairs). Check against gudhi (Maria, Boissonnat, Glisse & Yvinec
    2014)."""
    from scipy import ndimage

    rng = np.random.default_rng(7)
    values = ndimage.gaussian_filter(rng.normal(size=(21, 26, 17)), 1.2).astype(np.float32)
    for construction in CONSTRUCTIONS:
        birth, death, _, _ = pairs_dim1(values, construction)
        expected = gudhi_dim1(values, construction)
        assert len(expected) > 50
        assert as_sorted_pairs(birth, death) == expected


@pytest.mark.parametrize("construction", CONSTRUCTIONS)
@pytest.mark.parametrize("levels", [2, 5, 256])
def test_noisy_volumes_with_ties_equal_gudhi(construction, levels):
    """White noise of 2, 5 or 256 levels on 18x19x20: most voxels sit where earlier voxels
    are not connected around them, so the clearing's union-find and the reductions do
    real work (the local shortcuts alone would be wrong here). Check against gudhi (Maria,
    Boissonnat, Glisse & Yvinec 2014), whole diagram and locations' values."""
    values = np.random.default_rng(levels).integers(0, levels, (18, 19, 20)).astype(np.uint8)
    birth, death, birth_index, death_index = pairs_dim1(values, construction)
    expected = gudhi_dim1(values, construction)
    assert len(expected) > 100
    assert as_sorted_pairs(birth, death) == expected
    flat = values.reshape(-1)
    assert np.array_equal(flat[birth_index], birth) and np.array_equal(flat[death_index], death)
    # the memory-order pass shared by two threads gives the very same pairs and locations
    shared = pairs_dim1(values, construction, threads=2)
    for mine, theirs in zip((birth, death, birth_index, death_index), shared):
        assert np.array_equal(mine, theirs)


def bars_alive(birth, death, level):
    return int(np.count_nonzero((birth <= level) & (death > level)))


@pytest.mark.parametrize("construction", CONSTRUCTIONS)
def test_solid_torus_has_one_long_loop(construction):
    """Solid torus Betti numbers (1, 1, 0) (Hatcher 2002, "Algebraic Topology"): the
    sublevel set {distance to the core circle <= 5} is a voxelised solid torus."""
    values = torus_distance()
    birth, death, _, _ = pairs_dim1(values, construction)
    assert bars_alive(birth, death, 5.0) == 1
    assert np.count_nonzero(death - birth > 3.0) == 1


@pytest.mark.parametrize("construction", CONSTRUCTIONS)
def test_thickened_torus_surface_has_two_long_loops(construction):
    """Torus surface Betti numbers (1, 2, 1) (Hatcher 2002, "Algebraic Topology"): the
    sublevel set {| distance to the core circle - 5 | <= 1} is a thickened torus surface;
    its meridian and its longitude give two long bars."""
    values = np.abs(torus_distance() - 5.0)
    birth, death, _, _ = pairs_dim1(values, construction)
    assert bars_alive(birth, death, 1.0) == 2
    assert np.count_nonzero(death - birth > 3.0) == 2


@pytest.mark.parametrize("dtype", [np.uint8, np.float32])
def test_lent_buffer_and_superlevel_keep_the_pairs_and_leave_the_input(dtype):
    """A buffer lent as scratch (holding garbage) changes nothing; a superlevel sweep
    (counting ranks from the top, or a reversed copy for floats) pairs the same voxels as
    the sublevel sweep of the order-reversed values, with the scan's own values."""
    rng = np.random.default_rng(3)
    values = rng.integers(0, 6, size=(6, 5, 7)).astype(dtype)
    before = values.copy()
    plain = pairs_dim1(values, "voxel")
    lent = np.full(scratch_size(values.shape, "voxel") + 3, 77, dtype=np.int32)
    reused = pairs_dim1(values, "voxel", scratch=lent)
    assert all(np.array_equal(a, b) for a, b in zip(plain, reused))
    top = pairs_dim1(values, "voxel", superlevel=True)
    reversed_ = pairs_dim1(reversed_order_values(values), "voxel")
    assert len(top[0]) > 0
    assert np.array_equal(top[2], reversed_[2]) and np.array_equal(top[3], reversed_[3])
    assert np.array_equal(top[0], values.reshape(-1)[top[2]])
    assert np.all(top[1] < top[0])
    assert np.array_equal(values, before)


@pytest.mark.parametrize("dtype", [np.uint16, np.int32, np.float64])
def test_pool_grown_many_times_keeps_the_pairs(monkeypatch, dtype):
    """Check against gudhi (Maria, Boissonnat, Glisse & Yvinec 2014): with a pool of kept
    columns that starts at 8 entries and must be grown before nearly every column (and
    whose columns outgrow what is free), the pairs are still gudhi's; integer values
    compose their ranks, float64 values keep arrays of ranks and order."""
    from voxtopo.engine import _reduction

    monkeypatch.setattr(_reduction, "_FIRST_POOL_ENTRIES", 8)
    monkeypatch.setattr(_reduction, "_POOL_RESERVE", 2)
    rng = np.random.default_rng(11)
    values = rng.integers(0, 60, size=(9, 11, 10)).astype(dtype)
    birth, death, _, _, counts = _reduction.reduce_dim1(values, "voxel")
    assert counts["kept_entries"] > 100  # the pool really had to grow
    assert as_sorted_pairs(birth, death) == gudhi_dim1(values, "voxel")
    given_away = [np.full(scratch_size(values.shape, "voxel"), 5, dtype=np.int32)]
    again = pairs_dim1(values, "voxel", scratch=given_away, superlevel=True)
    assert given_away == []  # the reduction took the buffer (and frees it when done)
    expected = gudhi_intervals(values, 1, construction="voxel", superlevel=True)
    assert as_sorted_pairs(again[0], again[1]) == sorted(map(tuple, expected.tolist()))


def test_voxel_order_is_sorted_by_value_then_index():
    """Common practice, no source: numpy's stable argsort is the reference order."""
    rng = np.random.default_rng(5)
    for values in (rng.integers(0, 9, 5000).astype(np.uint8),
                   rng.integers(0, 70000, 5000).astype(np.int64),
                   np.round(rng.normal(size=5000), 1).astype(np.float32),
                   np.round(rng.normal(size=5000), 1),
                   rng.normal(scale=1e6, size=70000).astype(np.float32)):
        values[::13] = 0
        if values.dtype == np.float32:
            values[::17] = -0.0   # the same value as 0.0
        assert np.array_equal(voxel_order(values), np.argsort(values, kind="stable"))


def test_progress_reports_dimension_1_and_can_cancel():
    values = np.random.default_rng(1).random((9, 9, 9))
    seen = []
    pairs_dim1(values, "vertex", progress=lambda phase, fraction: seen.append((phase,
                                                                               fraction)))
    assert {phase for phase, _ in seen} == {"dimension 1"}
    fractions = [fraction for _, fraction in seen]
    assert fractions == sorted(fractions) and fractions[0] == 0.0 and fractions[-1] == 1.0

    def stop_half_way(phase, fraction):
        if fraction >= 0.5:
            raise Cancelled("stopped")

    with pytest.raises(Cancelled):
        pairs_dim1(values, "vertex", progress=stop_half_way)


@pytest.mark.parametrize("values, construction, words", [
    (np.zeros((4, 4)), "voxel", "3D volume"),
    (np.zeros((2, 2, 2, 2)), "voxel", "3D volume"),
    (np.zeros((0, 3, 3)), "voxel", "empty volume"),
    (np.array([[[0.0, np.nan]]]), "voxel", "NaN"),
    (np.zeros((3, 3, 3), dtype=complex), "voxel", "complex128"),
    (np.zeros((3, 3, 3)), "corners", "'corners'"),
])
def test_bad_input_gets_one_clear_sentence(values, construction, words):
    with pytest.raises(InputError) as caught:
        pairs_dim1(values, construction)
    message = str(caught.value)
    assert words in message
    assert message.count(". ") == 0 and message.endswith(".")
