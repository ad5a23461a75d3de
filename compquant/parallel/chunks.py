"""One large run, mapped chunk by chunk.

HDF5 file handles cannot travel between processes, so a task carries only the run's path
and a shot range; each worker opens the run itself (read-only, kept open in a small
per-process cache) and reads its rows. Chunk ranges start at multiples of the file's own
HDF5 chunking, so no two tasks decompress the same stored chunk.

:func:`map_chunks` is the single entry point for both paths: with a
:class:`~compquant.parallel.cluster.SerialExecutor` it reads and processes the chunks
here, in order; with a Dask executor the same function runs on the workers and the results
come back in the same order, so any reduction done afterwards adds the same numbers in the
same order and gives identical results.
"""

from __future__ import annotations

import os
from collections import OrderedDict
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import numpy as np

from compquant.errors import ResourceLimitError
from compquant.run import Run

#: open runs kept per process (path, size, mtime) -> Run
_OPEN_RUNS: OrderedDict = OrderedDict()
_MAX_OPEN = 4


def _key(path: str | os.PathLike) -> tuple:
    p = Path(path).resolve()
    st = p.stat()
    return (str(p), st.st_size, st.st_mtime_ns)


def worker_run(path: str | os.PathLike) -> Run:
    """The run at ``path``, opened read-only once per process and reused by later tasks.

    A changed file (size or modification time) is opened afresh.
    """
    key = _key(path)
    run = _OPEN_RUNS.get(key)
    if run is not None:
        _OPEN_RUNS.move_to_end(key)
        return run
    run = Run.open(key[0])
    _OPEN_RUNS[key] = run
    while len(_OPEN_RUNS) > _MAX_OPEN:
        _, old = _OPEN_RUNS.popitem(last=False)
        old.close()
    return run


def close_worker_runs() -> None:
    """Close every run this process keeps open."""
    while _OPEN_RUNS:
        _, run = _OPEN_RUNS.popitem()
        run.close()


def chunk_ranges(n_shots: int, chunk_shots: int, align: int = 1) -> list[tuple[int, int]]:
    """``[(start, stop), ...]`` covering ``0..n_shots`` in blocks of ``chunk_shots`` rows.

    ``chunk_shots`` is rounded down to a multiple of ``align`` (the file's HDF5 chunk rows)
    when it is at least ``align``, so that every task reads whole stored chunks.
    """
    if chunk_shots < 1:
        raise ResourceLimitError(
            f"chunk size {chunk_shots} is not positive", where="chunk_shots", fix="use a chunk size of at least 1 shot"
        )
    align = max(1, int(align))
    size = int(chunk_shots)
    if size >= align:
        size -= size % align
    return [(a, min(n_shots, a + size)) for a in range(0, n_shots, size)]


def _run_chunk(rng: tuple[int, int], path: str, fn: Callable, context: Any) -> Any:
    """Task body: open the run at ``path`` here (cached) and call ``fn(run, start, stop, context)``."""
    start, stop = rng
    return fn(worker_run(path), start, stop, context)


def map_chunks(
    executor,
    run_path: str | os.PathLike,
    fn: Callable,
    context: Any = None,
    *,
    chunk_shots: int,
    ranges: list[tuple[int, int]] | None = None,
    max_in_flight: int | None = None,
) -> Iterator:
    """Yield ``fn(run, start, stop, context)`` for every chunk of the run, in shot order.

    ``fn`` reads what it needs from the worker-local read-only ``run`` (``run.read_raw(start,
    stop)``, ``run.shots`` ...) and calls the step functions on it.

    Parameters
    ----------
    executor : SerialExecutor or DaskExecutor (from :func:`open_executor`)
    run_path : the run file; every worker must be able to read it at this path
    fn : a module-level function (it travels to worker processes by name)
    context : read-only inputs of ``fn`` (method, dark reference ...); broadcast once
    chunk_shots : shots per task (the same value as the serial path, so chunks match)
    ranges : explicit ``(start, stop)`` list instead of ``chunk_shots``
    """
    path = str(Path(run_path).resolve())
    if ranges is None:
        run = worker_run(path)
        ranges = chunk_ranges(run.n_shots, chunk_shots)
    ctx = executor.broadcast(context)
    yield from executor.map_ordered(_run_chunk, ranges, path, fn, ctx, max_in_flight=max_in_flight)


def spectra_array(run_path: str | os.PathLike, chunk_shots: int | None = None, raw: bool = True):
    """A lazy ``dask.array`` view of the run's spectra, one block per chunk range.

    Each block is a delayed read opened on the worker that computes it (HDF5 handles are
    never shipped). ``chunk_shots`` defaults to the file's own chunk rows times 16.
    """
    import dask
    import dask.array as da

    path = str(Path(run_path).resolve())
    run = worker_run(path)
    dtype = run.spectra_dtype if raw else np.dtype(np.float64)
    size = chunk_shots or run.chunk_rows * 16
    blocks = []
    for start, stop in chunk_ranges(run.n_shots, size, align=run.chunk_rows):
        d = dask.delayed(_read_block, pure=True)(path, start, stop, raw)
        blocks.append(da.from_delayed(d, shape=(stop - start, run.n_pixels), dtype=dtype))
    return da.concatenate(blocks, axis=0)


def _read_block(path: str, start: int, stop: int, raw: bool) -> np.ndarray:
    run = worker_run(path)
    return run.read_raw(start, stop) if raw else run.read_shots(start, stop)


__all__ = ["chunk_ranges", "close_worker_runs", "map_chunks", "spectra_array", "worker_run"]
