"""Pore bodies, throats, porosity and integral geometry against outside sources.

Sphere packings: standard crystallography geometry (Callister & Rethwisch, "Materials
Science and Engineering: An Introduction", interstitial sites). Euler characteristic:
skimage.measure.euler_number (Ohser, Nagel & Schladitz 2002). Connectivity density:
Odgaard & Gundersen 1993 on a rod lattice counted by hand. Surface area: marching cubes
(Lorensen & Cline 1987) against 4 pi R^2.

Tolerance for radii, derived from the voxel size: a radius is a distance between voxel
centres. The nearest solid voxel centre lies between 0 and 1 voxel beyond the true surface
(half a voxel from digitising the sphere, half from measuring to a centre rather than a
face), and the deepest voxel centre lies up to half a voxel diagonal (sqrt(3)/2) off the
true centre of a body. Every radius is therefore within one voxel of the geometric value.

The persistence engine is gudhi here for speed on a shared machine; the project's own
engine gives the same diagram (tests/test_persistence_checks.py).
"""

import json

import numpy as np
import pandas as pd
import pytest
from skimage.measure import euler_number

from voxtopo.errors import InputError
from voxtopo.jobs.pores import write_pores
from voxtopo.porosity import analyse
from voxtopo.porosity._euler import (euler_characteristic, euler_characteristic_python,
                                     phase_euler_characteristics)

ONE_VOXEL = 1.0
ENGINE = "gudhi"


def packing(kind, cell, cells, offset=0.0):
    """Pore mask of touching spheres on a cubic lattice of side ``cell`` voxels.

    Voxel i has its centre at ``i + offset``; sphere centres sit on the lattice points,
    repeated without end (the box cuts a periodic packing). Returns (mask, R).
    """
    n = int(round(cell * cells))
    c = np.arange(n) + offset
    z, y, x = np.meshgrid(c, c, c, indexing="ij")
    if kind == "simple cubic":
        radius = cell / 2

        def wrap(u):
            r = np.mod(u, cell)
            return np.minimum(r, cell - r)

        nearest = np.sqrt(wrap(z) ** 2 + wrap(y) ** 2 + wrap(x) ** 2)
    else:  # face-centred cubic: lattice points of the half-cell grid with an even sum
        radius = cell / (2 * np.sqrt(2))
        half = cell / 2
        u = np.stack([z / half, y / half, x / half])
        low = np.floor(u)
        nearest = np.full(z.shape, np.inf)
        for corner in np.ndindex(2, 2, 2):
            p = low + np.array(corner).reshape(3, 1, 1, 1)
            dist = np.sqrt((((u - p) * half) ** 2).sum(axis=0))
            nearest = np.where(p.sum(axis=0) % 2 == 0, np.minimum(nearest, dist), nearest)
    return nearest > radius, radius


@pytest.fixture(scope="module")
def simple_cubic():
    mask, radius = packing("simple cubic", 20, 2)
    return mask, radius, analyse(mask, engine=ENGINE)


@pytest.fixture(scope="module")
def face_centred():
    mask, radius = packing("face-centred cubic", 40, 1.1, offset=-3)
    return mask, radius, analyse(mask, engine=ENGINE)


def test_simple_cubic_porosity_is_one_minus_pi_over_six(simple_cubic):
    # Callister & Rethwisch, interstitial sites: packing fraction pi/6. Tolerance: a tenth
    # of a voxel of mean boundary displacement times the surface area density pi/(2R).
    mask, radius, result = simple_cubic
    assert result.summary["porosity"] == pytest.approx(1 - np.pi / 6, abs=0.1 * np.pi / (2 * radius))


def test_simple_cubic_pore_bodies_and_square_windows(simple_cubic):
    # Callister & Rethwisch, interstitial sites: largest empty sphere (sqrt(3)-1)R at the
    # cube centre, square window (sqrt(2)-1)R between two cubes; within one voxel.
    mask, radius, result = simple_cubic
    inner = result.pores[~result.pores["border"]]
    assert len(inner) == 7          # 8 cube centres; the eldest drains the whole pore space
    assert np.allclose(inner["body_radius"], (np.sqrt(3) - 1) * radius, atol=ONE_VOXEL)
    assert np.allclose(inner["throat_radius"], (np.sqrt(2) - 1) * radius, atol=ONE_VOXEL)
    # the body centres are the cube centres (10 or 30 along each axis), to within a voxel
    centres = inner[["body_z", "body_y", "body_x"]].to_numpy()
    assert np.all(np.min(np.abs(centres[..., None] - np.array([10, 30])), axis=-1) <= 1)


def test_simple_cubic_percolates_through_its_windows(simple_cubic):
    # Callister & Rethwisch, interstitial sites: the narrowest passage along every axis is
    # the square window (sqrt(2)-1)R.
    mask, radius, result = simple_cubic
    for axis in "zyx":
        assert result.summary["percolates"][axis] == "yes"
        assert result.summary["percolation_radius"][axis] == pytest.approx(
            (np.sqrt(2) - 1) * radius, abs=ONE_VOXEL)


def test_face_centred_cubic_porosity(face_centred):
    # Callister & Rethwisch, interstitial sites: packing fraction pi/(3 sqrt 2); tolerance
    # a tenth of a voxel times the surface area density 2 pi / cell.
    mask, radius, result = face_centred
    assert result.summary["porosity"] == pytest.approx(1 - np.pi / (3 * np.sqrt(2)),
                                                       abs=0.1 * 2 * np.pi / 40)


def test_face_centred_cubic_octahedral_and_tetrahedral_sites(face_centred):
    # Callister & Rethwisch, interstitial sites: octahedral (sqrt(2)-1)R, tetrahedral
    # (sqrt(3/2)-1)R, triangular windows (2/sqrt(3)-1)R; within one voxel each.
    mask, radius, result = face_centred
    inner = result.pores[~result.pores["border"]]
    octahedral = (np.sqrt(2) - 1) * radius
    tetrahedral = (np.sqrt(1.5) - 1) * radius
    near_oct = np.abs(inner["body_radius"] - octahedral) <= ONE_VOXEL
    near_tet = np.abs(inner["body_radius"] - tetrahedral) <= ONE_VOXEL
    assert (near_oct | near_tet).all()
    assert near_oct.sum() == 1 and near_tet.sum() == 8   # one cube centre, eight tetrahedra
    assert np.allclose(inner["throat_radius"], (2 / np.sqrt(3) - 1) * radius, atol=ONE_VOXEL)


def test_anisotropic_spacing_gives_the_same_physical_answer(simple_cubic):
    # The same simple cubic packing (Callister & Rethwisch, interstitial sites) seen with
    # every other z slice: spacing (2, 1, 1). Radii agree within one coarse voxel (2),
    # porosity within the z sampling of one slice in twenty (common practice, no source).
    iso, radius, fine = simple_cubic
    coarse = analyse(iso[::2], spacing=(2.0, 1.0, 1.0), unit="um", engine=ENGINE)
    assert coarse.summary["porosity"] == pytest.approx(fine.summary["porosity"], abs=0.02)
    a, b = (r.pores[~r.pores["border"]] for r in (coarse, fine))
    assert np.allclose(a["body_radius"].median(), b["body_radius"].median(), atol=2.0)
    assert np.allclose(a["throat_radius"].median(), b["throat_radius"].median(), atol=2.0)
    assert abs(a["body_radius"].median() - (np.sqrt(3) - 1) * radius) <= 2.0
    for axis in "zyx":
        assert coarse.summary["percolation_radius"][axis] == pytest.approx(
            (np.sqrt(2) - 1) * radius, abs=2.0)
    # surface area density is a physical quantity too: within 5 % (marching cubes,
    # Lorensen & Cline 1987, on a twice coarser z axis)
    assert coarse.summary["minkowski"]["surface_area_density"] == pytest.approx(
        fine.summary["minkowski"]["surface_area_density"], rel=0.05)
    assert coarse.summary["unit"] == "um" and coarse.summary["spacing"] == [2.0, 1.0, 1.0]


def _blobs(shape, seed, level=0.0):
    from scipy import ndimage
    noise = np.random.default_rng(seed).normal(size=shape)
    return ndimage.gaussian_filter(noise, 1.5) > level


@pytest.mark.parametrize("neighbourhood, complement, pore_conn, solid_conn",
                         [(26, 6, 3, 1), (6, 26, 1, 3)])
def test_euler_characteristic_of_each_phase_matches_scikit_image(neighbourhood, complement,
                                                                 pore_conn, solid_conn):
    # skimage.measure.euler_number (Ohser, Nagel & Schladitz 2002), matching connectivity:
    # 26 <-> connectivity 3, 6 <-> connectivity 1.
    mask = _blobs((20, 22, 24), seed=3)
    result = analyse(mask, neighbourhood=neighbourhood, engine=ENGINE)
    chi = result.summary["euler_characteristic"]
    assert chi["pore"] == euler_number(mask, connectivity=pore_conn)
    assert chi["solid"] == euler_number(~mask, connectivity=solid_conn)
    assert chi["neighbourhood"] == {"pore": neighbourhood, "solid": complement}


@pytest.mark.parametrize("connectivity, neighbourhood", [(1, 4), (2, 8), (1, 6), (3, 26)])
def test_euler_counting_matches_scikit_image_and_its_twin(connectivity, neighbourhood):
    # skimage.measure.euler_number (Ohser, Nagel & Schladitz 2002) on random masks.
    rng = np.random.default_rng(connectivity * neighbourhood)
    shape = (9, 11) if neighbourhood in (4, 8) else (6, 7, 8)
    for _ in range(5):
        mask = rng.random(shape) < 0.45
        expected = euler_number(mask, connectivity=connectivity)
        assert euler_characteristic(mask, neighbourhood) == expected
        assert euler_characteristic_python(mask, neighbourhood) == expected


@pytest.mark.parametrize("shape", [(6, 7, 8), (1, 6, 9), (9, 11), (2, 2)])
def test_both_phases_counted_in_one_pass_match_scikit_image(shape):
    # skimage.measure.euler_number (Ohser, Nagel & Schladitz 2002): the pore phase with the
    # full neighbourhood (connectivity ndim), the solid with the face one (connectivity 1),
    # each cut to a random region of interest (a voxel outside it is in neither phase).
    rng = np.random.default_rng(len(shape) * 100 + shape[0])
    full, face = (26, 6) if len(shape) == 3 else (8, 4)
    for _ in range(10):
        mask = rng.random(shape) < rng.uniform(0.2, 0.8)
        sample = rng.random(shape) < 0.8
        assert phase_euler_characteristics(mask, (full, face), sample) == (
            euler_number(mask & sample, connectivity=len(shape)),
            euler_number(~mask & sample, connectivity=1))
        assert phase_euler_characteristics(mask, (face, full)) == (
            euler_number(mask, connectivity=1), euler_number(~mask, connectivity=len(shape)))


def test_euler_characteristic_agrees_with_the_betti_numbers_at_level_zero():
    # CHECKS.md, scikit-image entry: the Euler characteristic equals the alternating sum of
    # the Betti numbers of the sublevel set {signed distance <= 0}, i.e. the pore phase.
    mask = _blobs((18, 18, 18), seed=8)
    result = analyse(mask, engine=ENGINE)
    betti = result.diagram.betti(0.0)
    assert betti[0] - betti[1] + betti[2] == result.summary["euler_characteristic"]["pore"]


def rod_lattice(n=36, nodes=(6, 18, 30), half_width=1):
    """Solid rods along all three axes joining a 3 x 3 x 3 grid of nodes (pore elsewhere)."""
    solid = np.zeros((n, n, n), bool)
    lo, hi = nodes[0], nodes[-1]
    for a in nodes:
        for b in nodes:
            sa = slice(a - half_width, a + half_width + 1)
            sb = slice(b - half_width, b + half_width + 1)
            run = slice(lo - half_width, hi + half_width + 1)
            solid[run, sa, sb] = True
            solid[sa, run, sb] = True
            solid[sa, sb, run] = True
    return ~solid


@pytest.fixture(scope="module")
def rods():
    mask = rod_lattice()
    return mask, analyse(mask, engine=ENGINE)


def test_rod_lattice_connectivity_density(rods):
    # Odgaard & Gundersen 1993: Conn.D = (1 - chi) / V. Counted by hand: 27 nodes and
    # 3 axes x 9 lines x 2 rods = 54 rods, one component, so 54 - 27 + 1 = 28 loops.
    mask, result = rods
    density = result.summary["connectivity_density"]
    assert density["phase"] == "solid"
    assert result.summary["euler_characteristic"]["solid"] == 1 - 28
    assert density["value"] == pytest.approx(28 / 36 ** 3)
    spaced = analyse(mask, spacing=(0.5, 0.5, 0.5), unit="mm", engine=ENGINE)
    assert spaced.summary["connectivity_density"]["value"] == pytest.approx(28 / 18 ** 3)


def test_rod_lattice_loops_are_in_the_loop_table(rods):
    # Same hand count (Odgaard & Gundersen 1993): 28 independent loops of the solid, which
    # the pore phase sees as 28 tunnels; they exist in the segmented mask (crossing pairs).
    mask, result = rods
    crossing = result.loops[result.loops["kind"] == "crossing"]
    assert len(crossing) == 28 == result.summary["counts"]["loops"]
    # each wraps a rod of half-width 1.5 voxels (a 3-voxel square), to within one voxel
    assert np.allclose(crossing["strut_radius"], 1.5, atol=ONE_VOXEL)


def test_sphere_surface_area_and_mean_curvature():
    # Lorensen & Cline 1987 (marching cubes) against 4 pi R^2, within 3 % for R = 10 voxels
    # (the binary staircase alone would add about 8 %, from memory). The integral mean
    # curvature of a sphere, 4 pi R, from memory, within 5 %. Euler density: a ball has
    # Betti numbers (1, 0, 0) (Hatcher 2002), so chi / V = 1 / V.
    n, radius = 32, 10.0
    c = np.arange(n) - (n - 1) / 2
    z, y, x = np.meshgrid(c, c, c, indexing="ij")
    pore = np.sqrt(z * z + y * y + x * x) <= radius
    result = analyse(pore, spacing=(2.0, 2.0, 2.0), unit="um", engine=ENGINE)
    functionals = result.summary["minkowski"]
    volume = (n * 2.0) ** 3
    physical_radius = 2.0 * radius
    assert functionals["surface_area_density"] * volume == pytest.approx(
        4 * np.pi * physical_radius ** 2, rel=0.03)
    assert functionals["mean_curvature_density"] * volume == pytest.approx(
        4 * np.pi * physical_radius, rel=0.05)
    assert functionals["euler_density"] * volume == pytest.approx(1.0)
    # a closed cavity: one isolated pore whose body is the sphere, radius within one voxel
    pores = result.pores
    assert len(pores) == 1 and pores["isolated"].iloc[0] and not pores["border"].iloc[0]
    assert pores["body_radius"].iloc[0] == pytest.approx(physical_radius, abs=2.0 * ONE_VOXEL)
    assert np.isnan(pores["throat_radius"].iloc[0])


def test_border_flag_marks_the_pore_cut_by_the_field_of_view():
    # common practice, no source: a ball cut by the scan's edge cannot be measured; one well
    # inside can. Basin or inscribed ball touching the outer layer sets the flag.
    n = 40
    z, y, x = np.meshgrid(*[np.arange(n)] * 3, indexing="ij")
    inside = (z - 20) ** 2 + (y - 12) ** 2 + (x - 12) ** 2 <= 36
    cut = (z - 20) ** 2 + (y - 30) ** 2 + (x - 37) ** 2 <= 36
    result = analyse(inside | cut, engine=ENGINE)
    pores = result.pores
    assert len(pores) == 2
    left = pores[pores["body_x"] < 20]
    right = pores[pores["body_x"] >= 20]
    assert len(left) == 1 and not left["border"].iloc[0]
    assert len(right) == 1 and right["border"].iloc[0]


def test_grains_of_a_two_bead_chain():
    # Two solid spheres of radius 8 whose centres are 14 apart in a pore matrix: their neck
    # is a circle of radius sqrt(8^2 - 7^2) = 3.87 (plane geometry, common practice, no
    # source); grain radii within one voxel of 8, neck within one voxel.
    n = 40
    z, y, x = np.meshgrid(*[np.arange(n)] * 3, indexing="ij")
    beads = ((z - 20) ** 2 + (y - 20) ** 2 + (x - 13) ** 2 <= 64) | \
            ((z - 20) ** 2 + (y - 20) ** 2 + (x - 27) ** 2 <= 64)
    result = analyse(~beads, engine=ENGINE)
    grains = result.grains
    assert len(grains) == 2
    assert np.allclose(grains["body_radius"], 8.0, atol=ONE_VOXEL)
    joined = grains.dropna(subset=["neck_radius"])
    assert len(joined) == 1
    assert joined["neck_radius"].iloc[0] == pytest.approx(np.sqrt(64 - 49), abs=ONE_VOXEL)
    assert joined["neck_x"].iloc[0] == pytest.approx(20.0, abs=1.0)


def test_enclosed_pore_is_a_void_of_the_solid():
    # A spherical shell of solid (radii 6 and 11) around a pore: the solid has Betti
    # numbers (1, 0, 1) (Hatcher 2002, spherical shell), so one enclosed void, whose radius
    # is the inner radius within one voxel and whose wall is half of 5 voxels thick.
    n = 32
    c = np.arange(n) - (n - 1) / 2
    z, y, x = np.meshgrid(c, c, c, indexing="ij")
    r = np.sqrt(z * z + y * y + x * x)
    solid = (r >= 6) & (r <= 11)
    result = analyse(~solid, engine=ENGINE)
    crossing = result.voids[result.voids["kind"] == "crossing"]
    assert len(crossing) == 1
    assert crossing["void_radius"].iloc[0] == pytest.approx(6.0, abs=ONE_VOXEL)
    assert crossing["wall_radius"].iloc[0] == pytest.approx(2.5, abs=ONE_VOXEL)
    assert result.summary["euler_characteristic"]["solid"] == 2


def test_threshold_and_label_inputs_select_the_pores():
    # Segmentation: pores at or below the threshold (or above with pores_bright); Otsu's
    # method (scikit-image) separates two well-separated gray levels; common practice.
    mask = _blobs((16, 16, 16), seed=5)
    gray = np.where(mask, 40, 200).astype(np.uint8)
    by_value = analyse(gray, threshold=100, engine=ENGINE)
    assert by_value.summary["porosity"] == pytest.approx(mask.mean())
    by_otsu = analyse(gray, threshold="otsu", engine=ENGINE)
    assert 40 <= by_otsu.summary["threshold"] < 200
    assert by_otsu.summary["threshold_method"] == "otsu"
    assert by_otsu.summary["porosity"] == pytest.approx(mask.mean())
    bright = analyse(255 - gray, threshold=100, pores_bright=True, engine=ENGINE)
    assert bright.summary["porosity"] == pytest.approx(mask.mean())
    labels = np.where(mask, 3, 7).astype(np.int32)
    by_label = analyse(labels, label=3, engine=ENGINE)
    assert by_label.summary["porosity"] == pytest.approx(mask.mean())
    assert np.array_equal(gray, np.where(mask, 40, 200))      # input untouched


def test_a_gray_scan_mapped_from_its_file_gives_the_same_pores_in_less_memory(tmp_path):
    # The pores job maps a gray scan from its file and gives its pages back once it is
    # segmented: the result must be the in-memory run's (itself checked against gudhi,
    # scipy and hand counts in this file), and the file must stay as it was.
    from voxtopo import jobs
    from voxtopo.memory import is_mapped
    from voxtopo.porosity import estimate

    mask = _blobs((24, 20, 22), seed=11)
    noise = np.random.default_rng(3).normal(0, 900, mask.shape)
    gray = np.clip(np.where(mask, 12000, 30000) + noise, 0, 65535).astype(np.uint16)
    path = tmp_path / "gray.npy"
    np.save(path, gray)
    before = path.read_bytes()
    scan = jobs.read_input("pores", path, {"spacing": 2.5, "unit": "um"})
    assert is_mapped(scan.data)
    mapped = analyse(scan, threshold="otsu", engine=ENGINE)
    held = analyse(gray, threshold="otsu", spacing=2.5, unit="um", engine=ENGINE)
    pd.testing.assert_frame_equal(mapped.pores, held.pores)
    assert mapped.summary["porosity"] == held.summary["porosity"]
    assert mapped.summary["threshold"] == held.summary["threshold"]
    pd.testing.assert_frame_equal(mapped.diagram.pairs, held.diagram.pairs)
    np.testing.assert_array_equal(scan.data, gray)          # still readable, for the plot
    write_pores(tmp_path / "out", mapped, scan)
    assert path.read_bytes() == before
    # the plan drops the scan (2 bytes a voxel of uint16) from what is held throughout
    shape = (1024, 1024, 1024)
    saved = estimate(shape, np.uint16) - estimate(shape, np.uint16, mapped=True)
    assert saved == 2 * 1024 ** 3


def test_two_dimensional_packing_of_discs():
    # Square packing of discs of radius R (plane version of the simple cubic case,
    # common practice, no source): porosity 1 - pi/4, largest empty disc (sqrt(2)-1)R,
    # window 0 -- the discs touch, so the pores are isolated (no throat).
    cell = 25
    c = np.arange(2 * cell)
    y, x = np.meshgrid(c, c, indexing="ij")
    wrap = lambda u: np.minimum(np.mod(u, cell), cell - np.mod(u, cell))  # noqa: E731
    mask = np.hypot(wrap(y), wrap(x)) > cell / 2
    result = analyse(mask, engine=ENGINE)
    assert result.summary["porosity"] == pytest.approx(1 - np.pi / 4, abs=0.1 * np.pi / cell)
    inner = result.pores[~result.pores["border"]]
    assert len(inner) == 4
    assert np.allclose(inner["body_radius"], (np.sqrt(2) - 1) * cell / 2, atol=ONE_VOXEL)
    assert inner["isolated"].all()
    assert result.summary["minkowski"]["mean_curvature_density"] is None
    assert "body_z" not in result.pores.columns


# ---------------------------------------------------------------------------- bad input
def _one_sentence(error):
    text = str(error.value)
    assert "\n" not in text and text.endswith(".")
    return text


def test_empty_mask_is_refused():
    with pytest.raises(InputError) as error:
        analyse(np.zeros((8, 8, 8), bool))
    assert "selects no pore voxel" in _one_sentence(error)


def test_all_pore_mask_is_refused():
    with pytest.raises(InputError) as error:
        analyse(np.ones((8, 8, 8), bool))
    assert "makes every voxel of the scan array pore" in _one_sentence(error)


def test_gray_scan_without_threshold_is_refused():
    gray = np.arange(512, dtype=np.uint16).reshape(8, 8, 8)
    with pytest.raises(InputError) as error:
        analyse(gray)
    assert "not a binary mask" in _one_sentence(error)
    assert "threshold" in str(error.value)


@pytest.mark.parametrize("kwargs, words", [
    ({"label": 9}, "No voxel"),
    ({"label": 1, "threshold": 0.5}, "not both"),
    ({"axis": "w"}, "percolation axis"),
    ({"neighbourhood": 8}, "Neighbourhood"),
    ({"threshold": "median"}, "number or 'otsu'"),
    ({"min_persistence": -1.0}, "min_persistence"),
])
def test_bad_options_are_refused_with_one_sentence(kwargs, words):
    labels = np.zeros((8, 8, 8), np.int32)
    labels[2:6, 2:6, 2:6] = 1
    with pytest.raises(InputError) as error:
        analyse(labels, **kwargs)
    assert words in _one_sentence(error)


def test_nan_in_a_gray_scan_is_refused():
    gray = np.random.default_rng(0).random((8, 8, 8))
    gray[3, 3, 3] = np.nan
    with pytest.raises(InputError) as error:
        analyse(gray, threshold=0.5)
    assert "NaN" in _one_sentence(error)


def test_too_big_for_memory_is_refused(monkeypatch):
    from voxtopo.errors import TooBigError
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", "100000")
    mask = _blobs((16, 16, 16), seed=1)
    with pytest.raises(TooBigError) as error:
        analyse(mask)
    assert "memory" in _one_sentence(error)


def test_estimate_grows_with_the_scan_and_holds_its_arrays(monkeypatch):
    # common practice, no source: a larger scan, a wider scan type or a region of interest
    # never needs less memory; a run holds at least the scan, its mask and the float32
    # distance (6 bytes per voxel for a uint8 scan); the need is per voxel, so doubling the
    # edge multiplies it by nearly 8 once the libraries' share is small (with memory
    # enough that the engine plans the same way at both sizes)
    from voxtopo.porosity import estimate
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", "1e12")
    sizes = [estimate((n, n, n), np.uint8) for n in (64, 128, 256, 512)]
    assert sizes == sorted(sizes) and len(set(sizes)) == len(sizes)
    assert estimate((256,) * 3, np.uint16) > estimate((256,) * 3, np.uint8)
    assert estimate((256,) * 3, np.uint8, roi=True) > estimate((256,) * 3, np.uint8)
    assert estimate((512,) * 3, np.uint8) > 6 * 512 ** 3
    assert 6 < estimate((1024,) * 3, np.uint8) / estimate((512,) * 3, np.uint8) <= 8


def test_refusal_names_the_estimate_and_the_out_of_core_path(monkeypatch, tmp_path, capsys):
    # common practice, no source: a run that cannot fit is refused before it allocates,
    # in one sentence, exit 2, nothing written, naming the remedies
    from voxtopo.cli import main
    from voxtopo.memory import human
    from voxtopo.porosity import estimate
    mask = _blobs((24, 24, 24), seed=2).astype(np.uint8)
    np.save(tmp_path / "mask.npy", mask)
    planned = estimate(mask.shape, np.uint8, engine=ENGINE)
    # a budget (80 % of the limit) just short of the plan
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", str(int(planned / 0.8) - 1000))
    out = tmp_path / "out"
    assert main(["pores", str(tmp_path / "mask.npy"), "--out", str(out),
                 "--engine", ENGINE]) == 2
    err = capsys.readouterr().err.strip().splitlines()[-1]
    assert human(planned) in err and "--out-of-core" in err and "crop or downsample" in err
    assert "Traceback" not in err and not out.exists()
    # and with the plan inside the budget the same run goes through
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", str(int(planned / 0.8) + 1000))
    assert main(["pores", str(tmp_path / "mask.npy"), "--out", str(out),
                 "--engine", ENGINE]) == 0


def test_pores_is_planned_once_as_a_whole(monkeypatch):
    # common practice, no source: a job checks its memory once, for the whole run; its
    # persistence runs are part of that plan and are not refused on their own (with a
    # remedy naming another command) after the distance transform has been done
    import voxtopo.engine
    from voxtopo.errors import TooBigError
    from voxtopo.porosity import analyse

    def refuse(needed, what, remedy):
        raise TooBigError(f"{what} would need {needed} bytes; {remedy}.")

    monkeypatch.setattr(voxtopo.engine, "ensure_fits", refuse)
    mask = _blobs((20, 20, 20), seed=4)
    with pytest.raises(TooBigError, match="analyse --out-of-core"):
        voxtopo.engine.persistence(mask.astype(np.float32))
    result = analyse(mask, engine=ENGINE)
    assert result.summary["porosity"] == pytest.approx(mask.mean())


@pytest.mark.parametrize("engine", ["voxtopo", "gudhi"])
def test_diagrams_of_the_distance_held_as_levels_are_those_of_the_float_field(engine):
    """The pore run holds the signed distance as level numbers through its persistence
    runs; its diagrams must be gudhi's (Maria, Boissonnat, Glisse & Yvinec 2014) of the
    float32 field itself, pore phase sublevel 26-connected and solid superlevel
    6-connected, value for value, and the distance it returns must be scipy's transform
    (scipy.ndimage.distance_transform_edt) bit for bit as float32."""
    from collections import Counter

    from scipy import ndimage

    from voxtopo.engine import _gudhi

    mask = _blobs((18, 20, 22), seed=6)
    spacing = (1.0, 0.5, 0.75)
    result = analyse(mask, spacing=spacing, engine=engine)
    field = (ndimage.distance_transform_edt(~mask, sampling=spacing).astype(np.float32)
             - ndimage.distance_transform_edt(mask, sampling=spacing).astype(np.float32))
    assert np.array_equal(result.distance.data, field)
    for diagram, superlevel, construction in ((result.diagram, False, "voxel"),
                                              (result.solid_diagram, True, "vertex")):
        theirs = _gudhi.compute(field, superlevel=superlevel, construction=construction,
                                periodic=None, field=2)
        pairs = diagram.pairs
        assert Counter(zip(pairs["dim"].tolist(), pairs["birth"].tolist(),
                           pairs["death"].tolist())) == Counter(
            zip(theirs.dim.tolist(), theirs.birth.tolist(), theirs.death.tolist()))


def test_interface_in_slabs_equals_the_whole_mesh():
    # the slab-wise mesh must count every triangle and interior edge once: the same area
    # and curvature as one mesh of the whole volume (marching cubes, Lorensen & Cline 1987,
    # through scikit-image), here with 6 slabs (the last a short one) and a region of
    # interest
    from scipy import ndimage
    from voxtopo.porosity import _minkowski
    from voxtopo.porosity._analysis import SURFACE_SMOOTHING_VOXELS
    mask = _blobs((18, 21, 19), seed=4)
    assert _minkowski.slab_planes(mask.shape) == 3  # an eighth of 18 planes, rounded up
    spacing = (1.3, 1.0, 0.8)
    sample = np.zeros(mask.shape, bool)
    sample[3:-2, 2:, :15] = True
    soft = ndimage.gaussian_filter(mask.astype(np.float32), sigma=SURFACE_SMOOTHING_VOXELS,
                                   mode="nearest")
    vertices, faces = _minkowski.interface_mesh(soft, spacing)
    for region in (None, sample):
        kept = faces if region is None else _minkowski.faces_in_sample(vertices, faces,
                                                                       region, spacing)
        area, curvature = _minkowski.interface_measures(mask, spacing,
                                                        SURFACE_SMOOTHING_VOXELS, region)
        # the mesh's vertices are float32 and the areas are summed in float32, in another
        # order slab by slab: agreement to float32 rounding of a sum, not to the last bit
        assert area == pytest.approx(_minkowski.surface_area(vertices, kept), rel=1e-6)
        assert curvature == pytest.approx(_minkowski.integral_mean_curvature(vertices, kept),
                                          rel=1e-6)


# ------------------------------------------------------------------------------ files
def test_result_folder_has_the_contract_columns_and_keys(tmp_path, simple_cubic):
    mask, radius, result = simple_cubic
    out = write_pores(tmp_path / "beads", result)
    pores = pd.read_csv(out / "pores.csv")
    assert list(pores.columns[:11]) == ["id", "body_radius", "body_z", "body_y", "body_x",
                                        "throat_radius", "throat_z", "throat_y", "throat_x",
                                        "border", "lifetime"]
    assert len(pores) == len(result.pores)
    summary = json.loads((out / "summary.json").read_text())
    for key in ("porosity", "connected_porosity", "percolates", "euler_characteristic",
                "connectivity_density", "minkowski", "percolation_radius", "counts",
                "threshold", "threshold_method", "unit", "cautions", "diagram"):
        assert key in summary
    assert summary["connectivity_density"]["neighbourhood"] == 6
    assert set(summary["minkowski"]) >= {"volume_fraction", "surface_area_density",
                                         "mean_curvature_density", "euler_density"}
    assert any("not a medical diagnosis" in c for c in summary["cautions"])
    assert any("two voxels" in c for c in summary["cautions"])
    for plot in ("pore_sizes.png", "distance_diagram.png", "pore_slices.png"):
        assert (out / plot).stat().st_size > 10_000
    # an existing folder is kept unless force is given
    stamp = (out / "pores.csv").stat().st_mtime_ns
    with pytest.raises(InputError):
        write_pores(out, result)
    assert (out / "pores.csv").stat().st_mtime_ns == stamp
    write_pores(out, result, force=True)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["beads"]


def test_connected_porosity_counts_only_components_spanning_the_axis():
    # A through channel along x (volume known by counting) and a closed cavity: only the
    # channel counts along x, nothing along z (common practice, no source).
    mask = np.zeros((20, 20, 20), bool)
    mask[8:12, 8:12, :] = True
    mask[2:5, 2:5, 2:5] = True
    result = analyse(mask, engine=ENGINE)
    assert result.summary["connected_porosity"]["x"] == pytest.approx(4 * 4 * 20 / 20 ** 3)
    assert result.summary["connected_porosity"]["z"] == 0.0
    assert result.summary["porosity"] == pytest.approx((320 + 27) / 8000)


# -------------------------------------------------------------------------------- CLI
def test_cli_writes_the_result_folder(tmp_path, capsys):
    # The closed-cavity geometry of test_sphere_surface_area_and_mean_curvature, saved as an
    # 8-bit mask (255 = pore): one isolated pore, nothing percolates (common practice).
    from voxtopo.cli import main
    n = 24
    z, y, x = np.meshgrid(*[np.arange(n) - 11.5] * 3, indexing="ij")
    mask = (np.sqrt(z * z + y * y + x * x) <= 7).astype(np.uint8) * 255
    path = tmp_path / "cavity.npy"
    np.save(path, mask)
    code = main(["pores", str(path), "--out", str(tmp_path / "res"), "--spacing", "1.5,1.5,1.5",
                 "--unit", "um", "--engine", "gudhi", "--axis", "z"])
    assert code == 0
    summary = json.loads((tmp_path / "res" / "summary.json").read_text())
    assert summary["unit"] == "um" and summary["percolates"] == {"z": "no"}
    assert summary["counts"]["pores"] == 1
    assert "research use only" in capsys.readouterr().out


def test_cli_refuses_a_gray_scan_without_threshold(tmp_path, capsys):
    from voxtopo.cli import main
    path = tmp_path / "gray.npy"
    np.save(path, np.arange(4096, dtype=np.uint16).reshape(16, 16, 16))
    code = main(["pores", str(path), "--out", str(tmp_path / "res")])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert "not a binary mask" in err and "Traceback" not in err and len(err.splitlines()) == 1
    assert not (tmp_path / "res").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["gray.npy"]


def test_progress_is_reported_and_cancel_stops_the_work():
    from voxtopo.errors import Cancelled
    mask = _blobs((12, 12, 12), seed=2)
    phases = []
    analyse(mask, engine=ENGINE, progress=lambda phase, fraction: phases.append(phase))
    assert {"distance transform", "percolation", "integral geometry"} <= set(phases)

    def stop(phase, fraction):
        if phase == "percolation":
            raise Cancelled("stopped by the user")

    with pytest.raises(Cancelled):
        analyse(mask, engine=ENGINE, progress=stop)


# ------------------------------------------------------------------- segmentation traps
def test_threshold_on_a_binary_mask_is_refused_not_inverted():
    # common practice, no source: a threshold splits gray values; on a mask it could only
    # keep or swap the two phases, so it is refused rather than guessed.
    mask, radius = packing("simple cubic", 10, 1)
    with pytest.raises(InputError) as error:
        analyse(mask, threshold="otsu", engine=ENGINE)
    assert "already a binary mask" in _one_sentence(error)
    with pytest.raises(InputError) as error:
        analyse(mask.astype(np.uint8), threshold=0.5, engine=ENGINE)
    assert "already a binary mask" in _one_sentence(error)


def test_pores_bright_without_a_threshold_is_refused():
    # RULES: an option that would be ignored is refused (common practice, no source)
    mask, radius = packing("simple cubic", 10, 1)
    with pytest.raises(InputError) as error:
        analyse(mask, pores_bright=True, engine=ENGINE)
    assert "no threshold" in _one_sentence(error)


def test_a_label_that_selects_almost_nothing_says_so():
    # the count of the selected voxels is numpy's count of the label (common practice, no
    # source): five voxels of 8000 are under the 0.1 % floor, and the note says so
    labels = np.full((20, 20, 20), 7, np.int32)
    labels[10, 10, 8:13] = 3
    result = analyse(labels, label=3, engine=ENGINE)
    assert np.count_nonzero(labels == 3) == 5
    notes = result.summary["notes"]
    assert any("only 5 pore voxels" in note and "label 3" in note for note in notes)
    assert all("\n" not in note and note.endswith(".") for note in notes)
    halves = np.where(np.arange(20)[:, None, None] < 10, 3, 7) * np.ones((20, 20, 20), np.int32)
    roomy = analyse(halves, label=3, engine=ENGINE)
    assert not any("only" in note for note in roomy.summary["notes"])


def test_a_threshold_that_selects_nothing_is_refused_with_the_value():
    gray = np.full((12, 12, 12), 200, np.uint8)
    gray[4:8, 4:8, 4:8] = 100
    with pytest.raises(InputError) as error:
        analyse(gray, threshold=50, engine=ENGINE)
    assert "threshold 50" in _one_sentence(error) and "no pore voxel" in str(error.value)


# --------------------------------------------------------------------- region of interest
def _packing_in_air(margin=8):
    """The simple cubic packing of 2 x 2 x 2 cells of 20 voxels, with air (pore) around it
    across y and x; returns (mask, roi, R) where the roi is the packing's box."""
    packed, radius = packing("simple cubic", 20, 2)
    n = packed.shape[0]
    mask = np.ones((n, n + 2 * margin, n + 2 * margin), bool)
    mask[:, margin:margin + n, margin:margin + n] = packed
    roi = np.zeros_like(mask)
    roi[:, margin:margin + n, margin:margin + n] = True
    return mask, roi, radius


@pytest.fixture(scope="module")
def packing_in_air():
    mask, roi, radius = _packing_in_air()
    return mask, roi, radius, analyse(mask, roi=roi, engine=ENGINE), analyse(mask,
                                                                             engine=ENGINE)


def test_region_of_interest_porosity_counts_only_the_sample(packing_in_air):
    # Callister & Rethwisch, interstitial sites: simple cubic porosity 1 - pi/6 inside the
    # sample, whatever air lies around it (tolerance as in the test above)
    mask, roi, radius, inside, whole = packing_in_air
    assert inside.summary["porosity"] == pytest.approx(1 - np.pi / 6,
                                                       abs=0.1 * np.pi / (2 * radius))
    assert whole.summary["porosity"] > 0.6      # the air counted as pore without the roi


def test_region_of_interest_percolation_ignores_the_air_around_the_sample(packing_in_air):
    # Callister & Rethwisch: along z the narrowest passage of the packing is the square
    # window (sqrt(2)-1)R, within one voxel; the air gap of 8 voxels would give about 8.
    # Across y and x the sample does not reach the scan's faces: not measured.
    mask, roi, radius, inside, whole = packing_in_air
    assert whole.summary["percolation_radius"]["z"] > 6.0
    assert inside.summary["percolates"]["z"] == "yes"
    assert inside.summary["percolation_radius"]["z"] == pytest.approx(
        (np.sqrt(2) - 1) * radius, abs=ONE_VOXEL)
    throat = inside.critical_throats["z"]
    assert roi[tuple(np.rint(throat).astype(int))]
    assert inside.summary["percolates"]["y"] == inside.summary["percolates"]["x"] == \
        "not measured"
    assert any("not measured" in note for note in inside.summary["notes"])


def test_region_of_interest_pore_sizes_are_those_of_the_packing(packing_in_air):
    # Callister & Rethwisch: the largest empty sphere (sqrt(3)-1)R sits at the 8 cube
    # centres; with the sample's edge as a border, the pores clear of it are the 7 inner
    # ones of the test above (the eldest drains the rest), each within one voxel
    mask, roi, radius, inside, whole = packing_in_air
    clear = inside.pores[~inside.pores["border"]]
    assert len(clear) == 7
    assert np.allclose(clear["body_radius"], (np.sqrt(3) - 1) * radius, atol=ONE_VOXEL)
    assert np.all(roi[tuple(np.rint(inside.pores[["body_z", "body_y", "body_x"]]
                                    .to_numpy()).astype(int).T)])


def test_region_of_interest_connectivity_density_of_a_rod_lattice():
    # Odgaard & Gundersen 1993: the 28 hand-counted loops of the rod lattice, per unit
    # volume of the sample (a 32^3 box), with a solid frame outside the sample that would
    # otherwise add a component; chi of the sample's solid against skimage.measure.
    # euler_number (Ohser, Nagel & Schladitz 2002) with the solid's 6-neighbourhood.
    mask = rod_lattice()
    roi = np.zeros_like(mask)
    roi[2:34, 2:34, 2:34] = True
    framed = mask & roi
    result = analyse(framed, roi=roi, engine=ENGINE)
    solid = ~framed & roi
    assert result.summary["euler_characteristic"]["solid"] == euler_number(solid,
                                                                          connectivity=1)
    assert result.summary["euler_characteristic"]["solid"] == 1 - 28
    assert result.summary["connectivity_density"]["value"] == pytest.approx(28 / 32 ** 3)
    assert result.summary["counts"]["loops"] == 28


def test_region_of_interest_must_match_the_scan():
    mask = rod_lattice()
    with pytest.raises(InputError) as error:
        analyse(mask, roi=np.ones((4, 4, 4), bool), engine=ENGINE)
    assert "shape" in _one_sentence(error)
    with pytest.raises(InputError) as error:
        analyse(mask, roi=np.zeros(mask.shape, bool), engine=ENGINE)
    assert "no voxel of the sample" in _one_sentence(error)


# ---------------------------------------------------------------------- flags and units
def test_isolated_marks_closed_pores_not_the_percolating_one():
    # scipy.ndimage.label (CHECKS.md) gives the pieces of the pore phase: the channel
    # through z is one piece reaching the faces, the cavity another reaching nothing. Only
    # the cavity is a closed (isolated) pore; the channel's largest pore is not.
    from scipy import ndimage
    mask = np.zeros((30, 30, 30), bool)
    z, y, x = np.meshgrid(*[np.arange(30)] * 3, indexing="ij")
    mask |= np.hypot(y - 8, x - 8) <= 3
    mask |= np.sqrt((z - 15) ** 2 + (y - 8) ** 2 + (x - 8) ** 2) <= 6   # a bulge
    cavity = np.sqrt((z - 15) ** 2 + (y - 22) ** 2 + (x - 22) ** 2) <= 4
    mask |= cavity
    pieces, count = ndimage.label(mask, structure=np.ones((3, 3, 3)))
    assert count == 2
    result = analyse(mask, engine=ENGINE)
    pores = result.pores
    largest = pores.iloc[0]
    assert largest["body_radius"] == pytest.approx(6.0, abs=ONE_VOXEL)
    assert not largest["isolated"]
    in_cavity = cavity[tuple(np.rint(pores[["body_z", "body_y", "body_x"]].to_numpy())
                             .astype(int).T)]
    assert pores["isolated"].to_numpy().tolist() == in_cavity.tolist()
    assert in_cavity.sum() == 1 == result.summary["counts"]["isolated_pores"]


def test_every_column_has_its_unit_and_2d_sizes_are_areas(tmp_path):
    # common practice, no source: a person reads positions and sizes in the scan's unit,
    # and an area in 2D is an area (unit squared)
    cell = 25
    c = np.arange(2 * cell)
    y, x = np.meshgrid(c, c, indexing="ij")
    wrap = lambda u: np.minimum(np.mod(u, cell), cell - np.mod(u, cell))  # noqa: E731
    mask = np.hypot(wrap(y), wrap(x)) > cell / 2
    result = analyse(mask, spacing=(0.5, 0.5), unit="um", engine=ENGINE)
    assert "body_area" in result.pores.columns and "body_volume" not in result.pores.columns
    out = write_pores(tmp_path / "discs", result)
    summary = json.loads((out / "summary.json").read_text())
    for name in ("pores.csv", "grains.csv", "loops.csv", "voids.csv", "pairs.csv"):
        table = pd.read_csv(out / name)
        assert set(summary["columns"][name]) == set(table.columns), name
    assert summary["columns"]["pores.csv"]["body_area"] == "um^2"
    assert summary["columns"]["pores.csv"]["body_x"] == "um"
    assert summary["columns"]["pairs.csv"]["birth_x"] == "um"
    assert summary["columns"]["pairs.csv"]["birth_voxel_x"] == "voxel index"
    # positions are physical: every body centre is a pixel centre times the spacing
    pores = pd.read_csv(out / "pores.csv")
    assert np.allclose(np.mod(pores["body_x"] / 0.5, 1.0), 0.0)
    assert pores["body_x"].max() <= (2 * cell - 1) * 0.5


def test_missing_voxel_size_and_negative_connectivity_density_are_explained():
    # Odgaard & Gundersen 1993: (1 - chi) / V assumes one component; two separate solid
    # balls (two pieces by scipy.ndimage.label, chi = 2 by skimage.measure.euler_number)
    # give a negative value, which the notes explain; no voxel size means per voxel.
    from scipy import ndimage
    z, y, x = np.meshgrid(*[np.arange(24)] * 3, indexing="ij")
    solid = (np.sqrt((z - 12) ** 2 + (y - 6) ** 2 + (x - 6) ** 2) <= 4) | \
        (np.sqrt((z - 12) ** 2 + (y - 17) ** 2 + (x - 17) ** 2) <= 4)
    assert ndimage.label(solid)[1] == 2 and euler_number(solid, connectivity=1) == 2
    result = analyse(~solid, engine=ENGINE)
    density = result.summary["connectivity_density"]
    assert density["value"] == pytest.approx(-1 / 24 ** 3)
    assert density["unit"].startswith("1/voxel^3")
    assert result.summary["voxel_size_known"] is False
    notes = " ".join(result.summary["notes"])
    assert "No voxel size" in notes and "2 separate pieces" in notes
    physical = analyse(~solid, spacing=(1.0, 1.0, 1.0), unit="um", engine=ENGINE)
    assert not any("No voxel size" in n for n in physical.summary["notes"])


def test_diagram_plot_names_the_zones_in_our_words(simple_cubic):
    # common practice, no source: the three zones of a signed-distance diagram are named
    # by where the feature lives, in the legend
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from voxtopo.report.pores import _diagram_plot
    mask, radius, result = simple_cubic
    fig = _diagram_plot(plt, result, "px", mask, 3)
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    plt.close(fig)
    assert any(label.startswith("pore-phase features") for label in labels)
    assert any(label.startswith("solid-phase features") for label in labels)
    assert any(label.startswith("features across the wall") for label in labels)


def test_cli_refuses_a_threshold_on_a_mask_with_one_sentence_and_no_warning(tmp_path,
                                                                            capsys):
    # common practice, no source: the bool mask would be thresholded into its complement;
    # the CLI refuses with one sentence, exit 2, and numpy's warnings never reach the user
    import warnings
    from voxtopo.cli import main
    mask, radius = packing("simple cubic", 10, 1)
    np.save(tmp_path / "mask.npy", mask)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        code = main(["pores", str(tmp_path / "mask.npy"), "--threshold", "otsu", "--out",
                     str(tmp_path / "res")])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert "already a binary mask" in err and len(err.splitlines()) == 1
    assert "Warning" not in err and not [w for w in caught
                                         if issubclass(w.category, RuntimeWarning)]
    assert not (tmp_path / "res").exists()


def test_cli_region_of_interest_and_the_shortest_lifetime_option(tmp_path, capsys):
    # Callister & Rethwisch as in the region-of-interest tests above: porosity 1 - pi/6
    # of the sample; the option for the shortest lifetime kept is --min-persistence and
    # the old name is gone (argparse refuses it, exit 2)
    from voxtopo.cli import main
    mask, roi, radius = _packing_in_air()
    np.save(tmp_path / "mask.npy", mask)
    np.save(tmp_path / "roi.npy", roi)
    code = main(["pores", str(tmp_path / "mask.npy"), "--roi", str(tmp_path / "roi.npy"),
                 "--out", str(tmp_path / "res"), "--engine", ENGINE, "--axis", "z",
                 "--min-persistence", "0.5", "--spacing", "2", "--unit", "um"])
    out = capsys.readouterr().out
    assert code == 0
    summary = json.loads((tmp_path / "res" / "summary.json").read_text())
    assert summary["porosity"] == pytest.approx(1 - np.pi / 6, abs=0.1 * np.pi / (2 * radius))
    assert summary["min_persistence"] == 0.5 and "min_lifetime" not in summary
    assert "of the sample" in out and "z: yes" in out
    with pytest.raises(SystemExit) as stop:
        main(["pores", str(tmp_path / "mask.npy"), "--out", str(tmp_path / "res2"),
              "--min-lifetime", "0.5"])
    assert stop.value.code == 2


def test_otsu_threshold_is_chosen_from_the_sample_alone():
    # skimage.filters.threshold_otsu (Otsu 1979, through scikit-image) on the sample's own
    # gray values is the reference: dark air around the sample must not move it
    from skimage.filters import threshold_otsu
    gray = np.zeros((20, 40, 40), np.uint8)                  # air, darker than the pores
    inside = np.full((20, 20, 20), 200, np.uint8)            # solid
    inside[:, 5:15, 5:15] = 100                              # a square channel of pore
    gray[:, 10:30, 10:30] = inside
    roi = np.zeros(gray.shape, bool)
    roi[:, 10:30, 10:30] = True
    result = analyse(gray, threshold="otsu", roi=roi, engine=ENGINE)
    expected = threshold_otsu(gray[roi])
    assert result.summary["threshold"] == pytest.approx(expected)
    assert result.summary["porosity"] == pytest.approx(100 / 400)


# --- robust features: stable under a boundary moved by the tolerance -------------------
def _disk_pores(seed=43, size=96, count=9, wall=4.0):
    """Pairs of overlapping disks (one pore drains into the other through the neck where
    they overlap), each pair apart from the others by a solid wall at least ``wall`` voxels
    thick: the stability guarantee is for a boundary that moves, not for a wall that a
    dilation closes."""
    from skimage.draw import disk
    rng = np.random.default_rng(seed)
    mask = np.zeros((size, size), bool)
    placed = []
    while len(placed) < count:
        big, small = rng.uniform(4.0, 8.0), rng.uniform(2.0, 6.0)
        angle = rng.uniform(0, 2 * np.pi)
        offset = (big + small - rng.uniform(1.0, 1.6 * small)) * np.array(
            [np.cos(angle), np.sin(angle)])
        reach = np.hypot(*offset) + small
        centre = rng.uniform(reach + 2, size - reach - 2, 2)
        if all(np.hypot(*(centre - c)) >= reach + r + wall for c, r in placed):
            placed.append((centre, max(reach, big)))
            mask[disk(tuple(centre), big, shape=mask.shape)] = True
            mask[disk(tuple(centre + offset), small, shape=mask.shape)] = True
    return mask


def _as_intervals(pores):
    """(birth, death) of each pore in the signed distance: born at -body_radius, dying a
    lifetime later (inf: never)."""
    birth = -pores["body_radius"].to_numpy(dtype=float)
    return np.column_stack([birth, birth + pores["lifetime"].to_numpy(dtype=float)])


@pytest.mark.parametrize("change", ["dilate", "erode"])
def test_robust_pores_keep_a_partner_when_the_boundary_moves_one_voxel(change):
    """Stability (Cohen-Steiner, Edelsbrunner & Harer 2007): moving the boundary by one
    voxel changes the signed distance by at most 1 + sqrt(2) on the grid, so the bottleneck
    distance (gudhi.bottleneck_distance, Maria et al. 2014) between the pore diagrams is at
    most that, and every pore flagged robust (lifetime above twice it) keeps a partner pore
    within that distance in the pores table of the moved mask."""
    import gudhi
    from scipy import ndimage
    mask = _disk_pores()
    move = ndimage.binary_dilation if change == "dilate" else ndimage.binary_erosion
    before = analyse(mask, engine=ENGINE)
    after = analyse(move(mask), engine=ENGINE)
    bound = 1.0 + np.sqrt(2.0)
    assert before.summary["robustness"]["threshold"] == pytest.approx(2 * bound)
    # the distances are float32: each of the two compared values carries half a float32
    # unit in the last place at the field's magnitude, the only slack beyond the bound
    rounding = float(np.spacing(np.abs(before.distance.data).max())) + 1e-9
    assert np.abs(before.distance.data - after.distance.data).max() <= bound + rounding
    for dim in (0, 1):
        ours, theirs = (d.intervals(dim) for d in (before.diagram, after.diagram))
        finite = [i[np.isfinite(i[:, 1])] for i in (ours, theirs)]
        assert gudhi.bottleneck_distance(*finite) <= bound + rounding
    robust = before.pores[before.pores["robust"]]
    assert 3 <= len(robust) < len(before.pores)
    partners = _as_intervals(after.pores)
    for birth, death in _as_intervals(robust):
        gap = np.maximum(np.abs(partners[:, 0] - birth),
                         np.where(np.isinf(death) & np.isinf(partners[:, 1]), 0.0,
                                  np.abs(partners[:, 1] - death)))
        assert gap.min() <= bound + rounding


def test_cli_flags_robust_features_in_every_table_and_counts_them(tmp_path, capsys):
    """The robust flag is lifetime above 2 (delta + h sqrt(d)) (stability theorem,
    Cohen-Steiner, Edelsbrunner & Harer 2007, with the voxel-centre offset): checked column
    by column in pores, grains, loops, voids and pairs, with delta = 2 voxels given on the
    command line; the summary and the printed line count them with the level."""
    from voxtopo.cli import main
    z, y, x = np.indices((30, 30, 30))
    mask = np.zeros((30, 30, 30), bool)
    for centre, radius in (((10, 10, 10), 6), ((20, 19, 20), 5), ((8, 22, 21), 2.5)):
        mask |= ((z - centre[0]) ** 2 + (y - centre[1]) ** 2 + (x - centre[2]) ** 2
                 <= radius ** 2)
    np.save(tmp_path / "mask.npy", mask.astype(np.uint8))
    out = tmp_path / "out"
    assert main(["pores", str(tmp_path / "mask.npy"), "--out", str(out),
                 "--boundary-tolerance", "2", "--engine", ENGINE]) == 0
    threshold = 2 * (2 + np.sqrt(3))
    summary = json.loads((out / "summary.json").read_text())
    assert summary["robustness"]["threshold"] == pytest.approx(threshold)
    assert summary["robustness"]["boundary_tolerance"] == 2
    for name, lifetime in (("pores", "lifetime"), ("grains", "lifetime"),
                           ("loops", "lifetime"), ("voids", "lifetime"),
                           ("pairs", "persistence")):
        table = pd.read_csv(out / f"{name}.csv")
        expected = table[lifetime].to_numpy(dtype=float) > threshold
        np.testing.assert_array_equal(table["robust"].to_numpy(dtype=bool), expected,
                                      err_msg=name)
    pores = pd.read_csv(out / "pores.csv")
    # the two large balls (radius 6 and 5) are robust; the small one (2.5) is not
    assert summary["counts"]["robust"]["pores"] == int(pores["robust"].sum()) == 2
    printed = capsys.readouterr().out
    assert f"2 robust of {len(pores)} pores" in printed
    assert "boundary tolerance 2 px" in printed


def test_cli_refuses_a_negative_boundary_tolerance_in_one_sentence(tmp_path, capsys):
    # common practice, no source: a tolerance is a length of 0 or more; one sentence
    # naming the wrong value, exit 2, nothing written
    from voxtopo.cli import main
    np.save(tmp_path / "mask.npy", np.eye(12, dtype=np.uint8))
    out = tmp_path / "out"
    assert main(["pores", str(tmp_path / "mask.npy"), "--out", str(out),
                 "--boundary-tolerance", "-1"]) == 2
    err = capsys.readouterr().err.strip()
    assert "-1" in err and "boundary_tolerance" in err.replace(" ", "_").lower()
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    assert not out.exists()
