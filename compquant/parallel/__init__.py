"""Scale out: the same step functions mapped over shot chunks and over runs with Dask.

* :func:`open_executor` -- serial, a local cluster (``workers=N``) or an existing one
  (``scheduler=ADDRESS``);
* :func:`map_chunks` -- one large run, chunk by chunk, results in shot order;
* :func:`map_runs` -- many runs, one task each, failures kept per run;
* :func:`spectra_array` -- a lazy dask.array view of a run's spectra.

There is no second implementation of any step here: the tasks call the functions of
``compquant.preprocess`` / ``compquant.lines`` that the serial path calls.
"""

from compquant.parallel.analyse import analyse_runs
from compquant.parallel.chunks import chunk_ranges, close_worker_runs, map_chunks, spectra_array, worker_run
from compquant.parallel.cluster import DaskExecutor, SerialExecutor, open_executor, peak_rss_bytes
from compquant.parallel.lines import chunk_mapper, measure_run_on, measure_runs, process_chunk_task
from compquant.parallel.runs import RunError, RunOutcome, collect_runs, map_runs, run_output_folders

__all__ = [
    "DaskExecutor",
    "RunError",
    "RunOutcome",
    "SerialExecutor",
    "analyse_runs",
    "chunk_mapper",
    "chunk_ranges",
    "close_worker_runs",
    "collect_runs",
    "map_chunks",
    "map_runs",
    "measure_run_on",
    "measure_runs",
    "open_executor",
    "peak_rss_bytes",
    "process_chunk_task",
    "run_output_folders",
    "spectra_array",
    "worker_run",
]
