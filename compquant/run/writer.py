"""Write runs in the compquant HDF5 run format (docs/run-format.md).

Two entry points:

* :func:`write_run` writes a whole run held in memory;
* :class:`RunWriter` streams spectra block by block, for runs larger than memory.

:func:`add_axes` copies a run written before the NeXus ``NXdata`` group and the HDF5
dimension scales existed (issue 20) into one that has them, its data untouched.

Both write to a temporary file beside the target and rename it into place only
when the run is complete, so an interrupted write never leaves a run under
its final name.
"""

from __future__ import annotations

import datetime as _dt
import os
from collections.abc import Mapping, Sequence
from pathlib import Path

import h5py
import numpy as np
import pandas as pd

from compquant import __version__
from compquant.errors import RunFormatError
from compquant.fileio import atomic_path
from compquant.interchange import add_nxdata
from compquant.run import _checks
from compquant.run.format import FORMAT_NAME, FORMAT_VERSION, SAMPLE_COLUMNS
from compquant.run.mask import mask_entries

_STR = h5py.string_dtype(encoding="utf-8")


def _samples_frame(samples) -> pd.DataFrame:
    if isinstance(samples, pd.DataFrame):
        df = samples.copy()
    else:
        df = pd.DataFrame(list(samples))
    if "sample_id" not in df.columns:
        raise RunFormatError("sample table has no 'sample_id' column", where="samples",
                             fix="give each sample an id")
    for col in SAMPLE_COLUMNS:
        if col not in df.columns:
            df[col] = "" if col != "role" else "unknown"
    df = df.fillna("")
    for col in SAMPLE_COLUMNS:
        df[col] = df[col].astype(str)
    return df.reset_index(drop=True)


def _attr_value(v):
    if v is None:
        return ""
    if isinstance(v, bool | np.bool_):
        return np.bool_(v)
    if isinstance(v, int | float | np.integer | np.floating | str):
        return v
    if isinstance(v, list | tuple) and all(isinstance(x, int | float) for x in v):
        return np.asarray(v, dtype=float)
    return str(v)


def _chunk_rows(n_shots: int, n_pixels: int, itemsize: int) -> int:
    target = 1 << 20  # about 1 MiB per chunk
    return int(max(1, min(n_shots, target // max(1, n_pixels * itemsize))))


class RunWriter:
    """Stream a run to disk block by block.

    Example
    -------
    >>> with RunWriter("big.h5", wavelength, n_shots, samples, sample_index,
    ...                dtype="uint16") as w:                      # doctest: +SKIP
    ...     for start, block in blocks:
    ...         w.write_spectra(start, block)

    All metadata is given up front; spectra are written with
    :meth:`write_spectra`. Every shot must be written before the block ends,
    otherwise the run is discarded.
    """

    def __init__(self, path, wavelength, n_shots: int, samples, sample_index, *, dtype="float64",
                 dark=None, response=None, saturation=None, exposure_s=None, dark_exposure_s=None,
                 pulse_energy_mj=None, time_s=None, x_mm=None, y_mm=None, shot=None,
                 instrument: Mapping | None = None, acquisition: Mapping | None = None,
                 medium: str = "air", compression: str | None = "gzip", compression_opts: int | None = 4,
                 created: str | None = None, pixel_mask=None, masked_ranges=(), sentinels=(),
                 response_basis: str | None = None):
        self.path = Path(path)
        where = str(self.path)
        self.wavelength = np.asarray(wavelength, dtype=np.float64)
        _checks.check_wavelength(self.wavelength, where)
        self.n_pixels = self.wavelength.size
        self.n_shots = int(n_shots)
        self.dtype = np.dtype(dtype)
        _checks.check_spectra_header((self.n_shots, self.n_pixels), self.dtype, self.n_pixels, where)
        self.samples = _samples_frame(samples)
        _checks.check_samples(list(self.samples.sample_id), list(self.samples.role),
                              list(self.samples.standard_ref), where)
        self.sample_index = np.asarray(sample_index)
        _checks.check_sample_index(self.sample_index, len(self.samples), self.n_shots, where)
        if medium not in ("air", "vacuum"):
            raise RunFormatError(f"wavelength medium {medium!r} is not 'air' or 'vacuum'", where=where,
                                 fix="say whether wavelengths are in standard air or vacuum")
        self.medium = medium
        self.columns = {}
        if shot is None:
            shot = np.zeros(self.n_shots, dtype=np.int32)
            for s in np.unique(self.sample_index):
                m = self.sample_index == s
                shot[m] = np.arange(int(m.sum()), dtype=np.int32)
        for name, values in (("shot", shot), ("pulse_energy_mj", pulse_energy_mj), ("time_s", time_s),
                             ("x_mm", x_mm), ("y_mm", y_mm)):
            if values is not None:
                arr = np.asarray(values)
                _checks.check_shot_column(name, arr, self.n_shots, where)
                self.columns[name] = arr
        if ("x_mm" in self.columns) != ("y_mm" in self.columns):
            raise RunFormatError("only one of x_mm, y_mm given", where=where,
                                 fix="give both shot positions or neither")
        self.dark = None if dark is None else np.atleast_2d(np.asarray(dark))
        if self.dark is not None:
            _checks.check_spectra_header(self.dark.shape, self.dark.dtype, self.n_pixels, where, "dark")
        self.response = None if response is None else np.asarray(response, dtype=np.float64)
        if self.response is not None and self.response.shape != (self.n_pixels,):
            raise RunFormatError(f"'response' has shape {self.response.shape}, expected ({self.n_pixels},)",
                                 where=where, fix="give one response value per pixel")
        if response_basis not in (None, "photon", "energy"):
            raise RunFormatError(f"response_basis {response_basis!r} is not 'photon' or 'energy'", where=where,
                                 fix="say whether the response converts counts to photon or energy radiance")
        self.response_basis = response_basis
        self.saturation = saturation
        self.exposure_s = exposure_s
        self.dark_exposure_s = dark_exposure_s
        self.instrument = dict(instrument or {})
        self.acquisition = dict(acquisition or {})
        self.compression = compression
        self.created = created
        self.compression_opts = compression_opts if compression == "gzip" else None
        self._set_mask(pixel_mask, masked_ranges, sentinels, where)
        self._written = np.zeros(self.n_shots, dtype=bool)
        self._ctx = None
        self._h5 = None

    def _set_mask(self, pixel_mask, masked_ranges, sentinels, where: str) -> None:
        """Optional ``/mask`` rows and declared sentinel values (docs/run-format.md, "Pixel masks")."""
        self.mask = mask_entries(pixel_mask, masked_ranges, self.n_shots, self.n_pixels, where)
        self.sentinels = tuple(float(v) for v in np.atleast_1d(np.asarray(sentinels, dtype=float)))

    def _write_mask(self, f) -> None:
        if self.sentinels:
            f["spectra"].attrs["sentinel"] = np.asarray(self.sentinels, dtype=np.float64)
        if self.mask.empty:
            return
        g = f.create_group("mask")
        g.attrs["NX_class"] = "NXcollection"
        g.create_dataset("shot", data=self.mask.shot.astype(np.int64))
        g.create_dataset("first_pixel", data=self.mask.first.astype(np.int64))
        g.create_dataset("last_pixel", data=self.mask.last.astype(np.int64))
        g.create_dataset("reason", data=np.array(self.mask.reason, dtype=object), dtype=_STR)

    def __enter__(self) -> RunWriter:
        self._ctx = atomic_path(self.path)
        tmp = self._ctx.__enter__()
        try:
            self._h5 = h5py.File(tmp, "w")
            self._write_header()
        except BaseException as exc:
            self._ctx.__exit__(type(exc), exc, exc.__traceback__)
            raise
        return self

    def _write_header(self) -> None:
        f = self._h5
        f.attrs["format"] = FORMAT_NAME
        f.attrs["format_version"] = FORMAT_VERSION
        f.attrs["created"] = self.created or _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
        f.attrs["writer"] = f"compquant {__version__}"
        f.attrs["NX_class"] = "NXentry"
        d = f.create_dataset("wavelength", data=self.wavelength)
        d.attrs["units"] = "nm"
        d.attrs["medium"] = self.medium
        rows = _chunk_rows(self.n_shots, self.n_pixels, self.dtype.itemsize)
        kw = {}
        if self.compression:
            kw = {"compression": self.compression, "compression_opts": self.compression_opts, "shuffle": True}
        s = f.create_dataset("spectra", shape=(self.n_shots, self.n_pixels), dtype=self.dtype,
                             chunks=(rows, self.n_pixels), **kw)
        s.attrs["units"] = "counts"
        if self.saturation is not None:
            s.attrs["saturation"] = float(self.saturation)
        if self.exposure_s is not None:
            s.attrs["exposure_s"] = float(self.exposure_s)
        if self.dark is not None:
            dk = f.create_dataset("dark", data=self.dark, **kw)
            dk.attrs["units"] = "counts"
            if self.dark_exposure_s is not None:
                dk.attrs["exposure_s"] = float(self.dark_exposure_s)
        if self.response is not None:
            r = f.create_dataset("response", data=self.response)
            r.attrs["units"] = "relative"
            if self.response_basis is not None:
                r.attrs["basis"] = self.response_basis
        g = f.create_group("shots")
        g.attrs["NX_class"] = "NXcollection"
        g.create_dataset("sample_index", data=self.sample_index.astype(np.int32))
        units = {"pulse_energy_mj": "mJ", "time_s": "s", "x_mm": "mm", "y_mm": "mm", "shot": ""}
        for name, arr in self.columns.items():
            dt = np.int32 if name == "shot" else np.float64
            ds = g.create_dataset(name, data=arr.astype(dt))
            ds.attrs["units"] = units[name]
        sg = f.create_group("samples")
        sg.attrs["NX_class"] = "NXcollection"
        for col in SAMPLE_COLUMNS:
            sg.create_dataset(col, data=np.array(list(self.samples[col]), dtype=object), dtype=_STR)
        ig = f.create_group("instrument")
        ig.attrs["NX_class"] = "NXinstrument"
        for k, v in self.instrument.items():
            ig.attrs[str(k)] = _attr_value(v)
        ag = f.create_group("acquisition")
        for k, v in self.acquisition.items():
            ag.attrs[str(k)] = _attr_value(v)
        # NeXus NXdata group and HDF5 dimension scales, so viewers and xarray show the axis
        add_nxdata(f, "spectra", ["shot_index", "wavelength"])
        self._write_mask(f)

    def write_spectra(self, start: int, block) -> None:
        """Write ``block`` (n × n_pixels) as shots ``start .. start+n-1``."""
        block = np.asarray(block)
        if block.ndim != 2 or block.shape[1] != self.n_pixels:
            raise RunFormatError(f"spectra block has shape {block.shape}, expected (n, {self.n_pixels})",
                                 where=str(self.path), fix="write whole spectra")
        stop = start + block.shape[0]
        if start < 0 or stop > self.n_shots:
            raise RunFormatError(f"spectra block {start}:{stop} outside 0:{self.n_shots}",
                                 where=str(self.path), fix="check the block offsets")
        if np.issubdtype(self.dtype, np.integer) and not np.issubdtype(block.dtype, np.integer):
            info = np.iinfo(self.dtype)
            block = np.clip(np.rint(block), info.min, info.max)
        self._h5["spectra"][start:stop] = block.astype(self.dtype, copy=False)
        self._written[start:stop] = True

    def __exit__(self, exc_type, exc, tb):
        try:
            if self._h5 is not None:
                self._h5.close()
            if exc_type is None and not self._written.all():
                missing = int((~self._written).sum())
                raise RunFormatError(f"{missing} shots were never written", where=str(self.path),
                                     fix="write every shot before closing the writer")
        except BaseException as err:
            self._ctx.__exit__(type(err), err, err.__traceback__)
            raise
        return self._ctx.__exit__(exc_type, exc, tb)


def write_run(path: str | os.PathLike, wavelength, spectra, samples: pd.DataFrame | Sequence[Mapping],
              sample_index, *, dark=None, response=None, saturation=None, exposure_s=None,
              dark_exposure_s=None, pulse_energy_mj=None, time_s=None, x_mm=None, y_mm=None, shot=None,
              instrument: Mapping | None = None, acquisition: Mapping | None = None, medium: str = "air",
              dtype=None, compression: str | None = "gzip", created: str | None = None, pixel_mask=None,
              masked_ranges=(), sentinels=(), response_basis: str | None = None) -> Path:
    """Write a whole run to ``path`` atomically and return the path.

    The run is written in the compquant HDF5 run format (docs/run-format.md) to a temporary file
    beside the target and renamed into place only when complete, so an interrupted write never
    leaves a run under its final name.  The file carries a NeXus ``NXdata`` group and HDF5
    dimension scales so general HDF5/NeXus viewers and xarray show the spectra against the
    wavelength axis (:func:`compquant.interchange.add_nxdata`).  For runs larger than memory use
    :class:`compquant.run.writer.RunWriter`, which streams spectra block by block.

    Parameters
    ----------
    path : str or path-like
        The run file to write.
    wavelength : (n_pixels,) array, nm, strictly increasing
    spectra : (n_shots, n_pixels) array of counts (integer or float)
    samples : DataFrame or list of dicts with ``sample_id``, ``role``, ``standard_ref``, ``description``
    sample_index : (n_shots,) int array, row of ``samples`` for each shot
    dark : (n_dark, n_pixels) array, optional dark frames
    response : (n_pixels,) relative spectral response, optional
    response_basis : ``"photon"`` or ``"energy"``: whether the response-corrected spectrum is
        photon or energy radiance (stored as the response dataset's ``basis`` attribute)
    saturation : detector saturation level in counts, optional
    dtype : storage dtype (default: that of ``spectra``)
    created : ISO 8601 time stored as the run's creation time (default: now, UTC); give a fixed
        value to make regenerated files byte-identical
    pixel_mask : (n_pixels,) bool, pixels masked in every shot (dead or blanked detector pixels)
    masked_ranges : iterable of ``(shot, first_pixel, last_pixel[, reason])`` masked in one shot
        (inclusive; shot -1 = every shot)
    sentinels : values the instrument writes for blanked pixels (e.g. -9999); read as masked
    exposure_s, dark_exposure_s : exposure times of the spectra and of the dark frames, s, optional
    pulse_energy_mj, time_s, x_mm, y_mm, shot : optional per-shot columns, (n_shots,) each: pulse
        energy (mJ), time (s), stage position (mm), shot number
    instrument, acquisition : mappings stored as the run's two groups of attributes, optional
    medium : ``"air"`` or ``"vacuum"``, the medium of ``wavelength``
    compression : HDF5 filter of the datasets (``"gzip"``, the deflate of RFC 1950/1951) or None

    Returns
    -------
    Path
        ``path``, now holding the complete run.

    Raises
    ------
    RunFormatError
        Arrays or tables that do not make a valid run (e.g. ``spectra`` not 2-D, shapes that do not
        match, a wavelength axis not strictly increasing).

    See Also
    --------
    Run : read a run.
    validate_run : check a run's data.

    References
    ----------
    .. [1] The HDF Group, HDF5 file format specification (Hierarchical Data Format, version 5),
       and the HDF5 Dimension Scale specification.
    .. [2] NeXus International Advisory Committee (NIAC), NeXus "NXdata" base class (attributes
       ``signal``, ``axes``, ``<axis>_indices``).
    .. [3] RFC 1950, ZLIB Compressed Data Format Specification version 3.3 (the ``gzip`` filter).
    .. [4] ISO 8601, Date and time -- Representations for information interchange (``created``).
    .. [5] compquant documentation: docs/run-format.md (the run format, version 1).

    Examples
    --------
    >>> import numpy as np, tempfile, pathlib
    >>> from compquant import Run, write_run
    >>> wl = np.linspace(300.0, 400.0, 64)
    >>> spectra = np.full((3, 64), 100.0)
    >>> samples = [{"sample_id": "S1", "role": "unknown", "standard_ref": "", "description": ""}]
    >>> with tempfile.TemporaryDirectory() as d:
    ...     out = write_run(pathlib.Path(d) / "tiny.h5", wl, spectra, samples, [0, 0, 0],
    ...                     created="2026-01-01T00:00:00Z")
    ...     with Run.open(out) as run:
    ...         print(run.n_shots, list(run.samples.sample_id))
    3 ['S1']
    """
    spectra = np.asarray(spectra)
    if spectra.ndim != 2:
        raise RunFormatError(f"spectra must be 2-D (shots x pixels), got shape {spectra.shape}",
                             where=str(path), fix="pass one row per shot")
    w = RunWriter(path, wavelength, spectra.shape[0], samples, sample_index,
                  dtype=dtype or spectra.dtype, dark=dark, response=response, saturation=saturation,
                  exposure_s=exposure_s, dark_exposure_s=dark_exposure_s, pulse_energy_mj=pulse_energy_mj,
                  time_s=time_s, x_mm=x_mm, y_mm=y_mm, shot=shot, instrument=instrument,
                  acquisition=acquisition, medium=medium, compression=compression, created=created,
                  pixel_mask=pixel_mask, masked_ranges=masked_ranges, sentinels=sentinels,
                  response_basis=response_basis)
    with w:
        w.write_spectra(0, spectra)
    return Path(path)



def _has_axes(f: h5py.File) -> bool:
    g = f.get("data")
    return (isinstance(g, h5py.Group) and g.attrs.get("NX_class") == "NXdata" and "wavelength" in f
            and f["wavelength"].is_scale and "shot_index" in f and f["shot_index"].is_scale)


def add_axes(src: str | os.PathLike, dst: str | os.PathLike) -> bool:
    """Write a copy of the run ``src`` to ``dst`` with the ``NXdata`` group and dimension scales.

    What is added is what :class:`RunWriter` writes into every new run
    (:func:`compquant.interchange.add_nxdata`): the group ``/data`` (NeXus ``NXdata``, NIAC:
    ``signal = "spectra"``, ``axes = ["shot_index", "wavelength"]``), the dataset ``/shot_index``
    (``0 .. n_shots-1``), the root attribute ``default = "data"``, and ``/wavelength`` and
    ``/shot_index`` made HDF5 dimension scales (HDF5 Dimension Scale specification) attached to
    the two dimensions of ``/spectra``. Nothing else changes: every dataset keeps its bytes, its
    storage (chunks, filters) and its attributes, so a file's numbers are the same before and
    after; its SHA-256 changes (it is another file).

    ``src`` is validated as a run first (:meth:`compquant.run.Run.open`) and only read; the copy
    is made beside ``dst`` and renamed into place when complete
    (:func:`compquant.fileio.atomic_path`), so ``dst`` may be ``src`` itself (the file is then
    replaced in one step, as ``scripts/add_run_axes.py`` does for the demo runs). Returns False
    when ``src`` already had them (then ``dst`` is a byte-for-byte copy), True otherwise.
    """
    import shutil

    from compquant.fileio import require_file
    from compquant.run.reader import Run

    src = require_file(src, "run file")
    with Run.open(src):  # a valid run, or a one-line RunFormatError
        pass
    with atomic_path(dst) as tmp:
        shutil.copyfile(src, tmp)
        with h5py.File(tmp, "r+") as f:
            if _has_axes(f):
                return False
            add_nxdata(f, "spectra", ["shot_index", "wavelength"])
    return True


__all__ = ["RunWriter", "add_axes", "write_run"]
