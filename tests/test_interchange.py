"""Run and map files in the tools labs already use (issue 20, item 5): NeXus NXdata and HDF5
dimension scales, xarray and specutils exports with units and the air/vacuum medium."""

from __future__ import annotations

import h5py
import numpy as np
import pandas as pd
import pytest

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
