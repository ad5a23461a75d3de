"""Build a run from the plain-text or CSV spectra an instrument exports.

Two layouts of spectra are read:

* a **folder of two-column files** (wavelength, intensity), one file per shot.
  Files are assigned to samples by the ``files`` column of the samples CSV (a
  glob pattern relative to the folder) or, when that column is absent, by file
  name: ``<sample_id>.txt`` or ``<sample_id><sep><shot number>.<ext>`` with
  ``sep`` one of ``_ - .`` (the longest matching sample id wins);
* **one wide table** (CSV): the first column is the wavelength, every other
  column is a shot whose header is the sample id, optionally followed by
  ``:<shot>`` (``BR-7:3``).

The samples CSV has the columns ``sample_id, role, standard_ref,
description`` (and optionally ``files``). Dark frames are optional
two-column files (or a folder of them) on the same wavelength axis.
"""

from __future__ import annotations

import csv
import fnmatch
import io
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from compquant.errors import InputError
from compquant.fileio import read_input, require_file
from compquant.run._checks import check_samples, check_wavelength
from compquant.run.mask import (
    REASON_NONFINITE,
    REASON_SENTINEL,
    describe_range,
    find_bad,
    pixel_ranges,
    reason_codes,
    value_limits,
)
from compquant.run.writer import write_run

SPECTRUM_SUFFIXES = (".txt", ".csv", ".tsv", ".dat", ".asc")
# numbers, and NaN / inf cells, which become masked pixels (compquant.run.mask)
_NUM = re.compile(r"^[+-]?((\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?|nan|inf|infinity)$", re.IGNORECASE)


@dataclass
class ConvertReport:
    """What :func:`convert_to_run` read and wrote."""

    output: Path
    n_files: int = 0
    n_shots: int = 0
    n_pixels: int = 0
    wl_min: float = float("nan")
    wl_max: float = float("nan")
    n_dark: int = 0
    shots_per_sample: dict = field(default_factory=dict)
    skipped_files: list = field(default_factory=list)
    masked: list = field(default_factory=list)  # (sample_id, shot, first_pixel, last_pixel, reason)

    def text(self) -> str:
        lines = [f"wrote {self.output}",
                 f"read {self.n_files} spectrum file(s): {self.n_shots} shots x {self.n_pixels} pixels, "
                 f"{self.wl_min:.3f} – {self.wl_max:.3f} nm; {self.n_dark} dark frame(s)"]
        for sid, n in self.shots_per_sample.items():
            lines.append(f"  {sid}: {n} shot(s)")
        if self.skipped_files:
            lines.append(f"ignored {len(self.skipped_files)} file(s) matching no sample: "
                         + ", ".join(self.skipped_files[:10]) + (" ..." if len(self.skipped_files) > 10 else ""))
        if self.masked:
            lines.append(f"masked {len(self.masked)} pixel range(s) (stored as NaN, listed in the run's /mask):")
            for sid, shot, a, b, reason in self.masked[:10]:
                lines.append(f"  {sid} shot {shot}: {describe_range(a, b)}, {reason}")
            if len(self.masked) > 10:
                lines.append(f"  ... and {len(self.masked) - 10} more ('compquant inspect' lists them all)")
        return "\n".join(lines)


def _split(line: str) -> list[str]:
    for sep in ("\t", ";", ","):
        if sep in line:
            return [c.strip() for c in line.split(sep)]
    return line.split()


def read_two_column(path: Path) -> tuple[np.ndarray, np.ndarray]:
    """Read a (wavelength nm, intensity) text file; header and ``#`` comment lines are skipped."""
    try:
        text = path.read_text(encoding="utf-8", errors="strict")
    except UnicodeDecodeError as exc:
        raise InputError("not a UTF-8 text file", where=str(path), fix="export the spectrum as text/CSV") from exc
    wl, y = [], []
    for n, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith(("#", "//", "%")):
            continue
        cells = [c for c in _split(line) if c != ""]
        if len(cells) < 2 or not (_NUM.match(cells[0]) and _NUM.match(cells[1])):
            if not wl:  # header lines before the data
                continue
            raise InputError(f"line {n} is not two numbers: {raw[:60]!r}", where=str(path),
                             fix="keep one 'wavelength intensity' pair per line")
        wl.append(float(cells[0]))
        y.append(float(cells[1]))
    if len(wl) < 2:
        raise InputError("holds fewer than 2 data rows", where=str(path),
                         fix="give a spectrum as two columns: wavelength (nm), intensity")
    return np.asarray(wl), np.asarray(y)


def _read_samples(src) -> pd.DataFrame:
    """The samples table from ``src`` (:class:`compquant.fileio.InputBytes`: a file or standard input, read once)."""
    path = src.where
    try:
        df = pd.read_csv(io.BytesIO(src.data), dtype=str, keep_default_na=False)
    except (pd.errors.ParserError, UnicodeDecodeError, pd.errors.EmptyDataError) as exc:
        raise InputError(f"cannot read the samples table ({exc})", where=str(path),
                         fix="give a CSV with columns sample_id, role, standard_ref, description") from exc
    df.columns = [c.strip() for c in df.columns]
    if "sample_id" not in df.columns or "role" not in df.columns:
        raise InputError("the samples table needs columns 'sample_id' and 'role'", where=str(path),
                         fix="add them (columns: sample_id, role, standard_ref, description)")
    for col in ("standard_ref", "description"):
        if col not in df.columns:
            df[col] = ""
    df = df.apply(lambda c: c.str.strip())
    check_samples(list(df.sample_id), list(df.role), list(df.standard_ref), str(path))
    return df


def _match_files(files: list[Path], folder: Path, samples: pd.DataFrame) -> tuple[dict, list[str]]:
    by_sample: dict[str, list[Path]] = {sid: [] for sid in samples.sample_id}
    skipped = []
    if "files" in samples.columns and samples["files"].str.len().gt(0).any():
        for f in files:
            rel = f.relative_to(folder).as_posix()
            hit = [sid for sid, pat in zip(samples.sample_id, samples["files"]) if pat and fnmatch.fnmatch(rel, pat)]
            if len(hit) > 1:
                raise InputError(f"file {rel!r} matches the patterns of several samples ({', '.join(hit)})",
                                 where=str(folder), fix="make the 'files' patterns distinct")
            (by_sample[hit[0]].append(f) if hit else skipped.append(rel))
        return by_sample, skipped
    ids = sorted(samples.sample_id, key=len, reverse=True)
    for f in files:
        stem = f.stem
        hit = None
        for sid in ids:
            if stem == sid or (stem.startswith(sid) and len(stem) > len(sid) and stem[len(sid)] in "_-."
                               and stem[len(sid) + 1:].isdigit()):
                hit = sid
                break
        (by_sample[hit].append(f) if hit else skipped.append(f.name))
    return by_sample, skipped


def _shot_key(p: Path):
    m = re.search(r"(\d+)$", p.stem)
    return (int(m.group(1)) if m else -1, p.name)


def _same_axis(ref: np.ndarray, wl: np.ndarray, where: str) -> None:
    if wl.shape != ref.shape or not np.allclose(wl, ref, rtol=1e-9, atol=1e-9):
        raise InputError(f"wavelength axis differs from the first file ({wl.size} vs {ref.size} pixels, "
                         f"{wl[0]:.4f}–{wl[-1]:.4f} vs {ref[0]:.4f}–{ref[-1]:.4f} nm)", where=where,
                         fix="export every spectrum on the same wavelength axis")


def _read_wide(path: Path, samples: pd.DataFrame):
    require_file(path, "spectra table")
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise InputError("not a UTF-8 text file", where=str(path), fix="export the table as UTF-8 CSV") from exc
    rows = [r for r in csv.reader(io.StringIO(text)) if r and not r[0].lstrip().startswith("#")]
    if len(rows) < 3:
        raise InputError("the wide table needs a header row and at least 2 data rows", where=str(path),
                         fix="first column wavelength, one column per shot headed by its sample id")
    header = [h.strip() for h in rows[0]]
    try:
        data = np.array([[float(c) for c in r] for r in rows[1:]], dtype=float)
    except ValueError as exc:
        raise InputError(f"non-numeric cell in the data rows ({exc})", where=str(path),
                         fix="keep only numbers below the header row") from exc
    if data.shape[1] != len(header):
        raise InputError(f"rows have {data.shape[1]} cells but the header has {len(header)}", where=str(path),
                         fix="give every row one cell per header column")
    known = set(samples.sample_id)
    cols_by_sample: dict[str, list[int]] = {sid: [] for sid in samples.sample_id}
    for j, h in enumerate(header[1:], start=1):
        sid = h.rsplit(":", 1)[0] if ":" in h and h.rsplit(":", 1)[1].isdigit() else h
        if sid not in known:
            raise InputError(f"column {j + 1} is headed {h!r}, which is not a sample id in the samples table",
                             where=str(path), fix="head each shot column with its sample id (optionally ':<shot>')")
        cols_by_sample[sid].append(j)
    return data[:, 0], data, cols_by_sample


def _read_dark(dark_paths, ref_wl) -> np.ndarray | None:
    files: list[Path] = []
    for p in dark_paths or ():
        p = Path(p)
        if p.is_dir():
            files += sorted(f for f in p.iterdir() if f.suffix.lower() in SPECTRUM_SUFFIXES)
        else:
            files.append(require_file(p, "dark file"))
    if not files:
        return None
    frames = []
    for f in files:
        wl, y = read_two_column(f)
        _same_axis(ref_wl, wl, str(f))
        frames.append(y)
    return np.vstack(frames)


def _storage_dtype(arr: np.ndarray):
    if np.all(np.isfinite(arr)) and np.all(arr == np.rint(arr)):
        lo, hi = arr.min(), arr.max()
        for dt in (np.uint16, np.int32):
            info = np.iinfo(dt)
            if lo >= info.min and hi <= info.max:
                return dt
    return np.float64


def _mask_values(data: np.ndarray, idx: np.ndarray, samples, saturation, sentinels, report) -> tuple:
    """NaN at non-finite, sentinel and implausible values (compquant.run.mask); the masked
    ranges as ``/mask`` rows ``(shot, first, last, reason)`` and in ``report.masked``."""
    limits = value_limits(np.float64, saturation, sentinels)
    bad = find_bad(data, limits)
    if bad is None:
        return data, []
    codes = reason_codes(data, bad)
    data = np.where(bad, np.nan, data)
    rows = []
    for i in np.flatnonzero(bad.any(axis=1)):
        for code, reason in ((1, REASON_NONFINITE), (2, REASON_SENTINEL)):
            for a, b in pixel_ranges(codes[i] == code):
                rows.append((int(i), a, b, reason))
    shot_in_sample = np.zeros(idx.size, dtype=int)
    for k in np.unique(idx):
        shot_in_sample[idx == k] = np.arange(int((idx == k).sum()))
    report.masked = [(str(samples.sample_id.iloc[int(idx[i])]), int(shot_in_sample[i]), a, b, r)
                     for i, a, b, r in rows]
    return data, rows


def convert_to_run(spectra: str | Path, samples_csv: str | Path, output: str | Path, *, dark=(),
                   saturation: float | None = None, medium: str = "air", instrument: dict | None = None,
                   acquisition: dict | None = None, sentinels=()) -> ConvertReport:
    """Build a run file from text spectra (folder of two-column files, or one wide CSV) and a samples CSV.

    The spectra axis must be strictly increasing and shared by every file; a
    sample listed without spectra is an error. Inputs are only read. Non-finite,
    sentinel (``sentinels``, e.g. ``-9999``) and implausible values (compquant.run.mask)
    become masked pixels: stored as NaN, listed in the run's ``/mask`` and in the report.
    ``samples_csv``: a file, ``-`` for standard input or an :class:`compquant.fileio.InputBytes`
    already read (:func:`compquant.fileio.read_input`; at most ``MAX_TABLE_BYTES``).
    """
    spectra = Path(spectra)
    src = read_input(samples_csv, "samples CSV")
    samples = _read_samples(src)
    samples_file = src.path.resolve() if src.path is not None else None
    report = ConvertReport(output=Path(output))
    if spectra.is_dir():
        files = sorted(f for f in spectra.rglob("*") if f.is_file() and f.suffix.lower() in SPECTRUM_SUFFIXES
                       and f.resolve() != samples_file)
        if not files:
            raise InputError("the spectra folder holds no .txt/.csv/.tsv/.dat/.asc files", where=str(spectra),
                             fix="put one two-column file per shot in the folder")
        by_sample, skipped = _match_files(files, spectra, samples)
        report.skipped_files = skipped
        ref_wl = None
        blocks, index = [], []
        for k, sid in enumerate(samples.sample_id):
            for f in sorted(by_sample[sid], key=_shot_key):
                wl, y = read_two_column(f)
                if ref_wl is None:
                    check_wavelength(wl, str(f))
                    ref_wl = wl
                else:
                    _same_axis(ref_wl, wl, str(f))
                blocks.append(y)
                index.append(k)
                report.n_files += 1
        if ref_wl is None:
            raise InputError("no file in the folder matches a sample id", where=str(spectra),
                             fix="name files '<sample_id>_<shot>.txt' or give a 'files' pattern per sample")
        wl = ref_wl
        data = np.vstack(blocks)
        idx = np.asarray(index)
    else:
        wl, table, cols = _read_wide(spectra, samples)
        check_wavelength(wl, str(spectra))
        order = [(k, j) for k, sid in enumerate(samples.sample_id) for j in cols[sid]]
        if not order:
            raise InputError("the wide table has no shot columns", where=str(spectra),
                             fix="add one column per shot headed by its sample id")
        data = np.vstack([table[:, j] for _, j in order])
        idx = np.asarray([k for k, _ in order])
        report.n_files = 1
    counts = np.bincount(idx, minlength=len(samples))
    empty = [sid for sid, n in zip(samples.sample_id, counts) if n == 0]
    if empty:
        raise InputError(f"no spectra found for sample(s) {', '.join(map(repr, empty))}", where=str(spectra),
                         fix="add their files/columns or remove them from the samples table")
    dk = _read_dark(dark, wl)
    order = np.argsort(idx, kind="stable")
    data, idx = data[order], idx[order]
    data, mask_rows = _mask_values(data, idx, samples, saturation, sentinels, report)
    write_run(output, wl, data, samples[["sample_id", "role", "standard_ref", "description"]],
              idx, dark=dk, saturation=saturation, medium=medium, instrument=instrument or {},
              acquisition=acquisition or {}, dtype=_storage_dtype(data), masked_ranges=mask_rows,
              sentinels=sentinels)
    report.n_shots, report.n_pixels = data.shape
    report.wl_min, report.wl_max = float(wl[0]), float(wl[-1])
    report.n_dark = 0 if dk is None else dk.shape[0]
    report.shots_per_sample = {sid: int(n) for sid, n in zip(samples.sample_id, counts)}
    return report


__all__ = ["ConvertReport", "convert_to_run", "read_two_column"]
