"""Out-of-core pores: the chunked run gives the in-memory numbers, checked against scipy,
scikit-image and gudhi where those give the quantity directly."""

import json
import os

import gudhi
import numpy as np
import pandas as pd
import pytest
import tifffile
import zarr
from scipy import ndimage
from skimage.filters import threshold_otsu
from skimage.measure import euler_number

from voxtopo.errors import InputError, TooBigError
from voxtopo.jobs import pores as pores_job
from voxtopo.porosity import analyse, analyse_chunked
from voxtopo.porosity._chunked_edt import Feature, signed_distance, squared_distances
from voxtopo.porosity._out_of_core import compute_on


def _blobs(shape, seed, sigma=2.0, level=0.0):
    """A random two-phase structure: smoothed noise below ``level`` is pore."""
    rng = np.random.default_rng(seed)
    return ndimage.gaussian_filter(rng.standard_normal(shape), sigma) < level


def _with_cavity(mask, centre, radius):
    """``mask`` with a ball of pore: a pore wider than the chunks."""
    grid = np.indices(mask.shape)
    inside = sum((g - c) ** 2 for g, c in zip(grid, centre)) <= radius ** 2
    return mask | inside


def _same_table(memory, chunked, any_order=False, rtol=1e-6):
    columns = [c for c in chunked.columns if c in memory.columns]
    memory, chunked = memory[columns], chunked[columns]
    if any_order:  # rows of equal lifetime come in the diagram's order, not a fixed one
        memory, chunked = (t.sort_values(columns[1:]) for t in (memory, chunked))
        memory, chunked = (t.drop(columns="id") for t in (memory, chunked))
    pd.testing.assert_frame_equal(memory.reset_index(drop=True), chunked.reset_index(drop=True),
                                  check_dtype=False, rtol=rtol)


def _gudhi_betti(field, levels, construction):
    """Reference: gudhi (Maria, Boissonnat, Glisse & Yvinec 2014, "The Gudhi Library:
    Simplicial Complexes and Persistent Homology", ICMS), CubicalComplex of the sublevel
    filtration: Betti k at t counts the intervals with birth <= t < death."""
    key = "top_dimensional_cells" if construction == "voxel" else "vertices"
    cc = gudhi.CubicalComplex(**{key: field.astype(np.float64)})
    cc.compute_persistence()
    out = []
    for k in range(field.ndim):
        bars = cc.persistence_intervals_in_dimension(k)
        out.append([int(np.count_nonzero((bars[:, 0] <= t) & (t < bars[:, 1])))
                    for t in levels])
    return out


CASES = [
    # (shape, chunks, neighbourhood, cavity): chunks smaller than the largest pore, odd
    # shapes, chunks whole along an axis, both neighbourhoods, 2D and 3D
    ((16, 17, 15), (6, 6, 6), None, ((8, 8, 7), 5)),
    ((13, 11, 17), (13, 4, 5), 6, ((6, 5, 8), 4)),
    ((41, 37), (9, 11), None, ((20, 18), 7)),
    ((33, 29), (33, 7), 4, ((16, 14), 6)),
]


@pytest.mark.parametrize("shape, chunks, neighbourhood, cavity", CASES)
def test_out_of_core_pores_equal_in_memory_pores(tmp_path, shape, chunks, neighbourhood,
                                                 cavity):
    mask = _with_cavity(_blobs(shape, seed=len(shape) + chunks[0]), *cavity)
    memory = analyse(mask, spacing=(2.0,) * len(shape), unit="um", neighbourhood=neighbourhood)
    chunked = analyse_chunked(mask, chunks=chunks, spacing=(2.0,) * len(shape), unit="um",
                              neighbourhood=neighbourhood, scratch=tmp_path, scheduler="sync")
    assert 2 * chunked.pores["body_radius"].max() > 2.0 * min(chunks)
    a, b = memory.summary, chunked.summary
    for key in ("porosity", "percolates", "critical_throat", "euler_characteristic",
                "connected_porosity"):
        assert a[key] == b[key], key
    assert b["connectivity_density"]["solid_pieces"] == a["connectivity_density"]["solid_pieces"]
    for axis, radius in a["percolation_radius"].items():
        assert b["percolation_radius"][axis] == (None if radius is None
                                                 else pytest.approx(radius, rel=1e-6))
    assert b["connectivity_density"]["value"] == a["connectivity_density"]["value"]
    for key, value in a["minkowski"].items():
        assert b["minkowski"][key] == (value if not isinstance(value, float)
                                       else pytest.approx(value, rel=1e-6)), key
    for key in ("pores", "pores_at_border", "isolated_pores", "grains", "grains_at_border",
                "voids"):
        assert a["counts"][key] == b["counts"][key], key
    _same_table(memory.pores, chunked.pores)
    _same_table(memory.grains, chunked.grains)
    _same_table(memory.voids, chunked.voids)
    if len(shape) == 2:
        _same_table(memory.loops, chunked.loops, any_order=True)
    # porosity is the pore voxel fraction (common practice, no source)
    assert b["porosity"] == pytest.approx(mask.mean(), abs=1e-12)
    # Euler characteristic of the pore phase with the matching neighbourhood: scikit-image
    # (Ohser, Nagel & Schladitz 2002)
    full = neighbourhood in (None, 26, 8)
    assert b["euler_characteristic"]["pore"] == euler_number(mask, len(shape) if full else 1)


def test_out_of_core_pores_with_a_region_of_interest_equal_in_memory(tmp_path):
    mask = _with_cavity(_blobs((14, 13, 12), seed=7), (7, 6, 6), 3)
    grid = np.indices(mask.shape)
    roi = ((grid[1] - 6) ** 2 + (grid[2] - 6) ** 2) <= 30          # a cylinder along z
    memory = analyse(mask, roi=roi)
    chunked = analyse_chunked(mask, roi=roi, chunks=(7, 7, 6), scratch=tmp_path,
                              scheduler="sync")
    for key in ("porosity", "percolates", "critical_throat", "euler_characteristic",
                "region_of_interest", "connected_porosity"):
        assert memory.summary[key] == chunked.summary[key], key
    assert chunked.summary["minkowski"]["surface_area_density"] == pytest.approx(
        memory.summary["minkowski"]["surface_area_density"], rel=1e-6)
    _same_table(memory.pores, chunked.pores)
    _same_table(memory.grains, chunked.grains)
    # the sample's porosity counts only the sample (common practice, no source)
    assert chunked.summary["porosity"] == pytest.approx(mask[roi].mean(), abs=1e-12)


# percolation rides on the pores' sweep: no sweep of its own
@pytest.mark.parametrize("with_roi, sweeps", [(False, 4), (True, 6)])
def test_border_flags_come_from_the_dual_sweeps_when_the_edge_is_the_scans_outer_layer(
        tmp_path, monkeypatch, with_roi, sweeps):
    """Without a region of interest the pores' border sweep is the grains' dual sweep (and
    back), so the run makes 4 union-find sweeps instead of 6; the border flags stay
    those of the in-memory run."""
    from voxtopo.engine import chunked as chunked_engine

    mask = _with_cavity(_blobs((14, 13, 12), seed=8), (7, 6, 6), 3)
    grid = np.indices(mask.shape)
    roi = (((grid[1] - 6) ** 2 + (grid[2] - 6) ** 2) <= 30) if with_roi else None
    run_sweeps = chunked_engine._run_sweeps
    made = []

    def counted(jobs, scheduler):
        made.extend(sweep for _, sweep in jobs)
        return run_sweeps(jobs, scheduler)

    monkeypatch.setattr(chunked_engine, "_run_sweeps", counted)
    chunked = analyse_chunked(mask, roi=roi, chunks=(7, 7, 6), scratch=tmp_path,
                              scheduler="sync")
    memory = analyse(mask, roi=roi)
    assert len(made) == sweeps
    assert chunked.summary["counts"]["pores_at_border"] == memory.summary["counts"][
        "pores_at_border"] > 0
    assert chunked.summary["counts"]["grains_at_border"] == memory.summary["counts"][
        "grains_at_border"]
    np.testing.assert_array_equal(chunked.pores["border"], memory.pores["border"])
    np.testing.assert_array_equal(chunked.grains["border"], memory.grains["border"])


@pytest.mark.parametrize("shape, chunks, spacing", [((14, 19, 12), (5, 7, 4), (1.0, 0.7, 1.3)),
                                                    ((27, 22), (8, 5), (0.6, 1.1))])
def test_chunked_edt_equals_scipy_on_random_masks_with_anisotropic_spacing(tmp_path, shape,
                                                                         chunks, spacing):
    """Reference: scipy.ndimage.distance_transform_edt with ``sampling=``."""
    rng = np.random.default_rng(5)
    codes = (rng.random(shape) < 0.15).astype(np.uint8)
    reports = []
    stores = squared_distances(codes, {"to_one": Feature((1,)), "to_zero": Feature((0,))},
                               spacing, tmp_path, chunks=chunks,
                               compute=compute_on("sync", "a test"),
                               progress=lambda *report: reports.append(report))
    assert reports == [("distance transform", k / len(shape)) for k in range(len(shape) + 1)]
    for name, feature in (("to_one", codes == 1), ("to_zero", codes == 0)):
        expected = ndimage.distance_transform_edt(~feature, sampling=spacing)
        got = np.sqrt(stores[name][...].astype(np.float64))
        np.testing.assert_allclose(got, expected, rtol=2e-7, atol=1e-6)


@pytest.mark.parametrize("shape, chunks, spacing", [((14, 19, 12), (5, 7, 4), (1.0, 0.7, 1.3)),
                                                    ((27, 22), (8, 5), (0.6, 1.1))])
def test_chunked_signed_distance_of_two_phases_equals_scipy(tmp_path, shape, chunks, spacing):
    """Reference: scipy.ndimage.distance_transform_edt with ``sampling=``, of each phase:
    -d in the pores, +d in the solid, d to the nearest voxel of the other phase."""
    rng = np.random.default_rng(7)
    pores = rng.random(shape) < 0.4
    codes = np.where(pores, 3, 2).astype(np.uint8)
    distance = zarr.create_array(str(tmp_path / "distance.zarr"), shape=shape, chunks=chunks,
                                 dtype=np.float32, fill_value=0)
    reports = []
    largest = signed_distance(codes, (3,), spacing, tmp_path / "edt", distance,
                              chunks=chunks, compute=compute_on("sync", "a test"),
                              progress=lambda *report: reports.append(report))
    # told at its start and after each pass (one pass an axis), so a long run's progress
    # names the stage it is in
    assert reports == [("distance transform", k / len(shape)) for k in range(len(shape) + 1)]
    expected = np.where(pores, -ndimage.distance_transform_edt(pores, sampling=spacing),
                        ndimage.distance_transform_edt(~pores, sampling=spacing))
    np.testing.assert_allclose(distance[...], expected, rtol=2e-7, atol=1e-6)
    assert largest == pytest.approx(np.abs(expected).max(), rel=1e-6)
    assert list((tmp_path / "edt").iterdir()) == []   # each pass's store goes once read


@pytest.mark.parametrize("neighbourhood", [26, 6])
def test_betti_curves_from_euler_characteristic_equal_the_diagrams_and_gudhi(tmp_path,
                                                                            neighbourhood):
    """b1 = b0 + b2 - chi (Euler-Poincare, Hatcher 2002) at every level, with b0 and b2
    from the chunked sweeps, equals the in-memory diagram's Betti curves and gudhi's."""
    mask = _blobs((13, 12, 12), seed=11, sigma=1.5)
    chunked = analyse_chunked(mask, chunks=(7, 6, 6), neighbourhood=neighbourhood,
                              scratch=tmp_path, scheduler="sync")
    field = np.where(mask, -ndimage.distance_transform_edt(mask),
                     ndimage.distance_transform_edt(~mask))
    # the chunked distances are float32, the in-memory ones float64: compare at the levels
    # of the grid that no distance value rounds across
    values = np.unique(field)
    levels = chunked.betti_curves["level"].to_numpy()
    gap = np.abs(levels[:, None] - values[None, :]).min(axis=1)
    curves = chunked.betti_curves[gap > 1e-5]
    levels = curves["level"].to_numpy()
    assert len(levels) > 200
    memory = analyse(mask, neighbourhood=neighbourhood).diagram.betti_curve(levels)
    reference = _gudhi_betti(field, levels, "voxel" if neighbourhood == 26 else "vertex")
    for k in range(3):
        np.testing.assert_array_equal(curves[f"betti_{k}"].to_numpy(),
                                      memory[f"betti_{k}"].to_numpy())
        np.testing.assert_array_equal(curves[f"betti_{k}"].to_numpy(), reference[k])
    assert curves["betti_1"].max() > 0       # the check sees loops, not only zeros


def _slabs_of_pieces(mask, chunks, full, queries=()):
    """Label ``mask`` chunk by chunk (label_chunk), one slab of chunks along the first axis
    at a time, as the out-of-core run asks for them."""
    from itertools import groupby

    from voxtopo.porosity._chunked_pieces import label_chunk
    from voxtopo.porosity._out_of_core import blocks

    phase = mask.astype(np.uint8)
    edge = np.zeros(mask.shape, bool)
    for _, slab in groupby(blocks(mask.shape, chunks), key=lambda box: box[0][0]):
        parts = []
        for lo, hi in slab:
            box = tuple(slice(a, b) for a, b in zip(lo, hi))
            local = np.zeros(mask.shape, bool)
            local[box] = True
            mine = [int(np.ravel_multi_index(tuple(np.asarray(q) - lo),
                                             tuple(np.subtract(hi, lo))))
                    for q in queries if local[tuple(q)]]
            parts.append(label_chunk(phase, edge, (1,), full, lo, hi, mine))
        yield parts


@pytest.mark.parametrize("shape, chunks, full", [
    ((19, 23, 21), (5, 7, 6), True), ((19, 23, 21), (19, 4, 9), False),
    ((31, 45), (4, 13), True), ((31, 45), (31, 6), False), ((9, 10, 11), (1, 3, 4), True)])
def test_chunked_pieces_joined_slab_by_slab_equal_scipy_labels(shape, chunks, full):
    """Reference: scipy.ndimage.label of the whole mask with the same neighbourhood
    (generate_binary_structure(ndim, ndim) for 26 / 8, (ndim, 1) for 6 / 4)."""
    from voxtopo.porosity._chunked_pieces import join

    mask = _blobs(shape, seed=len(shape) + sum(chunks), sigma=1.0, level=-0.25)
    structure = ndimage.generate_binary_structure(mask.ndim, mask.ndim if full else 1)
    labels, count = ndimage.label(mask, structure=structure)
    queries = [tuple(q) for q in np.argwhere(mask)[::7]]
    pieces = join(_slabs_of_pieces(mask, chunks, full, queries), shape, full)
    assert len(pieces.sizes) == count > 3
    np.testing.assert_array_equal(np.sort(pieces.sizes),
                                  np.sort(np.bincount(labels.ravel())[1:]))
    # the queries in chunk order, as the slabs report them
    from voxtopo.porosity._out_of_core import blocks
    ordered = []
    for lo, hi in blocks(shape, chunks):
        ordered += [q for q in queries
                    if all(a <= x < b for a, b, x in zip(lo, hi, q))]
    found = np.concatenate(pieces.piece_of_query)
    expected = np.array([labels[q] for q in ordered])
    # one piece per scipy label and back: the two labellings agree up to renaming
    assert len(set(zip(found, expected))) == len(set(found)) == len(set(expected))
    for a in range(mask.ndim):
        for side, index in ((0, 0), (1, -1)):
            touching = np.unique(np.take(labels, index, axis=a))
            touching = set(touching[touching > 0])
            piece_of = dict(zip(expected, found))
            flagged = {piece_of[t] for t in touching if t in piece_of}
            assert flagged <= set(np.flatnonzero(pieces.faces[:, a, side]))
            assert pieces.faces[:, a, side].sum() == len(touching)


def test_the_join_of_pieces_lets_go_of_a_slab_s_planes_two_slabs_later():
    """The driver's memory: the label planes of the slab before last are released before
    the next slab is even asked for (only two slabs of planes are held at once)."""
    import weakref

    from voxtopo.porosity._chunked_pieces import join

    mask = _blobs((24, 20, 20), seed=4, sigma=1.0)
    held = []

    def watched():
        for k, slab in enumerate(_slabs_of_pieces(mask, (4, 10, 10), True)):
            if k >= 2:
                assert all(r() is None for r in held[k - 2]), f"slab {k - 2} still held"
            held.append([weakref.ref(plane) for p in slab for plane in p.planes.values()])
            yield slab

    join(watched(), mask.shape, True)
    assert len(held) == 6
    assert all(r() is None for refs in held for r in refs)


@pytest.mark.parametrize("shape, chunks", [((13, 11, 17), (5, 4, 6)), ((12, 9, 10), (12, 2, 10)),
                                           ((21, 19), (6, 7)), ((17, 23), (17, 23))])
@pytest.mark.parametrize("construction, connectivity", [("voxel", None), ("vertex", 1)])
def test_euler_histograms_of_the_chunks_add_up_to_skimage_euler_numbers(shape, chunks,
                                                                       construction,
                                                                       connectivity):
    """Reference: skimage.measure.euler_number (Ohser, Nagel & Schladitz 2002) of the
    sublevel set at each level, 26 / 8 neighbourhood for the voxel construction and 6 / 4
    for the vertex one; the chunks' owned cells, each chunk read with a one-voxel halo,
    add up to it, and so do the binary phases' counts."""
    from voxtopo.porosity._local_counts import euler_histogram
    from voxtopo.porosity._out_of_core import blocks

    rng = np.random.default_rng(sum(shape))
    values = ndimage.gaussian_filter(rng.standard_normal(shape), 1.0)
    levels = np.quantile(values, np.linspace(0.05, 0.95, 9))
    curve = np.zeros(len(levels), np.int64)
    phase = np.zeros(2, np.int64)
    pore = values <= levels[4]
    for lo, hi in blocks(shape, chunks):
        first = [max(a - 1, 0) for a in lo]
        box = tuple(slice(f, min(b + 1, n)) for f, b, n in zip(first, hi, shape))
        curve += euler_histogram(values[box], first, lo, hi, shape, construction, levels)
        for k, inside in enumerate((pore, ~pore)):
            phase[k] += euler_histogram(np.where(inside[box], 0.0, 1.0), first, lo, hi,
                                        shape, construction, np.zeros(1))[0]
    connectivity = connectivity or len(shape)
    expected = [euler_number(values <= t, connectivity=connectivity) for t in levels]
    np.testing.assert_array_equal(np.cumsum(curve), expected)
    assert len(set(expected)) > 2
    assert phase.tolist() == [euler_number(pore, connectivity=connectivity),
                              euler_number(~pore, connectivity=connectivity)]


def test_in_memory_refusal_names_the_out_of_core_path(monkeypatch):
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", "2e6")
    with pytest.raises(TooBigError, match="--out-of-core"):
        analyse(_blobs((48, 48, 48), seed=1))


def test_a_worker_that_dies_gives_one_sentence_and_writes_nothing(tmp_path):
    from voxtopo.batch.cluster import local_cluster

    mask = _blobs((12, 12), seed=2)

    class DiesOnWorker:
        """The scan as an array whose reading kills any dask worker that reads it."""

        shape, dtype, chunks = mask.shape, mask.dtype, (6, 6)

        def __getitem__(self, index):
            from distributed import get_worker
            try:
                get_worker()
            except ValueError:
                return mask[index]
            os._exit(1)

    client, cluster = local_cluster(1, 2 * 2**30, tmp_path / "dask", dashboard=False,
                                    config={"distributed.scheduler.allowed-failures": 0})
    try:
        with client, pytest.raises(
                TooBigError, match="A worker of the out-of-core run died") as err:
            pores_job.pores_out_of_core(DiesOnWorker(), tmp_path / "out",
                                        pores_job.PoresOptions(out_of_core=True),
                                        scratch=tmp_path / "scratch", scheduler=client)
    finally:
        cluster.close()
    assert str(err.value).count(". ") == 0 and "\n" not in str(err.value)
    assert not (tmp_path / "out").exists()
    assert list((tmp_path / "scratch").iterdir()) == []
    assert not any(p.name.startswith(".out.") for p in tmp_path.iterdir())


@pytest.mark.parametrize("extra, words", [
    (["--out-of-core", "--engine", "gudhi"], "--engine gudhi picks an in-memory engine"),
    (["--chunks", "4,4"], "--chunks sets the block shape"),
    (["--scheduler", "tcp://127.0.0.1:1"], "--scheduler is for the out-of-core path"),
])
def test_options_the_out_of_core_path_would_ignore_are_one_sentence_exit_2(tmp_path, capsys,
                                                                          extra, words):
    from voxtopo.cli import main

    path = tmp_path / "scan.npy"
    np.save(path, _blobs((10, 12), seed=3).astype(np.uint8))
    assert main(["pores", str(path), "--out", str(tmp_path / "out"), *extra]) == 2
    err = capsys.readouterr().err
    assert words in err and "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "out").exists()


def test_cli_out_of_core_rewrites_a_tiff_and_runs_on_the_cluster(tmp_path, capsys,
                                                                   cluster_address):
    from voxtopo.cli import main

    mask = _with_cavity(_blobs((24, 22), seed=4), (12, 11), 5)
    path = tmp_path / "mask.tif"
    tifffile.imwrite(path, mask.astype(np.uint8))
    out = tmp_path / "result"
    assert main(["pores", str(path), "--out", str(out), "--out-of-core", "--chunks", "12,11",
                 "--scheduler", cluster_address, "--spacing", "1.5", "--unit", "um"]) == 0
    said = capsys.readouterr().out
    assert "Computed out of core in 12x11 chunks" in said
    summary = json.loads((out / "summary.json").read_text())
    memory = analyse(mask, spacing=(1.5, 1.5), unit="um")
    assert summary["porosity"] == memory.summary["porosity"]
    assert summary["counts"]["pores"] == memory.summary["counts"]["pores"]
    curves = pd.read_csv(out / "betti_curves.csv")
    reference = memory.diagram.betti_curve(curves["level"])
    np.testing.assert_array_equal(curves["betti_1"], reference["betti_1"])
    assert "Euler-Poincare" in summary["out_of_core"]["betti_curves"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["mask.tif", "result"]


def test_cli_out_of_core_without_a_scheduler_starts_its_own_workers(tmp_path):
    # No --scheduler: the run starts a local cluster of its own (as a batch does) and
    # closes it. Porosity is the pore voxels' share of the scan (common practice, no
    # source), counted here with numpy.
    import subprocess
    import sys

    mask = _blobs((14, 13, 12), seed=3)
    np.save(tmp_path / "mask.npy", mask.astype(np.uint8))
    out = tmp_path / "result"
    run = subprocess.run([sys.executable, "-m", "voxtopo.cli", "pores", str(tmp_path / "mask.npy"),
                          "--out", str(out), "--out-of-core", "--chunks", "7,7,6"],
                         capture_output=True, text=True, timeout=600)
    assert run.returncode == 0, run.stderr[-2000:]
    assert "Traceback" not in run.stderr
    summary = json.loads((out / "summary.json").read_text())
    assert summary["porosity"] == pytest.approx(np.count_nonzero(mask) / mask.size, abs=1e-12)
    assert summary["counts"]["pores"] == analyse(mask).summary["counts"]["pores"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["mask.npy", "result"]


def test_out_of_core_reads_an_ome_zarr_store_with_its_voxel_size(tmp_path):
    mask = _blobs((10, 12, 11), seed=9)
    root = zarr.open_group(str(tmp_path / "scan.ome.zarr"), mode="w")
    data = root.create_array("0", shape=mask.shape, chunks=(5, 6, 11), dtype=np.uint8)
    data[...] = mask
    root.attrs["multiscales"] = [{
        "version": "0.4",
        "axes": [{"name": a, "type": "space", "unit": "micrometer"} for a in "zyx"],
        "datasets": [{"path": "0", "coordinateTransformations":
                      [{"type": "scale", "scale": [2.0, 1.0, 1.0]}]}]}]
    result = pores_job.pores_out_of_core(tmp_path / "scan.ome.zarr", tmp_path / "out",
                                         scheduler="sync")
    memory = analyse(mask, spacing=(2.0, 1.0, 1.0), unit="um")
    assert result.analysis.summary["spacing"] == [2.0, 1.0, 1.0]
    assert result.analysis.summary["unit"] == "um"
    _same_table(memory.pores, result.analysis.pores)


def test_batch_settings_send_pores_out_of_core_onto_the_cluster(tmp_path, cluster_address):
    import io

    from voxtopo import batch

    mask = _with_cavity(_blobs((12, 12, 10), seed=12), (6, 6, 5), 3)
    store = zarr.create_array(str(tmp_path / "foam.zarr"), shape=mask.shape, chunks=(6, 6, 5),
                              dtype=np.uint8)
    store[...] = mask
    settings = tmp_path / "settings.toml"
    settings.write_text('job = "pores"\n[pores]\nout_of_core = true\nchunks = [6, 6, 10]\n')
    (tmp_path / "m.csv").write_text("path\nfoam.zarr\n")
    batch.run_batch(str(tmp_path / "m.csv"), tmp_path / "out", settings_path=settings,
                    scheduler=cluster_address, stream=io.StringIO())
    folder = tmp_path / "out" / "scans" / "foam"
    summary = json.loads((folder / "summary.json").read_text())
    assert summary["out_of_core"]["chunks"] == [6, 6, 10]
    # pores.csv holds 6 significant digits
    _same_table(analyse(mask).pores, pd.read_csv(folder / "pores.csv"), rtol=1e-5)
    assert not [p for p in (tmp_path / "out" / "scans").iterdir() if "scratch" in p.name]


def _gray(shape, seed, dtype=np.uint16):
    """A gray scan of a two-phase structure: dark pores near 12000, bright solid near
    40000, with noise so that the histogram has thousands of distinct values."""
    rng = np.random.default_rng(seed)
    mean = np.where(_blobs(shape, seed), 12000.0, 40000.0)
    gray = np.clip(mean + rng.normal(0.0, 6000.0, shape), 0, 65535)
    return gray.astype(dtype)


@pytest.mark.parametrize("chunks", [(6, 6, 6), (16, 4, 5), (5, 17, 3)])
def test_out_of_core_otsu_threshold_equals_scikit_image_on_the_whole_uint16_scan(tmp_path,
                                                                                  chunks):
    gray = _gray((16, 17, 15), seed=11)
    chunked = analyse_chunked(gray, threshold="otsu", chunks=chunks, scratch=tmp_path,
                              scheduler="sync")
    # outside source: scikit-image threshold_otsu (Otsu 1979) on the whole array
    assert chunked.summary["threshold"] == float(threshold_otsu(gray))
    assert chunked.summary["segmentation"]["method"] == "otsu"
    memory = analyse(gray, threshold="otsu")
    assert chunked.summary["segmentation"] == memory.summary["segmentation"]
    for key in ("porosity", "euler_characteristic", "connected_porosity"):
        assert chunked.summary[key] == memory.summary[key], key
    for key in ("pores", "pores_at_border", "isolated_pores", "grains", "grains_at_border",
                "voids"):
        assert chunked.summary["counts"][key] == memory.summary["counts"][key], key
    # porosity is the fraction of voxels at or below the threshold (common practice, no
    # source)
    assert chunked.summary["porosity"] == pytest.approx(
        np.mean(gray <= threshold_otsu(gray)), abs=1e-12)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_out_of_core_otsu_threshold_of_a_float_scan_equals_scikit_image(tmp_path, dtype):
    gray = _gray((15, 14, 13), seed=5, dtype=dtype) / dtype(65535.0)
    gray = gray.astype(dtype)
    chunked = analyse_chunked(gray, threshold="otsu", chunks=(4, 7, 5), scratch=tmp_path,
                              scheduler="sync")
    # outside source: scikit-image threshold_otsu (Otsu 1979), 256 bins over [min, max]
    assert chunked.summary["threshold"] == float(threshold_otsu(gray))
    assert chunked.summary["porosity"] == analyse(gray, threshold="otsu").summary["porosity"]


def test_out_of_core_otsu_counts_only_the_region_of_interest(tmp_path):
    gray = _gray((14, 13, 12), seed=8)
    grid = np.indices(gray.shape)
    roi = ((grid[1] - 6) ** 2 + (grid[2] - 6) ** 2) <= 30          # a cylinder along z
    gray[~roi] = 65535                                              # bright mounting around it
    chunked = analyse_chunked(gray, threshold="otsu", roi=roi, chunks=(7, 5, 6),
                              scratch=tmp_path, scheduler="sync")
    # outside source: scikit-image threshold_otsu (Otsu 1979) of the sample's voxels alone
    assert chunked.summary["threshold"] == float(threshold_otsu(gray[roi]))
    assert chunked.summary["threshold"] != float(threshold_otsu(gray))
    memory = analyse(gray, threshold="otsu", roi=roi)
    assert chunked.summary["segmentation"] == memory.summary["segmentation"]
    assert chunked.summary["porosity"] == memory.summary["porosity"]


def test_out_of_core_otsu_of_a_constant_scan_is_one_sentence(tmp_path):
    gray = np.full((8, 9, 7), 1234, np.uint16)
    with pytest.raises(InputError, match="is constant") as err:
        analyse_chunked(gray, threshold="otsu", chunks=(4, 4, 4), scratch=tmp_path,
                        scheduler="sync")
    assert "\n" not in str(err.value) and str(err.value).count(". ") == 0


def test_cli_out_of_core_otsu_summary_equals_the_in_memory_run(tmp_path, cluster_address):
    from voxtopo.cli import main

    gray = _gray((18, 16, 14), seed=21)
    path = tmp_path / "gray.npy"
    np.save(path, gray)
    common = ["--threshold", "otsu", "--spacing", "2", "--unit", "um"]
    assert main(["pores", str(path), "--out", str(tmp_path / "memory"), *common]) == 0
    assert main(["pores", str(path), "--out", str(tmp_path / "chunked"), *common,
                 "--out-of-core", "--chunks", "7,9,5", "--scheduler", cluster_address]) == 0
    memory, chunked = (json.loads((tmp_path / name / "summary.json").read_text())
                       for name in ("memory", "chunked"))
    # outside source: scikit-image threshold_otsu (Otsu 1979) on the whole array
    assert chunked["threshold"] == memory["threshold"] == float(threshold_otsu(gray))
    assert chunked["segmentation"] == memory["segmentation"]
    assert chunked["threshold_method"] == "otsu"
    assert chunked["porosity"] == memory["porosity"]
    for key in ("pores", "pores_at_border", "isolated_pores", "grains", "grains_at_border",
                "voids"):
        assert chunked["counts"][key] == memory["counts"][key], key
