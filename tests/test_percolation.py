"""Percolation radius, the union-find sweeps and their pure-Python twins.

Reference for components: scipy.ndimage.label with generate_binary_structure(ndim, 1 | ndim)
counts the components of a set (CHECKS.md, scipy entry); distances:
scipy.ndimage.distance_transform_edt with sampling=.
"""

import numpy as np
import pytest
from scipy import ndimage

from voxtopo.filtration import signed_distance
from voxtopo.porosity import analyse
from voxtopo.porosity import _sweep
from voxtopo.porosity._analysis import percolation

ENGINE = "gudhi"


def channel(shape=(24, 33, 33), radius=5.0, axis=0):
    """Pore mask of a straight cylinder of ``radius`` voxels through the whole scan."""
    grids = np.meshgrid(*[np.arange(n) for n in shape], indexing="ij")
    across = [g - (n - 1) / 2 for k, (g, n) in enumerate(zip(grids, shape)) if k != axis]
    return np.hypot(*across) <= radius


def test_straight_channel_percolates_along_its_axis_with_its_radius():
    # A cylinder of radius r (geometry, common practice, no source): the largest ball that
    # travels its length has radius r; within one voxel (a distance between voxel centres,
    # see tests/test_porosity.py for the derivation).
    result = analyse(channel(radius=5.0), engine=ENGINE)
    summary = result.summary
    assert summary["percolates"] == {"z": "yes", "y": "no", "x": "no"}
    assert summary["percolation_radius"]["z"] == pytest.approx(5.0, abs=1.0)
    assert summary["percolation_radius"]["y"] is None
    assert summary["percolation_radius"]["x"] is None
    assert summary["critical_throat"]["y"] is None


def test_channel_with_a_constriction_is_limited_by_it():
    # A wide channel (radius 7) pinched to radius 3 over two slices: the percolation radius
    # is the pinch, and the critical throat sits in it (common practice, no source).
    mask = channel(shape=(30, 33, 33), radius=7.0)
    mask[14:16] = channel(shape=(2, 33, 33), radius=3.0)
    result = analyse(mask, axis="z", engine=ENGINE)
    assert result.summary["percolation_radius"]["z"] == pytest.approx(3.0, abs=1.0)
    assert result.summary["percolation_radius"]["z"] < 5.0
    assert 13 <= result.critical_throats["z"][0] <= 16
    assert list(result.summary["percolates"]) == ["z"]


def test_anisotropic_channel_radius_is_physical():
    # The same cylinder sampled every 2 um across and 1 um along (distance_transform_edt
    # with sampling=, CHECKS.md): radius 10 um within one coarse voxel (2 um).
    shape = (20, 21, 21)
    grids = np.meshgrid(*[np.arange(n) for n in shape], indexing="ij")
    mask = np.hypot((grids[1] - 10) * 2.0, (grids[2] - 10) * 2.0) <= 10.0
    result = analyse(mask, spacing=(1.0, 2.0, 2.0), unit="um", engine=ENGINE)
    assert result.summary["percolation_radius"]["z"] == pytest.approx(10.0, abs=2.0)


def test_closed_cavity_never_percolates():
    # A ball of pore inside solid touches no face: nothing connects (common practice).
    n = 24
    z, y, x = np.meshgrid(*[np.arange(n) - 11.5] * 3, indexing="ij")
    result = analyse(np.sqrt(z * z + y * y + x * x) <= 7, engine=ENGINE)
    assert result.summary["percolates"] == {"z": "no", "y": "no", "x": "no"}
    assert set(result.summary["percolation_radius"].values()) == {None}
    assert set(result.summary["connected_porosity"].values()) == {0.0}


def test_channel_touching_only_one_face_does_not_percolate():
    mask = channel(radius=4.0)
    mask[12:] = False
    result = analyse(mask, axis="z", engine=ENGINE)
    assert result.summary["percolates"]["z"] == "no"


def _brute_force_radius(mask, axis, neighbourhood):
    """Largest r with {distance >= r} joining the two faces, by trying every distinct
    distance with scipy.ndimage.label (the reference; the library never tries radii)."""
    distance = -signed_distance(mask).data
    structure = ndimage.generate_binary_structure(mask.ndim,
                                                  mask.ndim if neighbourhood in (8, 26) else 1)
    for r in np.unique(distance[mask])[::-1]:
        labels, _ = ndimage.label(mask & (distance >= r), structure=structure)
        inlet = set(np.unique(np.take(labels, 0, axis=axis))) - {0}
        outlet = set(np.unique(np.take(labels, -1, axis=axis))) - {0}
        if inlet & outlet:
            return float(r)
    return 0.0


@pytest.mark.parametrize("shape, neighbourhood", [((9, 10, 11), 26), ((9, 10, 11), 6),
                                                  ((17, 19), 8), ((17, 19), 4)])
def test_sweep_matches_trying_every_radius(shape, neighbourhood):
    # scipy.ndimage.label on every distance level is the reference (CHECKS.md).
    rng = np.random.default_rng(len(shape) * neighbourhood)
    for trial in range(4):
        mask = ndimage.gaussian_filter(rng.normal(size=shape), 1.0) > -0.1
        if mask.all() or not mask.any():
            continue
        field = signed_distance(mask).data
        for axis in range(len(shape)):
            expected = _brute_force_radius(mask, axis, neighbourhood)
            radius, where = percolation(field, mask, axis, neighbourhood, (1.0,) * len(shape))
            assert radius == pytest.approx(expected)
            assert (where is None) == (expected == 0.0)


@pytest.mark.parametrize("neighbourhood", [26, 6])
def test_kernels_agree_with_their_python_twins(neighbourhood):
    rng = np.random.default_rng(neighbourhood)
    shape = (5, 6, 7)
    for _ in range(5):
        mask = rng.random(shape) < 0.6
        field = signed_distance(mask).data
        order = _sweep.sweep_order(field, mask)
        all_axes = _sweep.percolation_steps(order, shape, [0, 1, 2], neighbourhood)
        for axis in range(3):
            twin = _sweep.percolation_step(order, shape, axis, neighbourhood, python=True)
            assert _sweep.percolation_step(order, shape, axis, neighbourhood) == twin
            assert all_axes[axis] == twin
        voxels = order[rng.choice(len(order), size=6, replace=False)]
        levels = np.sort(rng.uniform(field[mask].min(), 0.0, size=6))
        fast = _sweep.basins(order, field, shape, neighbourhood, voxels, levels)
        slow = _sweep.basins(order, field, shape, neighbourhood, voxels, levels, python=True)
        for a, b in zip(fast, slow):
            assert np.array_equal(a, b)


def test_basin_sizes_match_scipy_labels():
    # The component of {f < level} holding a voxel, counted by scipy.ndimage.label.
    rng = np.random.default_rng(11)
    mask = ndimage.gaussian_filter(rng.normal(size=(12, 13, 14)), 1.0) > -0.2
    field = signed_distance(mask).data
    order = _sweep.sweep_order(field, mask)
    voxels = order[:: max(1, len(order) // 7)][:7]
    levels = np.sort(np.linspace(field[mask].min() + 0.5, -0.5, len(voxels)))
    size, own, border = _sweep.basins(order, field, mask.shape, 26, voxels, levels)
    structure = ndimage.generate_binary_structure(3, 3)
    for voxel, level, got, touches in zip(voxels, levels, size, border):
        labels, _ = ndimage.label(mask & (field < level), structure=structure)
        label = labels.ravel()[voxel]
        component = labels == label
        assert got == (component.sum() if label else 0)
        if label:
            edge = np.zeros_like(component)
            edge[[0, -1]] = edge[:, [0, -1]] = edge[:, :, [0, -1]] = True
            assert touches == bool((component & edge).any())
    assert own.sum() <= mask.sum()


def test_a_channel_one_or_two_voxels_wide_is_not_resolved():
    # common practice, no source: a passage one or two voxels wide has no voxel deeper
    # than about one voxel from the solid, so the scan cannot say it is open; a channel
    # five voxels across (radius 2 voxels) is resolved.
    thin = np.zeros((20, 9, 9), bool)
    thin[:, 4, 4:6] = True                                  # two voxels wide
    result = analyse(thin, axis="z", engine=ENGINE)
    assert result.summary["percolates"] == {"z": "not resolved"}
    assert result.summary["percolation_radius"]["z"] == pytest.approx(1.0)
    assert any("not resolved" in note for note in result.summary["notes"])
    wide = analyse(channel(shape=(20, 15, 15), radius=2.0), axis="z", engine=ENGINE)
    assert wide.summary["percolates"] == {"z": "yes"}


def test_cli_line_says_no_and_not_resolved_in_words(tmp_path, capsys):
    # common practice, no source: a sample that does not percolate says "no" (no radius of
    # 0 px), a sub-two-voxel passage says "not resolved", never a plain "yes"
    from voxtopo.cli import main
    thin = np.zeros((20, 9, 9), bool)
    thin[:, 4, 4:6] = True
    np.save(tmp_path / "thin.npy", thin)
    code = main(["pores", str(tmp_path / "thin.npy"), "--out", str(tmp_path / "res"),
                 "--engine", ENGINE])
    out = capsys.readouterr().out
    assert code == 0
    assert "z: not resolved" in out and "y: no" in out and "x: no" in out
    assert "r = 0" not in out and "z: yes" not in out
    assert "voxel size unknown" in out


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_sweep_order_is_numpys_stable_sort(dtype):
    # definition of the sweep (common practice, no source): increasing value, ties by flat
    # index, i.e. numpy's stable argsort of the phase's values; descending for the solid
    rng = np.random.default_rng(2)
    values = rng.integers(-6, 7, size=(9, 10, 11)).astype(dtype) / dtype(3)
    values[0, 0, :3] = [dtype(0.0), dtype(-0.0), dtype(0.0)]  # equal values, distinct bits
    phase = rng.random(values.shape) < 0.6
    candidates = np.flatnonzero(phase)
    expected = candidates[np.argsort(values.ravel()[candidates], kind="stable")]
    assert np.array_equal(_sweep.sweep_order(values, phase), expected)
    others = np.flatnonzero(~phase)
    expected = others[np.argsort(-values.ravel()[others], kind="stable")]
    assert np.array_equal(_sweep.sweep_order(values, phase, member=False, descending=True),
                          expected)


@pytest.mark.parametrize("shape, neighbourhood, member", [((12, 13, 14), 26, True),
                                                          ((12, 13, 14), 6, False),
                                                          ((30, 31), 8, True),
                                                          ((30, 31), 4, False)])
def test_pieces_left_by_the_basin_sweep_are_scipy_labels(shape, neighbourhood, member):
    # scipy.ndimage.label with generate_binary_structure(ndim, 1 | ndim) (CHECKS.md): the
    # union-find of a whole phase's sweep holds the same pieces, with the same sizes, the
    # same ones reaching the scan's outer layer and the same ones on each face.
    rng = np.random.default_rng(len(shape) * neighbourhood)
    # scattered blobs of the phase swept (the pore phase, or the solid: member False)
    mask = ndimage.gaussian_filter(rng.normal(size=shape), 1.0) > (0.1 if member else -0.4)
    phase = mask if member else ~mask
    field = signed_distance(mask).data
    order = _sweep.sweep_order(field, mask, member=member, descending=not member)
    _, pieces = _sweep.basins_and_pieces(order, field, shape, neighbourhood,
                                         np.zeros(0, np.int64), np.zeros(0), flip=not member)
    full = neighbourhood in (26, 8)
    labels, count = ndimage.label(phase, ndimage.generate_binary_structure(len(shape),
                                                                          len(shape) if full
                                                                          else 1))
    assert pieces.count() == count > 3
    voxels = np.flatnonzero(phase)
    piece = pieces.piece_of(voxels)
    # one piece per label and one label per piece
    pairs = np.unique(np.stack([piece, labels.ravel()[voxels]]), axis=1)
    assert pairs.shape[1] == count
    sizes = np.bincount(labels.ravel())
    assert np.array_equal(pieces.sizes(pairs[0]), sizes[pairs[1]])
    edge = np.ones(shape, bool)
    edge[(slice(1, -1),) * len(shape)] = False
    reaching = set(np.unique(labels[edge & phase]).tolist())
    assert pieces.at_border(pairs[0]).tolist() == [int(lab) in reaching for lab in pairs[1]]
    to_label = dict(zip(pairs[0].tolist(), pairs[1].tolist()))
    for axis in range(len(shape)):
        for end in (0, -1):
            on_face = np.unique(np.take(labels, end, axis=axis))
            assert sorted(to_label[p] for p in pieces.on_face(phase, axis, end)) == \
                on_face[on_face > 0].tolist()
