"""Reading a run's spectra with decompression on every core, overlapped with the caller's work.

h5py decompresses a gzip dataset inside the HDF5 library while holding its global lock,
so however many threads read, decompression runs on one core.  This module reads the
stored (compressed) bytes of each HDF5 chunk with ``Dataset.id.read_direct_chunk``
(HDF5's direct chunk read: no filter runs), and undoes the filters itself in a pool of
threads: the inflater (deflate, RFC 1950/1951: ``isal.isal_zlib`` from the optional ``fast``
extra when installed -- Intel ISA-L, about 2.4x faster here -- else the standard
library's ``zlib``) releases the GIL while it works, and
the byte un-shuffle of the HDF5 shuffle filter is one NumPy transpose-copy, so several
chunks decompress at once, on every core, while the caller processes the previous range.

Uncompressed runs need no decoding: one helper thread reads each range straight into its
array (one copy from the file cache), with ``os.preadv`` at the chunks' byte offsets from HDF5's
chunk index (``H5Dget_chunk_info``) on HDF5's own file descriptor when the file is a plain one
(``sec2`` driver, no user block) and every chunk is stored whole, else with ``Dataset.read_direct``
(pread does not run HDF5's selection machinery: 1.6 against 2.5 us of CPU per 8 KiB shot here,
docs/performance.md).
:func:`read_range` does the same work for one range in the calling thread, for Dask workers
(each core already has one).

Only the layout the run writer makes is read this way: chunks spanning whole spectra
(``chunks = (rows, n_pixels)``), filters deflate and/or shuffle.  Anything else (another
filter, a chunk stored with a filter skipped, an unallocated chunk) is read through h5py,
with the same result.  The bytes returned equal ``Run.read_raw`` exactly.
"""

from __future__ import annotations

import os
import sys
import zlib
from collections import deque
from concurrent.futures import ThreadPoolExecutor

import h5py
import numpy as np

from compquant.errors import RunFormatError

try:  # optional (compquant[fast]): the same deflate format, decoded faster
    from isal.isal_zlib import decompress as _inflate
    from isal.isal_zlib import error as _isal_error

    _INFLATE_ERRORS: tuple = (zlib.error, _isal_error)
except ImportError:  # pragma: no cover - depends on the installation
    _inflate = zlib.decompress
    _INFLATE_ERRORS = (zlib.error,)

#: the inflater in use ("isal" or "zlib"), for benchmarks and provenance
INFLATER = "isal" if _inflate is not zlib.decompress else "zlib"


def _layout(run):
    """``(dataset, chunk_rows, shuffle, deflate)`` when the direct path applies, else None."""
    ds = getattr(run, "_spectra", None)
    if not isinstance(ds, h5py.Dataset) or ds.chunks is None or ds.ndim != 2:
        return None
    if ds.chunks[1] != ds.shape[1] or ds.fletcher32 or ds.scaleoffset is not None:
        return None
    if ds.compression not in (None, "gzip") or ds.dtype.kind not in "uif":
        return None
    return ds, int(ds.chunks[0]), bool(ds.shuffle), ds.compression == "gzip"


def stored_unfiltered(run) -> bool:
    """True when the run's spectra are stored without filters (no compression, no shuffle):
    reading them is a copy from the file cache, with no decompression to spread over the cores."""
    lay = _layout(run)
    if lay is not None:
        return not (lay[2] or lay[3])
    ds = getattr(run, "_spectra", None)
    return (
        isinstance(ds, h5py.Dataset) and ds.chunks is None and ds.compression is None
        and not ds.shuffle and not ds.fletcher32 and ds.scaleoffset is None
    )  # fmt: skip


def _decode_chunk(ds, row0: int, rows: int, shuffle: bool, deflate: bool) -> np.ndarray:
    """One HDF5 chunk starting at ``row0`` as a (rows, n_pixels) array (filters undone here)."""
    npx = ds.shape[1]
    try:
        mask, data = ds.id.read_direct_chunk((row0, 0))
    except (OSError, ValueError, KeyError, RuntimeError):
        mask, data = -1, None  # e.g. a chunk never written: let HDF5 supply the fill value
    if mask != 0:
        return np.asarray(ds[row0 : min(ds.shape[0], row0 + rows)])
    if deflate:
        data = _inflate(data)  # releases the GIL
    itemsize = ds.dtype.itemsize
    buf = np.frombuffer(data, dtype=np.uint8)
    if buf.size != rows * npx * itemsize:
        raise zlib.error(f"chunk at row {row0} holds {buf.size} bytes, expected {rows * npx * itemsize}")
    if shuffle and itemsize > 1:
        buf = _unshuffle(buf, itemsize, rows * npx)
    out = buf.view(ds.dtype).reshape(rows, npx)
    stop = min(ds.shape[0], row0 + rows)
    return out[: stop - row0]


def _unshuffle(buf: np.ndarray, itemsize: int, n: int) -> np.ndarray:
    """Undo the HDF5 shuffle filter: byte ``j`` of element ``i`` is stored at ``j * n + i``.

    On a little-endian host the element whose stored bytes are ``b_0 .. b_{k-1}`` is the
    unsigned integer ``sum_j b_j << 8 j``: built with shifts and ors over whole byte planes
    (a transpose-copy of single bytes is about 25x slower).
    """
    planes = buf.reshape(itemsize, n)
    utype = {2: np.uint16, 4: np.uint32, 8: np.uint64}.get(itemsize)
    if utype is None or sys.byteorder != "little":
        return np.ascontiguousarray(planes.T)
    out = planes[itemsize - 1].astype(utype)
    for j in range(itemsize - 2, -1, -1):
        out <<= utype(8)
        out |= planes[j]
    return out.view(np.uint8)


def _read_range(ds, a: int, b: int, cr: int, shuffle: bool, deflate: bool, pool) -> list:
    """Futures of the chunks covering rows ``a:b``, with the row slice each contributes."""
    parts = []
    for c0 in range((a // cr) * cr, b, cr):
        fut = pool.submit(_decode_chunk, ds, c0, cr, shuffle, deflate)
        parts.append((fut, max(a, c0) - c0, min(b, c0 + cr) - c0))
    return parts


def _assemble(run, ds, a: int, b: int, parts) -> np.ndarray:
    out = np.empty((b - a, ds.shape[1]), dtype=ds.dtype)
    pos = 0
    for fut, lo, hi in parts:
        try:
            block = fut.result()
        except (*_INFLATE_ERRORS, ValueError, OSError) as exc:
            raise RunFormatError(
                f"spectra cannot be read ({exc})",
                where=str(getattr(run, "path", "")),
                fix="the file is truncated or corrupt; copy the run again",
            ) from exc
        out[pos : pos + hi - lo] = block[lo:hi]
        pos += hi - lo
    return out


def iter_raw(run, bounds: list[tuple[int, int]], threads: int | None = None, ahead: int = 2):
    """Yield ``(start, stop, raw)`` for each ``(start, stop)`` of ``bounds``, in order.

    ``raw`` equals ``run.read_raw(start, stop)``.  With the direct path (module docstring)
    the chunks of the next ``ahead`` ranges are decompressed by ``threads`` threads (default:
    one per core) while the caller works on the current one; otherwise one helper thread
    reads the next range through h5py (``threads = 0``: no helper thread at all).
    Memory: about ``ahead + 1`` ranges of raw counts.
    """
    bounds = list(bounds)
    threads = (os.cpu_count() or 1) if threads is None else int(threads)
    lay = _layout(run) if threads > 0 else None
    if lay is None:
        yield from _iter_plain(run, bounds, prefetch=threads > 0)
        return
    ds, cr, shuffle, deflate = lay
    for a, b in bounds:
        run._check_alloc((b - a, ds.shape[1]), ds.dtype.itemsize, "reading these spectra")
    if not (deflate or shuffle):
        yield from _iter_unfiltered(run, ds, bounds, ahead)
        return
    with ThreadPoolExecutor(max_workers=threads, thread_name_prefix="compquant-inflate") as pool:
        queue: deque = deque()
        nxt = 0
        for a, b in bounds:
            while nxt < len(bounds) and len(queue) <= ahead:
                queue.append(_read_range(ds, *bounds[nxt], cr, shuffle, deflate, pool))
                nxt += 1
            raw = _assemble(run, ds, a, b, queue.popleft())
            # the run's masked pixels come back as NaN, exactly as from ``run.read_raw``
            yield a, b, run.screen(np.arange(a, b), raw) if hasattr(run, "screen") else raw


def _read_into(run, ds, a: int, b: int) -> np.ndarray:
    """Rows ``a:b`` of an unfiltered dataset read straight into a new array (one copy, no
    intermediate buffer), then screened as ``run.read_raw`` does: with ``pread`` from HDF5's own
    file descriptor when every chunk is stored whole at a known place in a plain file
    (:func:`_chunk_places`), else by HDF5 (``Dataset.read_direct``)."""
    out = np.empty((b - a, ds.shape[1]), dtype=ds.dtype)
    try:
        places = _chunk_places(run, ds)
        if b <= a:
            pass
        elif places is not None:
            _pread_rows(places, ds, a, b, out)
        else:
            ds.read_direct(out, np.s_[a:b], np.s_[0 : b - a])
    except (OSError, ValueError, TypeError) as exc:
        raise RunFormatError(f"spectra cannot be read ({exc})", where=str(getattr(run, "path", "")),
                             fix="the file is truncated or corrupt; copy the run again") from exc
    return run.screen(np.arange(a, b), out) if hasattr(run, "screen") else out


class _Places:
    """Where an unfiltered chunked dataset's chunks lie in its file: ``offsets[k]`` is the byte
    offset of chunk ``k`` (rows ``k * rows`` onwards), ``fd`` HDF5's own descriptor of the file."""

    def __init__(self, fd: int, rows: int, offsets: np.ndarray):
        self.fd, self.rows, self.offsets = fd, rows, offsets


def _chunk_places(run, ds) -> _Places | None:
    """The chunks' byte offsets when the raw bytes can be read from the file directly: HDF5's
    default ``sec2`` driver (one plain file, whose descriptor h5py gives), no user block (chunk
    addresses are then file offsets), and every chunk allocated, stored whole (``chunk rows x
    n_pixels x itemsize`` bytes) with no filter skipped or applied, inside the file.  Else None
    (HDF5 reads).  Looked up once per opened run (HDF5's chunk index, ``H5Dget_chunk_info``)."""
    cached = getattr(run, "_fastread_places", False)
    if cached is not False:
        return cached
    places = None
    try:
        f = ds.file
        rows = int(ds.chunks[0])
        nbytes = rows * ds.shape[1] * ds.dtype.itemsize
        if f.driver == "sec2" and f.userblock_size == 0 and ds.compression is None and not ds.shuffle:
            fd = int(f.id.get_vfd_handle())
            size = os.fstat(fd).st_size
            n_chunks = -(-ds.shape[0] // rows)
            offsets = np.full(n_chunks, -1, dtype=np.int64)
            for i in range(ds.id.get_num_chunks()):
                info = ds.id.get_chunk_info(i)
                k = int(info.chunk_offset[0]) // rows
                ok = info.byte_offset is not None and info.filter_mask == 0 and info.size == nbytes
                if not ok or int(info.byte_offset) + nbytes > size or info.chunk_offset[1] != 0:
                    break
                offsets[k] = int(info.byte_offset)
            else:
                if (offsets >= 0).all():
                    places = _Places(fd, rows, offsets)
    except (AttributeError, OSError, ValueError, TypeError, RuntimeError, KeyError):
        places = None
    try:
        run._fastread_places = places
    except AttributeError:  # an object without a __dict__: look it up again next time
        pass
    return places


def _pread_rows(places: _Places, ds, a: int, b: int, out: np.ndarray) -> None:
    """Rows ``a:b`` into ``out`` with ``os.preadv`` (releases the GIL; the file offset of HDF5's
    descriptor is not moved), one call per run of chunks lying back to back in the file."""
    row_bytes = ds.shape[1] * ds.dtype.itemsize
    buf = memoryview(out.reshape(-1).view(np.uint8))
    pos, r, cr = 0, a, places.rows
    while r < b:
        k = r // cr
        start = int(places.offsets[k]) + (r - k * cr) * row_bytes
        stop_row = min(b, (k + 1) * cr)
        while stop_row < b and places.offsets[k + 1] == places.offsets[k] + cr * row_bytes:
            k += 1
            stop_row = min(b, (k + 1) * cr)
        want = (stop_row - r) * row_bytes
        done = 0
        while done < want:
            got = os.preadv(places.fd, [buf[pos + done : pos + want]], start + done)
            if got <= 0:
                raise OSError(f"the file ends inside the spectra (rows {r}-{stop_row - 1})")
            done += got
        pos += want
        r = stop_row


def _iter_unfiltered(run, ds, bounds, ahead: int):
    """Uncompressed runs: one helper thread reads the next ``ahead`` ranges with
    ``Dataset.read_direct`` into fresh arrays while the caller works on the current one
    (reading is a copy from the file cache: more threads would not help).  About half the CPU
    time per shot of the chunk-by-chunk direct path (docs/performance.md)."""
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="compquant-read") as ex:
        queue: deque = deque()
        nxt = 0
        for a, b in bounds:
            while nxt < len(bounds) and len(queue) <= ahead:
                queue.append(ex.submit(_read_into, run, ds, *bounds[nxt]))
                nxt += 1
            yield a, b, queue.popleft().result()


def read_range(run, a: int, b: int) -> np.ndarray:
    """``run.read_raw(a, b)`` in this thread, without a pool: the stored chunks read directly and
    inflated here (ISA-L when installed), or an uncompressed range read straight into its array.
    For Dask workers, where every core already has a worker: a worker reads its own ranges about
    twice as fast as through h5py's zlib (docs/performance.md).  Same bytes as ``read_raw``."""
    lay = _layout(run)
    if lay is None:
        return run.read_raw(a, b)
    ds, cr, shuffle, deflate = lay
    a, b = max(0, int(a)), min(ds.shape[0], int(b))
    run._check_alloc((b - a, ds.shape[1]), ds.dtype.itemsize, "reading these spectra")
    if not (deflate or shuffle):
        return _read_into(run, ds, a, b)
    parts = [(_Done(_decode_chunk, ds, c0, cr, shuffle, deflate), max(a, c0) - c0, min(b, c0 + cr) - c0)
             for c0 in range((a // cr) * cr, b, cr)]
    raw = _assemble(run, ds, a, b, parts)
    return run.screen(np.arange(a, b), raw) if hasattr(run, "screen") else raw


class _Done:
    """A computed value with the ``result()`` of a future (errors raised there, as from a pool)."""

    def __init__(self, fn, *args):
        self._fn, self._args = fn, args

    def result(self):
        return self._fn(*self._args)


def _iter_plain(run, bounds, prefetch: bool):
    """``run.read_raw`` for each range; with ``prefetch`` the next range is read by one helper
    thread while the caller processes the current one (h5py releases the GIL while it reads)."""
    if not prefetch or len(bounds) < 2:
        for a, b in bounds:
            yield a, b, run.read_raw(a, b)
        return
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="compquant-read") as ex:
        fut = ex.submit(run.read_raw, *bounds[0])
        for k, (a, b) in enumerate(bounds):
            raw = fut.result()
            if k + 1 < len(bounds):
                fut = ex.submit(run.read_raw, *bounds[k + 1])
            yield a, b, raw


__all__ = ["iter_raw", "read_range", "stored_unfiltered"]
