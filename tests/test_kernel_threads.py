"""measure_run's default thread count: the idle cores for an uncompressed run, the same numbers bit for bit.

Reference outside the default path: ``measure_run(threads=1)``, the single-threaded serial path
(itself held to the NumPy reference and to pybaselines by tests/test_compiled.py and
tests/test_kernel_snip.py); HDF5's own view of the stored filters (h5py ``Dataset.compression``,
``shuffle``) for which runs count as unfiltered.
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from _lines_data import LINES, WL, method, spectrum

from compquant.lines import compiled, measure_run
from compquant.lines._setup import _Setup
from compquant.lines.measure import default_threads
from compquant.run import Run, write_run
from compquant.run.fastread import stored_unfiltered

AREAS = {"Cu I 324.754": 400.0, "Cu I 327.396": 250.0, "Zn I 330.259": 30.0, "Zn I 334.502": 60.0}


def _write(path, compression):
    rng = np.random.default_rng(4)
    base = spectrum(AREAS)
    n = 300
    x = base * rng.normal(1.0, 0.03, (n, 1)) + rng.normal(0, 1.0, (n, WL.size)) * np.sqrt(np.maximum(base, 1)) + 100
    x[17] = 100.0  # a misfire
    x[40, 100:104] = 60000.0
    samples = [{"sample_id": s, "role": "unknown", "standard_ref": "", "description": "invented"} for s in "AB"]
    idx = np.repeat([0, 1], [150, 150])
    dark = 100 + rng.normal(0, 1.0, (4, WL.size))
    return write_run(path, WL, np.clip(np.rint(x), 0, 65535), samples, idx, dark=dark, saturation=50000.0,
                     dtype="uint16", compression=compression)  # fmt: skip


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    d = tmp_path_factory.mktemp("thr")
    return {c: _write(d / f"{c}.h5", None if c == "none" else c) for c in ("none", "gzip")}


def test_stored_unfiltered_follows_the_hdf5_filters(runs):
    for c, p in runs.items():
        with Run.open(p) as run:
            ds = run._spectra
            expect = ds.compression is None and not ds.shuffle  # h5py's view of the stored filters
            assert stored_unfiltered(run) is expect
            assert expect is (c == "none")


def test_default_threads(runs, monkeypatch):
    m = method(lines=[{"id": k} for k in LINES])
    monkeypatch.delenv("COMPQUANT_THREADS", raising=False)
    monkeypatch.setenv("COMPQUANT_KERNEL", "auto")
    with Run.open(runs["gzip"]) as run:
        assert default_threads(run, _Setup(run, m)) == 1  # decompression keeps the other cores busy
    with Run.open(runs["none"]) as run:
        cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
        # idle machine: every core the process may use, at most 8
        monkeypatch.setattr(os, "getloadavg", lambda: (0.0, 0.0, 0.0))
        assert default_threads(run, _Setup(run, m)) == (min(8, cores) if compiled.available() else 1)
        # busy machine (load average above the core count): one thread, as GNU make -l would
        monkeypatch.setattr(os, "getloadavg", lambda: (cores + 3.0, 0.0, 0.0))
        assert default_threads(run, _Setup(run, m)) == 1
        monkeypatch.setenv("COMPQUANT_THREADS", "3")
        assert default_threads(run, _Setup(run, m)) == 3
        monkeypatch.setenv("COMPQUANT_KERNEL", "numpy")
        monkeypatch.delenv("COMPQUANT_THREADS")
        assert default_threads(run, _Setup(run, m)) == 1


@pytest.mark.skipif(not compiled.available(), reason="numba not installed")
def test_default_equals_one_thread_bit_for_bit(runs, monkeypatch):
    m = method(lines=[{"id": k} for k in LINES])
    monkeypatch.delenv("COMPQUANT_THREADS", raising=False)
    with Run.open(runs["none"]) as run:
        one = measure_run(run, m, chunk_shots=64, threads=1)
        for threads in (None, 2, 3):
            got = measure_run(run, m, chunk_shots=64, threads=threads)
            a, b = np.asarray(one.shot_intensity), np.asarray(got.shot_intensity)
            assert np.array_equal(a.view(np.int64), b.view(np.int64)), threads
            assert one.table.equals(got.table)


@pytest.mark.skipif(not compiled.available(), reason="numba not installed")
def test_warm_loads_the_kernel_signature():
    # numba's own record of the machine code it holds (Dispatcher.signatures)
    from compquant.lines import _kernels

    assert compiled.warm(("uint16", "float32"))
    raw_types = {str(sig[0]) for sig in _kernels.kernel.signatures}
    assert any("uint16" in t for t in raw_types) and any("float32" in t for t in raw_types)


def test_one_thread_inside_a_dask_worker(runs, monkeypatch):
    # distributed.get_worker() answers inside a worker (Dask's documented way to find the worker)
    distributed = pytest.importorskip("distributed")
    m = method(lines=[{"id": k} for k in LINES])
    monkeypatch.delenv("COMPQUANT_THREADS", raising=False)
    monkeypatch.setattr(os, "getloadavg", lambda: (0.0, 0.0, 0.0))
    monkeypatch.setattr(distributed, "get_worker", lambda: object())
    with Run.open(runs["none"]) as run:
        assert default_threads(run, _Setup(run, m)) == 1
