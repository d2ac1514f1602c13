"""The out-of-core dimension-0 (and d-1) diagram equals the in-memory one."""

import json

import numpy as np
import pandas as pd
import pytest
import zarr
from reference import gudhi_intervals
from scipy import ndimage

from voxtopo.engine import _chunk_merge
from voxtopo.engine.chunked import chunked_persistence, chunked_persistence_and_crossings
from voxtopo.errors import InputError
from voxtopo.io import open_chunked


def _gudhi_intervals(image, dim, superlevel, construction):
    """Reference: gudhi (Maria, Boissonnat, Glisse & Yvinec 2014, "The Gudhi Library:
    Simplicial Complexes and Persistent Homology", ICMS), CubicalComplex with the matching
    construction; superlevel as the sublevel filtration of the negated values."""
    intervals = gudhi_intervals(image, dim, construction=construction, superlevel=superlevel)
    return sorted(map(tuple, np.round(intervals, 9)))


def _ours(diagram, dim):
    return sorted(map(tuple, np.round(diagram.intervals(dim), 9)))


def _assert_locations_hold_values(diagram, image):
    p = diagram.pairs
    axes = "zyx"[3 - image.ndim:]
    births = image[tuple(p[f"birth_voxel_{a}"].to_numpy(dtype=np.int64) for a in axes)]
    np.testing.assert_array_equal(births, p["birth"].to_numpy())
    finite = np.isfinite(p["death"].to_numpy())
    deaths = image[tuple(p.loc[finite, f"death_voxel_{a}"].to_numpy(dtype=np.int64) for a in axes)]
    np.testing.assert_array_equal(deaths, p.loc[finite, "death"].to_numpy())


def _store(tmp_path, image, chunks, name="scan.zarr"):
    path = tmp_path / name
    array = zarr.create_array(str(path), shape=image.shape, chunks=chunks, dtype=image.dtype)
    array[...] = image
    return path


def _rings(shape=(40, 40)):
    """Three separate annuli spread over many chunks, in a gently sloping background."""
    yy, xx = np.indices(shape)
    image = 0.01 * xx
    for (cy, cx, r) in [(14, 14, 8), (29, 29, 6), (7, 32, 4)]:
        dist = np.hypot(yy - cy, xx - cx)
        image = image + 3.0 * (np.abs(dist - r) < 1.2)
    return image


def _shells(shape=(24, 24, 24)):
    """Two spherical shells (one cavity each) across chunk borders, plus noise."""
    zz, yy, xx = np.indices(shape)
    rng = np.random.default_rng(3)
    image = 0.2 * rng.random(shape)
    for (c, r) in [((12, 12, 12), 7), ((6, 18, 6), 3)]:
        dist = np.sqrt(sum((g - ci) ** 2 for g, ci in zip((zz, yy, xx), c)))
        image = image + 2.0 * (np.abs(dist - r) < 1.0)
    return image


def _texture(shape, sigma, seed, decimals=1):
    rng = np.random.default_rng(seed)
    # Rounding creates many ties of value, which exercise the tie rule across chunks.
    return np.round(ndimage.gaussian_filter(rng.standard_normal(shape), sigma), decimals)


@pytest.mark.parametrize("chunks", [(8, 8), (16, 5), (40, 3), (13, 40)])
@pytest.mark.parametrize("superlevel", [False, True])
def test_rings_crossing_chunks_match_gudhi(tmp_path, chunks, superlevel):
    image = _rings()
    path = _store(tmp_path, image, chunks)
    diagram = chunked_persistence(open_chunked(path), superlevel=superlevel, scheduler="sync")
    assert diagram.shape == image.shape
    for dim in (0, 1):
        assert _ours(diagram, dim) == _gudhi_intervals(image, dim, superlevel, "voxel")
    _assert_locations_hold_values(diagram, image)
    if superlevel:
        # Hatcher 2002, "Algebraic Topology": an annulus has Betti numbers (1, 1); the three
        # separate bright rings are three components and three loops at a level between
        # background and ring.
        assert diagram.betti(2.0) == [3, 3]


@pytest.mark.parametrize("chunks", [(8, 8, 8), (5, 24, 7), (24, 24, 3), (10, 9, 11)])
def test_shells_crossing_chunks_match_gudhi(tmp_path, chunks):
    image = _shells()
    path = _store(tmp_path, image, chunks)
    diagram = chunked_persistence(open_chunked(path), superlevel=True, scheduler="sync")
    for dim in (0, 2):
        assert _ours(diagram, dim) == _gudhi_intervals(image, dim, True, "voxel")
    assert diagram.dimension(1).pairs.empty
    assert any("dimension 1 not computed" in note for note in diagram.notes)
    _assert_locations_hold_values(diagram, image)
    # A spherical shell has one cavity (Betti numbers (1, 0, 1), Hatcher 2002).
    assert diagram.betti(2.0)[2] == 2


@pytest.mark.parametrize("shape,chunks", [((31, 27), (6, 7)), ((12, 13, 14), (5, 4, 6)),
                                          ((9, 8, 10), (2, 3, 2))])
@pytest.mark.parametrize("neighbourhood", ["voxel", "vertex"])
@pytest.mark.parametrize("superlevel", [False, True])
def test_tied_textures_match_gudhi_in_both_constructions(shape, chunks, neighbourhood,
                                                          superlevel):
    image = _texture(shape, 1.0, seed=sum(shape))
    ndim = len(shape)
    number = {"voxel": 8 if ndim == 2 else 26, "vertex": 4 if ndim == 2 else 6}[neighbourhood]
    diagram = chunked_persistence(image, superlevel=superlevel, neighbourhood=number,
                                  chunks=chunks, scheduler="sync")
    for dim in (0, ndim - 1):
        assert _ours(diagram, dim) == _gudhi_intervals(image, dim, superlevel, neighbourhood)
    _assert_locations_hold_values(diagram, image)


@pytest.mark.parametrize("shape,chunks", [((33, 29), (6, 7)), ((14, 13, 15), (5, 4, 6))])
@pytest.mark.parametrize("superlevel", [False, True])
def test_faces_cut_into_many_strips_give_gudhi_s_pairs(monkeypatch, shape, chunks,
                                                       superlevel):
    # a merge keeps, of each strip of a face's rows, only a spanning forest of the edges
    # across it; with strips of a few edges (many strips per face, ties of value on a
    # coarse texture) the pairs and their places must still be gudhi's
    from voxtopo.engine import chunked

    monkeypatch.setattr(chunked, "CROSS_STRIP_EDGES", 23)
    image = _texture(shape, 1.0, seed=7 + sum(shape))
    ndim = len(shape)
    diagram = chunked_persistence(image, superlevel=superlevel, chunks=chunks,
                                  scheduler="sync")
    for dim in (0, ndim - 1):
        assert _ours(diagram, dim) == _gudhi_intervals(image, dim, superlevel, "voxel")
    _assert_locations_hold_values(diagram, image)
    whole = chunked_persistence(image, superlevel=superlevel, chunks=shape,
                                scheduler="sync")
    pd.testing.assert_frame_equal(diagram.pairs.sort_values(list(diagram.pairs.columns))
                                  .reset_index(drop=True),
                                  whole.pairs.sort_values(list(whole.pairs.columns))
                                  .reset_index(drop=True))


def _first_crossing_by_labels(image, axis, corners):
    """Reference: scipy.ndimage.label. Voxels enter one at a time in (value, C-order
    index) order; the answer is the first voxel after whose entry one labelled component
    holds voxels of both end slices along ``axis``."""
    structure = ndimage.generate_binary_structure(image.ndim, image.ndim if corners else 1)
    order = np.lexsort((np.arange(image.size), image.ravel()))
    entered = np.zeros(image.size, bool)
    for v in order:
        entered[v] = True
        labels, _ = ndimage.label(entered.reshape(image.shape), structure=structure)
        first = np.take(labels, 0, axis=axis)
        last = np.take(labels, -1, axis=axis)
        if np.intersect1d(first[first > 0], last[last > 0]).size:
            return np.unravel_index(v, image.shape), image.ravel()[v]
    raise AssertionError("the faces never joined")


@pytest.mark.parametrize("shape, chunks", [((9, 11), (4, 3)), ((9, 11), (9, 11)),
                                           ((6, 7, 5), (3, 2, 4)), ((6, 7, 5), (6, 4, 2))])
@pytest.mark.parametrize("corners", [True, False])
def test_faces_followed_through_chunks_join_where_scipy_labels_join_them(shape, chunks,
                                                                         corners):
    # coarse values: many ties, so the tie rule decides the voxel
    image = _texture(shape, 1.0, seed=sum(shape) + corners, decimals=1)
    neighbourhood = {(2, True): 8, (2, False): 4, (3, True): 26, (3, False): 6}[
        len(shape), corners]
    axes = tuple(range(len(shape)))
    diagram, _, crossings = chunked_persistence_and_crossings(
        image, crossing_axes=axes, neighbourhood=neighbourhood, chunks=chunks,
        scheduler="sync")
    for axis in axes:
        voxel, value = _first_crossing_by_labels(image, axis, corners)
        assert crossings[axis] == (tuple(int(i) for i in voxel), float(value))
    # following the faces changes nothing of the diagram
    plain = chunked_persistence(image, neighbourhood=neighbourhood, chunks=chunks,
                                scheduler="sync")
    pd.testing.assert_frame_equal(diagram.pairs, plain.pairs)


def test_dimension_zero_counts_components_like_scipy_label():
    # scipy.ndimage.label with generate_binary_structure(3, 3) counts the components of each
    # sublevel set (Betti 0, 26-neighbourhood), read off the chunked diagram at that level.
    image = _texture((14, 15, 16), 1.5, seed=8, decimals=2)
    diagram = chunked_persistence(image, chunks=(4, 5, 6), dual=False, scheduler="threads")
    structure = ndimage.generate_binary_structure(3, 3)
    for level in np.quantile(image, [0.05, 0.2, 0.5, 0.8]):
        assert diagram.betti(level)[0] == ndimage.label(image <= level, structure)[1]


@pytest.mark.parametrize("ascending", [True, False])
def test_sorted_runs_are_merged_into_numpy_s_sweep_order(ascending):
    # Reference: numpy.lexsort (a stable sort by value, then by id), reversed for a
    # descending sweep, of all the edges at once; few distinct values and ids, so that
    # many keys tie within a run and across runs.
    rng = np.random.default_rng(5)
    for sizes in [(0, 7, 3), (12, 0, 0), (40, 33, 9), (1, 1, 1)]:
        runs = []
        for size in sizes:
            values = rng.integers(0, 4, size).astype(np.float64)
            ids = rng.integers(0, 6, size).astype(np.int64)
            order = np.lexsort((ids, values))
            runs.append((values, ids) if size == 0 else
                        (values[order], ids[order]) if ascending else
                        (values[order[::-1]], ids[order[::-1]]))
        values = np.concatenate([r[0] for r in runs])
        ids = np.concatenate([r[1] for r in runs])
        bounds = np.cumsum([0, *sizes]).astype(np.int64)
        merged = _chunk_merge.merged_runs(values, ids, bounds, ascending)
        expected = np.lexsort((ids, values))
        if not ascending:
            expected = expected[::-1]
        assert np.array_equal(values[merged], values[expected])
        assert np.array_equal(ids[merged], ids[expected])
        assert np.array_equal(np.sort(merged), np.arange(values.size))
    # a run out of sweep order is told: the caller then sorts everything
    values = np.array([2.0, 1.0, 3.0]) if ascending else np.array([1.0, 2.0, 0.0])
    assert _chunk_merge.merged_runs(values, np.zeros(3, np.int64),
                                    np.array([0, 2, 3], np.int64), ascending).size == 0


def test_uint8_store_with_one_chunk_equals_many_chunks(tmp_path):
    image = (_texture((30, 30), 2.0, seed=4) * 40 + 128).clip(0, 255).astype(np.uint8)
    one = chunked_persistence(open_chunked(_store(tmp_path, image, (30, 30), "one.zarr")),
                              scheduler="sync")
    many = chunked_persistence(open_chunked(_store(tmp_path, image, (4, 9), "many.zarr")),
                               scheduler="sync")
    assert _ours(one, 0) == _ours(many, 0) == _gudhi_intervals(image, 0, False, "voxel")
    # gudhi (Maria et al. 2014) reference for dimension 1 as well
    assert _ours(many, 1) == _gudhi_intervals(image, 1, False, "voxel")


def test_ome_zarr_spacing_and_channel_are_read(tmp_path):
    image = _rings((24, 24))
    root = zarr.open_group(str(tmp_path / "film.ome.zarr"), mode="w")
    data = root.create_array("0", shape=(2, 24, 24), chunks=(1, 8, 8), dtype="f8")
    data[0] = image
    data[1] = -image
    root.attrs["multiscales"] = [{
        "version": "0.4",
        "axes": [{"name": "c", "type": "channel"},
                 {"name": "y", "type": "space", "unit": "micrometer"},
                 {"name": "x", "type": "space", "unit": "micrometer"}],
        "datasets": [{"path": "0", "coordinateTransformations":
                      [{"type": "scale", "scale": [1.0, 0.5, 0.25]}]}]}]
    path = tmp_path / "film.ome.zarr"
    with pytest.raises(InputError, match="2 channels"):
        open_chunked(path)
    source = open_chunked(path, channel=1)
    assert source.shape == (24, 24) and source.spacing == (0.5, 0.25) and source.unit == "um"
    diagram = chunked_persistence(source, scheduler="sync")
    assert _ours(diagram, 0) == _gudhi_intervals(-image, 0, False, "voxel")
    assert diagram.spacing == (0.5, 0.25)


def test_graph_kernel_matches_its_plain_twin():
    # the plain twin (reduce_graph_reference) is the reference: the kernel's records and
    # crossings must be the twin's, with faces followed or not
    rng = np.random.default_rng(11)
    m = 12
    values = np.round(rng.random(m), 1)
    ids = np.arange(m) * 3
    flags = (rng.random(m) < 0.3).astype(np.uint8)
    # most vertices start on no face, a few on one; every face gain brings one or two
    start_faces = np.where(rng.random(m) < 0.25, 1 << rng.integers(0, 6, m), 0).astype(np.uint8)
    edges = []
    for _ in range(30):
        a, b = rng.integers(0, m, 2)
        level = max(values[a], values[b]) + round(rng.random() * 0.3, 1)
        edges.append((int(a), int(b), level, int(rng.integers(0, 40))))
    for _ in range(14):
        a = int(rng.integers(0, m))
        bits = int(np.bitwise_or.reduce(1 << rng.integers(0, 6, rng.integers(1, 3))))
        edges.append((a, -1 - bits, values[a] + round(rng.random() * 0.3, 1),
                      int(rng.integers(0, 40))))
    edge_a = np.array([e[0] for e in edges])
    edge_b = np.array([e[1] for e in edges])
    levels = np.array([e[2] for e in edges])
    voxel = np.array([e[3] for e in edges])
    capacity = m + 6 * (m + len(edges))
    seen_gains = seen_crossings = 0
    # all faces; the first two axes; the last axis and one face of the middle one
    for wanted in (0, 0b111111, 0b001111, 0b110100):
        for ascending in (True, False):
            for outside in (-1, 0):
                expected, expected_crossing = _chunk_merge.reduce_graph_reference(
                    values, ids, flags, outside, edges, ascending, wanted, start_faces)
                order = np.lexsort((voxel, levels))
                order = order if ascending else order[::-1].copy()
                out = [np.empty(capacity, np.uint8)] + [np.empty(capacity, np.int64)
                                                        for _ in range(3)]
                faces, told = start_faces.copy(), np.zeros(m, np.uint8)
                crossing = np.full(3, -1)
                written = _chunk_merge.reduce_graph(values, ids, flags, outside, edge_a,
                                                    edge_b, levels, order, ascending,
                                                    np.empty(m, np.int64), np.empty(m, np.uint8),
                                                    *out, wanted, faces, told, crossing)
                got = list(zip(*(o[:written].tolist() for o in out)))
                assert got == expected
                assert crossing.tolist() == expected_crossing
                gains = sum(r[0] == _chunk_merge.FACE_GAIN for r in got)
                if not wanted:
                    assert gains == 0 and expected_crossing == [-1, -1, -1]
                seen_gains += gains
                seen_crossings += sum(c >= 0 for c in expected_crossing)
    # the faces were really followed: gains handed on and axes crossed
    assert seen_gains > 0 and seen_crossings > 0


def test_bad_inputs_are_refused_in_one_sentence(tmp_path):
    with pytest.raises(InputError, match="No zarr store"):
        open_chunked(tmp_path / "missing.zarr")
    with pytest.raises(InputError, match="open a store with voxtopo.io.open_chunked"):
        chunked_persistence(str(tmp_path / "missing.zarr"))
    (tmp_path / "plain.txt").write_text("not a store")
    with pytest.raises(InputError, match="not a zarr store"):
        open_chunked(tmp_path / "plain.txt")
    with pytest.raises(InputError, match="2D image or 3D volume"):
        chunked_persistence(np.zeros((2, 3, 4, 5)), chunks=(1, 2, 2, 2))
    with pytest.raises(InputError, match="Chunks should be"):
        chunked_persistence(np.zeros((4, 4)), chunks=(0, 2))
    with pytest.raises(InputError, match="integers or floats"):
        chunked_persistence(np.zeros((4, 4), dtype=complex), chunks=(2, 2))
    broken = tmp_path / "broken.zarr"
    broken.mkdir()
    (broken / "zarr.json").write_text("{ not json")
    with pytest.raises(InputError, match="not a readable zarr store"):
        open_chunked(broken)
    path = _store(tmp_path, np.arange(16.0).reshape(4, 4), (2, 2), "corrupt.zarr")
    chunk_files = sorted(p for p in (path / "c").rglob("*") if p.is_file())
    chunk_files[-1].write_bytes(b"\x00garbage")
    with pytest.raises(InputError, match="could not be read"):
        chunked_persistence(open_chunked(path), scheduler="sync")


def test_cli_analyse_out_of_core_writes_a_result_folder(tmp_path, capsys):
    import pandas as pd

    from voxtopo import cli

    image = _shells()
    path = _store(tmp_path, image, (8, 8, 8))
    out = tmp_path / "shells"
    assert cli.main(["analyse", str(path), "--out", str(out), "--out-of-core", "--superlevel",
                     "--chunks", "5,12,24", "--spacing", "2.5", "--unit", "um"]) == 0
    pairs = pd.read_csv(out / "pairs.csv")
    for dim in (0, 2):
        rows = pairs[pairs["dim"] == dim][["birth", "death"]].to_numpy()
        assert sorted(map(tuple, np.round(rows, 9))) == _gudhi_intervals(image, dim, True,
                                                                         "voxel")
    summary = json.loads((out / "summary.json").read_text())
    assert summary["scan"]["spacing"] == [2.5, 2.5, 2.5]
    page = (out / "report.html").read_text()
    assert "<td>loops (dimension 1)</td><td>not computed</td>" in page
    capsys.readouterr()
    refused = tmp_path / "smoothed"
    assert cli.main(["analyse", str(path), "--out", str(refused), "--out-of-core",
                     "--smooth", "1.0"]) == 2
    err = capsys.readouterr().err
    assert "cannot apply sigma" in err and err.count("\n") == 1
    assert not refused.exists()


class _WorkersWithLimits:
    """A distributed scheduler as the memory check sees one: workers with memory limits."""

    def __init__(self, *limits):
        self.limits = limits

    def scheduler_info(self):
        return {"workers": {f"tcp://127.0.0.1:{9000 + k}": {"memory_limit": limit}
                            for k, limit in enumerate(self.limits)}}


def test_an_out_of_core_run_plans_its_largest_task_and_refuses_small_workers():
    # The largest task of a chunked sweep is a chunk or, near the top of the merge tree,
    # a merge holding whole cross-sections of the scan (chunked.planned_merges); a worker
    # whose limit cannot hold it beside its own baseline is refused before any chunk is
    # read, in one sentence that says what each worker needs.
    from voxtopo.engine import chunked
    from voxtopo.engine.chunked import (BYTES_PER_CHUNK_VOXEL, WORKER_BASELINE_BYTES,
                                        _largest_task, planned_merge_bytes)
    from voxtopo.errors import TooBigError

    big, merge = _largest_task((2048,) * 3, (128,) * 3), planned_merge_bytes((2048,) * 3,
                                                                           (128,) * 3)
    assert big[0] == merge and big[2] and merge > 128 ** 3 * BYTES_PER_CHUNK_VOXEL
    one_chunk = _largest_task((64, 64, 64), (64, 64, 64))
    assert one_chunk[0] == 64 ** 3 * BYTES_PER_CHUNK_VOXEL and not one_chunk[2]

    volume = np.random.default_rng(5).integers(0, 9, (24, 24, 24)).astype(np.uint8)
    need = WORKER_BASELINE_BYTES + _largest_task(volume.shape, (8, 8, 8))[0]
    small = _WorkersWithLimits(int(need / 0.8) - 1_000_000, 8e9)
    with pytest.raises(TooBigError) as refused:
        chunked.chunked_persistence(volume, chunks=(8, 8, 8), scheduler=small)
    message = str(refused.value)
    assert "per worker" in message and "memory limit" in message
    assert "\n" not in message and message.endswith(".")
    from voxtopo.memory import human
    assert human(need) in message and human(need / 0.8) in message
    chunked._check_workers(chunked._Grid(volume, (8, 8, 8), "v"),
                           _WorkersWithLimits(int(need / 0.8) + 1_000_000))   # fits
