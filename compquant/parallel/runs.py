"""Many runs at once: one task per run, a failing run never stops the others.

:func:`map_runs` calls ``fn(path, context)`` for every run, on the executor's workers, and
returns one :class:`RunOutcome` per run in the order the runs were given. A user-facing
problem (:class:`~compquant.errors.CompquantError`) in one run is caught *on the worker* and
comes back as that run's error (what, where, fix, and the run it belongs to); the other runs
carry on. Any other exception is a bug: it is caught the same way so the other runs still
finish, and its traceback is kept for the report.
"""

from __future__ import annotations

import os
import traceback
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from compquant.errors import CompquantError, InputError
from compquant.fileio import require_file


@dataclass
class RunError:
    """Why one run failed (travels back from a worker as plain data)."""

    run: str
    kind: str
    what: str
    where: str | None = None
    fix: str | None = None
    traceback: str | None = None  # only for bugs (not CompquantError)

    def one_line(self) -> str:
        msg = self.what
        if self.where and self.where != self.run:
            msg = f"{self.where}: {msg}"
        if self.fix:
            msg = f"{msg}; {self.fix}"
        return f"run {self.run}: {msg}"


@dataclass
class RunOutcome:
    """Result of one run: ``value`` when it worked, ``error`` when it did not."""

    run: str
    value: Any = None
    error: RunError | None = None
    worker: str = field(default="")

    @property
    def ok(self) -> bool:
        return self.error is None


def _guarded(path: str, fn: Callable, context: Any) -> RunOutcome:
    """Task body: run ``fn(path, context)`` and turn any failure into a :class:`RunError`."""
    worker = f"pid {os.getpid()}"
    try:
        return RunOutcome(run=path, value=fn(path, context), worker=worker)
    except CompquantError as exc:
        return RunOutcome(run=path, worker=worker, error=RunError(path, exc.kind, exc.what, exc.where, exc.fix))
    except Exception as exc:  # a bug: keep its traceback, let the other runs finish
        return RunOutcome(
            run=path,
            worker=worker,
            error=RunError(path, "bug", f"{type(exc).__name__}: {exc}", traceback=traceback.format_exc()),
        )


def collect_runs(inputs: Iterable[str | os.PathLike], pattern: str = "*.h5") -> list[Path]:
    """Expand run arguments: files are kept, folders give their ``pattern`` files, sorted by name.

    The order is the order given, folders expanded in name order; duplicates are dropped.
    """
    out: list[Path] = []
    seen = set()
    for item in inputs:
        p = Path(item)
        if p.is_dir():
            found = sorted(q for q in p.glob(pattern) if q.is_file())
            if not found:
                raise InputError(
                    f"folder holds no run files ({pattern})",
                    where=str(p),
                    fix="give run files or a folder that holds .h5 runs",
                )
        elif p.exists() or p.is_symlink():
            found = [require_file(p, "run file")]  # a FIFO or a device is refused before any work
        else:
            raise InputError("no such run file or folder", where=str(p), fix="check the path")
        for q in found:
            key = q.resolve()
            if key not in seen:
                seen.add(key)
                out.append(q)
    if not out:
        raise InputError("no run given", where="command line", fix="give at least one run file or folder")
    return out


#: the files a multi-run call writes beside the runs' folders (a run folder never takes these names)
COMBINED_OUTPUTS = ("runs.csv", "lines-all.csv", "lims-all.csv", "runs-failures.txt")


def run_output_folders(paths, out_dir: str | os.PathLike) -> dict[str, Path]:
    """One output folder per run under ``out_dir``, named from the run file (safe name, numbered if repeated)."""
    from compquant.fileio import safe_filename

    used: set[str] = set(COMBINED_OUTPUTS)
    folders = {}
    for p in paths:
        name = safe_filename(Path(p).stem)
        if name.casefold() in used:  # a run called runs.csv.h5 must not take the combined table's name
            name = f"{name}-run"
        base, k = name, 1
        while name.casefold() in used:
            k += 1
            name = f"{base}-{k}"
        used.add(name.casefold())
        folders[str(p)] = Path(out_dir) / name
    return folders


def map_runs(
    executor, paths: Iterable[str | os.PathLike], fn: Callable, context: Any = None, progress: Callable | None = None
) -> list[RunOutcome]:
    """``fn(path, context)`` for every run; one :class:`RunOutcome` per run, in the order given.

    ``fn`` must be a module-level function. Each run is processed whole by one worker with
    the serial step functions, so its numbers equal a serial run of that file exactly.
    ``progress(outcome)`` is called as each run's outcome arrives (in the order given), e.g.
    to advance a progress bar or report the run at once.
    """
    ctx = executor.broadcast(context)
    items = [str(p) for p in paths]
    out = []
    for oc in executor.map_ordered(_guarded, items, fn, ctx, max_in_flight=len(items) or 1):
        out.append(oc)
        if progress is not None:
            progress(oc)
    return out


__all__ = ["COMBINED_OUTPUTS", "RunError", "RunOutcome", "collect_runs", "map_runs", "run_output_folders"]
