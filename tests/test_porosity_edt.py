"""The separable exact distance transform (porosity/_edt.py) against SciPy's.

Reference: ``scipy.ndimage.distance_transform_edt`` with ``sampling=`` (SciPy; exact
Euclidean distance transform, Maurer et al. 2003), which measures from every nonzero voxel
to the nearest zero voxel: ours measures to the nearest True voxel of ``feature``, so it is
compared with SciPy's transform of ``~feature``.

Tolerance: our distances are float32 (square root of a float32 squared distance), SciPy's
float64; float32 rounding is 2^-24 relative on the square and about as much on the root, so
a relative 1e-6 plus an absolute 1e-6 covers it with room, and a wrong site (off by a voxel)
is off by far more.
"""

import numpy as np
import pytest
from scipy import ndimage

from voxtopo.porosity._edt import (distance_to_nearest, lower_envelope_python,
                                   signed_squared_distance, squared_distance_pass)

RTOL = ATOL = 1e-6


def scipy_distance(feature, spacing):
    """SciPy's exact EDT to the nearest True voxel (reference, see module docstring)."""
    return ndimage.distance_transform_edt(~feature, sampling=spacing)


@pytest.mark.parametrize("shape, spacing, density", [
    ((40, 57), (0.7, 1.9), 0.05),
    ((31, 29), (2.0, 1.0), 0.4),
    ((17, 23, 19), (1.5, 0.6, 1.1), 0.02),
    ((24, 18, 30), (0.3, 0.3, 2.5), 0.2),
])
def test_distance_equals_scipy_on_random_masks(shape, spacing, density):
    feature = np.random.default_rng(len(shape) * 100 + int(100 * density)).random(shape) < density
    ours = distance_to_nearest(feature, spacing)
    assert ours.dtype == np.float32
    np.testing.assert_allclose(ours, scipy_distance(feature, spacing), rtol=RTOL, atol=ATOL)


def test_single_feature_voxel_gives_the_distance_to_it():
    feature = np.zeros((9, 14, 11), bool)
    feature[2, 10, 3] = True
    spacing = (1.7, 0.4, 1.0)
    ours = distance_to_nearest(feature, spacing)
    np.testing.assert_allclose(ours, scipy_distance(feature, spacing), rtol=RTOL, atol=ATOL)
    # the far corner, by Pythagoras (common practice, no source)
    assert ours[8, 0, 10] == pytest.approx(np.sqrt((6 * 1.7) ** 2 + (10 * 0.4) ** 2 + 7 ** 2),
                                           rel=RTOL)


def test_all_feature_is_zero_everywhere():
    assert not distance_to_nearest(np.ones((5, 6, 7), bool), (1.0, 2.0, 3.0)).any()


def test_no_feature_has_no_distance():
    # no feature voxel: no distance exists, so every voxel is +inf (the pores job refuses an
    # empty phase before it would get here)
    assert np.isposinf(distance_to_nearest(np.zeros((4, 5), bool), (1.0, 1.0))).all()


@pytest.mark.parametrize("shape", [(1, 13, 1), (1, 1, 12), (11, 1, 1), (1, 1, 1), (5, 1, 7),
                                   (1, 6)])
def test_lines_of_length_one(shape):
    rng = np.random.default_rng(3)
    feature = rng.random(shape) < 0.3
    feature.flat[-1] = True
    spacing = tuple(rng.uniform(0.5, 2.0, len(shape)))
    np.testing.assert_allclose(distance_to_nearest(feature, spacing),
                               scipy_distance(feature, spacing), rtol=RTOL, atol=ATOL)


def test_pass_works_in_place_on_non_contiguous_blocks():
    rng = np.random.default_rng(5)
    feature = rng.random((20, 26, 35)) < 0.03
    spacing = (1.2, 0.8, 1.6)
    # a Fortran-ordered array and a strided view: what the out-of-core path hands over
    squared = np.asfortranarray(np.where(feature, 0, np.inf).astype(np.float32))
    big = np.full((20, 52, 35), -1.0, np.float32)
    strided = big[:, ::2, :]
    strided[...] = np.where(feature, 0, np.inf)
    for block in (squared, strided):
        for axis in (2, 0, 1):
            squared_distance_pass(block, axis, spacing[axis])
        np.testing.assert_allclose(np.sqrt(block), scipy_distance(feature, spacing),
                                   rtol=RTOL, atol=ATOL)
    assert (big[:, 1::2, :] == -1).all()  # the voxels between the strides are untouched


def test_pass_equals_its_python_twin_on_one_line():
    rng = np.random.default_rng(11)
    line = np.where(rng.random(60) < 0.2, rng.uniform(0, 30, 60), np.inf).astype(np.float32)
    expected = lower_envelope_python(line, 1.3)
    squared_distance_pass(line, 0, 1.3)
    np.testing.assert_allclose(line, expected, rtol=RTOL)


@pytest.mark.parametrize("shape, spacing, density", [((33, 41), (1.0, 0.5), 0.45),
                                                     ((15, 22, 18), (2.0, 1.0, 0.7), 0.45),
                                                     ((20, 17, 23), (1.0, 1.5, 0.8), 0.02),
                                                     ((12, 9, 1), (1.0, 1.0, 1.5), 0.9)])
def test_two_phase_transform_equals_two_scipy_transforms(shape, spacing, density):
    # scipy.ndimage.distance_transform_edt with sampling= (CHECKS.md); sparse phases leave
    # whole lines without the other phase, lines of one voxel have no neighbour at all
    phase = np.random.default_rng(9).random(shape) < density
    squared = signed_squared_distance(phase, spacing)
    expected = np.where(phase, ndimage.distance_transform_edt(phase, sampling=spacing),
                        ndimage.distance_transform_edt(~phase, sampling=spacing))
    np.testing.assert_allclose(np.sqrt(squared), expected, rtol=RTOL, atol=ATOL)


def test_bad_pass_requests_are_refused_with_the_value():
    with pytest.raises(TypeError, match="float64"):
        squared_distance_pass(np.zeros(4), 0, 1.0)
    with pytest.raises(ValueError, match="got 3"):
        squared_distance_pass(np.zeros((4, 4), np.float32), 3, 1.0)
    with pytest.raises(ValueError, match="got -1"):
        squared_distance_pass(np.zeros(4, np.float32), 0, -1.0)
