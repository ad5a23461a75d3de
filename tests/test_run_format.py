"""The run format: round trips, lazy reading, memory limit, and every bad input of issue 2."""

from __future__ import annotations

import json
import shutil

import h5py
import numpy as np
import pytest
from click.testing import CliRunner
from conftest import file_hash, small_run_arrays
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from compquant.cli import main
from compquant.errors import ResourceLimitError, RunFormatError
from compquant.run import FORMAT_VERSION, ROLES, Run, validate_run, write_run


def cli(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def test_round_trip_and_lazy_access(small_run):
    wl, spectra, samples, idx, dark = small_run_arrays()
    with Run.open(small_run) as run:
        assert run.n_shots == spectra.shape[0] and run.n_pixels == wl.size
        np.testing.assert_array_equal(run.wavelength, wl)
        assert list(run.samples.sample_id) == [s["sample_id"] for s in samples]
        assert list(run.samples.n_shots) == [4] * 6
        np.testing.assert_array_equal(run.sample_spectra("LOT-1"), spectra[idx == 5])
        np.testing.assert_array_equal(run.dark(), dark)
        chunks = list(run.iter_chunks(chunk_shots=5))
        assert [c[:2] for c in chunks][:2] == [(0, 5), (5, 10)]
        np.testing.assert_array_equal(np.vstack([c[2] for c in chunks]), spectra)
        assert run.saturation == 65535
        assert run.acquisition["gate_delay_us"] == 1.0
        assert run.instrument["resolving_power"] == 5000
        np.testing.assert_array_equal(run.shots["pulse_energy_mj"], 50.0)


def test_opened_read_only(small_run):
    with Run.open(small_run) as run:
        assert run._h5.mode == "r"


def test_memory_limit_refuses_before_allocating(small_run):
    with Run.open(small_run, memory_limit_bytes=2000) as run:
        with pytest.raises(ResourceLimitError, match="memory limit"):
            run.sample_spectra("LOT-1")
        # a small chunk still streams
        start, stop, block = next(run.iter_chunks(chunk_shots=1))
        assert block.shape == (1, run.n_pixels)


def test_absurd_declared_shape_refused(tmp_path):
    # a dataset declared with 10^9 shots but never written: opening must refuse it, not allocate
    wl, spectra, samples, idx, dark = small_run_arrays()
    path = tmp_path / "huge.h5"
    write_run(path, wl, spectra, samples, idx)
    with h5py.File(path, "a") as f:
        del f["spectra"], f["shots/sample_index"], f["shots/shot"]
        n = 1_000_000_000
        f.create_dataset("spectra", shape=(n, wl.size), dtype="uint16", chunks=(1024, wl.size))
        f["shots"].create_dataset("sample_index", shape=(n,), dtype="int32", fillvalue=0, chunks=(1 << 20,))
    r = cli("inspect", path)
    assert r.exit_code == 2 and "memory limit" in r.output


# ---- bad inputs (issue 2): each a clear one-line error, exit code 2, input unchanged -------------

def _mutate(tmp_path, small_run, fn):
    p = tmp_path / "bad.h5"
    shutil.copy(small_run, p)
    with h5py.File(p, "a") as f:
        fn(f)
    return p


def _replace(f, name, data, **kw):
    attrs = dict(f[name].attrs)
    del f[name]
    f.create_dataset(name, data=data, **kw)
    for k, v in attrs.items():
        f[name].attrs[k] = v


BAD_CASES = {
    "wrong format name": (lambda f: f.attrs.__setitem__("format", "other-format"), "not 'compquant-run'"),
    "newer version": (lambda f: f.attrs.__setitem__("format_version", FORMAT_VERSION + 1), "newer"),
    "missing wavelength": (lambda f: f.__delitem__("wavelength"), "'wavelength' is missing"),
    "missing spectra": (lambda f: f.__delitem__("spectra"), "'spectra' is missing"),
    "wavelength not increasing": (lambda f: _replace(f, "wavelength", np.r_[f["wavelength"][:10][::-1],
                                                                             f["wavelength"][10:]]),
                                  "not strictly increasing"),
    "duplicated wavelength": (lambda f: _replace(f, "wavelength", np.r_[f["wavelength"][:1], f["wavelength"][:-1]]),
                              "duplicated"),
    "length mismatch": (lambda f: _replace(f, "wavelength", np.linspace(300, 340, 50)), "pixels per row"),
    "NaN in wavelength": (lambda f: _replace(f, "wavelength", np.r_[np.nan, f["wavelength"][1:]]), "NaN"),
    "sample index out of range": (lambda f: _replace(f, "shots/sample_index", np.r_[f["shots/sample_index"][:-1], 99]),
                                  "sample index 99"),
    "duplicate sample ids": (lambda f: _replace(f, "samples/sample_id",
                                                np.array(["A", "A", "B", "C", "D", "E"], dtype=object),
                                                dtype=h5py.string_dtype()), "duplicate sample id"),
    "unknown role": (lambda f: _replace(f, "samples/role",
                                        np.array(["standard", "standard", "blank", "check", "setup", "mystery"],
                                                 dtype=object), dtype=h5py.string_dtype()), "unknown role"),
    "standard without reference": (lambda f: _replace(f, "samples/standard_ref",
                                                      np.array(["", "R", "", "R3", "", ""], dtype=object),
                                                      dtype=h5py.string_dtype()), "no certified-standard reference"),
    "empty spectra": (lambda f: (_replace(f, "spectra", np.zeros((0, 64))),
                                 _replace(f, "shots/sample_index", np.zeros(0, dtype=np.int32))), "no shots"),
    "non-numeric dtype": (lambda f: _replace(f, "spectra", np.array([[b"x"] * 64] * 24)), "non-numeric dtype"),
}


@pytest.mark.parametrize("case", sorted(BAD_CASES))
def test_bad_run_one_line_error(tmp_path, small_run, case):
    fn, needle = BAD_CASES[case]
    p = _mutate(tmp_path, small_run, fn)
    before = file_hash(p)
    for args in (["inspect", p], ["inspect", "--json", p]):
        r = cli(*args)
        assert r.exit_code == 2, r.output
        out = r.output.strip()
        assert out.startswith("error: ") and "\n" not in out and "Traceback" not in out
        assert str(p) in out and needle in out
    assert file_hash(p) == before
    with pytest.raises(RunFormatError):
        Run.open(p)


def test_missing_file(tmp_path):
    r = cli("inspect", tmp_path / "none.h5")
    assert r.exit_code == 2 and "run file not found" in r.output


def test_not_hdf5(tmp_path):
    p = tmp_path / "x.h5"
    p.write_text("wavelength,intensity\n1,2\n")
    r = cli("inspect", p)
    assert r.exit_code == 2 and "not an HDF5 file" in r.output


def test_truncated_file(tmp_path, small_run):
    p = tmp_path / "trunc.h5"
    data = small_run.read_bytes()
    p.write_bytes(data[: len(data) // 2])
    r = cli("inspect", p)
    assert r.exit_code == 2 and r.output.startswith("error: ") and "Traceback" not in r.output
    assert "truncated or corrupt" in r.output


def test_declared_size_above_limit(small_run, monkeypatch):
    monkeypatch.setenv("COMPQUANT_MEMORY_LIMIT", "2K")
    r = cli("inspect", small_run)
    assert r.exit_code == 2 and "memory limit" in r.output


def test_inspect_text_and_json(small_run):
    before = file_hash(small_run)
    r = cli("inspect", small_run)
    assert r.exit_code == 0, r.output
    for needle in ("300.000 – 340.000 nm", "64 pixels", "STD-A", "REF-1", "standard", "gate_delay_us",
                   "saturated px", "dark frames: 3"):
        assert needle in r.output
    r = cli("inspect", "--json", small_run)
    d = json.loads(r.output)
    assert d["wavelength"]["n_pixels"] == 64
    assert [s["n_shots"] for s in d["samples"]] == [4] * 6
    assert file_hash(small_run) == before


def test_saturation_counted_per_sample(tmp_path):
    wl, spectra, samples, idx, dark = small_run_arrays()
    spectra = spectra.copy()
    spectra[idx == 5, 10] = 4000
    p = tmp_path / "sat.h5"
    write_run(p, wl, spectra, samples, idx, saturation=4000)
    d = json.loads(cli("inspect", "--json", p).output)
    sat = {s["sample_id"]: s["saturated_pixels"] for s in d["samples"]}
    assert sat["LOT-1"] >= 4
    assert any("saturated" in f["message"] for f in d["findings"])


def test_nan_in_spectra_is_a_finding(tmp_path):
    wl, spectra, samples, idx, dark = small_run_arrays()
    sp = spectra.astype(float)
    sp[0, 3] = np.nan
    p = tmp_path / "nan.h5"
    write_run(p, wl, sp, samples, idx)
    f = validate_run(p)
    # issue 16: a NaN pixel is masked (never measured), reported with its pixel and shot
    hit = [x for x in f if "masked" in x.message]
    assert hit and hit[0].level == "warning"
    assert "pixel 3 " in hit[0].message and "non-finite" in hit[0].message and "shot 0" in hit[0].message


def test_writer_refuses_bad_input(tmp_path):
    wl, spectra, samples, idx, dark = small_run_arrays()
    with pytest.raises(RunFormatError, match="duplicate sample id"):
        write_run(tmp_path / "a.h5", wl, spectra, samples + [samples[0]], idx)
    with pytest.raises(RunFormatError, match="strictly increasing"):
        write_run(tmp_path / "a.h5", wl[::-1], spectra, samples, idx)
    assert not (tmp_path / "a.h5").exists()
    assert list(tmp_path.iterdir()) == []  # no temporary leftovers


# ---- property test: write -> read round-trips any valid run ----------------------------------

@st.composite
def valid_runs(draw):
    n_pix = draw(st.integers(2, 40))
    start = draw(st.floats(150, 900))
    steps = draw(st.lists(st.floats(1e-3, 5.0), min_size=n_pix - 1, max_size=n_pix - 1))
    wl = start + np.concatenate([[0.0], np.cumsum(steps)])
    n_samples = draw(st.integers(1, 4))
    ids = draw(st.lists(st.text(min_size=1, max_size=12).filter(lambda s: s.strip() and "\x00" not in s),
                        min_size=n_samples, max_size=n_samples, unique=True))
    roles = draw(st.lists(st.sampled_from(ROLES), min_size=n_samples, max_size=n_samples))
    samples = [{"sample_id": i, "role": r, "standard_ref": "REF" if r in ("standard", "check") else "",
                "description": "d"} for i, r in zip(ids, roles)]
    n_shots = draw(st.integers(1, 12))
    idx = np.array(draw(st.lists(st.integers(0, n_samples - 1), min_size=n_shots, max_size=n_shots)))
    dtype = draw(st.sampled_from(["uint16", "int32", "float32", "float64"]))
    seed = draw(st.integers(0, 2**31))
    rng = np.random.default_rng(seed)
    sp = rng.integers(0, 60000, size=(n_shots, n_pix)).astype(dtype)
    return wl, sp, samples, idx


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(valid_runs())
def test_property_round_trip(tmp_path, case):
    wl, sp, samples, idx = case
    p = tmp_path / "prop.h5"
    write_run(p, wl, sp, samples, idx)
    with Run.open(p) as run:
        np.testing.assert_array_equal(run.wavelength, wl)
        np.testing.assert_array_equal(run.read_shots(0, run.n_shots), sp.astype(float))
        assert list(run.samples.sample_id) == [s["sample_id"] for s in samples]
        assert list(run.samples.role) == [s["role"] for s in samples]
        np.testing.assert_array_equal(run.shots.sample_index, idx)
        for k, s in enumerate(samples):
            np.testing.assert_array_equal(run.sample_spectra(s["sample_id"]), sp[idx == k].astype(float))
