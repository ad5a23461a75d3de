"""Lazy, read-only access to a compquant run file.

Opening a run reads its headers and small tables only (wavelength axis,
sample table, per-shot columns); spectra are read on demand, by sample or in
fixed-size chunks of shots for streaming.  Every array the reader allocates is
checked against a memory limit *before* allocation, so an absurd declared
shape is refused with a clear error instead of exhausting memory.
"""

from __future__ import annotations

import os
from collections.abc import Iterator

import h5py
import numpy as np
import pandas as pd

from compquant.errors import ResourceLimitError, RunFormatError
from compquant.fileio import require_file, sha256_file
from compquant.run import _checks
from compquant.run.format import (
    DEFAULT_CHUNK_SHOTS,
    DEFAULT_MEMORY_LIMIT,
    FORMAT_NAME,
    FORMAT_VERSION,
    MAX_ABS_COUNTS,
    SAMPLE_COLUMNS,
)
from compquant.run.mask import StoredMask, find_bad, value_limits


def memory_limit_from_env(default: int = DEFAULT_MEMORY_LIMIT) -> int:
    """The memory limit in bytes from ``COMPQUANT_MEMORY_LIMIT`` (e.g. ``512M``, ``4G``), else ``default``."""
    raw = os.environ.get("COMPQUANT_MEMORY_LIMIT", "").strip()
    if not raw:
        return default
    mult = {"K": 1024, "M": 1024**2, "G": 1024**3, "T": 1024**4}
    fix = "use a positive number of bytes or a size like 512M or 4G"
    try:
        if raw[-1].upper() in mult:
            value = float(raw[:-1]) * mult[raw[-1].upper()]
        else:
            value = float(raw)
    except ValueError as exc:
        raise ResourceLimitError(f"COMPQUANT_MEMORY_LIMIT={raw!r} is not a size", where="environment",
                                 fix=fix) from exc
    if not (value >= 1 and value < 2**62):  # also refuses NaN, inf, zero and negative sizes
        raise ResourceLimitError(f"COMPQUANT_MEMORY_LIMIT={raw!r} is not a positive size", where="environment",
                                 fix=fix)
    return int(value)


def _decode(values) -> list[str]:
    out = []
    for v in values:
        if isinstance(v, bytes):
            v = v.decode("utf-8", "replace")
        out.append(str(v))
    return out


_CHUNK_FLOOR = 1 << 20


def _size(n: int) -> str:
    """A byte count for people: 3 MiB, 512 KiB, 900 bytes."""
    for unit, div in (("GiB", 1024**3), ("MiB", 1024**2), ("KiB", 1024)):
        if abs(n) >= div:
            return f"{n / div:.0f} {unit}"
    return f"{n} bytes"


def _is_lock_error(exc: OSError) -> bool:
    return isinstance(exc, BlockingIOError) or "unable to lock file" in str(exc).lower()


def _positive_attr(obj, key: str, name: str, where: str) -> float | None:
    """An optional attribute that must be one finite number above zero (saturation, exposure)."""
    v = obj.attrs.get(key)
    if v is None:
        return None
    arr = np.asarray(v)
    ok = arr.size == 1 and (np.issubdtype(arr.dtype, np.integer) or np.issubdtype(arr.dtype, np.floating))
    x = float(arr.reshape(-1)[0]) if ok else float("nan")
    if not (ok and np.isfinite(x) and x > 0):
        raise RunFormatError(f"'{name}' attribute '{key}' is {v!r}, not a positive finite number", where=where,
                             fix=f"store {key} as a number above zero, or leave it out when it is not known")
    return x


def _attrs(obj) -> dict:
    out = {}
    for k, v in obj.attrs.items():
        if isinstance(v, bytes):
            v = v.decode("utf-8", "replace")
        elif isinstance(v, np.ndarray):
            v = v.tolist()
        elif isinstance(v, np.generic):
            v = v.item()
        out[str(k)] = v
    return out


def refuse_outside_data(h5, where: str) -> None:
    """Refuse a run whose data live outside the file (provenance: the run's SHA-256 must cover them).

    HDF5 external links, datasets with external storage and virtual datasets all let another
    file change the numbers without changing the run file's hash.  Soft links stay inside the
    file; where they lead (a loop, nowhere) is checked when the object is opened.
    """
    found = []

    def visit(name, link):
        if isinstance(link, h5py.ExternalLink):
            found.append(f"'{name}' is a link to another file ({link.filename})")
            return
        if isinstance(link, h5py.SoftLink):
            return
        obj = h5.get(name)
        if isinstance(obj, h5py.Dataset):
            if obj.is_virtual:
                found.append(f"'{name}' is a virtual dataset")
            elif obj.external:
                found.append(f"'{name}' is stored in external files")

    h5.visititems_links(visit)
    if found:
        raise RunFormatError(
            "the run's data live outside the file: " + "; ".join(found[:3]),
            where=where,
            fix="copy the data into the run file (e.g. h5repack, or rebuild it with 'compquant convert')",
        )


class Run:
    """A run file opened read-only.

    A run is one HDF5 file holding everything one spectrometer session measured (dark frames,
    wavelength axis, sample table, spectra, per-shot columns; docs/run-format.md).  Opening it
    reads the headers and small tables only; spectra are read on demand, by sample
    (:meth:`sample_spectra`) or in chunks of shots (:meth:`iter_chunks`).  Every array the
    reader allocates is checked against the memory limit before allocation, so an absurd
    declared shape is refused with a clear error instead of exhausting memory.  Spectra are in
    counts on the wavelength axis ``wavelength`` (nm, in ``medium``).

    Use :meth:`open` (or the constructor) as a context manager::

        with Run.open("day1.h5") as run:
            for sid in run.samples.sample_id:
                spectra = run.sample_spectra(sid)

    Parameters
    ----------
    path : str or path-like
        The run file (``.h5``).
    memory_limit_bytes : int, optional
        Largest array the reader may allocate, bytes (default ``COMPQUANT_MEMORY_LIMIT``, e.g.
        ``512M``, else the format's default).

    Attributes
    ----------
    path : Path
    wavelength : (n_pixels,) float64, nm
    medium : "air" or "vacuum"
    samples : DataFrame with sample_id, role, standard_ref, description, n_shots
    shots : DataFrame with sample_index, sample_id, shot and the optional per-shot columns
    instrument, acquisition, attrs : dict
    saturation : float or None, counts
    exposure_s, dark_exposure_s : float or None, s

    Raises
    ------
    RunFormatError
        Not an HDF5 file, truncated or corrupt, locked for writing, data stored outside the file,
        or a structure that does not follow the run format (docs/run-format.md, "What the reader
        checks on open").
    ResourceLimitError
        A declared shape larger than the memory limit, or a non-positive limit.

    See Also
    --------
    write_run : write a run.
    validate_run : findings in the data beyond the structure.

    References
    ----------
    .. [1] The HDF Group, HDF5 file format specification (Hierarchical Data Format, version 5),
       and the HDF5 Dimension Scale specification.
    .. [2] NeXus International Advisory Committee (NIAC), NeXus "NXdata" base class (attributes
       ``signal``, ``axes``, ``<axis>_indices``).
    .. [3] compquant documentation: docs/run-format.md (the run format, version 1).

    Examples
    --------
    From the repository root (shipped demo run, invented scenario):

    >>> from compquant import Run
    >>> with Run.open("demo_runs/demo-day1.h5") as run:
    ...     print(run.n_shots, run.wavelength.size, run.medium)
    1000 12288 air
    """

    def __init__(self, path: str | os.PathLike, memory_limit_bytes: int | None = None):
        self.path = require_file(path, "run file")
        self.memory_limit = int(memory_limit_bytes) if memory_limit_bytes is not None else memory_limit_from_env()
        if self.memory_limit < 1:
            raise ResourceLimitError(f"memory limit {self.memory_limit} bytes is not positive", where="memory limit",
                                     fix="give a positive number of bytes")
        where = str(self.path)
        self._where = where
        try:
            self._h5 = h5py.File(self.path, "r")
        except OSError as exc:
            with open(self.path, "rb") as fh:
                sig = fh.read(8)
            if _is_lock_error(exc):
                raise RunFormatError("the run is locked: another program has it open for writing", where=where,
                                     fix="wait until the instrument or converter has finished writing it, "
                                         "or analyse a copy") from exc
            if sig != b"\x89HDF\r\n\x1a\n":
                raise RunFormatError("not an HDF5 file", where=where,
                                     fix="give a compquant run (.h5); build one from text spectra with "
                                         "'compquant convert'") from exc
            raise RunFormatError("HDF5 file cannot be read (truncated or corrupt)", where=where,
                                 fix="copy the run again from the instrument or re-run 'compquant convert'") from exc
        try:
            refuse_outside_data(self._h5, where)
            self._read_headers()
        except RunFormatError:
            self._h5.close()
            raise
        except (OSError, KeyError, ValueError, TypeError, RuntimeError, OverflowError) as exc:
            self._h5.close()
            raise RunFormatError(f"run file is damaged ({type(exc).__name__}: {exc})", where=where,
                                 fix="copy the run again or re-run 'compquant convert'") from exc

    # -- opening -------------------------------------------------------------
    @classmethod
    def open(cls, path: str | os.PathLike, memory_limit_bytes: int | None = None) -> Run:
        """Open ``path`` read-only; read headers only."""
        return cls(path, memory_limit_bytes)

    def __enter__(self) -> Run:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        if getattr(self, "_h5", None) is not None:
            try:
                self._h5.close()
            finally:
                self._h5 = None

    def __repr__(self) -> str:
        return f"Run({str(self.path)!r}, shots={self.n_shots}, pixels={self.n_pixels}, samples={len(self.samples)})"

    def _need(self, name: str, kind: type = h5py.Dataset, required: bool = True):
        """The object ``name`` of the file, which must be a ``kind`` (dataset or group).

        Links are checked before they are followed: a link to another file is refused (a run
        is one file), and a soft link that loops or leads nowhere is a clear error.
        """
        what = "dataset" if kind is h5py.Dataset else "group"
        try:
            link = self._h5.get(name, getlink=True)
            if isinstance(link, h5py.ExternalLink):
                raise RunFormatError(f"'{name}' is a link to another file ({link.filename})", where=self._where,
                                     fix="a run is one self-contained file; copy the data into it")
            obj = self._h5.get(name) if link is not None else None
        except (RuntimeError, KeyError) as exc:
            raise RunFormatError(f"'{name}' is a link that cannot be followed (a loop or a dangling link)",
                                 where=self._where, fix="rebuild the run without soft links") from exc
        if obj is None and link is not None:
            raise RunFormatError(f"'{name}' is a dangling link", where=self._where,
                                 fix="rebuild the run without soft links")
        if obj is None:
            if not required:
                return None
            raise RunFormatError(f"{what} '{name}' is missing", where=self._where,
                                 fix="the file is not a complete compquant run; rebuild it with "
                                     "'compquant convert' or the instrument export")
        if not isinstance(obj, kind):
            other = "group" if isinstance(obj, h5py.Group) else "dataset" if isinstance(obj, h5py.Dataset) else "object"
            raise RunFormatError(f"'{name}' is a {other}, expected a {what}", where=self._where,
                                 fix="rebuild the run with 'compquant convert'")
        return obj

    def _check_alloc(self, shape: tuple, itemsize: int, what: str, floor: int = 0) -> None:
        """Refuse an allocation of ``shape`` x ``itemsize`` bytes above the limit (and above ``floor``)."""
        n = int(itemsize)
        for s in shape:
            n *= int(s)  # Python integers: no overflow for any declared shape
        if (n > self.memory_limit and n > floor) or n < 0:
            raise ResourceLimitError(
                f"{what} would need {_size(n)}, above the memory limit of "
                f"{_size(self.memory_limit)} (declared shape {tuple(int(s) for s in shape)})",
                where=self._where,
                fix="stream the run in chunks, or raise the limit with COMPQUANT_MEMORY_LIMIT / memory_limit_bytes")

    def _read_headers(self) -> None:
        f, where = self._h5, self._where
        self.attrs = _attrs(f)
        fmt = self.attrs.get("format")
        if fmt != FORMAT_NAME:
            raise RunFormatError(f"format is {fmt!r}, not {FORMAT_NAME!r}", where=where,
                                 fix="this HDF5 file is not a compquant run; build one with 'compquant convert'")
        ver = self.attrs.get("format_version")
        if not isinstance(ver, int | np.integer) or ver < 1:
            raise RunFormatError(f"format_version {ver!r} is not a positive integer", where=where,
                                 fix="rebuild the run with 'compquant convert'")
        if ver > FORMAT_VERSION:
            raise RunFormatError(f"run format version {ver} is newer than this compquant reads ({FORMAT_VERSION})",
                                 where=where, fix="upgrade compquant")
        self.format_version = int(ver)
        wl_ds = self._need("wavelength")
        self._check_alloc(wl_ds.shape, 8, "the wavelength axis")
        self._check_chunks(wl_ds, "wavelength")
        self.wavelength = np.asarray(wl_ds[()], dtype=wl_ds.dtype)
        _checks.check_wavelength(self.wavelength, f"{where}: wavelength")
        self.wavelength = self.wavelength.astype(np.float64)
        self.wavelength.setflags(write=False)
        med = wl_ds.attrs.get("medium", "air")
        self.medium = med.decode() if isinstance(med, bytes) else str(med)
        if self.medium not in ("air", "vacuum"):
            raise RunFormatError(f"wavelength medium {self.medium!r} is not 'air' or 'vacuum'", where=where,
                                 fix="set the 'medium' attribute of 'wavelength'")
        units = wl_ds.attrs.get("units", "nm")
        units = units.decode() if isinstance(units, bytes) else str(units)
        if units != "nm":
            raise RunFormatError(f"wavelength units are {units!r}, expected 'nm'", where=where,
                                 fix="store wavelengths in nm")
        sp = self._need("spectra")
        self._spectra = sp
        _checks.check_spectra_header(sp.shape, sp.dtype, self.wavelength.size, where)
        self.n_shots, self.n_pixels = int(sp.shape[0]), int(sp.shape[1])
        self._check_chunks(sp, "spectra")
        self.saturation = _positive_attr(sp, "saturation", "spectra", where)
        self.exposure_s = _positive_attr(sp, "exposure_s", "spectra", where)
        self.spectra_dtype = sp.dtype
        # samples
        self._need("samples", h5py.Group)
        cols = {}
        for col in SAMPLE_COLUMNS:
            ds = self._need(f"samples/{col}", required=False)
            if ds is None:
                if col in ("sample_id", "role"):
                    raise RunFormatError(f"sample table has no '{col}' column", where=where,
                                         fix="rebuild the run with 'compquant convert'")
                cols[col] = None
                continue
            cols[col] = self._text_column(ds, f"samples/{col}")
        n_samp = len(cols["sample_id"])
        for col in SAMPLE_COLUMNS:
            if cols[col] is None:
                cols[col] = [""] * n_samp
            if len(cols[col]) != n_samp:
                raise RunFormatError(f"sample column '{col}' has {len(cols[col])} rows, 'sample_id' has {n_samp}",
                                     where=where, fix="rebuild the sample table")
        _checks.check_samples(cols["sample_id"], cols["role"], cols["standard_ref"], where)
        # shots
        shg = self._need("shots", h5py.Group)
        si = self._need("shots/sample_index")
        # the per-shot table is held in memory: the columns as read, as int64/float64, the pandas
        # frame and its object sample-id column, and the temporaries that build them (measured:
        # about 24 bytes per column and shot, plus 64 bytes per shot)
        n_cols = 2 + sum(1 for k in shg.keys() if k != "sample_index") + 2
        self._check_alloc(si.shape, 24 * n_cols + 64, "the per-shot table", floor=_CHUNK_FLOOR)
        self._check_chunks(si, "shots/sample_index")
        idx = np.asarray(si[()])
        _checks.check_sample_index(idx, n_samp, self.n_shots, where)
        shots = {"sample_index": idx.astype(np.int64)}
        for name in ("shot", "pulse_energy_mj", "time_s", "x_mm", "y_mm"):
            ds = self._need(f"shots/{name}", required=False)
            if ds is not None:
                self._check_chunks(ds, f"shots/{name}")
                vals = np.asarray(ds[()])
                _checks.check_shot_column(name, vals, self.n_shots, where)
                shots[name] = vals
        if "shot" not in shots:
            s = np.zeros(self.n_shots, dtype=np.int64)
            for k in range(n_samp):
                m = idx == k
                s[m] = np.arange(int(m.sum()))
            shots["shot"] = s
        counts = np.bincount(idx, minlength=n_samp)
        self.samples = pd.DataFrame({c: cols[c] for c in SAMPLE_COLUMNS})
        self.samples["n_shots"] = counts.astype(int)
        df = pd.DataFrame(shots)
        df.insert(1, "sample_id", np.asarray(cols["sample_id"], dtype=object)[idx] if idx.size else [])
        self.shots = df
        self._index_of = {sid: i for i, sid in enumerate(cols["sample_id"])}
        # optional arrays and groups
        self._dark = self._need("dark", required=False)
        if self._dark is not None:
            _checks.check_spectra_header(self._dark.shape, self._dark.dtype, self.n_pixels, where, "dark")
            self._check_chunks(self._dark, "dark")
            self.dark_exposure_s = _positive_attr(self._dark, "exposure_s", "dark", where)
        else:
            self.dark_exposure_s = None
        self._response = self._need("response", required=False)
        if self._response is not None:
            self._response_values = self._read_response()
        ins = self._need("instrument", h5py.Group, required=False)
        self.instrument = _attrs(ins) if ins is not None else {}
        #: "photon" | "energy" | None (not recorded): basis of the response-corrected spectrum
        basis = None if self._response is None else self._response.attrs.get("basis")
        self.response_basis = None if basis is None else (basis.decode() if isinstance(basis, bytes) else str(basis))
        self.instrument.pop("NX_class", None)
        acq = self._need("acquisition", h5py.Group, required=False)
        self.acquisition = _attrs(acq) if acq is not None else {}
        self._open_mask()

    # -- pixel masks (compquant.run.mask) ---------------------------------------------
    def _open_mask(self) -> None:
        """Read the optional ``/mask`` group and the ``sentinel`` attribute; set the value limits."""
        where = f"{self._where}: mask"
        sent = self._spectra.attrs.get("sentinel", ())
        try:
            sent = np.atleast_1d(np.asarray(sent, dtype=np.float64))
        except (TypeError, ValueError) as exc:
            raise RunFormatError(f"'spectra' attribute 'sentinel' is not numeric ({sent!r})", where=self._where,
                                 fix="store sentinel values as numbers") from exc
        self.value_limits = value_limits(self.spectra_dtype, self.saturation, sent)
        g = self._h5.get("mask")
        cols = {}
        if g is not None:
            for name in ("shot", "first_pixel", "last_pixel", "reason"):
                if not isinstance(g.get(name), h5py.Dataset) or g[name].ndim != 1:
                    raise RunFormatError(f"'/mask/{name}' is missing or not 1-D", where=where,
                                         fix="write the mask with compquant (shot, first_pixel, last_pixel, reason)")
                self._check_alloc(g[name].shape, 64, f"'/mask/{name}'")
                cols[name] = g[name][()]
            cols["reason"] = _decode(cols["reason"])
        self.mask = StoredMask(cols.get("shot", []), cols.get("first_pixel", []), cols.get("last_pixel", []),
                               cols.get("reason", []), self.n_shots, self.n_pixels, where)

    def mask_rows(self, rows, raw: np.ndarray) -> np.ndarray | None:
        """Masked pixels of file rows ``rows`` whose stored values are ``raw``: the stored mask
        OR'ed with the implausible values (:func:`compquant.run.mask.find_bad`); None if none."""
        bad = find_bad(raw, self.value_limits)
        if not self.mask.empty:
            stored = self.mask.rows(np.asarray(rows))
            if stored is not None:
                bad = stored if bad is None else (bad | stored)
        return bad

    def _masked(self, rows, data: np.ndarray) -> np.ndarray:
        bad = self.mask_rows(rows, data)
        if bad is None:
            return data
        if data.dtype != np.float64:
            self._check_alloc(data.shape, 8, "masking these spectra")
            data = data.astype(np.float64)
        data[bad] = np.nan  # ``data`` is a fresh array read from the file: changed in place
        return data

    def _check_chunks(self, ds, name: str) -> None:
        """Refuse a dataset whose HDF5 chunks would need more memory than the limit to decompress.

        HDF5 decompresses a whole chunk to read any element of it, so one huge chunk (declared
        shape, or the stored, compressed size of a chunk) breaks the limit even for a one-row read.
        """
        if ds.chunks is None:
            return
        # chunks up to 1 MiB pass whatever the limit: HDF5's own chunk cache is of that order
        self._check_alloc(ds.chunks, ds.dtype.itemsize, f"one HDF5 chunk of '{name}'", floor=_CHUNK_FLOOR)
        try:
            n = ds.id.get_num_chunks()
            biggest = max((ds.id.get_chunk_info(i).size for i in range(min(n, 64))), default=0)
        except (OSError, RuntimeError, ValueError):  # very old HDF5 libraries cannot say
            return
        if biggest > max(self.memory_limit, _CHUNK_FLOOR):
            self._check_alloc((biggest,), 1, f"one stored chunk of '{name}'")

    def _text_column(self, ds, name: str) -> list[str]:
        """A 1-D column of text (sample ids, roles ...), decoded from UTF-8."""
        if ds.ndim != 1:
            raise RunFormatError(f"'{name}' has shape {ds.shape}, expected one text value per sample",
                                 where=self._where, fix="store the sample table as 1-D text columns")
        if h5py.check_string_dtype(ds.dtype) is None and ds.dtype.kind not in "SU":
            raise RunFormatError(f"'{name}' holds {ds.dtype} values, not text", where=self._where,
                                 fix="store the sample table as text columns")
        self._check_alloc(ds.shape, 64, f"sample column '{name}'")
        self._check_chunks(ds, name)
        values = _decode(ds[()])
        for i, v in enumerate(values):
            if "\x00" in v:
                raise RunFormatError(f"'{name}' row {i} holds a NUL character", where=self._where,
                                     fix="remove control characters from the sample table")
        return values

    def _read_response(self) -> np.ndarray:
        """The stored relative response, checked: one finite, positive value per pixel."""
        r = self._response
        if r.shape != (self.n_pixels,):
            raise RunFormatError(f"'response' has shape {r.shape}, expected ({self.n_pixels},)",
                                 where=self._where, fix="store one relative response value per pixel")
        if not (np.issubdtype(r.dtype, np.integer) or np.issubdtype(r.dtype, np.floating)):
            raise RunFormatError(f"'response' has non-numeric dtype {r.dtype}", where=self._where,
                                 fix="store the relative response as float64")
        self._check_chunks(r, "response")
        v = np.asarray(r[()], dtype=np.float64)
        _checks.check_response(v, self._where)
        v.setflags(write=False)
        return v

    # -- properties ------------------------------------------------------------
    @property
    def has_positions(self) -> bool:
        """True when the run stores per-shot x, y positions (a rastered run)."""
        return "x_mm" in self.shots.columns and "y_mm" in self.shots.columns

    @property
    def chunk_rows(self) -> int:
        """Rows per HDF5 chunk of the spectra dataset (reads aligned to it are fastest)."""
        return int(self._spectra.chunks[0]) if self._spectra.chunks else DEFAULT_CHUNK_SHOTS

    def sha256(self) -> str:
        """SHA-256 of the run file (provenance)."""
        if not hasattr(self, "_sha"):
            self._sha = sha256_file(self.path)
        return self._sha

    # -- data access -------------------------------------------------------------
    def _read(self, sel, n_rows: int) -> np.ndarray:
        self._check_alloc((n_rows, self.n_pixels), 8 + self.spectra_dtype.itemsize, "reading these spectra")
        try:
            data = self._spectra[sel]
        except (OSError, ValueError) as exc:
            raise RunFormatError(f"spectra cannot be read ({exc})", where=self._where,
                                 fix="the file is truncated or corrupt; copy the run again") from exc
        rows = np.arange(sel.start, sel.stop) if isinstance(sel, slice) else np.asarray(sel)
        return self.screen(rows, np.asarray(data, dtype=np.float64))

    def screen(self, rows, data: np.ndarray) -> np.ndarray:
        """Stored rows ``rows`` read as ``data``: masked pixels (stored mask, sentinels and
        implausible values) set to NaN (:meth:`_masked`), then the remaining values checked
        against :data:`MAX_ABS_COUNTS` (:meth:`_check_range`).  Every read of spectra ends here."""
        data = self._masked(rows, data)
        self._check_range(data, "spectra")
        return data

    def _check_range(self, data: np.ndarray, name: str) -> None:
        """Refuse stored float counts beyond :data:`MAX_ABS_COUNTS` (an overflow waiting to happen)."""
        if data.size == 0 or not np.issubdtype(data.dtype, np.floating):
            return
        finite = np.isfinite(data)  # NaN and inf pixels are shot QC's business ("not_finite")
        big = max(float(np.max(data, where=finite, initial=0.0)), -float(np.min(data, where=finite, initial=0.0)))
        if big > MAX_ABS_COUNTS:
            raise RunFormatError(f"'{name}' holds values out of range ({big:.3g} counts; a detector gives "
                                 f"less than {MAX_ABS_COUNTS:.0e})", where=self._where,
                                 fix="check the export: the counts were scaled or the data type misread")

    def dark(self) -> np.ndarray | None:
        """Dark frames (n_dark, n_pixels) as float64, or None when the run has none."""
        if self._dark is None:
            return None
        self._check_alloc(self._dark.shape, 16, "the dark frames")
        data = self._dark[()]
        self._check_range(data, "dark")
        return np.asarray(data, dtype=np.float64)

    def response(self) -> np.ndarray | None:
        """Relative spectral response (n_pixels,) or None (checked when the run was opened)."""
        if self._response is None:
            return None
        return self._response_values.copy()

    def sample_indices(self, sample_id: str) -> np.ndarray:
        """Row numbers (shots) of ``sample_id`` in the spectra dataset."""
        if sample_id not in self._index_of:
            raise RunFormatError(f"no sample {sample_id!r} in this run", where=self._where,
                                 fix="list the samples with 'compquant inspect'")
        return np.flatnonzero(self.shots["sample_index"].to_numpy() == self._index_of[sample_id])

    def sample_spectra(self, sample_id: str) -> np.ndarray:
        """All shots of one sample, (n, n_pixels) float64, in shot order."""
        rows = self.sample_indices(sample_id)
        if rows.size == 0:
            return np.empty((0, self.n_pixels))
        if rows[-1] - rows[0] + 1 == rows.size:
            return self._read(slice(int(rows[0]), int(rows[-1]) + 1), rows.size)
        return self._read(rows, rows.size)

    def read_shots(self, start: int, stop: int) -> np.ndarray:
        """Shots ``start:stop`` as (stop-start, n_pixels) float64."""
        start, stop = max(0, int(start)), min(self.n_shots, int(stop))
        return self._read(slice(start, stop), max(0, stop - start))

    def read_raw(self, start: int, stop: int, masked: bool = True) -> np.ndarray:
        """Shots ``start:stop`` in their stored dtype; with ``masked`` (default) a block holding
        masked pixels comes back as float64 with NaN at those pixels (docs/run-format.md)."""
        start, stop = max(0, int(start)), min(self.n_shots, int(stop))
        self._check_alloc((stop - start, self.n_pixels), self.spectra_dtype.itemsize, "reading these spectra")
        try:
            data = self._spectra[start:stop]
        except (OSError, ValueError) as exc:
            raise RunFormatError(f"spectra cannot be read ({exc})", where=self._where,
                                 fix="the file is truncated or corrupt; copy the run again") from exc
        if not masked:
            return data
        return self.screen(np.arange(start, stop), data)

    def iter_chunks(self, chunk_shots: int = DEFAULT_CHUNK_SHOTS) -> Iterator[tuple[int, int, np.ndarray]]:
        """Yield ``(start, stop, spectra)`` over all shots in chunks of ``chunk_shots`` rows (float64)."""
        if chunk_shots < 1:
            raise ResourceLimitError(f"chunk size {chunk_shots} is not positive", where="chunk_shots",
                                     fix="use a chunk size of at least 1 shot")
        for start in range(0, self.n_shots, chunk_shots):
            stop = min(self.n_shots, start + chunk_shots)
            yield start, stop, self.read_shots(start, stop)


__all__ = ["Run", "memory_limit_from_env"]
