"""The own engine end to end: the same diagram as gudhi, exact values at the locations.

External references named beside each check (see /work/shared/CHECKS.md): gudhi (Maria,
Boissonnat, Glisse & Yvinec 2014), skimage.measure.euler_number (Ohser, Nagel & Schladitz
2002), Betti numbers of textbook shapes (Hatcher 2002), stability of diagrams
(Cohen-Steiner, Edelsbrunner & Harer 2007).
"""

from collections import Counter

import gudhi
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from reference import annulus, shell, solid_torus
from skimage.measure import euler_number

import voxtopo
from voxtopo import memory
from voxtopo.engine import _gudhi, _levels, estimate, own
from voxtopo.errors import Cancelled, InputError, TooBigError

SETTINGS = settings(max_examples=30, deadline=None)
DTYPES = [np.uint8, np.int16, np.float32, np.float64]


@st.composite
def scans(draw):
    """2D or 3D arrays: odd, unequal and one-voxel sides; few values (many ties) or floats."""
    ndim = draw(st.sampled_from([2, 3]))
    shape = tuple(draw(st.integers(1, 7 if ndim == 2 else 4)) for _ in range(ndim))
    dtype = draw(st.sampled_from(DTYPES))
    if draw(st.booleans()):
        elements = st.integers(0, draw(st.integers(1, 4)))
    elif np.issubdtype(dtype, np.floating):
        elements = st.floats(-1e3, 1e3, width=np.dtype(dtype).itemsize * 8)
    else:
        elements = st.integers(0, 255 if dtype == np.uint8 else 30000)
    return draw(arrays(dtype, shape, elements=elements))


def _multiset(raw):
    return Counter(zip(raw.dim.tolist(), raw.birth.tolist(), raw.death.tolist()))


@SETTINGS
@given(scans(), st.booleans(), st.sampled_from(["voxel", "vertex"]))
def test_same_diagram_as_gudhi(values, superlevel, construction):
    """Check against gudhi (Maria, Boissonnat, Glisse & Yvinec 2014): the same multiset of
    (dim, birth, death), essential class included, in both constructions and directions."""
    ours = own.compute(values, superlevel=superlevel, construction=construction)
    reference = _gudhi.compute(values, superlevel=superlevel, construction=construction,
                               periodic=None, field=2)
    assert _multiset(ours) == _multiset(reference)


@SETTINGS
@given(scans(), st.booleans(), st.sampled_from(["voxel", "vertex"]))
def test_locations_hold_the_pair_values_bit_for_bit(values, superlevel, construction):
    """Birth and death voxels carry exactly the pair's values (common practice, no source:
    a location is only meaningful if the feature's value is found there)."""
    raw = own.compute(values, superlevel=superlevel, construction=construction)
    flat = values.ravel()
    assert np.array_equal(flat[raw.birth_index].astype(np.float64), raw.birth)
    finite = raw.death_index >= 0
    assert np.array_equal(flat[raw.death_index[finite]].astype(np.float64),
                          raw.death[finite])
    forever = -np.inf if superlevel else np.inf
    assert list(raw.dim[~finite]) == [0] and list(raw.death[~finite]) == [forever]
    # superlevel pairs are born higher; sublevel lower; none of zero persistence
    assert np.all(raw.birth > raw.death) if superlevel else np.all(raw.birth < raw.death)


def test_float32_superlevel_values_are_not_rounded():
    """Values like 0.1 in float32 come back as the array's own numbers, not -(-v) in
    float64 arithmetic gone through another representation (common practice, no source)."""
    values = np.array([[0.1, 0.7, 0.1], [0.7, 0.3, 0.7], [0.1, 0.7, 0.1]], np.float32)
    raw = own.compute(values, superlevel=True, construction="voxel")
    assert set(raw.birth.tolist()) | set(raw.death[np.isfinite(raw.death)].tolist()) <= \
        set(values.astype(np.float64).ravel().tolist())


@pytest.mark.parametrize("ndim", [2, 3])
@pytest.mark.parametrize("construction, connectivity", [("vertex", 1), ("voxel", None)])
def test_euler_characteristic_matches_scikit_image(ndim, construction, connectivity):
    """Check against skimage.measure.euler_number (Ohser, Nagel & Schladitz 2002): at every
    threshold the alternating sum of Betti numbers is the Euler number with the matching
    neighbourhood (6/4 for the vertex construction, 26/8 for the voxel construction)."""
    rng = np.random.default_rng(11 + ndim)
    values = rng.integers(0, 6, (9, 8, 7)[:ndim]).astype(np.uint8)
    raw = own.compute(values, superlevel=False, construction=construction)
    for level in range(6):
        alive = (raw.birth <= level) & (level < raw.death)
        chi = sum((-1) ** d * int(np.count_nonzero(alive & (raw.dim == d)))
                  for d in range(ndim))
        assert chi == euler_number(values <= level, connectivity=connectivity or ndim)


@pytest.mark.parametrize("neighbourhood", [6, 26])
def test_spherical_shell_has_one_cavity(neighbourhood):
    """Betti numbers of a spherical shell are (1, 0, 1) (Hatcher 2002, "Algebraic
    Topology"), measured with the own engine at the shell's level."""
    values = np.where(shell(25, 6, 10), 0.0, 1.0)
    diagram = voxtopo.persistence(values, neighbourhood=neighbourhood, engine="voxtopo")
    assert diagram.engine == "voxtopo"
    assert diagram.betti(0.0) == [1, 0, 1]


@pytest.mark.parametrize("neighbourhood", [4, 8])
def test_annulus_has_one_loop(neighbourhood):
    """Betti numbers of an annulus are (1, 1) (Hatcher 2002, "Algebraic Topology")."""
    values = np.where(annulus(31, 6, 12), 0.0, 1.0)
    diagram = voxtopo.persistence(values, neighbourhood=neighbourhood, engine="voxtopo")
    assert diagram.betti(0.0) == [1, 1]


def test_solid_torus_has_one_tunnel():
    """Betti numbers of a solid torus are (1, 1, 0) (Hatcher 2002, "Algebraic Topology");
    a superlevel run on the bright torus."""
    torus = solid_torus(33, big=10, small=4).astype(np.uint8) * 200
    diagram = voxtopo.persistence(torus, superlevel=True, engine="voxtopo")
    assert diagram.betti(200) == [1, 1, 0]


@settings(max_examples=15, deadline=None)
@given(arrays(np.float64, st.tuples(st.integers(2, 6), st.integers(2, 6)),
              elements=st.floats(0, 10)),
       arrays(np.float64, 36, elements=st.floats(-0.5, 0.5)))
def test_perturbation_moves_diagram_no_more_than_sup_norm(values, noise):
    """Stability (Cohen-Steiner, Edelsbrunner & Harer 2007): bottleneck distance between
    the diagrams of f and g is at most max |f - g|, per dimension (distance by gudhi)."""
    perturbed = values + noise[:values.size].reshape(values.shape)
    a = own.compute(values, superlevel=False, construction="voxel")
    b = own.compute(perturbed, superlevel=False, construction="voxel")
    bound = float(np.max(np.abs(perturbed - values)))
    for dim in (0, 1):
        pa = np.column_stack([a.birth[a.dim == dim], a.death[a.dim == dim]])
        pb = np.column_stack([b.birth[b.dim == dim], b.death[b.dim == dim]])
        assert gudhi.bottleneck_distance(pa, pb) <= bound + 1e-9


def test_progress_reports_every_phase_and_cancel_stops():
    """Phases are reported in order with fractions in [0, 1]; raising Cancelled inside the
    callback stops the run (common practice, no source)."""
    values = np.random.default_rng(0).random((6, 7, 8)).astype(np.float32)
    seen = []
    own.compute(values, superlevel=False, construction="voxel",
                progress=lambda phase, f: seen.append((phase, f)))
    phases = list(dict.fromkeys(p for p, _ in seen))
    assert phases == ["dimension 0", "dimension 2", "dimension 1"]
    assert all(0.0 <= f <= 1.0 for _, f in seen)

    def cancel_in_dimension_zero(phase, fraction):
        if phase == "dimension 0":
            raise Cancelled("stopped by the test")

    with pytest.raises(Cancelled):
        own.compute(values, superlevel=False, construction="voxel",
                    progress=cancel_in_dimension_zero)


@pytest.mark.parametrize("construction", ["voxel", "vertex"])
def test_two_threads_give_the_same_pairs_and_report_from_the_calling_thread(construction):
    """Dimension 1 in a second thread changes nothing in the result (same pairs and
    locations as one thread, and as gudhi's diagram); the callback only ever runs in the
    calling thread, and a cancel during dimension 1 stops the worker (common practice,
    no source)."""
    import threading

    values = np.random.default_rng(7).integers(0, 6, (9, 10, 11)).astype(np.uint8)
    threads_seen = set()

    def note(phase, fraction):
        threads_seen.add(threading.get_ident())

    one = own.compute(values, superlevel=False, construction=construction, threads=1)
    two = own.compute(values, superlevel=False, construction=construction, threads=2,
                      progress=note)
    for name in ("dim", "birth", "death", "birth_index", "death_index"):
        assert np.array_equal(getattr(one, name), getattr(two, name)), name
    assert threads_seen == {threading.get_ident()}
    theirs = _gudhi.compute(values, superlevel=False, construction=construction,
                            periodic=None, field=2)
    assert (Counter(zip(two.dim.tolist(), two.birth.tolist(), two.death.tolist()))
            == Counter(zip(theirs.dim.tolist(), theirs.birth.tolist(),
                           theirs.death.tolist())))

    def cancel_in_dimension_one(phase, fraction):
        if phase == "dimension 1":
            raise Cancelled("stopped by the test")

    before = threading.active_count()
    with pytest.raises(Cancelled):
        own.compute(values, superlevel=False, construction=construction, threads=2,
                    progress=cancel_in_dimension_one)
    assert threading.active_count() == before


@pytest.mark.parametrize("superlevel", [False, True])
@pytest.mark.parametrize("dtype", [np.uint8, np.int16, np.float32])
def test_vertex_loops_by_duality_equal_gudhi_at_the_ends_of_the_value_range(superlevel, dtype):
    """Dimension 1 of the vertex construction comes from the voxel construction of the
    reversed values inside a shell below them all (Garin, Heiss, Maggs, Bleile & Robins
    2020); the values span the whole dtype range, so the shell needs a wider type. Checked
    against gudhi (Maria, Boissonnat, Glisse & Yvinec 2014), locations included."""
    rng = np.random.default_rng(11)
    if np.issubdtype(dtype, np.integer):
        info = np.iinfo(dtype)
        values = rng.integers(info.min, int(info.max) + 1, (10, 11, 12)).astype(dtype)
        values.flat[:2] = (info.min, info.max)
    else:
        values = rng.normal(size=(10, 11, 12)).astype(dtype)
    ours = own.compute(values, superlevel=superlevel, construction="vertex")
    theirs = _gudhi.compute(values, superlevel=superlevel, construction="vertex",
                            periodic=None, field=2)
    loops = ours.dim == 1
    assert loops.sum() > 50
    assert (Counter(zip(ours.dim.tolist(), ours.birth.tolist(), ours.death.tolist()))
            == Counter(zip(theirs.dim.tolist(), theirs.birth.tolist(),
                           theirs.death.tolist())))
    flat = values.reshape(-1).astype(np.float64)
    assert np.array_equal(flat[ours.birth_index[loops]], ours.birth[loops])
    assert np.array_equal(flat[ours.death_index[loops]], ours.death[loops])


@pytest.mark.parametrize("superlevel", [False, True])
def test_vertex_loops_without_room_below_the_values_equal_gudhi(superlevel):
    """int64 volumes holding both ends of the int64 range leave no value for the outside
    shell of the duality; the direct vertex reduction then gives the loops. Checked
    against gudhi (Maria, Boissonnat, Glisse & Yvinec 2014)."""
    info = np.iinfo(np.int64)
    values = np.random.default_rng(12).integers(-50, 50, (8, 9, 10)).astype(np.int64)
    values.flat[:2] = (info.min, info.max)
    ours = own.compute(values, superlevel=superlevel, construction="vertex")
    theirs = _gudhi.compute(values, superlevel=superlevel, construction="vertex",
                            periodic=None, field=2)
    assert (ours.dim == 1).sum() > 20
    assert (Counter(zip(ours.dim.tolist(), ours.birth.tolist(), ours.death.tolist()))
            == Counter(zip(theirs.dim.tolist(), theirs.birth.tolist(),
                           theirs.death.tolist())))


def test_thread_setting_is_read_from_the_environment(monkeypatch):
    """VOXTOPO_THREADS sets the threads; a bad value gets one sentence."""
    monkeypatch.setenv("VOXTOPO_THREADS", "1")
    assert own.default_threads() == 1
    monkeypatch.setenv("VOXTOPO_THREADS", "many")
    with pytest.raises(InputError, match="VOXTOPO_THREADS"):
        own.default_threads()


@pytest.mark.parametrize("kwargs, words", [
    ({"periodic": (True, False)}, "periodic"),
    ({"field": 3}, "Z/3"),
])
def test_unsupported_requests_get_one_sentence(kwargs, words):
    """The engine refuses what it does not compute, naming the alternative."""
    options = {"superlevel": False, "construction": "voxel", "periodic": None, "field": 2}
    options.update(kwargs)
    with pytest.raises(InputError, match=words) as caught:
        own.compute(np.zeros((3, 3)), **options)
    assert "engine='gudhi'" in str(caught.value) and str(caught.value).count(". ") == 0


@pytest.mark.parametrize("values, words", [
    (np.zeros((2, 2, 2, 2)), "2D image or 3D volume"),
    (np.zeros((0, 3)), "empty array"),
    (np.zeros((3, 3), dtype=np.complex64), "integer or float"),
])
def test_bad_arrays_are_refused(values, words):
    with pytest.raises(InputError, match=words):
        own.compute(values, superlevel=False, construction="voxel")


def test_auto_uses_the_own_engine_and_gudhi_for_periodic():
    """engine="auto" picks voxtopo for Z/2 without periodic boundaries, gudhi otherwise."""
    values = np.arange(12.0).reshape(3, 4)
    assert voxtopo.persistence(values).engine == "voxtopo"
    assert voxtopo.persistence(values, periodic=True).engine == "gudhi"


def test_memory_estimate_grows_with_size_and_refuses_what_does_not_fit(monkeypatch):
    """The estimate covers at least the union-find forest (one 32-bit index per voxel),
    grows with the volume, and the refusal names the engine (common practice, no source)."""
    small = estimate((64, 64, 64), np.uint8, engine="voxtopo")
    large = estimate((128, 128, 128), np.uint8, engine="voxtopo")
    assert small >= 4 * 64 ** 3 and large >= 4 * 128 ** 3 and large > small
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", str(small // 2))
    with pytest.raises(TooBigError, match="voxtopo engine"):
        voxtopo.persistence(np.zeros((64, 64, 64), np.uint8), engine="voxtopo")


def _same_pairs(one, two) -> bool:
    return all(np.array_equal(getattr(one, name), getattr(two, name))
               for name in ("dim", "birth", "death", "birth_index", "death_index"))


@pytest.mark.parametrize("construction", ["voxel", "vertex"])
def test_reduction_after_the_sweeps_when_side_by_side_would_not_fit(monkeypatch, construction):
    """With two threads but memory for only one part at a time, dimension 1 runs after the
    sweeps in their union-find buffer: the same pairs and locations as side by side, and
    gudhi's diagram (Maria, Boissonnat, Glisse & Yvinec 2014); the estimate is then the
    smaller, one-after-the-other need."""
    values = np.random.default_rng(8).integers(0, 9, (9, 10, 11)).astype(np.uint16)
    side_by_side = own.compute(values, superlevel=True, construction=construction,
                               threads=2)
    roomy = own.bytes_needed(values.shape, values.dtype, 6 if construction == "vertex" else 26)
    squeezed = own._needs(values.shape, np.dtype(values.dtype), construction == "vertex")
    assert squeezed[1] < squeezed[0] == roomy
    limit = (squeezed[0] + squeezed[1]) / 2 / memory.BUDGET_FRACTION
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", str(limit))
    assert not own._side_by_side_fits(values.shape, values.dtype, construction == "vertex")
    assert own.bytes_needed(values.shape, values.dtype,
                            6 if construction == "vertex" else 26) == squeezed[1]
    one_after_other = own.compute(values, superlevel=True, construction=construction,
                                  threads=2)
    assert _same_pairs(side_by_side, one_after_other)
    theirs = _gudhi.compute(values, superlevel=True, construction=construction,
                            periodic=None, field=2)
    assert _multiset(one_after_other) == _multiset(theirs)


@pytest.mark.parametrize("shape", [(7, 9), (5, 6, 7)])
@pytest.mark.parametrize("construction", ["voxel", "vertex"])
@pytest.mark.parametrize("dtype", [np.uint16, np.float32])
def test_64_bit_indices_give_the_same_pairs(monkeypatch, shape, construction, dtype):
    """The 64-bit path, run on small data by lowering the engine's one limit for 32-bit
    indices (_union_find.INT32_VOXELS) below the volume's size: every array of indices,
    ranks and links becomes int64, and the pairs and locations are those of the 32-bit
    run and gudhi's diagram (Maria, Boissonnat, Glisse & Yvinec 2014). This proves that
    no kernel depends on 32-bit indices; the limit itself is pinned in
    test_engine_union_find."""
    from voxtopo.engine import _union_find

    values = (np.random.default_rng(9).integers(0, 7, shape) * 3).astype(dtype)
    if dtype == np.float32:  # the sorted-float path, not the level numbers' (uint16)
        monkeypatch.setattr(_levels, "MOST_LEVELS", 0)
    narrow = {superlevel: own.compute(values, superlevel=superlevel,
                                      construction=construction, threads=1)
              for superlevel in (False, True)}
    monkeypatch.setattr(_union_find, "INT32_VOXELS", 10)
    assert _union_find.index_dtype(values.size) == np.int64
    for superlevel in (False, True):
        for threads in (1, 2):
            wide = own.compute(values, superlevel=superlevel, construction=construction,
                               threads=threads)
            assert _same_pairs(narrow[superlevel], wide)
        theirs = _gudhi.compute(values, superlevel=superlevel, construction=construction,
                                periodic=None, field=2)
        assert _multiset(wide) == _multiset(theirs)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_float_levels_number_the_distinct_values_as_numpy_unique_does(dtype):
    """Check against numpy.unique (its sorted distinct values and inverse): level numbers
    (from 1) order the values exactly and give them back, -0.0 and 0.0 are one level, and
    too many levels give None."""
    rng = np.random.default_rng(7)
    values = (rng.integers(-700, 700, size=(30, 40, 50)) * 0.37).astype(dtype)
    values[0, 0, :3] = [0.0, -0.0, 0.0]
    levels, level_values = _levels.float_levels(values)
    distinct, inverse = np.unique(values, return_inverse=True)
    assert levels.dtype == np.uint16 and levels.shape == values.shape
    assert np.array_equal(levels.ravel(), inverse.ravel() + 1)
    assert level_values.dtype == dtype and np.array_equal(level_values[1:], distinct)
    assert np.array_equal(level_values[levels], values)
    many = rng.random(70_000).astype(dtype)
    distinct, inverse = np.unique(many, return_inverse=True)
    levels, level_values = _levels.float_levels(many)
    assert levels.dtype == np.uint32
    assert np.array_equal(levels.astype(np.int64), inverse + 1)
    assert np.array_equal(level_values[levels], many)
    assert _levels.float_levels(many, most=1000) is None
    assert _levels.float_levels(values.astype(np.int32)) is None


@pytest.mark.parametrize("construction", ["voxel", "vertex"])
@pytest.mark.parametrize("superlevel", [False, True])
def test_floats_over_few_levels_and_sorted_floats_give_gudhi_s_pairs(monkeypatch,
                                                                      construction,
                                                                      superlevel):
    """A signed distance transform (few distinct float32 values) runs on its level numbers;
    forced onto the sorted-float path it must give the same pairs at the same locations,
    and both gudhi's (Maria, Boissonnat, Glisse & Yvinec 2014) multiset."""
    from scipy import ndimage

    rng = np.random.default_rng(3)
    mask = ndimage.uniform_filter(rng.random((14, 15, 16)), 3) > 0.5
    values = (ndimage.distance_transform_edt(mask)
              - ndimage.distance_transform_edt(~mask)).astype(np.float32)
    assert _levels.float_levels(values) is not None
    on_levels = own.compute(values, superlevel=superlevel, construction=construction)
    monkeypatch.setattr(_levels, "MOST_LEVELS", 0)
    assert _levels.float_levels(values) is None
    sorted_floats = own.compute(values, superlevel=superlevel, construction=construction)
    for column in ("dim", "birth", "death", "birth_index", "death_index"):
        assert np.array_equal(getattr(on_levels, column), getattr(sorted_floats, column))
    reference = _gudhi.compute(values, superlevel=superlevel, construction=construction,
                               periodic=None, field=2)
    assert _multiset(on_levels) == _multiset(reference)
