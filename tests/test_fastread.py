"""Direct chunk reads with threaded decompression (compquant.run.fastread) against h5py's own read.

Reference outside the project: h5py reading the same dataset through the HDF5 filter
pipeline (``Dataset.__getitem__``) must give the same bytes.
"""

from __future__ import annotations

import os

import h5py
import numpy as np
import pytest

from compquant.errors import RunFormatError
from compquant.run import Run, write_run
from compquant.run.fastread import _chunk_places, _layout, iter_raw, read_range

NPX = 300


def _write(path, dtype, compression, n=4000):
    rng = np.random.default_rng(1)
    spectra = rng.integers(0, 60000, (n, NPX)).astype(dtype)
    samples = [{"sample_id": "A", "role": "unknown", "standard_ref": "", "description": ""}]
    return write_run(path, np.linspace(300, 400, NPX), spectra, samples, np.zeros(n, int), compression=compression)


@pytest.mark.parametrize(
    ("dtype", "compression"),
    [("uint16", "gzip"), ("float32", "gzip"), ("int32", None), ("uint16", None), ("float64", "gzip")],
)
def test_direct_read_equals_h5py(tmp_path, dtype, compression):
    p = _write(tmp_path / "r.h5", dtype, compression)
    bounds = [(0, 1), (1, 2700), (2700, 2701), (2701, 4000)]  # not aligned to the HDF5 chunks
    with Run.open(p) as run:
        assert _layout(run) is not None and run.chunk_rows < 2000
        got = list(iter_raw(run, bounds, threads=2))
        with h5py.File(p, "r") as f:
            ref = f["spectra"][()]
    assert [(a, b) for a, b, _ in got] == bounds
    for a, b, raw in got:
        assert raw.dtype == ref.dtype and np.array_equal(raw, ref[a:b])


def test_plain_path_for_other_readers(tmp_path):
    class Reader:  # any object with read_raw (e.g. a test double) takes the h5py path
        def read_raw(self, a, b):
            return np.arange(a, b)[:, None]

    got = [r[:, 0].tolist() for _, _, r in iter_raw(Reader(), [(0, 2), (2, 5)])]
    assert got == [[0, 1], [2, 3, 4]]


def test_corrupt_chunk_is_a_run_format_error(tmp_path):
    p = _write(tmp_path / "c.h5", "uint16", "gzip")
    with h5py.File(p, "r") as f:
        info = f["spectra"].id.get_chunk_info(1)
    with open(p, "r+b") as fh:  # overwrite the middle of the second chunk's deflate stream
        fh.seek(info.byte_offset + info.size // 2)
        fh.write(b"\xff" * 64)
    with Run.open(p) as run, pytest.raises(RunFormatError, match="cannot be read"):
        for _ in iter_raw(run, [(0, 4000)], threads=2):
            pass


def test_direct_read_returns_masked_pixels_as_nan_like_read_raw(tmp_path):
    """The threaded path must apply the run's pixel mask exactly as ``Run.read_raw`` does (a stored
    mask row and a float32-maximum sentinel, docs/run-format.md "Pixel masks")."""
    rng = np.random.default_rng(2)
    n = 3000
    spectra = rng.integers(0, 60000, (n, NPX)).astype(np.float32)
    spectra[1234, 17] = np.finfo(np.float32).max
    samples = [{"sample_id": "A", "role": "unknown", "standard_ref": "", "description": ""}]
    p = write_run(tmp_path / "m.h5", np.linspace(300, 400, NPX), spectra, samples, np.zeros(n, int),
                  masked_ranges=[(2500, 40, 42, "cosmic ray")])
    with Run.open(p) as run:
        assert _layout(run) is not None
        got = np.concatenate([r for _, _, r in iter_raw(run, [(0, 1500), (1500, n)], threads=2)])
        ref = run.read_raw(0, n)
    assert np.isnan(got[1234, 17]) and np.isnan(got[2500, 40:43]).all()
    assert np.array_equal(got, ref, equal_nan=True)


@pytest.mark.parametrize(("dtype", "compression"), [("uint16", "gzip"), ("uint16", None), ("float32", "gzip")])
def test_read_range_equals_h5py(tmp_path, dtype, compression):
    # the worker-side read (no thread pool) against h5py's own read of the same rows
    p = _write(tmp_path / "r.h5", dtype, compression)
    with Run.open(p) as run, h5py.File(p, "r") as f:
        ref = f["spectra"][()]
        for a, b in [(0, 1), (5, 2701), (3999, 4000), (0, 4000)]:
            raw = read_range(run, a, b)
            assert raw.dtype == ref.dtype and np.array_equal(raw, ref[a:b])


@pytest.mark.parametrize("dtype", ["uint16", "float32", ">u2"])
def test_uncompressed_chunks_read_from_the_file_equal_h5py(tmp_path, dtype):
    """An uncompressed run's chunks are read with pread at the offsets HDF5's chunk index gives
    (H5Dget_chunk_info); the bytes equal h5py's read, for ranges across chunk boundaries."""
    p = _write(tmp_path / "u.h5", dtype, None)
    with Run.open(p) as run, h5py.File(p, "r") as f:
        ds = run._spectra
        places = _chunk_places(run, ds)
        assert places is not None and places.rows == ds.chunks[0] and places.offsets.size == -(-4000 // places.rows)
        ref = f["spectra"][()]
        bounds = [(0, 1), (1, 2700), (2700, 2701), (2701, 4000)]
        got = list(iter_raw(run, bounds, threads=2))
        for a, b in [(3999, 4000), (0, 4000), (ds.chunks[0] - 1, ds.chunks[0] + 1)]:
            raw = read_range(run, a, b)
            assert raw.dtype == ref.dtype and np.array_equal(raw, ref[a:b])
    for a, b, raw in got:
        assert raw.dtype == ref.dtype and np.array_equal(raw, ref[a:b])


def test_run_cut_short_while_open_is_a_run_format_error(tmp_path):
    """A file truncated after it was opened (e.g. a copy overwritten meanwhile): the short read
    is a clear error, not garbage or a crash."""
    p = _write(tmp_path / "t.h5", "uint16", None)
    with Run.open(p) as run:
        places = _chunk_places(run, run._spectra)
        assert places is not None
        os.truncate(p, int(places.offsets[places.offsets.size // 2]) + 10)
        with pytest.raises(RunFormatError, match="cannot be read"):
            for _ in iter_raw(run, [(0, 2000), (2000, 4000)], threads=2):
                pass
