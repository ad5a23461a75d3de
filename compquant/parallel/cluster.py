"""Where the work runs: in this process, on a local Dask cluster, or on an existing one.

:func:`open_executor` is a context manager that yields an :class:`Executor`:

* no options: :class:`SerialExecutor`, everything in this process, in order;
* ``workers=N``: a ``distributed.LocalCluster`` of ``N`` worker *processes* with one thread
  each, listening on loopback only (127.0.0.1), shut down when the block ends;
* ``scheduler="tcp://host:8786"``, ``scheduler_file="scheduler.json"`` (the file a
  ``dask scheduler --scheduler-file`` writes), or neither but the environment variable
  ``DASK_SCHEDULER_ADDRESS`` set: a client of an existing Dask cluster (not shut down).
  On connecting, the versions of Dask, distributed and compquant on the workers are compared
  with this process's (:func:`check_versions`): a mismatch is a clear error, not a wrong result.

The dashboard address is logged (``compquant`` logger, shown by default on the command line).

Both executors offer the same two operations, so the serial and the distributed path call
the same step functions and gather their results in the same order:

* :meth:`Executor.map_ordered` maps a module-level function over items and yields the
  results **in item order**, holding at most ``max_in_flight`` results at a time (bounded
  memory);
* :meth:`Executor.broadcast` ships a read-only context (method, dark reference, ...) to
  every worker once.

Functions sent to workers must live in importable modules (spawned worker processes import
them by name); lambdas and ``__main__`` functions do not travel.
"""

from __future__ import annotations

import contextlib
import ipaddress
import logging
import os
import re
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from typing import Any

from compquant.errors import ConfigError

log = logging.getLogger("compquant.parallel")


class SerialExecutor:
    """Run every task here, one after another (the reference path)."""

    kind = "serial"
    n_workers = 1
    address = None

    def broadcast(self, value: Any) -> Any:
        return value

    def map_ordered(self, fn: Callable, items: Iterable, *args, max_in_flight: int | None = None, **kwargs) -> Iterator:
        for item in items:
            yield fn(item, *args, **kwargs)

    def describe(self) -> str:
        return "serial (this process)"


class DaskExecutor:
    """Tasks as ``distributed`` futures; results come back in submission order."""

    kind = "dask"

    def __init__(self, client):
        self.client = client

    @property
    def n_workers(self) -> int:
        return max(1, len(self.client.scheduler_info(n_workers=-1).get("workers", {})))

    @property
    def address(self) -> str:
        return self.client.scheduler.address

    def broadcast(self, value: Any) -> Any:
        """Scatter ``value`` to every worker once; tasks receive the worker-local copy."""
        return self.client.scatter(value, broadcast=True, hash=False)

    def map_ordered(self, fn: Callable, items: Iterable, *args, max_in_flight: int | None = None, **kwargs) -> Iterator:
        """Submit ``fn(item, *args, **kwargs)`` for every item; yield results in item order.

        At most ``max_in_flight`` tasks (default 4 per worker) are pending or held, so the
        memory on the client stays bounded however many items there are. A task that raises
        re-raises here when its turn comes, after the earlier results were yielded.
        """
        limit = max_in_flight or 4 * self.n_workers
        pending: deque = deque()
        it = iter(items)
        exhausted = False
        try:
            while True:
                while not exhausted and len(pending) < limit:
                    try:
                        item = next(it)
                    except StopIteration:
                        exhausted = True
                        break
                    pending.append(self.client.submit(fn, item, *args, pure=False, **kwargs))
                if not pending:
                    return
                fut = pending.popleft()
                try:
                    yield fut.result()
                finally:
                    fut.release()
        finally:
            for fut in pending:
                fut.cancel()

    def describe(self) -> str:
        return f"Dask cluster at {self.address} ({self.n_workers} workers)"


Executor = SerialExecutor | DaskExecutor


#: transports a Dask scheduler listens on (distributed.comm): tcp, tls, and websockets
SCHEDULER_SCHEMES = ("tcp", "tls", "ws", "wss")

_LABEL = r"[A-Za-z0-9](?:[A-Za-z0-9-]{0,61}[A-Za-z0-9])?"
_HOST = re.compile(rf"^{_LABEL}(?:\.{_LABEL})*$")  # host names (RFC 1123)


def _check_address(address: str) -> str:
    """``[scheme://]host:port`` with a known scheme, a host name or IP address and a port 1-65535.

    Returns the address with its scheme (``tcp://`` when none was given). Anything else is a
    one-line :class:`ConfigError` that shows the expected form, before any connection is tried.
    """
    form = "give it as [tcp://]HOST:PORT, e.g. tcp://10.0.0.5:8786 (schemes: " + ", ".join(SCHEDULER_SCHEMES) + ")"

    def bad(why: str) -> ConfigError:
        return ConfigError(f"scheduler address {address!r:.80} {why}", where="--scheduler", fix=form)

    a = str(address).strip()
    if not a or not a.isprintable() or any(ch.isspace() for ch in a):
        raise bad("is empty or holds spaces or control characters")
    scheme, sep, rest = a.partition("://")
    if not sep:
        scheme, rest = "tcp", a
    if scheme.lower() not in SCHEDULER_SCHEMES:
        raise bad(f"has an unknown scheme {scheme!r:.20}")
    if "/" in rest or "@" in rest or "?" in rest or "#" in rest:
        raise bad("has a path, user or query part")
    if rest.startswith("["):  # [IPv6]:port
        host, _, port = rest[1:].partition("]")
        port = port[1:] if port.startswith(":") else ""
        try:
            ipaddress.IPv6Address(host)
        except ValueError:
            raise bad("has a bad IPv6 address") from None
    else:
        host, _, port = rest.rpartition(":")
        if not host:
            raise bad("has no host and port")
        try:
            ipaddress.IPv4Address(host)
        except ValueError:
            if not _HOST.match(host) or host.replace(".", "").isdigit():
                raise bad(f"has a bad host name {host!r:.40}") from None
    if not (port.isdigit() and 0 < int(port) < 65536):
        raise bad(f"needs a port number from 1 to 65535, got {port!r:.12}")
    return f"{scheme.lower()}://{rest}"


def _worker_versions() -> dict:
    """Task body: the versions a worker process runs (module-level so it travels by name)."""
    import sys

    import dask
    import distributed

    import compquant

    return {
        "compquant": compquant.__version__,
        "dask": dask.__version__,
        "distributed": distributed.__version__,
        "python": ".".join(map(str, sys.version_info[:2])),
    }


def check_versions(client, where: str) -> None:
    """Raise :class:`ConfigError` unless every worker runs this process's compquant, Dask,
    distributed and Python (major.minor) versions (pickled tasks and results are only
    guaranteed between equal versions)."""
    mine = _worker_versions()
    try:
        theirs = client.run(_worker_versions)
    except Exception as exc:  # e.g. compquant not importable on a worker
        raise ConfigError(
            f"cannot read the workers' versions ({type(exc).__name__}: {exc})",
            where=where,
            fix="install the same compquant (and compquant[scale]) on every worker",
        ) from exc
    for worker, vers in sorted(theirs.items()):
        diff = [f"{k} {vers.get(k)} (here {v})" for k, v in mine.items() if vers.get(k) != v]
        if diff:
            raise ConfigError(
                f"worker {worker} runs other versions: {', '.join(diff)}",
                where=where,
                fix="install the same versions of compquant, dask and distributed on every worker and here",
            )


def _log_dashboard(client) -> None:
    link = getattr(client, "dashboard_link", None)
    if link:
        log.info("Dask dashboard: %s", link)


@contextlib.contextmanager
def open_executor(
    workers: int | None = None,
    scheduler: str | None = None,
    *,
    scheduler_file: str | os.PathLike | None = None,
    memory_limit: str | int | None = "auto",
    timeout_s: float = 30.0,
) -> Iterator:
    """Yield an executor: serial, a local cluster of ``workers`` processes, or an existing cluster
    (``scheduler`` address, ``scheduler_file``, or ``DASK_SCHEDULER_ADDRESS`` from the environment).

    ``workers`` and the existing-cluster options exclude each other. The local cluster binds to
    127.0.0.1 (its status web page too, on a free loopback port), one thread per worker process,
    and ``memory_limit`` per worker (Dask's own accounting; ``"auto"`` shares the machine's memory).
    """
    given = [n for n, v in (("--workers", workers), ("--scheduler", scheduler), ("--scheduler-file", scheduler_file))
             if v is not None]
    if len(given) > 1:
        raise ConfigError(
            f"both {' and '.join(given)} given",
            where="command line",
            fix="use --workers N for a local cluster, or --scheduler ADDRESS or --scheduler-file FILE",
        )
    if scheduler is not None and scheduler_file is None and os.path.isfile(scheduler):
        scheduler, scheduler_file = None, scheduler  # --scheduler-file folded into --scheduler by the CLI
    if not given and os.environ.get("DASK_SCHEDULER_ADDRESS", "").strip():
        scheduler = os.environ["DASK_SCHEDULER_ADDRESS"]
        log.info("using the Dask scheduler of DASK_SCHEDULER_ADDRESS (%s)", scheduler.strip())
    if workers is None and scheduler is None and scheduler_file is None:
        yield SerialExecutor()
        return
    try:
        from distributed import Client
    except ImportError as exc:  # pragma: no cover - dask is a declared extra
        raise ConfigError(
            "Dask is not installed",
            where="--workers/--scheduler",
            fix="install compquant[scale] (dask[array], distributed)",
        ) from exc
    if scheduler is not None or scheduler_file is not None:
        if scheduler_file is not None:
            where = str(scheduler_file)
            if not os.path.isfile(scheduler_file):
                raise ConfigError("no such scheduler file", where=where,
                                  fix="give the file written by 'dask scheduler --scheduler-file FILE'")
            connect = {"scheduler_file": str(scheduler_file)}
        else:
            where = _check_address(scheduler)
            connect = {"address": where}
        try:
            client = Client(**connect, timeout=timeout_s)
        except (OSError, TimeoutError, ValueError) as exc:
            raise ConfigError(
                f"cannot reach the Dask scheduler ({exc})",
                where=where,
                fix="check the address or scheduler file and that the scheduler is running",
            ) from exc
        try:
            check_versions(client, where)
            _log_dashboard(client)
            yield DaskExecutor(client)
        finally:
            client.close()
        return
    if int(workers) < 1:
        raise ConfigError(
            f"--workers {workers} is not a positive number", where="--workers", fix="give at least 1 worker"
        )
    # the scheduler runs in this process: keep its routine messages off the user's screen
    dlog = logging.getLogger("distributed")
    level = dlog.level
    dlog.setLevel(logging.WARNING)
    try:
        yield from _local_cluster(int(workers), memory_limit)
    finally:
        dlog.setLevel(level)


def _local_cluster(workers: int, memory_limit) -> Iterator:
    import dask
    from distributed import Client, LocalCluster

    # workers inherit this environment: keep numpy's BLAS to one thread per worker process
    env = {k: "1" for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")}
    old = {k: os.environ.get(k) for k in env}
    os.environ.update({k: v for k, v in env.items() if old[k] is None})
    # Worker settings measured with benchmarks/scale.py: Dask's default MALLOC_TRIM_THRESHOLD_=65536
    # fixes glibc's mmap threshold at 128 KiB, so every chunk-sized numpy temporary is mapped and
    # unmapped again (page faults: ~65 % more CPU per chunk than in one process); keeping buffers up
    # to 64 MiB on the heap brings that to ~20 %. The statistical profiler (no dashboard here) is off.
    settings = {
        "distributed.worker.profile.enabled": False,
        "distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": str(256 << 20),
        "distributed.nanny.pre-spawn-environ.MALLOC_MMAP_THRESHOLD_": str(64 << 20),
    }
    try:
        with dask.config.set(settings):
            cluster = LocalCluster(
                n_workers=workers,
                threads_per_worker=1,
                processes=True,
                host="127.0.0.1",
                dashboard_address="127.0.0.1:0",
                memory_limit=memory_limit,
                silence_logs=40,
            )
    finally:
        for k, v in old.items():
            if v is None:
                os.environ.pop(k, None)
    try:
        client = Client(cluster)
        try:
            _log_dashboard(client)
            client.run(_warm_worker)  # the compiled kernel's machine code, once per worker (0.2-0.3 CPU-s each)
            yield DaskExecutor(client)
        finally:
            client.close()
    finally:
        cluster.close()


def _warm_worker() -> bool:
    """Worker side of :func:`open_executor`: load the compiled line kernel now, not in the first
    task (:func:`compquant.lines.compiled.warm`); False when it cannot be loaded."""
    try:
        from compquant.lines import compiled

        return compiled.warm()
    except Exception:  # a worker without numba or a broken cache: the first task loads it, or NumPy runs
        return False


def peak_rss_bytes() -> int:
    """Peak resident memory of this process (bytes), from ``getrusage`` (Linux reports KiB)."""
    import resource
    import sys

    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return int(peak if sys.platform == "darwin" else peak * 1024)


__all__ = ["DaskExecutor", "Executor", "SerialExecutor", "check_versions", "open_executor", "peak_rss_bytes"]
