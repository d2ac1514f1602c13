"""Filtrations: smoothing, crop, downsampling, thresholds, the signed distance transform."""

import numpy as np
import pytest
from reference import gudhi_intervals
from scipy import ndimage

import voxtopo
from voxtopo import filtration
from voxtopo.scan import Scan


def test_signed_distance_matches_scipy_edt_with_anisotropic_spacing():
    """Reference: scipy.ndimage.distance_transform_edt with sampling= (CHECKS.md)."""
    rng = np.random.default_rng(0)
    mask = ndimage.gaussian_filter(rng.normal(size=(12, 20, 18)), 2) > 0
    spacing = (3.0, 1.0, 1.5)
    sdt = filtration.signed_distance(Scan(mask, spacing, "um"))
    inside = ndimage.distance_transform_edt(mask, sampling=spacing)
    outside = ndimage.distance_transform_edt(~mask, sampling=spacing)
    np.testing.assert_allclose(sdt.data[mask], -inside[mask])
    np.testing.assert_allclose(sdt.data[~mask], outside[~mask])
    assert sdt.values == "distance" and sdt.unit == "um"


def test_signed_distance_of_a_ball_gives_its_radius_as_deepest_value():
    """The deepest pore value is minus the inscribed radius (geometry, within one voxel)."""
    n, r = 41, 12.0
    z, y, x = np.meshgrid(*[np.arange(n) - n // 2] * 3, indexing="ij")
    ball = np.sqrt(z * z + y * y + x * x) <= r
    sdt = filtration.signed_distance(ball)
    assert abs(-sdt.data.min() - r) <= 1.0
    diagram = voxtopo.persistence(sdt)
    zero = diagram.dimension(0).pairs
    assert abs(-zero["birth"].min() - r) <= 1.0


def test_signed_distance_refuses_single_phase_and_non_binary_masks():
    with pytest.raises(voxtopo.InputError, match="all pore"):
        filtration.signed_distance(np.ones((4, 4), bool))
    with pytest.raises(voxtopo.InputError, match="all solid"):
        filtration.signed_distance(np.zeros((4, 4), bool))
    with pytest.raises(voxtopo.InputError, match="not binary"):
        filtration.signed_distance(np.arange(16).reshape(4, 4))


def test_smoothing_sigma_is_physical():
    """Smoothing by sigma um along an axis of spacing s equals scipy's gaussian_filter with
    sigma/s voxels (scipy.ndimage is the reference)."""
    rng = np.random.default_rng(1)
    data = rng.random((10, 20, 30)).astype(np.float32)
    scan = Scan(data, (4.0, 2.0, 1.0), "um")
    out = filtration.smooth(scan, 4.0).data
    expected = ndimage.gaussian_filter(data, sigma=(1.0, 2.0, 4.0), mode="nearest")
    np.testing.assert_allclose(out, expected, rtol=1e-5, atol=1e-6)


def test_crop_keeps_the_box_and_records_its_origin():
    data = np.arange(6 * 7 * 8).reshape(6, 7, 8)
    out = filtration.crop(Scan(data), "1:4,:,2:5")
    np.testing.assert_array_equal(out.data, data[1:4, :, 2:5])
    assert out.metadata["crop_origin"] == [1, 0, 2]
    with pytest.raises(voxtopo.InputError, match="nothing"):
        filtration.crop(Scan(data), "3:3,:,:")
    with pytest.raises(voxtopo.InputError, match="needs 3 ranges"):
        filtration.crop(Scan(data), "1:2,3:4")


def test_downsampling_is_a_block_mean_and_scales_the_spacing():
    data = np.arange(4 * 6, dtype=np.float64).reshape(4, 6)
    out = filtration.downsample(Scan(data, (1.0, 2.0), "um"), 2)
    expected = data.reshape(2, 2, 3, 2).mean(axis=(1, 3))
    np.testing.assert_allclose(out.data, expected)
    assert out.spacing == (2.0, 4.0)


def test_otsu_threshold_separates_two_phases():
    """Otsu's method (scikit-image's threshold_otsu) on a two-level image lands between them."""
    data = np.full((20, 20), 30, np.uint8)
    data[5:15, 5:15] = 200
    mask, used = filtration.threshold(Scan(data), "otsu")
    assert 30 <= used < 200
    assert mask.sum() == 400 - 100


def test_nan_is_refused_unless_filled():
    data = np.ones((5, 5))
    data[2, 2] = np.nan
    with pytest.raises(voxtopo.InputError, match="1 NaN"):
        filtration.check_finite(Scan(data, source="x.npy"))
    filled = filtration.fill_invalid(Scan(data), "max")
    assert np.isfinite(filled.data).all() and filled.data[2, 2] == 1.0
    assert np.isnan(data[2, 2]), "the input array must not be modified"


def test_an_empty_crop_is_told_in_the_users_words():
    with pytest.raises(voxtopo.InputError) as refused:
        filtration.crop(np.zeros((100, 100)), "50:10,:")
    message = str(refused.value)
    assert "50:10,:" in message and "slice(" not in message and "100x100" in message


# --- region of interest ---------------------------------------------------------------------
def _gudhi_region_intervals(image, sample, dim, superlevel, neighbourhood):
    """Reference: gudhi (reference.gudhi_intervals) on the image with the voxels outside the
    region set to where the sweep never reaches (+inf, superlevel -inf), so that they never
    enter the complex."""
    values = np.where(sample, image, -np.inf if superlevel else np.inf)
    construction = "voxel" if neighbourhood in (8, 26) else "vertex"
    intervals = gudhi_intervals(values, dim, construction=construction, superlevel=superlevel)
    return sorted(map(tuple, np.round(intervals, 9)))


@pytest.mark.parametrize("shape, neighbourhood", [((13, 14), 8), ((13, 14), 4),
                                                  ((7, 8, 9), 26), ((7, 8, 9), 6)])
@pytest.mark.parametrize("superlevel", [False, True])
def test_a_region_of_interest_gives_the_diagram_of_the_region_alone(shape, neighbourhood,
                                                                    superlevel):
    """Outside voxels entering last, then dropped, give exactly the persistence of the
    region's own cubical complex: gudhi (Maria, Boissonnat, Glisse & Yvinec 2014) with the
    outside at +inf.
    The region is irregular (several pieces, holes), the values have ties."""
    rng = np.random.default_rng(sum(shape) + neighbourhood + superlevel)
    image = np.round(rng.random(shape) * 6) / 6
    sample = ndimage.gaussian_filter(rng.random(shape), 1.2) > 0.47
    assert 0 < sample.sum() < sample.size
    field, level = filtration.outside_last(image, sample, superlevel=superlevel)
    diagram = voxtopo.persistence(field, superlevel=superlevel, neighbourhood=neighbourhood)
    region = diagram.without_outside(level)
    for dim in range(len(shape)):
        ours = sorted(map(tuple, np.round(region.intervals(dim), 9)))
        assert ours == _gudhi_region_intervals(image, sample, dim, superlevel,
                                               neighbourhood), dim
    essential = region.pairs[~np.isfinite(region.pairs["death"])]
    assert essential[["death_voxel_" + a for a in "zyx"[3 - len(shape):]]].isna().all().all()
    assert sample[tuple(region.voxels("birth").T)].all()    # every birth lies inside


def test_outside_last_keeps_classes_the_engine_would_cut_by_min_persistence():
    """A class alive when the outside enters must outlive any min_persistence handed to
    the engine, or it would be lost before it could become 'never dies'."""
    image = np.array([[0.0, 5.0, 0.0]])
    sample = np.array([[True, False, True]])
    field, level = filtration.outside_last(image, sample, min_persistence=100.0)
    diagram = voxtopo.persistence(field, neighbourhood=8, min_persistence=100.0)
    region = diagram.without_outside(level)
    # two separate pieces of the region: two components that never die (Hatcher 2002:
    # b0 counts the pieces)
    assert region.counts() == {0: 2, 1: 0}
    assert not np.isfinite(region.pairs["death"]).any()
