"""Distances between diagrams, vectorisations, embedding and the group test."""

import math

import gudhi
import numpy as np
import pytest
from reference import gudhi_intervals
from scipy import ndimage
from scipy.spatial.distance import pdist, squareform
from scipy.stats import norm

import voxtopo
from voxtopo import compare
from voxtopo.errors import InputError


def _texture(seed, correlation, shape=(40, 40)):
    """Gaussian random field: white noise smoothed over ``correlation`` pixels."""
    rng = np.random.default_rng(seed)
    field = ndimage.gaussian_filter(rng.standard_normal(shape), correlation, mode="wrap")
    return (field - field.mean()) / field.std()


def _diagram(image, **options):
    return voxtopo.persistence(image, engine="gudhi", **options)


def test_distances_are_symmetric_and_zero_on_identical_inputs():
    # Both are metrics on diagrams (Cohen-Steiner, Edelsbrunner & Harer 2007, "Stability of
    # persistence diagrams", Discrete Comput. Geom. 37): d(a, a) = 0, d(a, b) = d(b, a).
    a, b = _diagram(_texture(1, 1.5)), _diagram(_texture(2, 1.5))
    for metric in (compare.bottleneck, compare.wasserstein):
        # gudhi's bottleneck is exact to the last bits of a double, hence the tiny tolerance
        assert metric(a, a, dims=(0, 1)) == pytest.approx(0.0, abs=1e-12)
        forth, back = metric(a, b, dims=(0, 1)), metric(b, a, dims=(0, 1))
        assert forth > 0
        assert forth == pytest.approx(back, rel=1e-12)
    matrix = compare.distance_matrix([a, b, a], dims=(0, 1))
    np.testing.assert_allclose(matrix, matrix.T)
    assert matrix[0, 2] == pytest.approx(0.0, abs=1e-12) and np.all(np.diag(matrix) == 0)


@pytest.mark.parametrize("superlevel", [False, True])
def test_bottleneck_equals_gudhi_on_gudhi_own_diagrams(superlevel):
    # Reference: gudhi (Maria, Boissonnat, Glisse & Yvinec 2014, "The Gudhi Library:
    # Simplicial Complexes and Persistent Homology", ICMS): CubicalComplex diagrams of the
    # same images, fed to gudhi.bottleneck_distance with their points at infinity.
    f, g = _texture(3, 2.0, (24, 24)), _texture(4, 2.0, (24, 24))
    sign = -1.0 if superlevel else 1.0
    for dim in (0, 1):
        reference = [gudhi_intervals(sign * image, dim) for image in (f, g)]
        expected = gudhi.bottleneck_distance(*reference)
        ours = compare.bottleneck(_diagram(f, superlevel=superlevel),
                                  _diagram(g, superlevel=superlevel), dims=(dim,))
        assert ours == pytest.approx(expected, rel=1e-9, abs=1e-12)


def test_bottleneck_and_wasserstein_of_a_hand_sized_pair():
    # Definition of both distances (Cohen-Steiner, Edelsbrunner & Harer 2007): the pairs
    # (4, 9) and (6, 9) are 2 apart in L-infinity, while sending both to the diagonal
    # costs 5/2 and 3/2; the essential classes (0, inf) coincide. So both distances are 2.
    a = _diagram(np.array([[0.0, 9.0, 4.0]]))
    b = _diagram(np.array([[0.0, 9.0, 6.0]]))
    assert compare.bottleneck(a, b) == pytest.approx(2.0)
    assert compare.wasserstein(a, b, order=1) == pytest.approx(2.0)
    # moving the essential birth from 0 to 1 adds one to the essential part:
    c = _diagram(np.array([[1.0, 9.0, 6.0]]))
    assert compare.bottleneck(a, c) == pytest.approx(2.0)
    assert compare.wasserstein(a, c, order=1) == pytest.approx(3.0)
    assert compare.wasserstein(a, c, order=2) == pytest.approx(math.sqrt(4 + 1))


def test_different_numbers_of_essential_classes_give_infinity_unless_ignored():
    # A periodic image is a torus with two essential 1-cycles (Betti numbers (1, 2, 1),
    # Hatcher 2002, "Algebraic Topology"); a plain image has none.
    image = _texture(5, 2.0, (16, 16))
    flat = _diagram(image)
    torus = _diagram(image, periodic=True)
    assert compare.bottleneck(flat, torus, dims=(1,)) == math.inf
    assert compare.wasserstein(flat, torus, dims=(1,)) == math.inf
    assert math.isfinite(compare.bottleneck(flat, torus, dims=(1,), essential="ignore"))


@pytest.mark.parametrize("superlevel", [False, True])
def test_stability_bound_holds_for_perturbed_images(superlevel):
    # Stability (Cohen-Steiner, Edelsbrunner & Harer 2007, Discrete Comput. Geom. 37):
    # bottleneck(D(f), D(g)) <= max |f - g|, in every dimension.
    rng = np.random.default_rng(6)
    for trial in range(4):
        f = _texture(10 + trial, 1.0 + trial, (20, 20, 20) if trial % 2 else (32, 32))
        g = f + rng.uniform(-0.3, 0.3, f.shape) * (trial + 1) / 4
        bound = float(np.abs(f - g).max())
        df, dg = _diagram(f, superlevel=superlevel), _diagram(g, superlevel=superlevel)
        for dim in range(f.ndim):
            assert compare.bottleneck(df, dg, dims=(dim,)) <= bound + 1e-12


def test_persistence_image_pixels_are_gaussian_mass_of_each_pair():
    # Adams et al. 2017 ("Persistence images", JMLR 18): each pixel holds the integral of
    # weight x Gaussian over the pixel; the reference mass comes from scipy.stats.norm.
    d = _diagram(np.array([[0.0, 9.0, 4.0, 9.0, 1.0]]))   # finite pairs (4, 9) and (1, 9)
    grid = compare.image_grid([d], 0, resolution=6, sigma=0.7)
    image = compare.persistence_image(d, 0, grid)
    expected = np.zeros_like(image)
    for birth, persistence in [(4.0, 5.0), (1.0, 8.0)]:
        weight = min(persistence / grid.weight_ramp, 1.0)
        mass_b = np.diff(norm.cdf(grid.birth_edges, loc=birth, scale=0.7))
        mass_p = np.diff(norm.cdf(grid.persistence_edges, loc=persistence, scale=0.7))
        expected += weight * np.outer(mass_p, mass_b)
    np.testing.assert_allclose(image, expected, rtol=1e-10, atol=1e-14)
    assert grid.weight_ramp == 8.0


def test_persistence_image_kernel_matches_its_plain_loop_twin():
    rng = np.random.default_rng(7)
    points, weights = rng.random((5, 2)) * 3, rng.random(5)
    edges_b, edges_p = np.linspace(-1, 4, 6), np.linspace(0, 4, 5)
    np.testing.assert_allclose(compare._image_kernel(points, weights, edges_b, edges_p, 0.4),
                               compare._image_kernel_reference(points, weights, edges_b,
                                                               edges_p, 0.4), rtol=1e-12)


def test_betti_curves_on_the_common_grid_count_components():
    # scipy.ndimage.label with generate_binary_structure(2, 2) counts the components of
    # the sublevel set (Betti 0) with the 8-neighbourhood, at every level of the grid.
    images = [_texture(20, 1.5, (24, 24)), 2.0 + _texture(21, 3.0, (24, 24))]
    diagrams = [_diagram(im) for im in images]
    curves = compare.betti_curves(diagrams, ["a", "b"], n=17)
    levels = curves[curves["name"] == "a"]["level"].to_numpy()
    np.testing.assert_array_equal(levels, curves[curves["name"] == "b"]["level"].to_numpy())
    assert levels.min() <= images[0].min() and levels.max() >= images[1].max() - 1e-9
    structure = ndimage.generate_binary_structure(2, 2)
    for name, image in zip("ab", images):
        rows = curves[curves["name"] == name]
        for level, b0 in zip(rows["level"], rows["betti_0"]):
            assert b0 == ndimage.label(image <= level, structure)[1]


def test_mds_recovers_a_planar_configuration():
    # Classical/metric MDS of Euclidean distances of points in the plane reproduces those
    # distances (scikit-learn's MDS; distances from scipy.spatial.distance.pdist).
    points = np.array([[0, 0], [3, 0], [0, 4], [3, 4], [1.5, 2]], dtype=float)
    matrix = squareform(pdist(points))
    embedding = compare.embed_mds(matrix, seed=1)
    np.testing.assert_allclose(squareform(pdist(embedding)), matrix, atol=1e-2)


def test_permutation_test_separates_two_textures_and_not_two_samples_of_one():
    # Permutation p-values with the +1 correction (Phipson & Smyth 2010, "Permutation
    # P-values should never be zero", from memory): with 6 + 6 samples of two clearly
    # different textures the statistic is extreme among relabellings.
    fine = [_diagram(_texture(100 + i, 1.0)) for i in range(6)]
    coarse = [_diagram(_texture(200 + i, 4.0)) for i in range(6)]
    groups = ["fine"] * 6 + ["coarse"] * 6
    different = compare.compare_diagrams(fine + coarse, groups=groups, dims=(0, 1),
                                         n_permutations=499, seed=3)
    assert different.test.p_value <= 0.01
    assert different.test.statistic > 0
    more_fine = [_diagram(_texture(300 + i, 1.0)) for i in range(6)]
    same = compare.compare_diagrams(fine + more_fine, groups=groups, dims=(0, 1),
                                    n_permutations=499, seed=3)
    assert same.test.p_value > 0.05
    assert 1 / 500 <= same.test.p_value <= 1.0


def test_permutation_test_p_value_is_never_zero():
    # Phipson & Smyth 2010 (from memory): p >= 1 / (permutations + 1).
    matrix = np.array([[0, 1, 9, 9], [1, 0, 9, 9], [9, 9, 0, 1], [9, 9, 1, 0.0]])
    result = compare.permutation_test(matrix, ["a", "a", "b", "b"], n_permutations=50, seed=0)
    assert result.p_value >= 1 / 51
    # only the true labelling and its mirror (b, b, a, a) reach the observed statistic, one
    # third of the three ways to split four into two pairs: p close to 1/3.
    assert result.p_value == pytest.approx(1 / 3, abs=0.15)


def test_comparison_writes_its_tables(tmp_path):
    ds = [_diagram(_texture(400 + i, 1.0 + 2 * (i % 2), (20, 20))) for i in range(4)]
    comparison = compare.compare_diagrams(ds, names=list("pqrs"), groups=list("abab"),
                                          n_permutations=19)
    comparison.save(tmp_path)
    import pandas as pd
    table = pd.read_csv(tmp_path / "distances.csv")
    assert len(table) == 6
    row = table[(table["first"] == "p") & (table["second"] == "s")].iloc[0]
    # gudhi.bottleneck_distance on the dimension-0 intervals (gudhi, Maria et al. 2014)
    expected = gudhi.bottleneck_distance(ds[0].intervals(0), ds[3].intervals(0))
    assert row["bottleneck_dim0"] == pytest.approx(expected, rel=1e-9)
    with np.load(tmp_path / "persistence_images.npz", allow_pickle=False) as images:
        assert images["dim0"].shape == (4, 20, 20)


def test_bad_inputs_are_refused_in_one_sentence():
    a = _diagram(_texture(1, 1.0, (12, 12)))
    up = _diagram(_texture(1, 1.0, (12, 12)), superlevel=True)
    with pytest.raises(InputError, match="superlevel"):
        compare.bottleneck(a, up)
    with pytest.raises(InputError, match="Dimension 2 does not exist"):
        compare.bottleneck(a, a, dims=(2,))
    with pytest.raises(InputError, match="order"):
        compare.wasserstein(a, a, order=0.5)
    with pytest.raises(InputError, match="two groups"):
        compare.permutation_test(np.zeros((3, 3)), ["a", "b", "c"])
    with pytest.raises(InputError, match="infinite"):
        compare.embed_mds(np.array([[0, np.inf, 1], [np.inf, 0, 1], [1, 1, 0.0]]))
    with pytest.raises(InputError, match="at least two diagrams"):
        compare.compare_diagrams([a])
    with pytest.raises(InputError, match="min-persistence"):
        compare.compare_diagrams([a, a], min_persistence=-1)


# --- which pairs are compared ------------------------------------------------------------
def _result_folder(folder, diagram, flags=None, *, flag="significant", section=None):
    """A result folder as voxtopo analyse writes it: pairs.csv (with a flag column when
    ``flags`` are given) and summary.json (with the verdict section when given)."""
    import dataclasses
    import json

    folder.mkdir(parents=True)
    pairs = diagram.pairs.copy()
    if flags is not None:
        pairs[flag] = flags
    dataclasses.replace(diagram, pairs=pairs).save(folder)
    if section is not None:
        summary = json.loads((folder / "summary.json").read_text())
        summary["significance" if flag == "significant" else "robustness"] = section
        (folder / "summary.json").write_text(json.dumps(summary))
    return folder


def _flags_for(diagram, keep_births):
    """True for the finite pairs born at one of ``keep_births``; False for every other
    pair, the essential class included (it must be kept all the same)."""
    births = diagram.pairs["birth"].to_numpy()
    finite = np.isfinite(diagram.pairs["death"].to_numpy())
    return finite & np.isin(births, keep_births)


def _two_flagged_folders(tmp_path, flag="significant", section=None):
    # one row of gray values: components born at 0 (never dies), 4 and 1 (both die at 9)
    first = _diagram(np.array([[0.0, 9.0, 4.0, 9.0, 1.0]]))
    second = _diagram(np.array([[0.0, 9.0, 1.5]]))
    section = section or {"method": "family-wise Monte Carlo test", "alpha": 0.05}
    a = _result_folder(tmp_path / "runs" / "a", first, _flags_for(first, [1.0]), flag=flag,
                       section=section)
    b = _result_folder(tmp_path / "runs" / "b", second, _flags_for(second, [1.5]), flag=flag,
                       section=section)
    return a, b


def test_compare_keeps_only_significant_pairs_and_every_essential_class(tmp_path):
    # Definition of the bottleneck distance (Cohen-Steiner, Edelsbrunner & Harer 2007),
    # value from gudhi.bottleneck_distance (Maria et al. 2014) on the hand-chosen pairs:
    # significant pairs only, (1, 9) against (1.5, 9): 0.5; every pair, (4, 9) must also go
    # to the diagonal at 5 / 2: 2.5. The essential classes (0, inf) match at no cost,
    # although the first one's flag is False; dropping it would make the distance infinite.
    a, b = _two_flagged_folders(tmp_path)
    diagrams, names, _ = compare.load_results([a, b])
    significant = compare.compare_diagrams(diagrams, names, dims=(0,))
    assert significant.matrix[0, 1] == pytest.approx(
        gudhi.bottleneck_distance(np.array([[1.0, 9.0]]), np.array([[1.5, 9.0]])))
    assert significant.matrix[0, 1] == pytest.approx(0.5)
    everything = compare.compare_diagrams(diagrams, names, dims=(0,), all_pairs=True)
    assert everything.matrix[0, 1] == pytest.approx(
        gudhi.bottleneck_distance(np.array([[4.0, 9.0], [1.0, 9.0]]), np.array([[1.5, 9.0]])))
    assert everything.matrix[0, 1] == pytest.approx(2.5)
    assert significant.summary()["features_compared"] == (
        "significant features (family-wise alpha 0.05, as computed per scan)")
    assert everything.summary()["features_compared"] == "all pairs"


def test_robust_pairs_of_distance_sweeps_are_compared_by_default(tmp_path):
    # The same hand-sized pairs as distances in um (bottleneck definition, Cohen-Steiner,
    # Edelsbrunner & Harer 2007): robust pairs only give 0.5.
    import dataclasses

    first = dataclasses.replace(_diagram(np.array([[0.0, 9.0, 4.0, 9.0, 1.0]])),
                                values="distance", unit="um")
    second = dataclasses.replace(_diagram(np.array([[0.0, 9.0, 1.5]])), values="distance",
                                 unit="um")
    section = {"method": "stability theorem", "boundary_tolerance": 0.5, "unit": "um"}
    a = _result_folder(tmp_path / "a", first, _flags_for(first, [1.0]), flag="robust",
                       section=section)
    b = _result_folder(tmp_path / "b", second, _flags_for(second, [1.5]), flag="robust",
                       section=section)
    comparison = compare.compare_diagrams(*compare.load_results([a, b])[:2], dims=(0,))
    assert comparison.matrix[0, 1] == pytest.approx(0.5)
    assert comparison.summary()["features_compared"].startswith(
        "robust features (boundary tolerance 0.5 um")


def test_a_folder_without_flags_is_compared_with_all_its_pairs_and_a_note(tmp_path):
    # bottleneck definition (Cohen-Steiner, Edelsbrunner & Harer 2007): the older folder
    # keeps (4, 9) and (1, 9), so (4, 9) goes to the diagonal at 2.5.
    a, _ = _two_flagged_folders(tmp_path)
    older = _result_folder(tmp_path / "runs" / "older",
                           _diagram(np.array([[0.0, 9.0, 4.0, 9.0, 1.0]])))
    comparison = compare.compare_diagrams(*compare.load_results([older, a])[:2], dims=(0,))
    assert comparison.matrix[0, 1] == pytest.approx(2.5)
    assert any(note.startswith("older has no significance") and "all its pairs" in note
               for note in comparison.notes)
    assert comparison.features == ("significant features (family-wise alpha 0.05, as computed "
                                   "per scan), and all pairs of 1 diagram(s) without flags")


def test_flags_carried_in_memory_select_pairs_without_a_result_folder():
    # bottleneck definition (Cohen-Steiner, Edelsbrunner & Harer 2007): (1, 9) against
    # (1.5, 9) once the pairs flagged False are left out, as voxtopo.significance flags them
    import dataclasses

    diagrams = []
    for row, keep in (([0.0, 9.0, 4.0, 9.0, 1.0], [1.0]), ([0.0, 9.0, 1.5], [1.5])):
        d = _diagram(np.array([row]))
        diagrams.append(dataclasses.replace(
            d, pairs=d.pairs.assign(significant=_flags_for(d, keep))))
    comparison = compare.compare_diagrams(diagrams, dims=(0,))
    assert comparison.matrix[0, 1] == pytest.approx(0.5)
    assert comparison.features == "significant features (as flagged in each scan)"
    assert comparison.pairs_compared == [{0: 2}, {0: 2}]   # one finite, one never dies


def test_cli_compare_says_which_pairs_it_compared(tmp_path, capsys):
    # bottleneck values of the hand-sized pairs as above (Cohen-Steiner et al. 2007)
    import json

    import pandas as pd

    from voxtopo.cli import main

    a, b = _two_flagged_folders(tmp_path)
    assert main(["compare", str(a), str(b), "--out", str(tmp_path / "c1"), "--dims", "0"]) == 0
    line = capsys.readouterr().out
    assert "significant features (family-wise alpha 0.05, as computed per scan)" in line
    table = pd.read_csv(tmp_path / "c1" / "distances.csv")
    assert table["bottleneck_dim0"].iloc[0] == pytest.approx(0.5)
    assert main(["compare", str(a), str(b), "--out", str(tmp_path / "c2"), "--dims", "0",
                 "--all-pairs"]) == 0
    assert "all pairs" in capsys.readouterr().out
    summary = json.loads((tmp_path / "c2" / "summary.json").read_text())
    assert summary["features_compared"] == "all pairs"
    assert pd.read_csv(tmp_path / "c2" / "distances.csv")["bottleneck_dim0"].iloc[0] == \
        pytest.approx(2.5)
    assert "all pairs" in (tmp_path / "c2" / "report.html").read_text()


# --- memory -------------------------------------------------------------------------------
def _many_pairs(seed, n=300):
    """A diagram with about n / 2 finite components and as many loops."""
    return _diagram(np.random.default_rng(seed).random((int(math.sqrt(n)) + 4,) * 2))


def test_wasserstein_estimate_covers_the_dense_cost_matrix():
    # gudhi.wasserstein builds an (n + 1) x (m + 1) float64 cost matrix for POT (gudhi's
    # documentation of wasserstein_distance, common practice, no source): 8 bytes a cell
    # is the least any estimate must hold.
    for n, m in [(0, 5), (10, 20), (2000, 3000)]:
        assert compare.wasserstein_bytes(n, m) >= 8 * (n + 1) * (m + 1)


def test_wasserstein_too_big_is_refused_before_it_runs(monkeypatch):
    a, b = _many_pairs(1), _many_pairs(2)
    n = max(len(compare._parts(d, 0)[0]) for d in (a, b))
    needed = compare.wasserstein_bytes(n, n)
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", str(needed // 2))

    def never(*args, **kwargs):
        raise AssertionError("the Wasserstein distance ran although it does not fit")

    import gudhi.wasserstein
    monkeypatch.setattr(gudhi.wasserstein, "wasserstein_distance", never)
    from voxtopo.errors import TooBigError
    with pytest.raises(TooBigError, match="--metric bottleneck") as refusal:
        compare.compare_diagrams([a, b], dims=(0,), metric="wasserstein", all_pairs=True)
    message = str(refusal.value)
    assert "would need about" in message and "\n" not in message
    assert "leave out --all-pairs" in message
    with pytest.raises(TooBigError, match="min-persistence"):
        compare.wasserstein(a, b, dims=(0,))
    with pytest.raises(TooBigError, match="would need about"):
        compare.distance_matrix([a, b, a], dims=(1, 0), metric="wasserstein")
    # the bottleneck distance alone is computed: no Wasserstein call, and it fits
    bottleneck_only = compare.compare_diagrams([a, b], dims=(0,), all_pairs=True)
    assert {metric for metric, _ in bottleneck_only.matrices} == {"bottleneck"}


def test_cli_refuses_a_wasserstein_comparison_past_the_memory_budget(tmp_path, monkeypatch,
                                                                     capsys):
    from voxtopo.cli import main

    a = _result_folder(tmp_path / "a", _many_pairs(1))
    b = _result_folder(tmp_path / "b", _many_pairs(2))
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", "20000")
    code = main(["compare", str(a), str(b), "--out", str(tmp_path / "c"), "--metric",
                 "wasserstein"])
    assert code == 2
    assert not (tmp_path / "c").exists()
    error = capsys.readouterr().err
    assert "would need about" in error and "--metric bottleneck" in error
    assert len([line for line in error.splitlines() if "error" in line]) == 1


# --- 2D against 3D ------------------------------------------------------------------------
def test_two_dimensional_against_three_dimensional_is_refused_first(monkeypatch):
    flat = _diagram(_texture(1, 1.0, (12, 12)))
    solid = _diagram(_texture(2, 1.0, (8, 8, 8)))

    def never(*args, **kwargs):
        raise AssertionError("a distance was computed before the refusal")

    monkeypatch.setattr(compare, "_finite_bottleneck", never)
    monkeypatch.setattr(compare, "image_grid", never)
    for call in (lambda: compare.compare_diagrams([flat, solid], dims=(0,)),
                 lambda: compare.bottleneck(flat, solid),
                 lambda: compare.distance_matrix([solid, flat])):
        with pytest.raises(InputError, match=r"2D .* 3D|3D .* 2D") as refusal:
            call()
        message = str(refusal.value)
        assert message.endswith(".") and message.count(". ") == 0


# --- the resolution of the permutation test -----------------------------------------------
@pytest.mark.parametrize("sizes", [(2, 2), (3, 2), (2, 2, 2), (3, 3, 1), (1, 1, 2), (4, 2, 2),
                                   (3, 3), (1, 1, 1, 2)])
def test_distinct_groupings_match_an_enumeration(sizes):
    # Outside check of the closed form: enumerate every relabelling with itertools and count
    # the different partitions of the diagrams (the statistic ignores group names).
    import itertools

    labels = [g for g, size in enumerate(sizes) for _ in range(size)]
    partitions = set()
    for order in set(itertools.permutations(labels)):
        blocks = {}
        for item, label in enumerate(order):
            blocks.setdefault(label, set()).add(item)
        partitions.add(frozenset(frozenset(block) for block in blocks.values()))
    assert compare.distinct_groupings(sizes) == len(partitions)


def test_permutation_test_states_its_resolution():
    # Two groups of three: 6! / (3! 3! 2!) = 10 groupings (checked by enumeration above), so
    # even perfectly separated groups reach p of about 1/10 (Besag & Clifford 1989: the
    # observed labelling is one of the equally likely ones), never 1/1000.
    matrix = np.full((6, 6), 9.0)
    matrix[:3, :3] = matrix[3:, 3:] = 1.0
    np.fill_diagonal(matrix, 0.0)
    result = compare.permutation_test(matrix, list("aaabbb"), n_permutations=999, seed=1)
    assert result.distinct_groupings == 10
    assert result.smallest_p_value == pytest.approx(0.1)
    assert result.p_value == pytest.approx(0.1, abs=0.035)
    description = result.description()
    assert description["distinct_groupings"] == 10
    assert description["smallest_p_value_reachable"] == pytest.approx(0.1)


# --- persistence images of superlevel runs ------------------------------------------------
def test_superlevel_persistence_image_uses_the_real_births():
    # Superlevel sweep of one row of values: components born at 8 and at 5 die at 0, the one
    # born at 9 never dies. Adams et al. 2017 ("Persistence images", JMLR 18): each pixel
    # holds weight x Gaussian mass at (birth, persistence); reference mass scipy.stats.norm.
    d = _diagram(np.array([[9.0, 0.0, 5.0, 0.0, 8.0]]), superlevel=True)
    grid = compare.image_grid([d], 0, resolution=6, sigma=0.5)
    assert grid.birth_edges[0] == pytest.approx(5.0 - 1.5)
    assert grid.birth_edges[-1] == pytest.approx(8.0 + 1.5)
    image = compare.persistence_image(d, 0, grid)
    expected = np.zeros_like(image)
    for birth, persistence in [(8.0, 8.0), (5.0, 5.0)]:
        weight = min(persistence / grid.weight_ramp, 1.0)
        expected += weight * np.outer(
            np.diff(norm.cdf(grid.persistence_edges, loc=persistence, scale=0.5)),
            np.diff(norm.cdf(grid.birth_edges, loc=birth, scale=0.5)))
    np.testing.assert_allclose(image, expected, rtol=1e-10, atol=1e-14)


# --- names -----------------------------------------------------------------------------------
def test_summary_names_its_settings_in_plain_words():
    ds = [_diagram(_texture(500 + i, 1.0, (16, 16))) for i in range(3)]
    summary = compare.compare_diagrams(ds, dims=(0, 1), metric="wasserstein", order=2).summary()
    assert summary["dimensions_compared"] == [0, 1]
    assert summary["distance"] == "Wasserstein, order 2"
    assert "matched among themselves" in summary["classes_that_never_die"]
    for old in ("dimensions", "metric", "wasserstein_order", "essential_classes"):
        assert old not in summary


def test_cli_refuses_compare_options_that_would_be_ignored(tmp_path, capsys):
    # house rule (common practice, no source): an option that would change nothing is
    # refused in one sentence with exit code 2 and nothing written
    from voxtopo.cli import main

    a, b = _two_flagged_folders(tmp_path)
    for extra, word in ((["--order", "2"], "--order"), (["--group-column", "site"],
                                                        "--group-column")):
        out = tmp_path / f"c{word}"
        assert main(["compare", str(a), str(b), "--out", str(out)] + extra) == 2
        error = [line for line in capsys.readouterr().err.splitlines() if "error" in line]
        assert len(error) == 1 and word in error[0]
        assert not out.exists()


def test_all_pairs_of_folders_that_hold_only_flagged_pairs_says_so(tmp_path):
    # A folder written with only its significant pairs (every finite flag True): asking for
    # all pairs cannot bring the others back, and the note says so (common practice, no
    # source: a count says what it counts).
    d = _diagram(np.array([[0.0, 9.0, 4.0, 9.0, 1.0]]))
    kept = _result_folder(tmp_path / "kept", d, np.ones(len(d), bool),
                          section={"alpha": 0.05})
    other = _result_folder(tmp_path / "other", d, _flags_for(d, [1.0]),
                           section={"alpha": 0.05})
    comparison = compare.compare_diagrams(*compare.load_results([kept, other])[:2], dims=(0,),
                                          all_pairs=True)
    assert comparison.features == "all pairs"
    assert [note for note in comparison.notes if "kept" in note] == [
        "every finite pair of kept is flagged significant (a result folder keeps only those "
        "when its analysis kept only significant features), so all its pairs are its "
        "significant features"]
    assert not any("other" in note for note in comparison.notes)


def test_min_persistence_leaves_out_short_pairs_before_comparing():
    # bottleneck definition (Cohen-Steiner, Edelsbrunner & Harer 2007): above persistence 6
    # only (1, 9) and (1.5, 9) remain, 0.5 apart; (4, 9), 2.5 from the diagonal, is gone.
    first = _diagram(np.array([[0.0, 9.0, 4.0, 9.0, 1.0]]))
    second = _diagram(np.array([[0.0, 9.0, 1.5]]))
    comparison = compare.compare_diagrams([first, second], dims=(0,), min_persistence=6)
    assert comparison.matrix[0, 1] == pytest.approx(0.5)
    assert comparison.features.startswith("all pairs with persistence above 6 gray value")


def test_cli_line_states_the_permutation_tests_resolution(tmp_path, capsys):
    # Two groups of two: 4! / (2! 2! 2!) = 3 groupings (itertools enumeration above), so the
    # line must say that no p below about 1/3 can occur, whatever the 999 permutations allow.
    import json

    from voxtopo.cli import main

    folders = [_result_folder(tmp_path / group / f"s{i}", _diagram(_texture(600 + i, 1.0 + 2 * i,
                                                                            (16, 16))))
               for i, group in enumerate(["first", "first", "second", "second"])]
    assert main(["compare", *map(str, folders), "--out", str(tmp_path / "c")]) == 0
    line = capsys.readouterr().out
    assert "3 distinct groupings" in line and "no p-value below about 0.333" in line
    summary = json.loads((tmp_path / "c" / "summary.json").read_text())
    assert summary["permutation_test"]["smallest_p_value_reachable"] == pytest.approx(1 / 3)
