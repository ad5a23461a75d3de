"""``compquant analyse`` over many runs: one run per task, one output set per run.

Each task calls :func:`compquant.analyse.analyse` -- the single-run function -- on one run
with that run's own output folder; a failing run comes back as its error and the other
runs' outputs are complete. The client then joins the runs' LIMS CSV files into one.

The configuration files (method, standards, saved calibration, lab profile, specification)
are read here and sent to the workers by value: a worker uses the file at the same path when
it has it with the same content (a shared or local file system, so the certificates name the
real paths), and otherwise a private copy of the bytes it was sent.  Files that a method
names in turn (a response curve, a shift reference) and the run files themselves are read
at their paths on the worker.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

from compquant.parallel.runs import RunOutcome, map_runs

_FILE_OPTIONS = ("standards", "calibration", "lab", "spec")


def _by_value(path) -> dict | None:
    """A configuration file as sent to the workers: its absolute path, bytes and sha256."""
    if path is None:
        return None
    from compquant.fileio import InputBytes

    if isinstance(path, InputBytes):  # read already (standard input): sent as it is
        return {"input": path}
    p = Path(path)
    try:
        data = p.read_bytes()
    except OSError:
        return {"path": str(p), "data": None, "sha256": None}  # the worker reports the error
    return {"path": str(p.resolve()), "data": data, "sha256": hashlib.sha256(data).hexdigest()}


def _on_worker(f: dict | None, folder: Path) -> str | None:
    """The path a worker uses for a file sent by value (see the module docstring)."""
    if f is None:
        return None
    if "input" in f:
        return f["input"]
    p = Path(f["path"])
    if f["data"] is None:
        return str(p)
    try:
        if p.is_file() and hashlib.sha256(p.read_bytes()).hexdigest() == f["sha256"]:
            return str(p)
    except OSError:
        pass
    folder.mkdir(parents=True, exist_ok=True)
    local = folder / p.name
    local.write_bytes(f["data"])
    return str(local)


def _analyse_one(path: str, ctx: dict) -> dict:
    import tempfile

    from compquant.analyse import analyse

    kw = dict(ctx["options"])
    with tempfile.TemporaryDirectory(prefix="compquant-config-") as tmp:
        for i, key in enumerate(_FILE_OPTIONS):
            kw[key] = _on_worker(ctx["files"].get(key), Path(tmp) / str(i))
        method = _on_worker(ctx["files"]["method"], Path(tmp) / "method")
        out = analyse(path, method, outdir=str(ctx["outdirs"][path]), **kw)
    return {
        "outdir": out.outdir,
        "lims_csv": out.lims_csv,
        "summary_json": out.summary_json,
        "n_certificates": len(out.certificates),
        "valid_for_release": out.valid_for_release,
        "failures": dict(out.failures),
    }


def analyse_runs(
    executor, paths: list[str | os.PathLike], method_path, outdirs: dict[str, Path], *, progress=None, **options
) -> list[RunOutcome]:
    """:func:`compquant.analyse.analyse` for every run (``options`` as for one run); outcomes in order.

    ``progress(outcome)`` is called as each run finishes (see :func:`map_runs`)."""
    items = [str(p) for p in paths]
    files = {key: _by_value(options.get(key)) for key in _FILE_OPTIONS}
    files["method"] = _by_value(method_path)
    opts = {k: v for k, v in options.items() if k not in _FILE_OPTIONS}
    ctx = {"files": files, "outdirs": {str(k): v for k, v in outdirs.items()}, "options": opts}
    return map_runs(executor, items, _analyse_one, ctx, progress=progress)


__all__ = ["analyse_runs"]
