"""Per-shot x per-line arrays of a measurement, in memory or spilled to a file.

Line measurement keeps three ``(n_shots, n_lines)`` arrays: the intensities (float64), the
saturated flags and the masked flags (bool), 10 bytes per shot x line.  A run of 2 million
shots with 20 lines would hold 400 MB of them.  Above a size (:data:`SPILL_CELLS` cells, or
``COMPQUANT_SPILL_CELLS``), :class:`ShotArray` writes them chunk by chunk to a ``.npy`` file
in a temporary folder (``COMPQUANT_SPILL_DIR``, else the system's), reads back only the rows
and columns a step asks for, in blocks of bounded size, and finally hands the caller a
read-only memory map of the file (already unlinked on POSIX systems, so no file is left
behind whatever happens next).  The numbers are the same float64 values either way: the
file holds exactly what the in-memory array would, so the line table does not change.

The file is written with plain ``write`` calls, never through a writable memory map, so
the pages it occupies are the system's file cache, not the process's resident memory.
"""

from __future__ import annotations

import os
import tempfile
import weakref

import numpy as np

#: default spill size: arrays of more cells than this go to a file (16 MB of float64)
SPILL_CELLS = 2_000_000
#: rows per block when a spilled array is read or rewritten (bounded memory per step)
BLOCK_BYTES = 16 * 2**20


def spill_cells() -> int:
    """Cells above which per-shot arrays are spilled (``COMPQUANT_SPILL_CELLS``, default
    :data:`SPILL_CELLS`; 0 spills always)."""
    v = os.environ.get("COMPQUANT_SPILL_CELLS", "").strip()
    try:
        return max(0, int(v)) if v else SPILL_CELLS
    except ValueError:
        return SPILL_CELLS


class ShotArray:
    """A ``(n_rows, n_cols)`` array of one dtype, held in memory or in a ``.npy`` spill file.

    Parameters
    ----------
    n_rows, n_cols : shape.
    dtype : numpy dtype.
    fill : initial value of every cell.
    spill : write to a file instead of holding the array.
    spill_dir : folder for the file (default ``COMPQUANT_SPILL_DIR`` or the system's temp dir).
    """

    def __init__(self, n_rows: int, n_cols: int, dtype, fill=0, spill: bool = False, spill_dir=None):
        self.shape = (int(n_rows), int(n_cols))
        self.dtype = np.dtype(dtype)
        self.path = None
        self._f = None
        if not spill:
            self._a = np.full(self.shape, fill, dtype=self.dtype)
            return
        self._a = None
        folder = spill_dir or os.environ.get("COMPQUANT_SPILL_DIR") or tempfile.gettempdir()
        try:
            fd, path = tempfile.mkstemp(prefix="compquant-shots-", suffix=".npy", dir=folder)
        except OSError as exc:
            raise _spill_error(exc, folder) from exc
        self.path = path
        self._f = os.fdopen(fd, "w+b", buffering=0)  # unbuffered: the file always holds what was written
        self._finalizer = weakref.finalize(self, _remove, self._f, path)
        header = {"descr": np.lib.format.dtype_to_descr(self.dtype), "fortran_order": False, "shape": self.shape}
        np.lib.format.write_array_header_1_0(self._f, header)
        self._offset = self._f.tell()
        self._row_bytes = self.shape[1] * self.dtype.itemsize
        try:
            self._f.truncate(self._offset + self.shape[0] * self._row_bytes)
        except OSError as exc:
            self._finalizer()
            raise _spill_error(exc, folder) from exc
        self.block_rows = max(1, BLOCK_BYTES // max(1, self._row_bytes))
        filler = np.full((min(self.block_rows, self.shape[0]), self.shape[1]), fill, dtype=self.dtype)
        if filler.size and np.any(filler != 0):  # the file starts as zeros (NaN != 0 too)
            for a in range(0, self.shape[0], self.block_rows):
                self._write(a, filler[: min(self.shape[0], a + self.block_rows) - a])

    @property
    def spilled(self) -> bool:
        return self._a is None

    # ----------------------------------------------------------------- raw row access
    def _read(self, start: int, stop: int) -> np.ndarray:
        out = np.empty((stop - start, self.shape[1]), dtype=self.dtype)
        view = memoryview(out.reshape(-1).view(np.uint8))
        pos, off = 0, self._offset + start * self._row_bytes
        while pos < view.nbytes:
            got = os.preadv(self._f.fileno(), [view[pos:]], off + pos)
            if got <= 0:
                raise OSError(f"short read from the spill file {self.path}")
            pos += got
        return out

    def _write(self, start: int, block: np.ndarray) -> None:
        view = memoryview(np.ascontiguousarray(block, dtype=self.dtype).reshape(-1).view(np.uint8))
        pos, off = 0, self._offset + start * self._row_bytes
        try:
            while pos < view.nbytes:
                pos += os.pwrite(self._f.fileno(), view[pos:], off + pos)
        except OSError as exc:  # e.g. the disk is full
            raise _spill_error(exc, os.path.dirname(self.path)) from exc

    # ----------------------------------------------------------------- the steps of measure_run
    def write(self, start: int, stop: int, cols, values: np.ndarray, nan_where: np.ndarray | None = None) -> None:
        """``a[start:stop, cols] = values`` and then ``a[start:stop, cols][nan_where] = nan``."""
        if nan_where is not None:
            values = np.where(nan_where, np.nan, values)
        if not self.spilled:
            self._a[start:stop, cols] = values
            return
        if isinstance(cols, slice) and cols.indices(self.shape[1]) == (0, self.shape[1], 1):
            self._write(start, values)
            return
        block = self._read(start, stop)
        block[:, cols] = values
        self._write(start, block)

    def column(self, j: int) -> np.ndarray:
        """A copy of column ``j`` (n_rows,)."""
        if not self.spilled:
            return self._a[:, j].copy()
        out = np.empty(self.shape[0], dtype=self.dtype)
        for a in range(0, self.shape[0], self.block_rows):
            b = min(self.shape[0], a + self.block_rows)
            out[a:b] = self._read(a, b)[:, j]
        return out

    def update_rows(self, fn) -> None:
        """Apply ``fn(block, start, stop)`` (in place) to every block of rows."""
        if not self.spilled:
            fn(self._a, 0, self.shape[0])
            return
        for a in range(0, self.shape[0], self.block_rows):
            b = min(self.shape[0], a + self.block_rows)
            block = self._read(a, b)
            fn(block, a, b)
            self._write(a, block)

    def take(self, rows: np.ndarray, cols=slice(None)) -> np.ndarray:
        """``a[rows][:, cols]`` for ascending row indices ``rows``; a spilled file is read one
        block of rows at a time, skipping blocks that hold none of ``rows``."""
        rows = np.asarray(rows, dtype=np.int64)
        if not self.spilled:
            return self._a[rows][:, cols]
        n_cols = len(range(*cols.indices(self.shape[1]))) if isinstance(cols, slice) else len(cols)
        out = np.empty((rows.size, n_cols), dtype=self.dtype)
        pos = 0
        while pos < rows.size:
            a = int(rows[pos])
            b = min(self.shape[0], a + self.block_rows)
            end = int(np.searchsorted(rows, b, side="left"))
            sel = rows[pos:end]
            lo, hi = int(sel[0]), int(sel[-1]) + 1
            block = self._read(lo, hi)
            if sel.size == hi - lo:  # consecutive rows: no row gather
                out[pos:end] = block[:, cols]
            elif isinstance(cols, slice):
                out[pos:end] = block[sel - lo, cols]
            else:
                out[pos:end] = block[np.ix_(sel - lo, cols)]
            pos = end
        return out

    def result(self) -> np.ndarray:
        """The whole array: the in-memory array, or a read-only memory map of the spill file
        (the file is unlinked at once where the system allows it, else when the map is freed)."""
        if not self.spilled:
            return self._a
        m = np.load(self.path, mmap_mode="r")
        self._finalizer.detach()
        self._f.close()
        try:
            os.unlink(self.path)
        except OSError:  # a system that cannot unlink an open file: remove it with the map
            weakref.finalize(m, _remove, None, self.path)
        return m

    def close(self) -> None:
        """Remove the spill file (a no-op in memory or after :meth:`result`)."""
        if self.spilled and self._finalizer.alive:
            self._finalizer()


def _spill_error(exc: OSError, folder):
    from compquant.errors import ResourceLimitError

    return ResourceLimitError(f"cannot write the per-shot spill file ({exc.strerror or exc})", where=str(folder),
                              fix="set COMPQUANT_SPILL_DIR to a writable folder with free space "
                                  "(about 10 bytes per shot x line)")


def _remove(f, path) -> None:
    try:
        if f is not None:
            f.close()
    finally:
        try:
            os.unlink(path)
        except OSError:
            pass
