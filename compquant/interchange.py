"""Spectra and results in the formats other tools read: NeXus NXdata, xarray, specutils.

* :func:`add_nxdata` gives an HDF5 file (a run or a maps file) what general HDF5/NeXus viewers
  and ``xarray.open_dataset(..., engine="h5netcdf")`` need to show the spectrum axis: an
  ``NXdata`` group (NeXus, NIAC, "NXdata" base class: attributes ``signal``, ``axes``,
  ``<axis>_indices``) whose members are HDF5 soft links to the datasets (nothing is copied),
  the file's ``default`` attribute naming it, and HDF5 dimension scales (HDF5 Dimension Scale
  specification, as written by ``h5py.Dataset.make_scale``) attached to the signal's axes.
* :func:`spectra_to_xarray`, :func:`mean_spectra_to_xarray`, :func:`results_to_xarray` build
  ``xarray`` objects with the wavelength as a coordinate (units and the air/vacuum medium in
  its attributes).
* :func:`to_spectrum` builds a ``specutils`` spectrum (``Spectrum``, ``Spectrum1D`` in
  specutils < 2) with astropy units; the medium goes into ``meta["medium"]`` because
  specutils' spectral axis does not record it.

xarray, h5netcdf, specutils and astropy are optional (``pip install "compquant[interchange]"``);
a missing one is a :class:`~compquant.errors.ConfigError` naming the extra.
"""

from __future__ import annotations

import numpy as np

from compquant.errors import ConfigError

#: the extra that installs the optional libraries of this module
EXTRA = "compquant[interchange]"


def _need(module: str):
    import importlib

    try:
        return importlib.import_module(module)
    except ImportError as exc:
        raise ConfigError(f"{module} is not installed", where="export",
                          fix=f'pip install "{EXTRA}"') from exc


def add_nxdata(h5, signal: str, axes: list[str], *, group: str = "data", units: dict | None = None,
               auxiliary: list[str] = ()) -> None:
    """Add an ``NXdata`` group ``group`` to the open ``h5py`` file or group ``h5``.

    ``signal`` is the path (relative to ``h5``) of the data array; ``axes`` one entry per
    dimension of it: the path of a 1-D coordinate dataset; a name that is not a dataset yet
    becomes an index ``0..n-1`` stored beside the signal (every dimension needs a scale for
    xarray/netCDF readers). The group holds soft links named after the datasets; each
    axis dataset becomes an HDF5 dimension scale attached to its dimension of the signal,
    and every dimension gets a label. ``units`` adds ``units`` attributes where missing;
    ``auxiliary`` names further arrays on the same axes (NeXus ``auxiliary_signals``).
    """
    import h5py

    sig = h5[signal]
    if len(axes) != sig.ndim:
        raise ValueError(f"{len(axes)} axes for a {sig.ndim}-D signal")
    g = h5.require_group(group)
    g.attrs["NX_class"] = "NXdata"
    sig_name = signal.rsplit("/", 1)[-1]
    g.attrs["signal"] = sig_name
    names = []
    for dim, axis in enumerate(axes):
        if axis not in h5:  # beside the signal: netCDF readers look for scales there or above
            ds = h5.create_dataset(axis, data=np.arange(sig.shape[dim], dtype=np.int64))
        else:
            ds = h5[axis]
        name = axis.rsplit("/", 1)[-1]
        names.append(name)
        g.attrs[f"{name}_indices"] = np.int32(dim)
        if name not in g:
            g[name] = h5py.SoftLink(ds.name)
        if not ds.is_scale:
            ds.make_scale(name)
        for arr in [sig] + [h5[a] for a in auxiliary]:
            if not any(s == ds for s in arr.dims[dim].values()):
                arr.dims[dim].attach_scale(ds)
            if not arr.dims[dim].label:
                arr.dims[dim].label = name
    g.attrs["axes"] = np.array(names, dtype=h5py.string_dtype())
    for target in [sig] + [h5[a] for a in auxiliary]:
        link = target.name.rsplit("/", 1)[-1]
        if link not in g:
            g[link] = h5py.SoftLink(target.name)
    if auxiliary:
        g.attrs["auxiliary_signals"] = np.array([a.rsplit("/", 1)[-1] for a in auxiliary], dtype=h5py.string_dtype())
    for path, unit in (units or {}).items():
        if "units" not in h5[path].attrs:
            h5[path].attrs["units"] = unit
    if isinstance(h5, h5py.File) or h5.name == "/":
        h5.attrs["default"] = group


def _wavelength_coord(wavelength, medium: str):
    return ("wavelength", np.asarray(wavelength, dtype=float),
            {"units": "nm", "medium": medium, "long_name": f"wavelength in {medium}"})


def spectra_to_xarray(run, sample_id: str | None = None, *, raw: bool = False):
    """The shots of a run (or of one sample) as an ``xarray.DataArray`` (shot, wavelength).

    ``raw`` gives the counts as stored; otherwise float64 counts. Coordinates: ``wavelength``
    (nm, medium), and per shot ``sample_id`` and ``shot``. Reads the shots into memory.
    """
    xr = _need("xarray")
    if sample_id is None:
        data = run.read_raw(0, run.n_shots) if raw else run.read_shots(0, run.n_shots)
        shots = run.shots
    else:
        idx = run.sample_indices(sample_id)
        data = run.sample_spectra(sample_id)
        shots = run.shots.iloc[idx]
    return xr.DataArray(
        np.asarray(data), dims=("shot_index", "wavelength"),
        coords={"wavelength": _wavelength_coord(run.wavelength, run.medium),
                "sample_id": ("shot_index", shots["sample_id"].astype(str).to_numpy()),
                "shot": ("shot_index", shots["shot"].to_numpy())},
        name="spectra", attrs={"units": "counts", "source": str(run.path)},
    )


def mean_spectra_to_xarray(wavelength, mean_spectra: dict, medium: str = "air"):
    """Mean spectra by sample (``{sample_id: array}``, e.g. ``LineMeasurement.mean_spectra``)
    as an ``xarray.DataArray`` (sample_id, wavelength)."""
    xr = _need("xarray")
    ids = list(mean_spectra)
    return xr.DataArray(
        np.array([np.asarray(mean_spectra[s], dtype=float) for s in ids]), dims=("sample_id", "wavelength"),
        coords={"sample_id": np.array(ids, dtype=str), "wavelength": _wavelength_coord(wavelength, medium)},
        name="mean_spectrum", attrs={"units": "counts"},
    )


def results_to_xarray(results):
    """A results table (``compquant.quantify`` columns ``sample_id, element, mass_fraction,
    u, U, k``, LOD where present) as an ``xarray.Dataset`` over (sample_id, element)."""
    xr = _need("xarray")
    cols = [c for c in ("mass_fraction", "u", "U", "k", "lod", "loq") if c in results.columns]
    frame = results.set_index(["sample_id", "element"])[cols]
    ds = xr.Dataset.from_dataframe(frame)
    for c in ("mass_fraction", "u", "U", "lod", "loq"):
        if c in ds:
            ds[c].attrs["units"] = "g/g"
    return ds


def to_spectrum(wavelength, flux, medium: str = "air", unit: str = "ct", meta: dict | None = None):
    """A ``specutils`` spectrum: spectral axis in nm, flux in ``unit`` (astropy unit string),
    ``meta["medium"]`` = ``"air"`` or ``"vacuum"``. ``flux`` may be 1-D or (n, n_pixels)."""
    _need("specutils")
    import astropy.units as u
    import specutils

    cls = getattr(specutils, "Spectrum", None) or specutils.Spectrum1D
    m = {"medium": medium}
    m.update(meta or {})
    return cls(spectral_axis=np.asarray(wavelength, dtype=float) * u.nm,
               flux=np.asarray(flux, dtype=float) * u.Unit(unit), meta=m)


__all__ = ["EXTRA", "add_nxdata", "mean_spectra_to_xarray", "results_to_xarray", "spectra_to_xarray", "to_spectrum"]
