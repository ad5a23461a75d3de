"""Column sums of many spectra that do not depend on how the rows are grouped or ordered.

Floating-point addition is not associative: adding the same spectra chunk by chunk, with
other chunk sizes or on other workers, changes the last bits of a sum, and the mean spectra
built from such sums feed decisions (wavelength shift, fitted line shapes) that can amplify
those bits.  :class:`FixedPointSum` makes the per-sample sums reproducible: every value is
first rounded, on its own, to a fixed grid, and the grid values are then added exactly, so
the result is the same for any chunking, any row order, any number of threads or Dask
workers.  This is the "pre-rounding" idea of reproducible summation (Demmel & Nguyen, "Fast
reproducible floating-point summation", Proc. 21st IEEE Symposium on Computer Arithmetic
(ARITH 21), 2013, 163-172), with two fixed levels instead of data-dependent ones so that no
pass over the data is needed first:

* ``q1 = (x + C1) - C1`` with ``C1 = 1.5 * 2**52`` is ``x`` rounded to an integer (exact
  for ``|x| < 2**51``, round-half-even), ``r = x - q1`` is exact and ``|r| <= 1/2``;
* ``q2 = (r + C2) - C2`` with ``C2 = 1.5 * 2**(52 - F)`` is ``r`` rounded to the grid
  ``2**-F``; the rest, at most ``2**-(F+1)``, is dropped.

Sums of integers below ``2**53`` and of multiples of ``2**-F`` below ``2**(53-F)`` are exact
in binary floating point, so blocks of at most ``BLOCK_ROWS`` rows are summed in float64
(exactly), and the block sums go into two 64-bit integer accumulators (exact, associative).
With ``F = 40`` a value is kept to 4.5e-13 of the data's units (counts): far below any
detector noise.  Values with ``|x| >= 2**39`` and non-finite ones are summed in floating
point in a separate channel (as before this module; they do not occur in counts).
"""

from __future__ import annotations

import numpy as np

FRACTION_BITS = 40
_C1 = 1.5 * 2.0**52
_C2 = 1.5 * 2.0 ** (52 - FRACTION_BITS)
_LO_SCALE = 2.0**FRACTION_BITS
LIMIT = 2.0**39
#: rows per exact float block: 8192 * 2**39 < 2**53 (integers) and 8192 * 2**-1 <= 2**(53-40)
BLOCK_ROWS = 8192
_CACHE_VALUES = 1 << 16  # values per step (512 KiB per buffer): the work stays in the CPU cache


class FixedPointSum:
    """Exact, order-independent accumulator of column sums of 2-D float arrays (module docstring)."""

    __slots__ = ("hi", "lo", "rest", "n")

    def __init__(self, n_columns: int):
        self.hi = np.zeros(n_columns, dtype=np.int64)  # integer parts
        self.lo = np.zeros(n_columns, dtype=np.int64)  # fractions, in units of 2**-F
        self.rest = None  # float sum of non-finite or huge values (None while there are none)
        self.n = 0

    @classmethod
    def of_rows(cls, rows: np.ndarray) -> FixedPointSum:
        rows = np.asarray(rows, dtype=np.float64)
        acc = cls(rows.shape[1])
        acc.add_rows(rows)
        return acc

    def add_rows(self, rows: np.ndarray) -> None:
        """Add the rows of ``rows`` (shape (n, n_columns))."""
        rows = np.asarray(rows, dtype=np.float64)
        n = rows.shape[0]
        if n == 0:
            return
        if not (rows.max() < LIMIT and rows.min() > -LIMIT):  # also catches NaN
            ok = np.abs(rows) < LIMIT
            extra = np.where(ok, 0.0, rows).sum(axis=0)
            self.rest = extra if self.rest is None else self.rest + extra
            rows = np.where(ok, rows, 0.0)
        m = rows.shape[1]
        sub = max(1, min(n, _CACHE_VALUES // max(m, 1)))  # rows per cache-sized step
        q, r = np.empty((sub, m)), np.empty((sub, m))
        s1, s2, t = np.zeros(m), np.zeros(m), np.empty(m)
        done = 0  # rows in s1, s2 since the last move to the integer accumulators
        for a in range(0, n, sub):
            blk = rows[a : a + sub]
            k = blk.shape[0]
            qk, rk = q[:k], r[:k]
            np.add(blk, _C1, out=qk)
            qk -= _C1  # x rounded to an integer (exact)
            np.subtract(blk, qk, out=rk)  # exact, |r| <= 1/2
            rk += _C2
            rk -= _C2  # rounded to the grid 2**-F
            s1 += np.sum(qk, axis=0, out=t)  # integer-valued partial sums: exact
            s2 += np.sum(rk, axis=0, out=t)  # multiples of 2**-F below 2**(53-F): exact
            done += k
            if done + sub > BLOCK_ROWS or a + sub >= n:
                self.hi += s1.astype(np.int64)
                self.lo += (s2 * _LO_SCALE).astype(np.int64)
                s1[:] = 0.0
                s2[:] = 0.0
                done = 0
        self.n += n

    def merge(self, other: FixedPointSum) -> None:
        """Add another accumulator's sums (exact)."""
        self.hi += other.hi
        self.lo += other.lo
        if other.rest is not None:
            self.rest = other.rest.copy() if self.rest is None else self.rest + other.rest
        self.n += other.n

    def copy(self) -> FixedPointSum:
        new = FixedPointSum(self.hi.size)
        new.merge(self)
        return new

    def value(self) -> np.ndarray:
        """The column sums as float64 (from the exact grid sums, rounded twice at most)."""
        whole = np.floor_divide(self.lo, 1 << FRACTION_BITS)  # carry whole units out of the fractions
        frac = self.lo - whole * (1 << FRACTION_BITS)
        out = (self.hi + whole).astype(np.float64) + frac.astype(np.float64) / _LO_SCALE
        return out if self.rest is None else out + self.rest

    # the operations of the plain float arrays these sums replace (``a += b``, ``a + b``,
    # ``a / n``, ``np.asarray(a)``), so callers read as before
    def __iadd__(self, other: FixedPointSum) -> FixedPointSum:
        self.merge(other)
        return self

    def __add__(self, other: FixedPointSum) -> FixedPointSum:
        new = self.copy()
        new.merge(other)
        return new

    def __truediv__(self, k):
        return self.value() / k

    def __array__(self, dtype=None, copy=None):
        v = self.value()
        return v if dtype is None else v.astype(dtype)


def row_products(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``a @ b`` with each row of the result independent of how many rows ``a`` has.

    BLAS picks other kernels, and so other rounding, for other numbers of rows: ``a @ b`` on
    a chunk of 37 rows, of 1 row and of 4096 rows can differ in the last bit for the same row.
    (numpy's own reductions also change order with the shape.)  Here a vector ``b``, and each
    column of a matrix ``b`` restricted to its non-zero rows ``nz`` (line windows and fitted
    profiles touch a few pixels each), go through numpy's ``einsum`` loop for ``ij,j->i``: no
    BLAS, one fixed order of the products along each row, whatever the number of rows.
    """
    a = np.ascontiguousarray(a, dtype=np.float64)  # einsum's loop order follows the memory layout
    if b.ndim == 1:
        return np.einsum("ij,j->i", a, np.ascontiguousarray(b, dtype=np.float64))
    out = np.empty((a.shape[0], b.shape[1]))
    for k in range(b.shape[1]):
        nz = np.flatnonzero(b[:, k])
        if nz.size == 0:
            out[:, k] = 0.0
        else:
            out[:, k] = np.einsum("ij,j->i", np.ascontiguousarray(a[:, nz]), np.ascontiguousarray(b[nz, k]))
    return out


__all__ = ["FRACTION_BITS", "FixedPointSum", "row_products"]
