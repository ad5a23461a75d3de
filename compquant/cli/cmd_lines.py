"""``compquant lines RUN --method FILE -o lines.csv``: measure a method's lines in a run.

Several runs (files or folders of ``*.h5``): ``compquant lines RUN1 RUN2 DIR ... --method FILE -o OUTDIR``
writes one output set per run in ``OUTDIR/<run name>/`` and one combined table
``OUTDIR/lines-all.csv`` (a ``run`` column first) plus ``OUTDIR/runs.csv`` (status of each run).
``--workers N`` / ``--scheduler ADDRESS`` compute on Dask: chunks of a single run, or one run per
task for several runs (compquant.parallel); the numbers equal the serial ones.
"""

from __future__ import annotations

import json
from pathlib import Path

import click

from compquant.cli._common import (
    SAFETY,
    file_option,
    fold_scheduler,
    format_columns,
    is_stdio,
    method_option,
    output_option,
    progress_bar,
    report_runs,
    scheduler_file_option,
    write_csv,
)
from compquant.errors import OutputError
from compquant.fileio import atomic_write, json_ready, terminal_text


def _columns(rows) -> str:
    return format_columns(rows, right=range(2, len(rows[0]) - 1))


def _short_table(table, max_rows: int = 60) -> str:
    """The line table when short; otherwise one summary row per sample."""
    if len(table) <= max_rows:
        rows = [("sample_id", "line_id", "intensity", "u_intensity", "n_shots", "snr", "flags")]
        for r in table.itertuples(index=False):
            rows.append(
                (
                    terminal_text(r.sample_id),
                    str(r.line_id),
                    f"{r.intensity:.4g}",
                    f"{r.u_intensity:.2g}",
                    str(r.n_shots),
                    f"{r.snr:.1f}",
                    r.flags or "-",
                )
            )
        return _columns(rows)
    rows = [("sample_id", "role", "shots", "lines", "found", "flagged lines")]
    for (sid, role), g in table.groupby(["sample_id", "role"], sort=False):
        flagged = g[g["flags"] != ""]
        found = int((~g["flags"].str.contains("not_found")).sum())
        kinds = sorted({f for fl in flagged["flags"] for f in fl.split(";")})
        rows.append(
            (
                terminal_text(sid),
                str(role),
                str(int(g["n_shots"].max())),
                str(len(g)),
                str(found),
                f"{len(flagged)} ({', '.join(kinds)})" if kinds else "0",
            )
        )
    return _columns(rows)


def write_shots_csv(lm, path) -> None:
    """The per-shot CSV (``sample_id, shot, line_id, intensity, accepted, saturated``), written in
    blocks of rows from the measurement's compact arrays (``lm.shot_view``), so memory does not
    grow with shots x lines; the bytes equal ``write_csv(lm.shots, path)``."""
    import sys

    from compquant.cli._common import safe_frame
    from compquant.fileio import atomic_write

    def _write(fh) -> None:
        for i, block in enumerate(lm.shot_view.frames()):
            safe_frame(block).to_csv(fh, index=False, header=i == 0, float_format="%.10g")

    if is_stdio(path):
        _write(sys.stdout)
        return
    try:
        with atomic_write(Path(path), "w", newline="") as fh:
            _write(fh)
    except OSError as exc:
        raise OutputError(
            f"cannot write ({exc.strerror})", where=str(path), fix="choose a writable output path"
        ) from exc


def write_outputs(lm, out: Path, shots_out: Path | None, qc_out: Path) -> list[Path]:
    """Write the line table, per-shot table, QC report and provenance of one run; return the paths."""
    stem = out.with_suffix("")
    write_csv(lm.table, out)
    if shots_out is not None:
        write_shots_csv(lm, shots_out)
    if qc_out is None:  # line table on standard output (-o -) and no QC file asked for
        return [out] + ([shots_out] if shots_out is not None else [])
    qc = lm.qc.merge(lm.shifts, on="sample_id", how="left")
    write_csv(qc, qc_out)
    prov_path = Path(f"{stem}-provenance.json")
    with atomic_write(prov_path) as fh:
        json.dump(json_ready(lm.provenance, str), fh, indent=2, sort_keys=True, default=str, allow_nan=False)
    return [out] + ([shots_out] if shots_out is not None else []) + [qc_out, prov_path]


def write_run_outputs(lm, out_dir: Path) -> list[Path]:
    """The output set of one run among several: ``lines.csv``, ``lines-shots.csv``, ``lines-qc.csv``,
    ``lines-provenance.json`` in ``out_dir`` (module-level so Dask workers can call it)."""
    out_dir = Path(out_dir)
    return write_outputs(lm, out_dir / "lines.csv", out_dir / "lines-shots.csv", out_dir / "lines-qc.csv")


def _many_runs(run_paths, method, out_dir: Path, chunk_shots, workers, scheduler, quiet) -> None:
    import pandas as pd

    from compquant.errors import CompquantError
    from compquant.parallel import collect_runs, measure_runs, open_executor, run_output_folders

    paths = collect_runs(run_paths)
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputError(
            "with several runs, -o must be a folder", where=str(out_dir), fix="give an output folder, e.g. -o results/"
        )
    folders = run_output_folders(paths, out_dir)
    with open_executor(workers, scheduler) as ex:
        if not quiet:
            click.echo(f"measuring {len(paths)} runs on {ex.describe()}", err=True)
        with progress_bar(len(paths), "runs     ", enabled=not quiet) as bar:  # one step per run
            outcomes = measure_runs(ex, paths, method, chunk_shots=chunk_shots, outputs=folders,
                                    writer=write_run_outputs, progress=lambda oc: bar.update(1))
    tables, status = [], []
    for oc in outcomes:
        if oc.ok:
            t = oc.value["table"].copy()
            t.insert(0, "run", oc.run)
            tables.append(t)
            status.append(
                {
                    "run": oc.run,
                    "status": "ok",
                    "outputs": str(folders[oc.run]),
                    "n_shots": oc.value["n_shots"],
                    "error": "",
                }
            )
            if not quiet:
                click.echo(terminal_text(f"ok: {oc.run} -> {folders[oc.run]}"))
                for note in oc.value["notes"]:
                    click.echo(terminal_text(f"note: {oc.run}: {note}"))
        else:
            status.append(
                {"run": oc.run, "status": "failed", "outputs": "", "n_shots": 0, "error": oc.error.one_line()}
            )
    failed = report_runs(outcomes, out_dir, click.echo)
    if tables:
        write_csv(pd.concat(tables, ignore_index=True), out_dir / "lines-all.csv")
    write_csv(pd.DataFrame(status, columns=["run", "status", "outputs", "n_shots", "error"]), out_dir / "runs.csv")
    if not quiet:
        click.echo(terminal_text(
            f"wrote {out_dir / 'lines-all.csv'} ({len(tables)} of {len(outcomes)} runs) and {out_dir / 'runs.csv'}"
        ))
    if failed:
        names = ", ".join(oc.run for oc in failed)
        raise CompquantError(
            f"{len(failed)} of {len(outcomes)} runs failed: {names}",
            where=str(out_dir),
            fix="see the 'failed:' lines above and runs.csv; the other runs' outputs are complete",
        )


@click.command("lines", epilog=SAFETY)
@click.argument("run_paths", metavar="RUN...", nargs=-1, required=True, type=click.Path())
@method_option("Method file (TOML, docs/method-file.md).")
@output_option(
    "Line table CSV for one run ('-': standard output, no other file unless named); "
    "an output folder for several runs or a folder of runs.",
    folder=None,
)
@file_option("--shots", "shots_path", help="Per-shot CSV [default: <output stem>-shots.csv beside the output].")
@click.option("--no-shots", is_flag=True, help="Do not write the per-shot CSV.")
@file_option("--qc", "qc_path", help="Shot-QC report CSV [default: <output stem>-qc.csv].")
@click.option(
    "--chunk-shots",
    type=int,
    default=None,
    help="Shots processed per chunk (memory ~ chunk x pixels x 24 bytes) [method default 4096].",
)
@click.option(
    "--workers",
    type=int,
    default=None,
    help="Start a local Dask cluster of N worker processes (loopback only) and compute there.",
)
@click.option("--scheduler", default=None,
              help="Compute on an existing Dask cluster at this address (default: DASK_SCHEDULER_ADDRESS if set).")
@scheduler_file_option
@click.option(
    "--threads",
    type=click.IntRange(1, 64),
    default=None,
    help="Worker threads in this process (results are identical). Default: the idle cores for a run stored "
    "uncompressed measured by the compiled kernel, else 1.",
)
@click.option("--quiet", is_flag=True, help="No progress bar and no table on screen.")
def command(
    run_paths, method_path, output, shots_path, no_shots, qc_path, chunk_shots, workers, scheduler, scheduler_file,
    threads, quiet,
):
    """Preprocess every shot of RUN as the method says (dark, response, saturation, shot QC,
    baseline, normalisation, shift) and measure its lines: intensity with standard uncertainty,
    centre, FWHM, signal-to-noise and flags per sample. Writes the line table, the per-shot
    intensities and the shot-QC report as CSV (atomic writes; the run is opened read-only).

    Several runs, or a folder of runs: -o is a folder; each run gets its own output set there,
    plus lines-all.csv (every run's table) and runs.csv. A run that fails is reported by name
    and the others still complete."""
    from compquant.fileio import refuse_overwriting_inputs
    from compquant.lines import measure_run
    from compquant.method import load_method
    from compquant.parallel import chunk_mapper, open_executor
    from compquant.run import Run

    refuse_overwriting_inputs([output, shots_path, qc_path], [*run_paths, method_path])
    scheduler = fold_scheduler(scheduler, scheduler_file)
    method = load_method(method_path)
    if len(run_paths) > 1 or Path(run_paths[0]).is_dir():
        if shots_path or qc_path or no_shots:
            raise OutputError(
                "--shots, --qc and --no-shots apply to a single run",
                where="command line",
                fix="leave them out with several runs (each run's set is fixed)",
            )
        _many_runs(run_paths, method, Path(output), chunk_shots, workers, scheduler, quiet)
        return
    run_path = run_paths[0]
    out = Path(output)
    stem = out.with_suffix("")
    if is_stdio(output):  # the line table on standard output; other files only when named
        shots_out = Path(shots_path) if shots_path and not no_shots else None
        qc_out = Path(qc_path) if qc_path else None
    else:
        shots_out = None if no_shots else Path(shots_path or f"{stem}-shots.csv")
        qc_out = Path(qc_path or f"{stem}-qc.csv")
    refuse_overwriting_inputs(
        [shots_out, qc_out] + ([] if is_stdio(output) else [Path(f"{stem}-provenance.json")]), [run_path, method_path]
    )
    with Run.open(run_path) as run, open_executor(workers, scheduler) as ex:
        mapper = chunk_mapper(ex)
        passes = 1 + (method.preprocess.shift != "none") + any(ln.mode == "fit" for ln in method.lines)
        total = run.n_shots * passes
        with progress_bar(total, "measuring", enabled=not quiet) as bar:  # shots x passes over the run
            lm = measure_run(
                run, method, chunk_shots=chunk_shots, progress=bar.update, chunk_mapper=mapper, threads=threads
            )
    written = write_outputs(lm, out, shots_out, qc_out)
    if is_stdio(output):
        if not quiet and len(written) > 1:
            click.echo("wrote " + ", ".join(str(p) for p in written[1:]), err=True)
        return
    if not quiet:
        click.echo(_short_table(lm.table))
        rej = lm.qc[lm.qc["n_rejected"] > 0]
        for r in rej.itertuples(index=False):
            sid = terminal_text(r.sample_id)
            click.echo(f"shot QC: {sid}: {r.n_rejected} of {r.n_shots} shots rejected ({r.reasons})")
        for note in lm.provenance.get("notes", []):
            click.echo(f"note: {terminal_text(note)}")
        click.echo("wrote " + ", ".join(str(p) for p in written))
