"""Pixel masks of a run: stored masks, sentinel and non-physical values, pixel ranges.

A pixel of a shot is *masked* when its value cannot be a measurement, or when the
run file says so.  Masked pixels are read as NaN by :class:`compquant.run.Run`
(``read_raw``, ``read_shots``, ``sample_spectra``) and never enter a line integral or
a fit (docs/run-format.md, "Pixel masks").  A value is masked when it is

* stored as masked in the ``/mask`` group (per run, or per shot);
* not finite (NaN, +-inf);
* a declared sentinel (the ``sentinel`` attribute of ``/spectra``, e.g. ``-9999``);
* for signed-integer storage, the most negative value of the type (a common
  blanking code of instrument software, common practice);
* beyond the plausible range: ``|v| >= 1e30`` (no detector or accumulation
  reaches 1e30 counts; the largest float32, 3.4e38, is a common dead-pixel code),
  and, when the run states its saturation level ``S``, ``v > 2 S`` or ``v < -S``
  (a reading cannot exceed the detector's full scale; the factor 2 leaves room for
  stored offsets and rounding -- common practice).

Stored masks are rows ``(shot, first_pixel, last_pixel, reason)`` with ``shot = -1``
for a mask that holds for every shot of the run (dead or blanked detector pixels).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compquant.errors import RunFormatError

#: absolute value from which a stored count is taken as a sentinel (see module docstring)
PLAUSIBLE_ABS_MAX = 1e30
#: multiple of the saturation level above which a value is beyond the detector's range
SATURATION_FACTOR = 2.0

REASON_STORED = "masked in the run file"
REASON_NONFINITE = "non-finite value"
REASON_SENTINEL = "sentinel or implausible value"


@dataclass(frozen=True)
class ValueLimits:
    """Values outside ``[lo, hi]`` or equal to a sentinel are masked."""

    lo: float
    hi: float
    sentinels: tuple[float, ...] = ()

    def describe(self) -> str:
        s = f"values outside [{self.lo:.6g}, {self.hi:.6g}] or not finite"
        if self.sentinels:
            s += " or equal to " + ", ".join(f"{v:g}" for v in self.sentinels)
        return s


def value_limits(dtype, saturation: float | None = None, sentinels=()) -> ValueLimits:
    """The plausible value range of stored counts (module docstring)."""
    dt = np.dtype(dtype)
    lo, hi = -PLAUSIBLE_ABS_MAX, PLAUSIBLE_ABS_MAX
    if saturation is not None and np.isfinite(saturation) and saturation > 0:
        hi = SATURATION_FACTOR * float(saturation)
        lo = -float(saturation)
    sent = [float(v) for v in np.atleast_1d(np.asarray(sentinels, dtype=float)) if np.isfinite(v)]
    if np.issubdtype(dt, np.signedinteger):
        sent.append(float(np.iinfo(dt).min))
    return ValueLimits(lo=lo, hi=hi, sentinels=tuple(sorted(set(sent))))


def find_bad(block: np.ndarray, limits: ValueLimits) -> np.ndarray | None:
    """Boolean mask of the implausible values of ``block``; None when there are none.

    A quick min/max pass finds clean blocks (the usual case) without building a mask.
    """
    a = np.asarray(block)
    if a.size == 0:
        return None
    mn, mx = a.min(), a.max()
    floating = np.issubdtype(a.dtype, np.floating)
    clean = (not floating or (np.isfinite(mn) and np.isfinite(mx))) and mn >= limits.lo and mx <= limits.hi
    if clean and limits.sentinels:
        clean = not any(mn <= s <= mx for s in limits.sentinels) or not np.isin(a, limits.sentinels).any()
    if clean:
        return None
    with np.errstate(invalid="ignore"):
        bad = (a < limits.lo) | (a > limits.hi)
    if floating:
        bad |= ~np.isfinite(a)
    if limits.sentinels:
        bad |= np.isin(a, limits.sentinels)
    return bad if bad.any() else None


def reason_codes(block: np.ndarray, bad: np.ndarray) -> np.ndarray:
    """Per bad value: 1 = non-finite, 2 = sentinel/implausible (0 where not bad)."""
    a = np.asarray(block)
    out = np.zeros(a.shape, dtype=np.int8)
    if np.issubdtype(a.dtype, np.floating):
        nf = ~np.isfinite(a)
        out[bad & nf] = 1
        out[bad & ~nf] = 2
    else:
        out[bad] = 2
    return out


def pixel_ranges(row_mask) -> list[tuple[int, int]]:
    """Runs of True in a 1-D boolean array as inclusive ``(first, last)`` pixel pairs."""
    m = np.asarray(row_mask, dtype=bool).astype(np.int8)
    if not m.any():
        return []
    d = np.diff(np.concatenate([[0], m, [0]]))
    starts = np.flatnonzero(d == 1)
    stops = np.flatnonzero(d == -1) - 1
    return [(int(a), int(b)) for a, b in zip(starts, stops)]


def describe_range(first: int, last: int, wavelength=None) -> str:
    """``"pixels 120-124 (300.120-300.128 nm)"`` or ``"pixel 7 (250.007 nm)"``."""
    txt = f"pixel {first}" if first == last else f"pixels {first}-{last}"
    if wavelength is not None:
        wl = np.asarray(wavelength)
        txt += f" ({wl[first]:.3f} nm)" if first == last else f" ({wl[first]:.3f}-{wl[last]:.3f} nm)"
    return txt


def describe_shots(shots) -> str:
    """``"shots 0-4, 7"``: compact list of shot numbers."""
    s = sorted({int(x) for x in shots})
    if not s:
        return "no shot"
    if s == [-1]:
        return "every shot"
    parts = []
    for a, b in pixel_ranges(np.isin(np.arange(s[0], s[-1] + 1), s)):
        parts.append(f"{a + s[0]}" if a == b else f"{a + s[0]}-{b + s[0]}")
    return ("shot " if len(s) == 1 else "shots ") + ", ".join(parts)


class StoredMask:
    """The ``/mask`` group of a run: rows (shot, first_pixel, last_pixel, reason)."""

    def __init__(self, shot, first, last, reason, n_shots: int, n_pixels: int, where: str):
        self.shot = np.asarray(shot, dtype=np.int64)
        self.first = np.asarray(first, dtype=np.int64)
        self.last = np.asarray(last, dtype=np.int64)
        self.reason = [str(r) for r in reason]
        k = self.shot.size
        if not (self.first.shape == self.last.shape == (k,)) or len(self.reason) != k:
            raise RunFormatError("the '/mask' datasets differ in length", where=where,
                                 fix="give shot, first_pixel, last_pixel and reason one entry per masked range")
        bad = (self.shot < -1) | (self.shot >= n_shots) | (self.first < 0) | (self.last >= n_pixels) | (
            self.first > self.last)
        if bad.any():
            i = int(np.argmax(bad))
            raise RunFormatError(f"'/mask' row {i} (shot {self.shot[i]}, pixels {self.first[i]}-{self.last[i]}) "
                                 f"lies outside the run ({n_shots} shots, {n_pixels} pixels)", where=where,
                                 fix="shot -1 masks every shot; pixels run from 0 to n_pixels-1, first <= last")
        self.n_pixels = n_pixels
        self.static = np.zeros(n_pixels, dtype=bool)
        for a, b in zip(self.first[self.shot == -1], self.last[self.shot == -1]):
            self.static[a : b + 1] = True
        per = self.shot >= 0
        order = np.argsort(self.shot[per], kind="stable")
        self._shots = self.shot[per][order]
        self._first = self.first[per][order]
        self._last = self.last[per][order]

    @property
    def empty(self) -> bool:
        return self.shot.size == 0

    def rows(self, shot_numbers: np.ndarray) -> np.ndarray | None:
        """Stored mask of the given file rows, (n, n_pixels) bool; None when nothing is masked."""
        rows = np.asarray(shot_numbers, dtype=np.int64)
        out = None
        if self.static.any():
            out = np.broadcast_to(self.static, (rows.size, self.n_pixels)).copy()
        if self._shots.size:
            lo = np.searchsorted(self._shots, rows.min() if rows.size else 0)
            hi = np.searchsorted(self._shots, rows.max() if rows.size else -1, side="right")
            for s, a, b in zip(self._shots[lo:hi], self._first[lo:hi], self._last[lo:hi]):
                hit = np.flatnonzero(rows == s)
                if hit.size:
                    if out is None:
                        out = np.zeros((rows.size, self.n_pixels), dtype=bool)
                    out[hit, a : b + 1] = True
        return out


def mask_entries(pixel_mask=None, masked_ranges=(), n_shots: int = 0, n_pixels: int = 0, where: str = "mask"):
    """Rows for the ``/mask`` group from a run-wide boolean pixel mask and per-shot ranges.

    ``masked_ranges``: iterable of ``(shot, first_pixel, last_pixel[, reason])``.
    """
    shot, first, last, reason = [], [], [], []
    if pixel_mask is not None:
        pm = np.asarray(pixel_mask, dtype=bool)
        if pm.shape != (n_pixels,):
            raise RunFormatError(f"pixel mask has shape {pm.shape}, expected ({n_pixels},)", where=where,
                                 fix="give one true/false per pixel")
        for a, b in pixel_ranges(pm):
            shot.append(-1)
            first.append(a)
            last.append(b)
            reason.append(REASON_STORED)
    for row in masked_ranges or ():
        row = tuple(row)
        if len(row) not in (3, 4):
            raise RunFormatError(f"masked range {row!r} is not (shot, first_pixel, last_pixel[, reason])",
                                 where=where, fix="give shot, first and last pixel (inclusive)")
        shot.append(int(row[0]))
        first.append(int(row[1]))
        last.append(int(row[2]))
        reason.append(str(row[3]) if len(row) == 4 else REASON_STORED)
    sm = StoredMask(shot, first, last, reason, n_shots, n_pixels, where)
    return sm


__all__ = [
    "PLAUSIBLE_ABS_MAX",
    "REASON_NONFINITE",
    "REASON_SENTINEL",
    "REASON_STORED",
    "StoredMask",
    "ValueLimits",
    "describe_range",
    "describe_shots",
    "find_bad",
    "mask_entries",
    "pixel_ranges",
    "reason_codes",
    "value_limits",
]
