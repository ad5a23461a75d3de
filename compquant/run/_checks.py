"""Checks shared by the run writer, reader and validator.

Each check raises :class:`compquant.errors.RunFormatError` with where/what/fix.
"""

from __future__ import annotations

import numpy as np

from compquant.errors import RunFormatError
from compquant.run.format import ROLES


def check_wavelength(wl: np.ndarray, where: str) -> None:
    if wl.ndim != 1:
        raise RunFormatError(f"'wavelength' must be 1-D, got shape {wl.shape}", where=where,
                             fix="store one wavelength per pixel")
    if wl.size < 2:
        raise RunFormatError("'wavelength' has fewer than 2 pixels", where=where,
                             fix="store the full wavelength axis")
    if not np.issubdtype(wl.dtype, np.number) or np.issubdtype(wl.dtype, np.complexfloating):
        raise RunFormatError(f"'wavelength' has non-numeric dtype {wl.dtype}", where=where,
                             fix="store wavelengths as float64 nm")
    bad = ~np.isfinite(wl)
    if bad.any():
        raise RunFormatError(f"'wavelength' holds NaN or infinite values (first at pixel {int(np.argmax(bad))})",
                             where=where, fix="re-export the wavelength calibration")
    d = np.diff(wl)
    if (d <= 0).any():
        i = int(np.argmax(d <= 0))
        kind = "duplicated" if d[i] == 0 else "decreasing"
        raise RunFormatError(f"'wavelength' is not strictly increasing ({kind} at pixel {i + 1}: "
                             f"{wl[i]:.6g} then {wl[i + 1]:.6g} nm)", where=where,
                             fix="sort pixels by wavelength and drop duplicates before writing the run")
    if wl[0] <= 0:
        raise RunFormatError(f"'wavelength' starts at {wl[0]:.6g} nm, not a positive wavelength", where=where,
                             fix="store wavelengths in nm")


def check_spectra_header(shape: tuple, dtype: np.dtype, n_pixels: int, where: str, name: str = "spectra") -> None:
    if len(shape) != 2:
        raise RunFormatError(f"'{name}' must be 2-D (shots x pixels), got shape {shape}", where=where,
                             fix="store one row per shot")
    if not (np.issubdtype(dtype, np.integer) or np.issubdtype(dtype, np.floating)) or dtype == np.bool_:
        raise RunFormatError(f"'{name}' has non-numeric dtype {dtype}", where=where,
                             fix="store counts as unsigned/signed integers or floats")
    if shape[1] != n_pixels:
        raise RunFormatError(f"'{name}' has {shape[1]} pixels per row but 'wavelength' has {n_pixels}",
                             where=where, fix="write spectra and wavelength with the same pixel count")
    if name == "spectra" and shape[0] == 0:
        raise RunFormatError("'spectra' holds no shots", where=where, fix="the run is empty; record shots")


def check_samples(ids: list[str], roles: list[str], refs: list[str], where: str) -> None:
    if len(ids) == 0:
        raise RunFormatError("the sample table is empty", where=where, fix="describe at least one sample")
    seen: dict[str, int] = {}
    for i, sid in enumerate(ids):
        if not sid or not str(sid).strip():
            raise RunFormatError(f"sample {i} has an empty id", where=where, fix="give every sample an id")
        if sid in seen:
            raise RunFormatError(f"duplicate sample id {sid!r} (rows {seen[sid]} and {i})", where=where,
                                 fix="give every sample a unique id")
        seen[sid] = i
    for sid, role, ref in zip(ids, roles, refs):
        if role not in ROLES:
            raise RunFormatError(f"sample {sid!r} has unknown role {role!r}", where=where,
                                 fix=f"use one of {', '.join(ROLES)}")
        if role in ("standard", "check") and not str(ref).strip():
            raise RunFormatError(f"sample {sid!r} has role {role!r} but no certified-standard reference",
                                 where=where, fix="fill standard_ref with the standard's id")


def check_sample_index(idx: np.ndarray, n_samples: int, n_shots: int, where: str) -> None:
    if idx.shape != (n_shots,):
        raise RunFormatError(f"'shots/sample_index' has {idx.size} entries but 'spectra' has {n_shots} shots",
                             where=where, fix="give one sample index per shot")
    if not np.issubdtype(idx.dtype, np.integer):
        raise RunFormatError(f"'shots/sample_index' has dtype {idx.dtype}, not integer", where=where,
                             fix="store sample indices as integers")
    if idx.size and (idx.min() < 0 or idx.max() >= n_samples):
        bad = int(np.argmax((idx < 0) | (idx >= n_samples)))
        raise RunFormatError(f"shot {bad} refers to sample index {int(idx[bad])}, but the sample table has "
                             f"{n_samples} rows", where=where, fix="sample indices run from 0 to n_samples-1")


def check_shot_column(name: str, values: np.ndarray, n_shots: int, where: str) -> None:
    if values.shape != (n_shots,):
        raise RunFormatError(f"'shots/{name}' has {values.size} entries for {n_shots} shots", where=where,
                             fix="give one value per shot")
    if not np.issubdtype(values.dtype, np.number):
        raise RunFormatError(f"'shots/{name}' has non-numeric dtype {values.dtype}", where=where,
                             fix="store it as numbers")


#: widest ratio between the largest and the smallest relative response value accepted; beyond it,
#: dividing by the response turns counts into numbers no detector gives (a response of 1e-300
#: would make every count 1e300). Common practice: a grating/detector response varies by a few
#: orders of magnitude across its range at most.
MAX_RESPONSE_RANGE = 1e6


def check_response(r: np.ndarray, where: str) -> None:
    bad = ~np.isfinite(r)
    if bad.any():
        raise RunFormatError(f"'response' holds NaN or infinite values (first at pixel {int(np.argmax(bad))})",
                             where=where, fix="re-measure or re-export the relative response")
    if (r <= 0).any():
        i = int(np.argmax(r <= 0))
        raise RunFormatError(f"'response' is {r[i]:.6g} at pixel {i}, not above zero", where=where,
                             fix="a relative response is positive at every pixel")
    if r.max() > MAX_RESPONSE_RANGE or r.min() < 1.0 / MAX_RESPONSE_RANGE**2:
        raise RunFormatError(f"'response' spans {r.min():.3g} to {r.max():.3g}, outside the range of a relative "
                             f"response ({1.0 / MAX_RESPONSE_RANGE**2:.0e} to {MAX_RESPONSE_RANGE:.0e})", where=where,
                             fix="normalise the response curve (e.g. to 1 at its maximum)")
    if r.max() / r.min() > MAX_RESPONSE_RANGE:
        raise RunFormatError(f"'response' spans {r.min():.3g} to {r.max():.3g}, a range above "
                             f"{MAX_RESPONSE_RANGE:.0e}", where=where,
                             fix="check the response curve; crop the pixels the spectrometer does not cover")
