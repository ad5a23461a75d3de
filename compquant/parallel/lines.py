"""Line measurement on Dask: chunks of one large run, or many runs at once.

Both paths call :func:`compquant.lines.measure_run`, the function of the serial path:

* one large run -- :func:`chunk_mapper` hands ``measure_run`` a mapper that computes
  :func:`compquant.lines.chunk.process_chunk` for each chunk on the workers (each worker
  opens the run read-only itself); ``measure_run`` then merges the results in shot order
  exactly as it does serially, so the line table is the same, number for number;
* many runs -- :func:`measure_runs` gives each run to one worker, which runs the serial
  ``measure_run`` on it; a run that fails comes back as that run's error.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterator
from pathlib import Path

import numpy as np

from compquant.parallel.chunks import map_chunks
from compquant.parallel.cluster import SerialExecutor
from compquant.parallel.runs import RunOutcome, map_runs


def process_chunk_task(run, start: int, stop: int, plan):
    """Worker side: ``process_chunk`` on shots ``start:stop`` of the worker-local ``run``, read by
    :func:`compquant.run.fastread.read_range` (the stored chunks inflated in the worker's thread,
    ISA-L when installed: the same bytes as ``run.read_raw``)."""
    from compquant.lines.chunk import process_chunk
    from compquant.run.fastread import read_range

    sample_index = run.shots["sample_index"].to_numpy()[start:stop].astype(np.int64)
    return process_chunk(read_range(run, start, stop), sample_index, plan)


def split_ranges(ranges: list[tuple[int, int]], n_tasks: int, align: int = 1) -> list[tuple[int, int, int]]:
    """Cut shot ranges into at least ``n_tasks`` pieces (when they have that many shots):
    ``[(parent index, start, stop), ...]`` in shot order, cuts at multiples of ``align`` (the
    file's HDF5 chunk rows) where the range is long enough, so no stored chunk is read twice."""
    total = sum(b - a for a, b in ranges)
    if len(ranges) >= n_tasks or total <= 0:
        return [(i, a, b) for i, (a, b) in enumerate(ranges)]
    size = max(1, -(-total // n_tasks))  # ceil
    align = max(1, int(align))
    if size >= align:
        size -= size % align
    out = []
    for i, (a, b) in enumerate(ranges):
        cut = a
        while cut < b:
            nxt = min(b, (cut // size + 1) * size) if size >= align else min(b, cut + size)
            out.append((i, cut, nxt))
            cut = nxt
    return out


def chunk_mapper(executor, max_in_flight: int | None = None, tasks_per_worker: int = 2) -> Callable | None:
    """A ``chunk_mapper`` for :func:`compquant.lines.measure_run`; None for the serial executor.

    The mapper ships the chunk plan to every worker once per pass and yields the chunk
    results in range order, at most ``max_in_flight`` (default 4 per worker) held at a time.
    When the run has fewer chunks than ``tasks_per_worker`` x workers (a 640-shot run is one
    4096-shot chunk), each chunk is cut into pieces computed on different workers and merged
    back (:func:`compquant.lines.chunk.merge_chunk_results`): per-shot results are row-stable
    and per-sample sums exact (:mod:`compquant.exactsum`), so the table is the same, bit for bit.
    """
    if executor is None or isinstance(executor, SerialExecutor):
        return None

    def mapper(run, ranges, plan) -> Iterator:
        from compquant.lines.chunk import merge_chunk_results

        pieces = split_ranges(list(ranges), tasks_per_worker * executor.n_workers, getattr(run, "chunk_rows", 1))
        results = map_chunks(
            executor, run.path, process_chunk_task, plan, chunk_shots=1,
            ranges=[(a, b) for _, a, b in pieces], max_in_flight=max_in_flight,
        )
        parent, parts = 0, []
        for (i, _, _), res in zip(pieces, results):
            if i != parent:
                yield merge_chunk_results(parts)
                parent, parts = i, []
            parts.append(res)
        if parts:
            yield merge_chunk_results(parts)

    return mapper


def measure_run_on(executor, run, method, chunk_shots: int | None = None, progress=None):
    """:func:`compquant.lines.measure_run` with its chunks computed on ``executor``."""
    from compquant.lines import measure_run

    return measure_run(run, method, chunk_shots=chunk_shots, progress=progress, chunk_mapper=chunk_mapper(executor))


def _measure_one(path: str, ctx: dict):
    """Worker side of :func:`measure_runs`: serial ``measure_run`` of one run, outputs written."""
    from compquant.lines import measure_run
    from compquant.run import Run

    with Run.open(path) as run:
        lm = measure_run(run, ctx["method"], chunk_shots=ctx.get("chunk_shots"))
    writer = ctx.get("writer")
    written = writer(lm, ctx["outputs"][path]) if writer is not None else []
    return {
        "table": lm.table,
        "qc": lm.qc,
        "notes": list(lm.provenance.get("notes", [])),
        "written": [str(p) for p in written],
        "n_shots": int(lm.shot_accepted.size),
    }


def measure_runs(
    executor,
    paths: list[str | os.PathLike],
    method,
    *,
    chunk_shots: int | None = None,
    outputs: dict[str, Path] | None = None,
    writer: Callable | None = None,
    progress: Callable | None = None,
) -> list[RunOutcome]:
    """Measure every run, one run per task; one :class:`RunOutcome` per run, in the order given.

    ``writer(lm, out_dir) -> [paths]`` (a module-level function) writes a run's output set
    on the worker that measured it; ``outputs`` maps each run path to its output folder.
    The outcome's value holds the line table, QC table, notes and the files written.
    ``progress(outcome)`` is called as each run finishes (see :func:`map_runs`).
    """
    items = [str(p) for p in paths]
    ctx = {
        "method": method,
        "chunk_shots": chunk_shots,
        "writer": writer,
        "outputs": {str(k): v for k, v in (outputs or {}).items()},
    }
    return map_runs(executor, items, _measure_one, ctx, progress=progress)


__all__ = ["chunk_mapper", "measure_run_on", "measure_runs", "process_chunk_task", "split_ranges"]
