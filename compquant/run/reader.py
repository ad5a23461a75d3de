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
    SAMPLE_COLUMNS,
)


def memory_limit_from_env(default: int = DEFAULT_MEMORY_LIMIT) -> int:
    """The memory limit in bytes from ``COMPQUANT_MEMORY_LIMIT`` (e.g. ``512M``, ``4G``), else ``default``."""
    raw = os.environ.get("COMPQUANT_MEMORY_LIMIT", "").strip()
    if not raw:
        return default
    mult = {"K": 1024, "M": 1024**2, "G": 1024**3, "T": 1024**4}
    try:
        if raw[-1].upper() in mult:
            return int(float(raw[:-1]) * mult[raw[-1].upper()])
        return int(float(raw))
    except ValueError as exc:
        raise ResourceLimitError(f"COMPQUANT_MEMORY_LIMIT={raw!r} is not a size", where="environment",
                                 fix="use a number of bytes or a size like 512M or 4G") from exc


def _decode(values) -> list[str]:
    out = []
    for v in values:
        if isinstance(v, bytes):
            v = v.decode("utf-8", "replace")
        out.append(str(v))
    return out


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

    HDF5 external links, soft links, datasets with external storage and virtual datasets all
    let another file change the numbers without changing the run file's hash.
    """
    found = []

    def visit(name, link):
        if isinstance(link, (h5py.ExternalLink, h5py.SoftLink)):
            found.append(f"'{name}' is a link to {getattr(link, 'filename', '') or link.path}")
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

    Use :meth:`open` (or the constructor) as a context manager::

        with Run.open("day1.h5") as run:
            for sid in run.samples.sample_id:
                spectra = run.sample_spectra(sid)

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
    """

    def __init__(self, path: str | os.PathLike, memory_limit_bytes: int | None = None):
        self.path = require_file(path, "run file")
        self.memory_limit = int(memory_limit_bytes) if memory_limit_bytes is not None else memory_limit_from_env()
        where = str(self.path)
        self._where = where
        try:
            self._h5 = h5py.File(self.path, "r")
        except OSError as exc:
            with open(self.path, "rb") as fh:
                sig = fh.read(8)
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
        except (OSError, KeyError, ValueError, TypeError) as exc:
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

    def _need(self, name: str):
        if name not in self._h5:
            raise RunFormatError(f"dataset '{name}' is missing", where=self._where,
                                 fix="the file is not a complete compquant run; rebuild it with "
                                     "'compquant convert' or the instrument export")
        obj = self._h5[name]
        return obj

    def _check_alloc(self, shape: tuple, itemsize: int, what: str) -> None:
        n = itemsize
        for s in shape:
            n *= int(s)
        if n > self.memory_limit:
            raise ResourceLimitError(
                f"{what} would need {n / 1024**2:.0f} MiB, above the memory limit of "
                f"{self.memory_limit / 1024**2:.0f} MiB (declared shape {tuple(int(s) for s in shape)})",
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
        if not isinstance(wl_ds, h5py.Dataset):
            raise RunFormatError("'wavelength' is not a dataset", where=where, fix="rebuild the run")
        self._check_alloc(wl_ds.shape, 8, "the wavelength axis")
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
        if not isinstance(sp, h5py.Dataset):
            raise RunFormatError("'spectra' is not a dataset", where=where, fix="rebuild the run")
        self._spectra = sp
        _checks.check_spectra_header(sp.shape, sp.dtype, self.wavelength.size, where)
        self.n_shots, self.n_pixels = int(sp.shape[0]), int(sp.shape[1])
        sat = sp.attrs.get("saturation")
        self.saturation = float(sat) if sat is not None else None
        exp = sp.attrs.get("exposure_s")
        self.exposure_s = float(exp) if exp is not None else None
        self.spectra_dtype = sp.dtype
        # samples
        sg = self._need("samples")
        cols = {}
        for col in SAMPLE_COLUMNS:
            if col not in sg:
                if col in ("sample_id", "role"):
                    raise RunFormatError(f"sample table has no '{col}' column", where=where,
                                         fix="rebuild the run with 'compquant convert'")
                cols[col] = None
                continue
            ds = sg[col]
            self._check_alloc(ds.shape, 64, f"sample column '{col}'")
            cols[col] = _decode(ds[()])
        n_samp = len(cols["sample_id"])
        for col in SAMPLE_COLUMNS:
            if cols[col] is None:
                cols[col] = [""] * n_samp
            if len(cols[col]) != n_samp:
                raise RunFormatError(f"sample column '{col}' has {len(cols[col])} rows, 'sample_id' has {n_samp}",
                                     where=where, fix="rebuild the sample table")
        _checks.check_samples(cols["sample_id"], cols["role"], cols["standard_ref"], where)
        # shots
        shg = self._need("shots")
        if "sample_index" not in shg:
            raise RunFormatError("per-shot column 'shots/sample_index' is missing", where=where,
                                 fix="give each shot its sample index")
        # the per-shot table is held in memory: about 8 bytes per column (plus the sample-id column) per shot
        n_cols = 2 + sum(1 for k in shg.keys() if k != "sample_index") + 2
        self._check_alloc(shg["sample_index"].shape, 8 * n_cols, "the per-shot table")
        idx = np.asarray(shg["sample_index"][()])
        _checks.check_sample_index(idx, n_samp, self.n_shots, where)
        shots = {"sample_index": idx.astype(np.int64)}
        for name in ("shot", "pulse_energy_mj", "time_s", "x_mm", "y_mm"):
            if name in shg:
                vals = np.asarray(shg[name][()])
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
        self._dark = self._h5.get("dark")
        if self._dark is not None:
            _checks.check_spectra_header(self._dark.shape, self._dark.dtype, self.n_pixels, where, "dark")
            de = self._dark.attrs.get("exposure_s")
            self.dark_exposure_s = float(de) if de is not None else None
        else:
            self.dark_exposure_s = None
        self._response = self._h5.get("response")
        if self._response is not None and self._response.shape != (self.n_pixels,):
            raise RunFormatError(f"'response' has shape {self._response.shape}, expected ({self.n_pixels},)",
                                 where=where, fix="store one relative response value per pixel")
        self.instrument = _attrs(self._h5["instrument"]) if "instrument" in self._h5 else {}
        self.instrument.pop("NX_class", None)
        self.acquisition = _attrs(self._h5["acquisition"]) if "acquisition" in self._h5 else {}

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
        return np.asarray(data, dtype=np.float64)

    def dark(self) -> np.ndarray | None:
        """Dark frames (n_dark, n_pixels) as float64, or None when the run has none."""
        if self._dark is None:
            return None
        self._check_alloc(self._dark.shape, 16, "the dark frames")
        return np.asarray(self._dark[()], dtype=np.float64)

    def response(self) -> np.ndarray | None:
        """Relative spectral response (n_pixels,) or None."""
        if self._response is None:
            return None
        return np.asarray(self._response[()], dtype=np.float64)

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

    def read_raw(self, start: int, stop: int) -> np.ndarray:
        """Shots ``start:stop`` in their stored dtype (no conversion)."""
        start, stop = max(0, int(start)), min(self.n_shots, int(stop))
        self._check_alloc((stop - start, self.n_pixels), self.spectra_dtype.itemsize, "reading these spectra")
        try:
            return self._spectra[start:stop]
        except (OSError, ValueError) as exc:
            raise RunFormatError(f"spectra cannot be read ({exc})", where=self._where,
                                 fix="the file is truncated or corrupt; copy the run again") from exc

    def iter_chunks(self, chunk_shots: int = DEFAULT_CHUNK_SHOTS) -> Iterator[tuple[int, int, np.ndarray]]:
        """Yield ``(start, stop, spectra)`` over all shots in chunks of ``chunk_shots`` rows (float64)."""
        if chunk_shots < 1:
            raise ResourceLimitError(f"chunk size {chunk_shots} is not positive", where="chunk_shots",
                                     fix="use a chunk size of at least 1 shot")
        for start in range(0, self.n_shots, chunk_shots):
            stop = min(self.n_shots, start + chunk_shots)
            yield start, stop, self.read_shots(start, stop)


__all__ = ["Run", "memory_limit_from_env"]
