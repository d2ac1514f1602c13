"""Significance of features: noise estimate, calibration, power, the simulated noise, the
robust flag of distance sweeps, Rips p-values, and bad input.

Calibration counts are chosen to keep the file near a minute: 60 images of 32 x 32 per
noise model (binomial standard error sqrt(0.05 * 0.95 / 60) = 0.028), pooled over four
models (240 images, standard error 0.014); the bounds are three standard errors.
"""

import math

import gudhi
import numpy as np
import pytest
from scipy import ndimage, stats
from skimage.draw import disk
from skimage.measure import euler_number

import voxtopo
from voxtopo import filtration as filt
from voxtopo.errors import InputError
from voxtopo.significance import (NoiseModel, anscombe, assess, dominant_loop_stability,
                                  estimate_noise, null_distribution, rips_significance,
                                  robust_flags, robust_threshold, simulate_noise,
                                  universal_p_values)

ALPHA = 0.05
IMAGES_PER_MODEL = 60
CALIBRATION_SHAPE = (32, 32)


def _correlated(shape, sigma, length, rng):
    """Gaussian noise of standard deviation ``sigma`` correlated by a Gaussian kernel of
    ``length`` voxels, made with scipy alone (not with the code under test)."""
    white = rng.standard_normal(shape)
    if length == 0:
        return sigma * white
    field = ndimage.gaussian_filter(white, length, mode="wrap")
    return sigma * field / field.std()


def _any_significant(image, **options):
    diagram = voxtopo.persistence(image, superlevel=options.pop("superlevel", False))
    tested, _ = assess(diagram, image, alpha=ALPHA, **options)
    finite = np.isfinite(tested.pairs["persistence"])
    return bool(tested.pairs["significant"][finite].any())


# --- the noise model -------------------------------------------------------------------
def test_white_noise_level_agrees_with_scikit_image_despite_structure():
    # Donoho & Johnstone 1994: sigma = MAD / 0.6745 of the finest diagonal Haar wavelet
    # coefficients, written out here (scikit-image's estimate_sigma computes the same but
    # needs PyWavelets, which is not installed); a bright disk must move neither estimate.
    rng = np.random.default_rng(3)
    image = rng.normal(100, 4.0, (256, 256))
    image[disk((128, 128), 50)] += 60
    diagonal = (image[0::2, 0::2] - image[0::2, 1::2] - image[1::2, 0::2]
                + image[1::2, 1::2]) / 2
    reference = np.median(np.abs(diagonal)) / 0.6745
    ours = estimate_noise(image)
    assert ours.sigma == pytest.approx(reference, rel=0.05)
    assert ours.sigma == pytest.approx(4.0, rel=0.05)
    assert ours.correlation_voxels <= 0.3


@pytest.mark.parametrize("length", [1.0, 2.0])
def test_correlation_length_of_smoothed_white_noise(length):
    # Noise made by scipy.ndimage.gaussian_filter of white noise with a kernel of `length`
    # voxels, scaled to sigma 3 (common practice, no source): both numbers come back.
    rng = np.random.default_rng(int(10 * length))
    field = _correlated((400, 400), 3.0, length, rng)
    model = estimate_noise(field)
    assert model.correlation_voxels == pytest.approx(length, abs=0.15)
    assert model.sigma == pytest.approx(3.0, rel=0.06)


def test_correlation_length_is_given_in_the_scan_unit():
    field = _correlated((300, 300), 1.0, 1.0, np.random.default_rng(5))
    model = estimate_noise(voxtopo.Scan(field, spacing=(0.5, 0.25), unit="um"))
    length = model.describe()["correlation_length"]
    assert length[0] == pytest.approx(0.5 * model.correlation_voxels)
    assert length[1] == pytest.approx(0.25 * model.correlation_voxels)
    assert model.describe()["correlation_length_unit"] == "um"


def test_anscombe_gives_unit_variance_to_counts():
    # Anscombe 1948: 2 sqrt(x + 3/8) of Poisson counts with a mean well above a few has
    # variance close to 1 (the error falls like 1 / mean^2, from memory); 5 percent at a
    # mean of 20 is a loose bound.
    counts = np.random.default_rng(0).poisson(20, (400, 400))
    assert anscombe(counts).data.var() == pytest.approx(1.0, rel=0.05)


# --- calibration ------------------------------------------------------------------------
NOISE_KINDS = {"white": 0.0, "correlated 1 voxel": 1.0, "correlated 2 voxels": 2.0}


@pytest.fixture(scope="module")
def calibration():
    """Fraction of noise-only images with ANY significant feature, per noise kind.

    Besag & Clifford 1989: a Monte Carlo test on the maximum over the scan (here also over
    its dimensions) has family-wise level alpha, so the fraction is alpha within binomial
    error. Each image gets its own noise estimate and its own seed."""
    fractions = {}
    for index, (kind, length) in enumerate(NOISE_KINDS.items()):
        rng = np.random.default_rng(100 + index)
        hits = [_any_significant(_correlated(CALIBRATION_SHAPE, 5.0, length, rng) + 50,
                                 seed=1000 * index + i) for i in range(IMAGES_PER_MODEL)]
        fractions[kind] = float(np.mean(hits))
    rng = np.random.default_rng(7)
    hits = [_any_significant(anscombe(rng.poisson(12, CALIBRATION_SHAPE)).data,
                             noise_model="poisson", seed=5000 + i)
            for i in range(IMAGES_PER_MODEL)]
    fractions["poisson"] = float(np.mean(hits))
    return fractions


@pytest.mark.parametrize("kind", [*NOISE_KINDS, "poisson"])
def test_false_alarm_rate_is_alpha_for_each_noise(calibration, kind):
    error = math.sqrt(ALPHA * (1 - ALPHA) / IMAGES_PER_MODEL)
    assert calibration[kind] <= ALPHA + 3 * error


def test_false_alarm_rate_pooled_over_noises_is_alpha(calibration):
    pooled = np.mean(list(calibration.values()))
    error = math.sqrt(ALPHA * (1 - ALPHA) / (IMAGES_PER_MODEL * len(calibration)))
    print(f"calibration: {calibration}, pooled {pooled:.3f}")
    assert abs(pooled - ALPHA) <= 3 * error


def test_block_scaling_is_not_liberal():
    # The Gumbel scaling of block maxima to the whole scan must keep the false-alarm rate
    # at or below alpha (Besag & Clifford 1989 for the level; the scaling is ours, so only
    # the upper side is asserted: conservative is allowed, liberal is not).
    rng = np.random.default_rng(11)
    hits = [_any_significant(_correlated((96, 96), 2.0, 0.0, rng), block_shape=(32, 32),
                             seed=i) for i in range(40)]
    assert np.mean(hits) <= ALPHA + 3 * math.sqrt(ALPHA * (1 - ALPHA) / 40)


# --- power ------------------------------------------------------------------------------
def test_planted_disks_are_significant_where_they_are():
    # Depth 8 sigma: the null threshold of white noise on 64 x 64 at alpha 0.05 is about
    # 4 sigma (the largest noise persistence), so 8 sigma is well above the noise maxima
    # and the test must find every disk. Noise may still give a false alarm in a fraction
    # alpha of such images; at most one is allowed here.
    rng = np.random.default_rng(21)
    image = rng.normal(0, 1.0, (64, 64))
    centres = [(16, 16), (16, 48), (48, 30)]
    for centre in centres:
        image[disk(centre, 5)] -= 8.0
    diagram = voxtopo.persistence(image)
    tested, significance = assess(diagram, image)
    found = tested.pairs[(tested.pairs["dim"] == 0) & tested.pairs["significant"]]
    births = found[["birth_voxel_y", "birth_voxel_x"]].to_numpy(dtype=float)
    near = np.array([np.min(np.hypot(*(births - centre).T)) for centre in centres])
    assert np.all(near <= 5)
    at_disks = sum(np.min(np.hypot(*(np.array(centres) - b).T)) <= 5 for b in births)
    assert at_disks == 3          # two finite disks and the essential class in a third
    assert len(found) - at_disks <= 1
    assert significance.thresholds()[0] < 8.0


def test_planted_ring_is_a_significant_loop():
    # A bright ring 8 sigma high swept from bright to dark: one loop (Hatcher 2002, the
    # annulus has Betti numbers (1, 1)) that must be significant at its place.
    rng = np.random.default_rng(22)
    image = rng.normal(0, 1.0, (64, 64))
    yy, xx = np.mgrid[:64, :64]
    radius = np.hypot(yy - 32, xx - 32)
    image[(radius >= 12) & (radius <= 16)] += 8.0
    tested, _ = assess(voxtopo.persistence(image, superlevel=True), image)
    loops = tested.pairs[(tested.pairs["dim"] == 1) & tested.pairs["significant"]]
    assert len(loops) == 1
    death = loops[["death_voxel_y", "death_voxel_x"]].to_numpy(dtype=float)[0]
    assert np.hypot(*(death - 32)) < 12      # the loop is filled inside the ring


def test_planted_ball_in_a_volume_is_significant():
    # A dark ball 8 sigma deep in a 32^3 volume of white noise (same reasoning as the
    # disks: about twice the noise maxima).
    rng = np.random.default_rng(23)
    volume = rng.normal(0, 1.0, (32, 32, 32))
    zz, yy, xx = np.mgrid[:32, :32, :32]
    volume[np.hypot(np.hypot(zz - 10, yy - 10), xx - 10) <= 4] -= 8.0
    volume[np.hypot(np.hypot(zz - 22, yy - 22), xx - 22) <= 4] -= 8.0
    tested, _ = assess(voxtopo.persistence(volume), volume)
    found = tested.pairs[tested.pairs["significant"]]
    assert sorted(found["dim"].tolist()) == [0, 0]


# --- the simulated noise ----------------------------------------------------------------
def test_simulated_noise_follows_the_gaussian_kinematic_formula():
    """Adler & Taylor 2007 (Random Fields and Geometry), Gaussian kinematic formula for a
    unit-variance stationary field on a rectangle of area A and half-perimeter L1:

        E chi{f >= u} = (1 - Phi(u)) + L1 sqrt(lambda2) / (2 pi) exp(-u^2/2)
                        + A lambda2 / (2 pi)^(3/2) u exp(-u^2/2)

    with lambda2 = Var(df/dx) = 1 / (2 s^2) for white noise smoothed by a Gaussian kernel
    of s voxels (its correlation is exp(-h^2 / (4 s^2))). The Euler characteristic of each
    excursion set comes from scikit-image's euler_number (Ohser, Nagel & Schladitz 2002).
    The tolerance allows for 25 fields and the grid: 6 percent of the largest term."""
    s, n, fields = 3.0, 256, 25
    model = NoiseModel("gaussian", "given", 1.0, s, (1.0, 1.0), "px")
    rng = np.random.default_rng(31)
    levels = np.array([-1.5, -0.5, 0.5, 1.0, 2.0])
    mean_chi = np.zeros(len(levels))
    for _ in range(fields):
        field = simulate_noise((n, n), model, rng)
        mean_chi += [euler_number(field >= u, connectivity=2) for u in levels]
    mean_chi /= fields
    lambda2 = 1.0 / (2.0 * s ** 2)
    area, half_perimeter = (n - 1) ** 2, 2 * (n - 1)
    bump = np.exp(-levels ** 2 / 2)
    expected = (stats.norm.sf(levels) + half_perimeter * np.sqrt(lambda2) / (2 * np.pi) * bump
                + area * lambda2 / (2 * np.pi) ** 1.5 * levels * bump)
    np.testing.assert_allclose(mean_chi, expected, atol=0.06 * np.abs(expected).max())


# --- distance sweeps: the robust flag ---------------------------------------------------
def _pore_mask():
    rng = np.random.default_rng(41)
    mask = np.zeros((96, 96), bool)
    for _ in range(14):
        centre = rng.integers(8, 88, 2)
        mask[disk(tuple(centre), rng.uniform(2.0, 9.0), shape=mask.shape)] = True
    return mask


def _finite(diagram, dim):
    intervals = diagram.intervals(dim)
    return intervals[np.isfinite(intervals[:, 1])]


@pytest.mark.parametrize("change", ["dilate", "erode"])
def test_robust_features_survive_moving_the_boundary_by_one_voxel(change):
    # Stability (Cohen-Steiner, Edelsbrunner & Harer 2007): the bottleneck distance (gudhi,
    # Maria et al. 2014) between the two diagrams is at most the largest change of the
    # signed distance, delta + a voxel diagonal on the grid; a robust feature (persistence
    # above twice that) is farther than that from the diagonal, so it keeps a partner.
    mask = _pore_mask()
    moved = (ndimage.binary_dilation if change == "dilate" else ndimage.binary_erosion)(mask)
    before = robust_flags(voxtopo.persistence(filt.signed_distance(mask)), 1.0)
    after = voxtopo.persistence(filt.signed_distance(moved))
    assert np.abs(filt.signed_distance(mask).data
                  - filt.signed_distance(moved).data).max() <= 1.0 + math.sqrt(2) + 1e-9
    bound = robust_threshold(before, 1.0) / 2
    robust = before.pairs[before.pairs["robust"] & np.isfinite(before.pairs["death"])]
    assert len(robust) >= 3
    for dim in (0, 1):
        distance = gudhi.bottleneck_distance(_finite(before, dim), _finite(after, dim))
        assert distance <= bound + 1e-9
        lifetimes = robust[robust["dim"] == dim]["persistence"].to_numpy()
        assert np.all(lifetimes / 2 > distance)
        survivors = np.count_nonzero(np.diff(_finite(after, dim), axis=1) > 2 * distance)
        assert survivors >= len(lifetimes)


# --- Rips diagrams ----------------------------------------------------------------------
def _rips_pairs(points, max_edge):
    tree = gudhi.RipsComplex(points=points, max_edge_length=max_edge).create_simplex_tree(
        max_dimension=2)
    tree.compute_persistence()
    rows = [(dim, b, d) for dim, (b, d) in tree.persistence() if dim >= 1]
    import pandas as pd
    return pd.DataFrame(rows, columns=["dim", "birth", "death"])


def test_rips_p_values_are_uniform_on_uniform_clouds():
    # Bobrowski & Skraba 2023 (Scientific Reports 13): under the universal null the
    # p-values of the bars of a uniform random cloud are uniform; Kolmogorov-Smirnov
    # (scipy) on the pooled loop p-values of 12 clouds. The constants are from memory,
    # which is why this test exists.
    rng = np.random.default_rng(51)
    p_values = []
    for _ in range(12):
        pairs = _rips_pairs(rng.uniform(size=(300, 2)), max_edge=0.3)
        loops = pairs[pairs["dim"] == 1]
        p = universal_p_values(loops["birth"], loops["death"])
        p_values.extend(p[np.isfinite(p)])
    assert len(p_values) > 300
    assert stats.kstest(p_values, "uniform").pvalue > 0.001


def test_a_sampled_circle_is_a_stable_significant_loop():
    # Hatcher 2002: a circle has Betti numbers (1, 1). Sampled with small noise, its loop
    # is significant under the universal null in every rerun; a uniform square has no
    # significant loop (Bobrowski & Skraba 2023). 150 points give the diagram enough small
    # bars for the law's normalisation (with 80, only two to five bars, it is not).
    def circle(seed):
        rng = np.random.default_rng(seed)
        angles = rng.uniform(0, 2 * np.pi, 150)
        points = np.c_[np.cos(angles), np.sin(angles)] + rng.normal(0, 0.05, (150, 2))
        return _rips_pairs(points, max_edge=2.0)

    def square(seed):
        return _rips_pairs(np.random.default_rng(seed).uniform(-1, 1, (150, 2)), 0.6)

    assert dominant_loop_stability(circle, range(5))["dominant"] == 5
    assert dominant_loop_stability(square, range(5))["dominant"] <= 1
    tested = rips_significance(circle(9))
    assert int(tested["significant"].sum()) == 1


def test_primary_circle_of_natural_patches_is_significant_and_stable():
    """Carlsson et al. 2008: the dense core of high-contrast 3x3 patches of a natural image
    (scikit-image's bundled gravel, no download) is the primary circle. Under the universal
    null (Bobrowski & Skraba 2023) its loop is the one significant loop, in each of three
    resamples of the patch positions (voxtopo.patches with its defaults)."""
    from skimage import data

    from voxtopo.jobs.patches import PatchOptions
    from voxtopo.patches import core, sample
    from voxtopo.patches import persistence as patch_persistence

    image, options = data.gravel(), PatchOptions()

    def loops_of(seed):
        cloud = sample(image, options.k, positions=options.positions, seed=seed,
                       log=options.log, contrast_percent=options.contrast_percent)
        dense = core(cloud, options.k_neighbour, options.density_percent)
        pairs = patch_persistence(dense, landmarks=options.landmarks, field=2).pairs
        return pairs[pairs["field"] == 2]

    stability = dominant_loop_stability(loops_of, range(3))
    assert stability["dominant"] == 3
    tested = rips_significance(loops_of(0))
    assert int(tested["significant"].sum()) == 1


# --- bad input --------------------------------------------------------------------------
@pytest.mark.parametrize("alpha", [0.0, 1.0, -0.1, 1.5])
def test_alpha_outside_zero_one_is_refused(alpha):
    image = np.random.default_rng(0).normal(size=(20, 20))
    with pytest.raises(InputError, match=f"between 0 and 1.*{alpha:g}"):
        assess(voxtopo.persistence(image), image, alpha=alpha)


@pytest.mark.parametrize("level", [-1.0, 0.0, float("nan")])
def test_a_noise_level_that_is_not_positive_is_refused(level):
    with pytest.raises(InputError, match="positive number of gray units"):
        estimate_noise(np.random.default_rng(0).normal(size=(20, 20)), noise=level)


def test_a_constant_image_has_no_noise_to_estimate():
    with pytest.raises(InputError, match="constant.*no noise to estimate.*--noise"):
        estimate_noise(np.full((20, 20), 7.0))


def test_poisson_model_refuses_negative_values():
    with pytest.raises(InputError, match="down to -3.*counts of at least 0"):
        anscombe(np.array([[1.0, -3.0], [2.0, 4.0]]))


def test_a_noise_level_with_the_poisson_model_is_refused():
    with pytest.raises(InputError, match="Poisson"):
        estimate_noise(np.ones((8, 8)), noise=2.0, noise_model="poisson")


def test_too_few_simulations_are_refused():
    model = NoiseModel("gaussian", "given", 1.0, 0.0, (1.0, 1.0), "px")
    with pytest.raises(InputError, match="at least 2 simulations, got 1"):
        null_distribution((16, 16), model, simulations=1)


def test_a_region_of_interest_is_read_and_simulated_alone():
    """Noise of level 2 inside the region and 40 outside: the level read off the region is
    2 (by construction; Donoho & Johnstone 1994 for the MAD estimate). With blocks, the
    null of the region stands for its own voxels, so the same persistence is less
    surprising in the whole field than in a quarter of it (a family-wise maximum over more
    places is larger: common practice, no source)."""
    from voxtopo.significance import estimate_noise, null_distribution

    rng = np.random.default_rng(30)
    shape = (64, 64)
    region = np.zeros(shape, bool)
    region[:32, :32] = True
    field = rng.normal(0, 1, shape) * np.where(region, 2.0, 40.0)
    model = estimate_noise(field, sample=region)
    assert model.sigma == pytest.approx(2.0, rel=0.15)
    assert estimate_noise(field).sigma > 10          # the whole field is far noisier
    whole = null_distribution(shape, model, block_shape=(16, 16), simulations=20)
    quarter = null_distribution(shape, model, block_shape=(16, 16), simulations=20,
                                sample=region)
    lifetimes = np.linspace(1.0, 8.0, 8)
    assert (quarter.p_value(0, lifetimes) <= whole.p_value(0, lifetimes)).all()
    assert (quarter.p_value(0, lifetimes) < whole.p_value(0, lifetimes)).any()
