"""Run and map files in the tools labs already use (issue 20, item 5): NeXus NXdata and HDF5
dimension scales, xarray and specutils exports with units and the air/vacuum medium."""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np
import pandas as pd
import pytest

from compquant.fileio import sha256_file
from compquant.interchange import mean_spectra_to_xarray, results_to_xarray, spectra_to_xarray, to_spectrum
from compquant.run import Run


def test_run_file_has_nxdata_and_dimension_scales(small_run):
    # NeXus NXdata base class (NIAC): signal, axes and <axis>_indices attributes
    with h5py.File(small_run, "r") as f:
        assert f.attrs["default"] == "data"
        g = f["data"]
        assert g.attrs["NX_class"] == "NXdata" and g.attrs["signal"] == "spectra"
        assert [a.decode() if isinstance(a, bytes) else a for a in g.attrs["axes"]] == ["shot_index", "wavelength"]
        assert g.attrs["wavelength_indices"] == 1 and g.attrs["shot_index_indices"] == 0
        assert np.array_equal(f["shot_index"][:], np.arange(24))
        assert g["spectra"].name == "/spectra" or np.array_equal(g["spectra"][0], f["spectra"][0])
        assert g["wavelength"].attrs["units"] == "nm"
        # HDF5 dimension scales (checked with h5py's own reading of them)
        assert f["wavelength"].is_scale
        assert f["spectra"].dims[1][0].name == "/wavelength" and f["spectra"].dims[1].label == "wavelength"
    # and the reader still reads it as before
    with Run.open(small_run) as run:
        assert run.n_shots == 24 and run.n_pixels == 64


def test_run_file_opens_in_xarray_with_the_wavelength_axis(small_run):
    xr = pytest.importorskip("xarray")
    pytest.importorskip("h5netcdf")
    with xr.open_dataset(small_run, engine="h5netcdf", phony_dims="access") as ds:
        assert "wavelength" in ds["spectra"].dims
        with h5py.File(small_run, "r") as f:
            assert np.array_equal(ds["wavelength"].values, f["wavelength"][:])


def test_xarray_exports_keep_units_and_medium(small_run):
    pytest.importorskip("xarray")
    with Run.open(small_run) as run:
        da = spectra_to_xarray(run, "LOT-1")
        every = spectra_to_xarray(run)
        wl = run.wavelength
    assert da.dims == ("shot_index", "wavelength") and da.shape == (4, 64)
    assert da.wavelength.attrs["units"] == "nm" and da.wavelength.attrs["medium"] == "air"
    assert set(every.sample_id.values) == {"STD-A", "STD-B", "BLANK", "CHK", "SET-HI", "LOT-1"}
    m = mean_spectra_to_xarray(wl, {"A": np.ones(64), "B": np.zeros(64)}, medium="vacuum")
    assert m.sel(sample_id="A").sum().item() == 64 and m.wavelength.attrs["medium"] == "vacuum"
    res = pd.DataFrame({"sample_id": ["L1", "L1", "L2"], "element": ["Zn", "Pb", "Zn"],
                        "mass_fraction": [0.35, 0.02, 0.30], "u": [0.003, 0.001, 0.003]})
    ds = results_to_xarray(res)
    assert ds.mass_fraction.sel(sample_id="L1", element="Pb").item() == 0.02
    assert np.isnan(ds.mass_fraction.sel(sample_id="L2", element="Pb").item())
    assert ds.mass_fraction.attrs["units"] == "g/g"


def test_specutils_spectrum_has_astropy_units_and_medium():
    pytest.importorskip("specutils")
    import astropy.units as u

    wl = np.linspace(300, 310, 50)
    sp = to_spectrum(wl, np.arange(50.0), medium="vacuum")
    assert sp.spectral_axis.unit == u.nm and sp.flux.unit == u.ct
    assert sp.meta["medium"] == "vacuum"
    # astropy's unit conversion: 300 nm = 3000 Angstrom
    assert sp.spectral_axis.to(u.AA)[0].value == pytest.approx(3000.0)


# ------------------------------------------- runs written before NXdata existed: compquant upgrade, demo runs

DEMO = Path(__file__).resolve().parents[1] / "demo_runs"

#: SHA-256 of the values (dtype, shape, bytes: scripts/add_run_axes.py dataset_digests) of /spectra
#: in the demo runs as shipped: regenerated on 2026-12-02 (late evening) with a new SET-LO and a
#: third setup disc SET-MN (files 35ef4254... and 96afbc60..., demo_runs/README.md); the spectra
#: before were 6eea485c... and e440a86a... (two 120-shot setup samples), 2b904b78... and
#: 10f955a4... (shipped database, 40-shot setup samples) and, simulated with the 234-line list,
#: cd5c3f22... and 82473099...
DEMO_SPECTRA_SHA256 = {
    "demo-day1.h5": "27b57378345909b90a9a37d0c02a889176cd0201c7e7563b1c802a78a8c33c5c",
    "demo-day2.h5": "6be4e171f27a9449df46c6fe88020fc244cfb8e56d6a9fe05454f87945bccf0d",
}


def _values_sha256(ds) -> str:
    import hashlib

    a = np.asarray(ds[()])
    h = hashlib.sha256(str(a.dtype).encode() + str(a.shape).encode())
    if a.dtype.kind == "O":  # variable-length strings: their bytes, not the pointers
        for v in a.ravel():
            h.update((v if isinstance(v, bytes) else str(v).encode("utf-8")) + b"\x00")
    else:
        h.update(np.ascontiguousarray(a).tobytes())
    return h.hexdigest()


def _stored_chunks(ds) -> list[bytes]:
    """The chunks as stored (compressed), read raw: equal lists mean equal bytes on disk."""
    out = []
    for i in range(ds.id.get_num_chunks()):
        info = ds.id.get_chunk_info(i)
        out.append(ds.id.read_direct_chunk(info.chunk_offset)[1])
    return out


@pytest.mark.parametrize("name", sorted(DEMO_SPECTRA_SHA256))
def test_demo_runs_have_the_axes_and_their_shipped_numbers(name):
    xr = pytest.importorskip("xarray")
    pytest.importorskip("h5netcdf")
    path = DEMO / name
    with h5py.File(path, "r") as f:
        assert f.attrs["default"] == "data" and f["data"].attrs["NX_class"] == "NXdata"
        assert f["wavelength"].is_scale and f["spectra"].dims[1].label == "wavelength"
        assert _values_sha256(f["spectra"]) == DEMO_SPECTRA_SHA256[name]
        wl = f["wavelength"][:]
    with xr.open_dataset(path, engine="h5netcdf", phony_dims="access") as ds:
        assert ds["spectra"].dims == ("shot_index", "wavelength")
        assert np.array_equal(ds["wavelength"].values, wl)


def _old_style_run(path, monkeypatch):
    """A run written as before issue 20: no NXdata group, no dimension scales."""
    from conftest import small_run_arrays

    import compquant.run.writer as writer

    monkeypatch.setattr(writer, "add_nxdata", lambda *a, **k: None)
    wl, spectra, samples, idx, dark = small_run_arrays()
    writer.write_run(path, wl, spectra, samples, idx, dark=dark, saturation=65535, compression="gzip")
    monkeypatch.undo()
    with h5py.File(path, "r") as f:
        assert "data" not in f and not f["wavelength"].is_scale
    return path


def test_upgrade_adds_the_axes_and_keeps_every_byte_of_data(tmp_path, monkeypatch):
    from click.testing import CliRunner

    from compquant.cli import main

    old = _old_style_run(tmp_path / "old.h5", monkeypatch)
    new = tmp_path / "new.h5"
    old_sha = sha256_file(old)
    r = CliRunner().invoke(main, ["upgrade", str(old), "-o", str(new)])
    assert r.exit_code == 0, r.output
    assert "added the NXdata group" in r.output
    with h5py.File(old, "r") as fo, h5py.File(new, "r") as fn:
        assert _stored_chunks(fo["spectra"]) == _stored_chunks(fn["spectra"])  # compressed bytes on disk
        names = []
        fo.visititems(lambda n, o: names.append(n) if isinstance(o, h5py.Dataset) else None)
        for n in names:
            assert _values_sha256(fo[n]) == _values_sha256(fn[n]), n
        assert fn["data"].attrs["signal"] == "spectra" and fn["spectra"].dims[1][0].name == "/wavelength"
    with Run.open(old) as a, Run.open(new) as b:
        assert np.array_equal(a.read_raw(0, a.n_shots), b.read_raw(0, b.n_shots))
    xr = pytest.importorskip("xarray")
    pytest.importorskip("h5netcdf")
    with xr.open_dataset(new, engine="h5netcdf", phony_dims="access") as ds:
        assert "wavelength" in ds["spectra"].dims
    # the input is only read; upgrading an upgraded run changes nothing; the input is never the output
    assert sha256_file(old) == old_sha
    again = tmp_path / "again.h5"
    r = CliRunner().invoke(main, ["upgrade", str(new), "-o", str(again)])
    assert r.exit_code == 0 and "copied unchanged" in r.output and again.read_bytes() == new.read_bytes()
    r = CliRunner().invoke(main, ["upgrade", str(old), "-o", str(old)])
    assert r.exit_code == 2 and r.stderr.startswith("error:") and len(r.stderr.splitlines()) == 1


def test_upgrade_refuses_what_is_not_a_run(tmp_path):
    from click.testing import CliRunner

    from compquant.cli import main

    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as f:
        f["x"] = np.arange(3)
    r = CliRunner().invoke(main, ["upgrade", str(other), "-o", str(tmp_path / "new.h5")])
    assert r.exit_code == 2 and r.stderr.startswith("error:") and len(r.stderr.splitlines()) == 1
    assert not (tmp_path / "new.h5").exists()
