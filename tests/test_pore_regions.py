"""Pore regions: the flooding kernel against its definition, and against geometry."""

import numpy as np
import pytest
from scipy import ndimage

import voxtopo
from voxtopo.errors import InputError
from voxtopo.filtration import signed_distance
from voxtopo.porosity._regions import pore_regions, pore_regions_by_levels


def _pores(distance, neighbourhood, min_persistence=0.0):
    pores = voxtopo.persistence(distance, neighbourhood=neighbourhood, engine="gudhi",
                                min_persistence=min_persistence).dimension(0).pairs
    axes = ["birth_voxel_z", "birth_voxel_y", "birth_voxel_x"][3 - distance.ndim:]
    return pores[axes].to_numpy(dtype=np.int64), pores["death"].to_numpy()


@pytest.mark.parametrize("shape, neighbourhood", [((14, 15), 8), ((14, 15), 4),
                                                  ((7, 8, 9), 26), ((7, 8, 9), 6)])
@pytest.mark.parametrize("min_persistence", [0.0, 0.7])
def test_flooding_matches_the_definition_on_random_masks(shape, neighbourhood,
                                                         min_persistence):
    """The kernel against its twin, which labels {distance < level} with scipy.ndimage.label
    (connectivity ndim for 8/26, 1 for 4/6) once per pore; pores come from gudhi
    (Maria et al. 2014, CubicalComplex) through the gudhi backend."""
    rng = np.random.default_rng(sum(shape) + neighbourhood)
    for _ in range(6):
        mask = ndimage.gaussian_filter(rng.random(shape), 1.0) > 0.5
        distance = signed_distance(mask).data
        births, deaths = _pores(distance, neighbourhood, min_persistence)
        fast = pore_regions(distance, births, deaths, neighbourhood)
        slow = pore_regions_by_levels(distance, births, deaths, neighbourhood)
        np.testing.assert_array_equal(fast, slow)


def _two_balls_and_a_throat(radius=6, throat=2, gap=16, size=(20, 20, 40)):
    z, y, x = np.indices(size)
    centre = np.array(size) // 2
    left, right = centre[2] - gap // 2, centre[2] + gap // 2
    ball = lambda cx: ((z - centre[0]) ** 2 + (y - centre[1]) ** 2 + (x - cx) ** 2
                       <= radius ** 2)
    tube = ((z - centre[0]) ** 2 + (y - centre[1]) ** 2 <= throat ** 2) & \
        (x >= left) & (x <= right)
    return ball(left) | ball(right) | tube, (tuple(centre[:2]) + (left,),
                                            tuple(centre[:2]) + (right,))


def test_two_balls_joined_by_a_throat_split_into_two_regions():
    """Two ball pores of radius 6 voxels joined by a tube of radius 2. Closed forms
    (common practice, no source): the distance transform (scipy distance_transform_edt is
    the reference for distances, CHECKS.md) is deepest at -6 in each ball centre and the
    merge happens at minus the tube radius; on a voxel grid both within one voxel
    (CHECKS.md: packings hold to within about one voxel). Every pore voxel belongs to one
    of the two regions, each region is one piece (scipy.ndimage.label) holding its centre."""
    mask, centres = _two_balls_and_a_throat()
    distance = signed_distance(mask).data
    diagram = voxtopo.persistence(distance, neighbourhood=26, engine="gudhi",
                                  min_persistence=0.5).dimension(0)
    pores = diagram.pairs
    assert len(pores) == 2
    assert np.all(np.abs(-pores["birth"].to_numpy() - 6) <= 1.0)
    finite = pores[np.isfinite(pores["death"])]
    assert len(finite) == 1
    assert abs(-finite["death"].iloc[0] - 2) <= 1.0
    births = diagram.voxels("birth")
    labels = pore_regions(distance, births, pores["death"].to_numpy(), 26)
    np.testing.assert_array_equal(labels > 0, mask)
    structure = ndimage.generate_binary_structure(3, 3)
    for k in (1, 2):
        _, pieces = ndimage.label(labels == k, structure=structure)
        assert pieces == 1
    assert {labels[c] for c in centres} == {1, 2}


def test_docstring_line_partition():
    """The drawing in the module docstring, worked by hand (common practice, no source)."""
    d = np.array([[-3.0, -2, -1, -2, -4, -1, 1]])
    assert pore_regions(d, [[0, 0], [0, 4]], [-1.0, np.inf], 8).tolist() == \
        [[1, 1, 2, 2, 2, 2, 0]]


def test_mismatched_births_and_levels_are_refused_in_one_sentence():
    with pytest.raises(InputError, match=r"^Got 2 pore birth voxels but 1 death levels; "
                                         r"give one level per pore\.$"):
        pore_regions(np.full((3, 3), -1.0), [[0, 0], [1, 1]], [np.inf], 8)


def test_birth_outside_the_volume_is_refused():
    with pytest.raises(InputError, match="outside the volume of shape"):
        pore_regions(np.full((3, 3), -1.0), [[5, 0]], [np.inf], 8)


def test_wrong_neighbourhood_is_refused_with_the_value():
    with pytest.raises(InputError, match=r"got 26\.$"):
        pore_regions(np.full((3, 3), -1.0), [[0, 0]], [np.inf], 26)


def test_regions_of_a_pore_analysis_are_labelled_by_pore_id():
    # Two closed cavities of known voxel counts (numpy's count of each ball, common
    # practice, no source) in solid: each is one pore, its region is its ball, and the
    # label is the pore's id in the table; the region's voxels make its body_volume.
    from voxtopo.porosity import analyse, regions_of
    z, y, x = np.meshgrid(*[np.arange(30)] * 3, indexing="ij")
    big = np.sqrt((z - 15) ** 2 + (y - 9) ** 2 + (x - 9) ** 2) <= 6
    small = np.sqrt((z - 15) ** 2 + (y - 21) ** 2 + (x - 21) ** 2) <= 3
    result = analyse(big | small, spacing=(2.0, 2.0, 2.0), unit="um", engine="gudhi")
    labels = regions_of(result)
    pores = result.pores
    assert pores["id"].tolist() == [1, 2]
    assert np.array_equal(labels == 1, big) and np.array_equal(labels == 2, small)
    assert pores["body_volume"].tolist() == [8.0 * big.sum(), 8.0 * small.sum()]


def test_regions_stop_at_the_region_of_interest():
    # common practice, no source: outside the sample no voxel belongs to a pore
    from voxtopo.porosity import analyse, regions_of
    mask = np.ones((20, 20, 20), bool)
    mask[:, 5:15, 5:15] = False
    mask[:, 8:12, 8:12] = True                       # a channel through a solid block
    roi = np.zeros_like(mask)
    roi[:, 5:15, 5:15] = True
    result = analyse(mask, roi=roi, engine="gudhi")
    labels = regions_of(result)
    assert not labels[~roi].any()
    assert np.array_equal(labels > 0, mask & roi)
