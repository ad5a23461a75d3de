"""Dask paths give the serial numbers exactly; a failing run is named, the others complete.

One local cluster (2 worker processes, loopback) is shared by every test in this module.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from compquant.cli import main
from compquant.lines import measure_run
from compquant.method import method_from_dict
from compquant.parallel import (
    SerialExecutor,
    chunk_ranges,
    collect_runs,
    map_chunks,
    measure_run_on,
    measure_runs,
    open_executor,
    spectra_array,
)
from compquant.run import Run, write_run

METHOD = {
    "method": {"id": "par-test", "version": "1"},
    "preprocess": {"baseline": {"method": "snip", "max_half_window": 12}},
    "lines": [
        {"id": "Cu I 324.754", "window_nm": 0.5},
        {"id": "Cu I 327.396", "mode": "fit", "window_nm": 0.5},
    ],
}


def _run_file(path, seed: int, n_per_sample: int = 150, raster: bool = False):
    """Invented test data: two Gaussian lines on a sloping continuum, Poisson counts."""
    rng = np.random.default_rng(seed)
    wl = np.linspace(318.0, 334.0, 400)
    samples = [{"sample_id": f"S{k}", "role": "unknown"} for k in range(3)]
    idx = np.repeat(np.arange(3), n_per_sample)
    amp = np.array([3000.0, 6000.0, 9000.0])[idx] * rng.normal(1, 0.05, idx.size)
    shape = np.exp(-0.5 * ((wl - 324.754) / 0.05) ** 2) + 0.6 * np.exp(-0.5 * ((wl - 327.396) / 0.05) ** 2)
    mean = 300 + 2 * (wl - 318)[None, :] + amp[:, None] * shape[None, :]
    spectra = rng.poisson(mean).astype(np.uint16)
    dark = rng.poisson(300, size=(4, wl.size)).astype(np.uint16)
    pos = {}
    if raster:  # every sample scanned on a 15 x 10 grid, step 0.1 mm
        k = np.arange(idx.size) % n_per_sample
        pos = {"x_mm": 0.1 * (k % 15), "y_mm": 0.1 * (k // 15)}
    write_run(path, wl, spectra, samples, idx, dark=dark, saturation=65535, **pos)
    return path


@pytest.fixture(scope="module")
def cluster():
    with open_executor(workers=2) as ex:
        yield ex


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    d = tmp_path_factory.mktemp("runs")
    return [_run_file(d / f"day{k}.h5", seed=k) for k in range(3)]


@pytest.fixture(scope="module")
def method():
    return method_from_dict(METHOD, source="par-test.toml")


def test_chunk_ranges_align_and_cover():
    r = chunk_ranges(1000, 300, align=64)
    assert r[0] == (0, 256) and r[-1][1] == 1000
    assert all(a[1] == b[0] for a, b in zip(r, r[1:]))


def test_two_workers_equal_serial_exactly(cluster, runs, method):
    with Run.open(runs[0]) as run:
        serial = measure_run(run, method, chunk_shots=64)
        dist = measure_run_on(cluster, run, method, chunk_shots=64)
    assert cluster.n_workers == 2
    # same numbers, same order: exact comparison, no tolerance
    pd.testing.assert_frame_equal(serial.table, dist.table, check_exact=True)
    assert np.array_equal(serial.shot_intensity, dist.shot_intensity, equal_nan=True)
    assert np.array_equal(serial.shot_accepted, dist.shot_accepted)
    for sid, m in serial.mean_spectra.items():
        assert np.array_equal(m, dist.mean_spectra[sid])


def test_map_chunks_in_order_and_dask_array(cluster, runs):
    with Run.open(runs[1]) as run:
        ref = run.read_raw(0, run.n_shots).astype(np.int64).sum(axis=1)
    got = list(map_chunks(cluster, runs[1], _row_sums, None, chunk_shots=37, max_in_flight=3))
    assert np.array_equal(np.concatenate(got), ref)
    arr = spectra_array(runs[1], chunk_shots=100)
    total = arr.astype(np.int64).sum(axis=1).compute(scheduler="sync")
    assert np.array_equal(total, ref)


def _row_sums(run, start, stop, context):
    return run.read_raw(start, stop).astype(np.int64).sum(axis=1)


def test_failing_run_is_named_and_others_complete(cluster, runs, method, tmp_path):
    broken = tmp_path / "broken.h5"
    data = runs[2].read_bytes()
    broken.write_bytes(data[: len(data) // 3])  # a truncated copy
    paths = [runs[0], broken, runs[2]]
    outcomes = measure_runs(cluster, paths, method, chunk_shots=64)
    assert [o.run for o in outcomes] == [str(p) for p in paths]
    assert outcomes[0].ok and outcomes[2].ok
    assert not outcomes[1].ok
    assert str(broken) in outcomes[1].error.one_line()
    assert outcomes[1].error.kind == "run-format"
    for k in (0, 2):
        with Run.open(paths[k]) as run:
            ref = measure_run(run, method, chunk_shots=64).table
        pd.testing.assert_frame_equal(outcomes[k].value["table"], ref, check_exact=True)


def test_serial_executor_is_the_plain_path(runs, method):
    outs = measure_runs(SerialExecutor(), runs[:1], method, chunk_shots=64)
    with Run.open(runs[0]) as run:
        ref = measure_run(run, method, chunk_shots=64).table
    pd.testing.assert_frame_equal(outs[0].value["table"], ref, check_exact=True)


def test_cli_lines_many_runs_and_folder(cluster, runs, method, tmp_path):
    import tomli_w

    mpath = tmp_path / "m.toml"
    mpath.write_bytes(tomli_w.dumps(METHOD).encode())
    folder = runs[0].parent
    bad = tmp_path / "bad.h5"
    bad.write_bytes(b"not a run")
    out = tmp_path / "out"
    res = CliRunner().invoke(
        main,
        [
            "lines",
            str(folder),
            str(bad),
            "--method",
            str(mpath),
            "-o",
            str(out),
            "--chunk-shots",
            "64",
            "--scheduler",
            cluster.address,
            "--quiet",
        ],
    )
    assert res.exit_code == 2, res.output
    assert "bad.h5" in res.output and "not an HDF5 file" in res.output
    combined = pd.read_csv(out / "lines-all.csv")
    assert list(combined["run"].unique()) == [str(p) for p in collect_runs([folder])]
    status = pd.read_csv(out / "runs.csv")
    assert list(status["status"]) == ["ok", "ok", "ok", "failed"]
    for p in runs:
        one = pd.read_csv(out / p.stem / "lines.csv")
        with Run.open(p) as run:
            ref = measure_run(run, method, chunk_shots=64).table
        # the CSV keeps 10 significant digits (float_format %.10g); exact equality is tested above
        np.testing.assert_allclose(one["intensity"].to_numpy(), ref["intensity"].to_numpy(), rtol=1e-9)
        assert (out / p.stem / "lines-qc.csv").exists()
        sub = combined[combined["run"] == str(p)].reset_index(drop=True)
        assert list(sub["line_id"]) == list(ref["line_id"])


def test_cli_single_run_on_cluster_equals_serial(cluster, runs, tmp_path):
    import tomli_w

    mpath = tmp_path / "m.toml"
    mpath.write_bytes(tomli_w.dumps(METHOD).encode())
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    r1 = CliRunner().invoke(
        main, ["lines", str(runs[1]), "--method", str(mpath), "-o", str(a), "--quiet", "--chunk-shots", "64"]
    )
    r2 = CliRunner().invoke(
        main,
        [
            "lines",
            str(runs[1]),
            "--method",
            str(mpath),
            "-o",
            str(b),
            "--quiet",
            "--chunk-shots",
            "64",
            "--scheduler",
            cluster.address,
        ],
    )
    assert r1.exit_code == 0 and r2.exit_code == 0, r1.output + r2.output
    assert a.read_text() == b.read_text()


def test_workers_and_scheduler_exclude_each_other(runs, tmp_path):
    import tomli_w

    mpath = tmp_path / "m.toml"
    mpath.write_bytes(tomli_w.dumps(METHOD).encode())
    res = CliRunner().invoke(
        main,
        [
            "lines",
            str(runs[0]),
            "--method",
            str(mpath),
            "-o",
            str(tmp_path / "x.csv"),
            "--workers",
            "2",
            "--scheduler",
            "tcp://127.0.0.1:1",
        ],
    )
    assert res.exit_code == 2
    assert "both --workers and --scheduler" in res.output


def test_maps_on_cluster_equal_serial(cluster, method, tmp_path):
    from compquant.maps.build import make_maps

    path = _run_file(tmp_path / "raster.h5", seed=9, raster=True)
    with Run.open(path) as run:
        a = make_maps(run, method, chunk_shots=64)
        b = make_maps(run, method, chunk_shots=64, executor=cluster)
    assert [s.sample_id for s in a.samples] == ["S0", "S1", "S2"]
    for sa, sb in zip(a.samples, b.samples):
        assert (sa.grid.nx, sa.grid.ny) == (15, 10)
        for ma, mb in zip(sa.maps, sb.maps):
            assert np.array_equal(ma.values, mb.values, equal_nan=True)


# ------------------------------------------------------------------ issue 20: Dask done properly


def test_split_ranges_cover_in_order_and_align():
    from compquant.parallel.lines import split_ranges

    pieces = split_ranges([(0, 640)], 4, align=42)
    assert len(pieces) >= 4 and pieces[0][1] == 0 and pieces[-1][2] == 640
    assert all(a[2] == b[1] for a, b in zip(pieces, pieces[1:]))
    assert all(p[1] % 42 == 0 for p in pieces)  # no stored HDF5 chunk read by two tasks
    assert split_ranges([(0, 100), (100, 200)], 2) == [(0, 0, 100), (1, 100, 200)]  # enough already


def test_default_chunking_gives_every_worker_work_and_same_numbers(cluster, runs, method, monkeypatch):
    # a 450-shot run is a single chunk of the default 4096 shots: before issue 20 one task did it all
    import compquant.parallel.lines as plines

    seen = []
    real = plines.map_chunks

    def spy(executor, path, fn, ctx, **kw):
        seen.append(len(kw["ranges"]))
        return real(executor, path, fn, ctx, **kw)

    monkeypatch.setattr(plines, "map_chunks", spy)
    with Run.open(runs[0]) as run:
        serial = measure_run(run, method)
        dist = measure_run_on(cluster, run, method)
    assert seen and min(seen) >= 2 * cluster.n_workers
    pd.testing.assert_frame_equal(serial.table, dist.table, check_exact=True)
    assert np.array_equal(serial.shot_intensity, dist.shot_intensity, equal_nan=True)


def test_scheduler_from_environment_and_scheduler_file(cluster, tmp_path, monkeypatch):
    import json

    monkeypatch.setenv("DASK_SCHEDULER_ADDRESS", cluster.address)
    with open_executor() as ex:
        assert ex.kind == "dask" and ex.address == cluster.address and ex.n_workers == 2
    monkeypatch.delenv("DASK_SCHEDULER_ADDRESS")
    with open_executor() as ex:
        assert ex.kind == "serial"
    f = tmp_path / "scheduler.json"
    f.write_text(json.dumps({"address": cluster.address}))  # the key Dask's scheduler file holds
    with open_executor(scheduler_file=f) as ex:
        assert ex.address == cluster.address
    with open_executor(scheduler=str(f)) as ex:  # what --scheduler-file passes on
        assert ex.address == cluster.address


def test_version_mismatch_is_a_clear_error(cluster, monkeypatch):
    import compquant
    import compquant.parallel.cluster as pc
    from compquant.errors import ConfigError

    pc.check_versions(cluster.client, "tcp://test")  # equal: no error
    # this process claims another version; the worker processes keep the real one
    monkeypatch.setattr(compquant, "__version__", "0.0.0-other")
    with pytest.raises(ConfigError) as ei:
        pc.check_versions(cluster.client, "tcp://test")
    assert "compquant" in ei.value.one_line() and "same versions" in ei.value.one_line()


def test_configuration_files_travel_by_value(tmp_path):
    from compquant.parallel.analyse import _by_value, _on_worker

    cfg = tmp_path / "method.toml"
    cfg.write_text("[method]\nid = 'x'\n")
    sent = _by_value(cfg)
    # the worker has the same file: it uses the real path (the certificate names it)
    assert _on_worker(sent, tmp_path / "copy") == str(cfg.resolve())
    # the worker does not have it (no shared file system): a private copy of the bytes sent
    cfg.unlink()
    local = _on_worker(sent, tmp_path / "copy")
    assert local != str(cfg) and open(local, "rb").read() == b"[method]\nid = 'x'\n"
