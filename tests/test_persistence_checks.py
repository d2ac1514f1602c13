"""The persistence diagram against references outside the project.

- Betti 0 at every level equals the number of connected components that
  scipy.ndimage.label finds in the sublevel set, with the matching structuring element
  (generate_binary_structure(ndim, 1) for 4/6, (ndim, ndim) for 8/26).
- The Euler characteristic at every level equals skimage.measure.euler_number of the
  sublevel set with the matching connectivity (Ohser, Nagel & Schladitz 2002, "The Euler
  number of discretized sets -- on the choice of adjacency in homogeneous lattices").
- Stability (Cohen-Steiner, Edelsbrunner & Harer 2007, "Stability of persistence
  diagrams"): the bottleneck distance between the diagrams of f and f + noise is at most
  max |noise|; the bottleneck distance is gudhi's (Maria et al. 2014).
"""

import gudhi
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import ndimage
from skimage.measure import euler_number

import voxtopo


def smooth_random(shape, seed, sigma=1.5):
    rng = np.random.default_rng(seed)
    field = ndimage.gaussian_filter(rng.normal(size=shape), sigma, mode="wrap")
    return field.astype(np.float64)


CASES = [((40, 44), 8), ((40, 44), 4), ((18, 20, 22), 26), ((18, 20, 22), 6)]


@pytest.mark.parametrize("shape, neighbourhood", CASES)
@pytest.mark.parametrize("superlevel", [False, True])
def test_betti0_and_euler_match_scipy_and_skimage_at_every_level(shape, neighbourhood,
                                                                   superlevel):
    image = smooth_random(shape, seed=len(shape) * 10 + neighbourhood)
    diagram = voxtopo.persistence(image, neighbourhood=neighbourhood, superlevel=superlevel)
    ndim = image.ndim
    low = neighbourhood in (4, 6)
    structure = ndimage.generate_binary_structure(ndim, 1 if low else ndim)
    connectivity = 1 if low else ndim
    for level in np.quantile(image, np.linspace(0.02, 0.98, 15)):
        swept = image >= level if superlevel else image <= level
        expected_b0 = ndimage.label(swept, structure=structure)[1]
        betti = diagram.betti(level)
        assert betti[0] == expected_b0
        chi = sum((-1) ** k * b for k, b in enumerate(betti))
        assert chi == euler_number(swept, connectivity=connectivity)


def test_betti_curve_agrees_with_betti_at_each_level():
    """Internal consistency: the vectorised curve equals level-by-level counting."""
    image = smooth_random((30, 30), seed=3)
    diagram = voxtopo.persistence(image)
    levels = np.quantile(image, np.linspace(0, 1, 25))
    curve = diagram.betti_curve(levels)
    for i, level in enumerate(levels):
        assert [curve["betti_0"][i], curve["betti_1"][i]] == diagram.betti(level)


def _bottleneck(d1, d2, dim):
    return gudhi.bottleneck_distance(d1.intervals(dim), d2.intervals(dim))


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), amplitude=st.floats(0.001, 0.5),
       ndim=st.sampled_from([2, 3]), low=st.booleans(), superlevel=st.booleans())
def test_bottleneck_distance_never_exceeds_the_perturbation(seed, amplitude, ndim, low,
                                                             superlevel):
    shape = (12, 13) if ndim == 2 else (7, 8, 9)
    rng = np.random.default_rng(seed)
    f = smooth_random(shape, seed, sigma=1.0)
    noise = rng.uniform(-amplitude, amplitude, size=shape)
    neighbourhood = (4 if ndim == 2 else 6) if low else None
    d_f = voxtopo.persistence(f, neighbourhood=neighbourhood, superlevel=superlevel)
    d_g = voxtopo.persistence(f + noise, neighbourhood=neighbourhood, superlevel=superlevel)
    bound = np.abs(noise).max()
    for dim in range(ndim):
        assert _bottleneck(d_f, d_g, dim) <= bound + 1e-9


@pytest.mark.parametrize("shape, neighbourhood", CASES + [((1, 9, 11), 26), ((5, 1, 7), 6)])
@pytest.mark.parametrize("superlevel", [False, True])
def test_birth_and_death_voxels_hold_the_birth_and_death_values(shape, neighbourhood,
                                                                 superlevel):
    image = np.round(smooth_random(shape, seed=7) * 4) / 4  # many ties
    diagram = voxtopo.persistence(image, neighbourhood=neighbourhood, superlevel=superlevel)
    pairs = diagram.pairs
    axes = ["z", "y", "x"][3 - image.ndim:]
    birth_idx = tuple(pairs[f"birth_voxel_{a}"].to_numpy(dtype=int) for a in axes)
    np.testing.assert_array_equal(image[birth_idx], pairs["birth"].to_numpy())
    finite = pairs[np.isfinite(pairs["death"])]
    death_idx = tuple(finite[f"death_voxel_{a}"].to_numpy(dtype=int) for a in axes)
    np.testing.assert_array_equal(image[death_idx], finite["death"].to_numpy())
    essential = pairs[~np.isfinite(pairs["death"])]
    assert essential[[f"death_voxel_{a}" for a in axes]].isna().all().all()


def test_superlevel_pairs_keep_the_scans_own_values():
    """A bright blob on a dark background: born at its peak, dies where it meets a
    brighter one; values never negated (DESIGN.md convention)."""
    image = np.zeros((20, 20))
    image[4:7, 4:7] = 5.0
    image[12:16, 12:16] = 9.0
    diagram = voxtopo.persistence(image, superlevel=True)
    zero = diagram.dimension(0).pairs
    assert list(zero["birth"]) == [9.0, 5.0]
    assert zero["death"].iloc[0] == -np.inf
    assert zero["death"].iloc[1] == 0.0
    assert (zero["birth"] >= zero["death"]).all()


def test_constant_image_has_one_component_that_never_dies():
    for shape in [(9, 9), (4, 5, 6), (1, 1, 8)]:
        diagram = voxtopo.persistence(np.full(shape, 3, np.uint8))
        assert len(diagram) == 1
        row = diagram.pairs.iloc[0]
        assert (row["dim"], row["birth"], row["death"]) == (0, 3.0, np.inf)


def test_periodic_boundary_turns_a_stripe_into_a_loop():
    """A horizontal stripe on a torus (periodic in x) is a circle: Betti (1, 1) --
    Hatcher 2002: a band around the flat torus is an annulus."""
    image = np.ones((12, 16))
    image[5:8, :] = 0
    diagram = voxtopo.persistence(image, periodic=(False, True))
    assert diagram.betti(0.0) == [1, 1]
    plain = voxtopo.persistence(image)
    assert plain.betti(0.0) == [1, 0]


def test_z3_coefficients_give_the_same_diagram_on_torsion_free_images():
    """Cubical sets in R^3 have no torsion (common practice, no source), so Z/2 and Z/3
    agree."""
    image = smooth_random((8, 9, 10), seed=11)
    d2 = voxtopo.persistence(image, field=2)
    d3 = voxtopo.persistence(image, field=3)
    for dim in range(3):
        a, b = d2.intervals(dim), d3.intervals(dim)
        np.testing.assert_array_equal(a[np.lexsort(a.T)], b[np.lexsort(b.T)])


def test_bad_options_are_refused_with_the_wrong_value_in_the_message():
    image = np.zeros((5, 5))
    with pytest.raises(voxtopo.InputError, match="got 6"):
        voxtopo.persistence(image, neighbourhood=6)
    with pytest.raises(voxtopo.InputError, match="prime"):
        voxtopo.persistence(image, field=4)
    with pytest.raises(voxtopo.InputError, match="NaN"):
        voxtopo.persistence(np.array([[np.nan, 1.0], [0.0, 2.0]]))
    with pytest.raises(voxtopo.InputError, match="2D image or a 3D volume"):
        voxtopo.persistence(np.zeros((2, 2, 2, 2)))
