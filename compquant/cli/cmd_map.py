"""``compquant map RUN --method FILE [--calibration cal.json] -o OUTDIR``: element maps of a rastered run."""

from __future__ import annotations

import json
from pathlib import Path

import click

from compquant.cli._common import (
    SAFETY,
    file_option,
    fold_scheduler,
    method_option,
    output_option,
    progress_bar,
    run_argument,
    scheduler_file_option,
    write_csv,
)
from compquant.fileio import terminal_text


def write_map_outputs(result, out_dir: Path) -> list[Path]:
    """``maps.h5``, one PNG per sample and element, ``maps-provenance.json`` (and node results CSV)."""
    from compquant.fileio import atomic_write, json_ready, safe_filename
    from compquant.maps.output import write_map_png, write_maps_h5

    out_dir = Path(out_dir)
    attrs = {k: v for k, v in result.provenance.items() if isinstance(v, str)}
    written = [write_maps_h5(out_dir / "maps.h5", result.samples, attrs)]
    for sm in result.samples:
        for em in sm.maps:
            name = safe_filename(f"{sm.sample_id}_{em.element}")
            written.append(write_map_png(out_dir / f"{name}.png", sm, em))
    if result.results is not None:
        p = out_dir / "maps-node-results.csv"
        write_csv(result.results, p, float_format="%.8g")
        written.append(p)
    p = out_dir / "maps-provenance.json"
    with atomic_write(p) as fh:
        json.dump(json_ready(result.provenance, str), fh, indent=2, sort_keys=True, default=str, allow_nan=False)
    written.append(p)
    return written


@click.command("map", epilog=SAFETY)
@run_argument
@method_option("Method file (TOML); its [map] table picks lines, grid step and samples.")
@file_option(
    "--calibration", "calibration_path",
    help="Calibration JSON: map mass fractions instead of line intensities.",
)
@output_option("Output folder (maps.h5, PNG images, provenance).", dest="out_dir", folder=True)
@click.option("--sample", "samples", multiple=True, help="Sample to map (repeatable) [default: rastered ones].")
@click.option("--chunk-shots", type=int, default=None, help="Shots per streamed chunk [method default].")
@click.option("--workers", type=int, default=None, help="Compute on a local Dask cluster of N worker processes.")
@click.option("--scheduler", default=None,
              help="Compute on an existing Dask cluster at this address (default: DASK_SCHEDULER_ADDRESS if set).")
@scheduler_file_option
@click.option("--db", metavar="PATH|URL",
              help="Store the maps in the lab's record, with the run's recorded analysis (default: $COMPQUANT_DB).")
@click.option("--quiet", is_flag=True, help="No progress bar or summary.")
def command(run_path, method_path, calibration_path, out_dir, samples, chunk_shots, workers, scheduler, scheduler_file,
            db, quiet):
    """Per-element maps of a rastered run (shots with x, y stage positions): each grid node holds
    the mean over its accepted shots of the line intensity, or with --calibration the mass
    fraction from the calibration curves. Writes maps.h5 (x/y axes in mm, units attributes) and a
    PNG per sample and element with a colour bar and a scale bar. The run is streamed chunk by
    chunk and opened read-only."""
    from compquant.fileio import refuse_overwriting_inputs

    refuse_overwriting_inputs([out_dir], [run_path, method_path, calibration_path])
    from compquant.maps.build import make_maps
    from compquant.method import load_method
    from compquant.parallel import open_executor
    from compquant.record.store import recorder_for_maps
    from compquant.run import Run

    method = load_method(method_path)
    cal = None
    if calibration_path:
        from compquant.calibrate.model import Calibration

        cal = Calibration.load(calibration_path)
    scheduler = fold_scheduler(scheduler, scheduler_file)
    with Run.open(run_path) as run:
        recorder = recorder_for_maps(db, run)  # fail fast: before the work; the run keeps its hash
        with open_executor(workers, scheduler) as ex:
            if quiet or run.n_shots < 20000:
                result = make_maps(
                    run, method, calibration=cal, chunk_shots=chunk_shots, executor=ex, samples=list(samples) or None
                )
            else:
                passes = 1 + (method.preprocess.shift != "none") + any(ln.mode == "fit" for ln in method.lines)
                with progress_bar(run.n_shots * passes, "measuring") as bar:
                    result = make_maps(run, method, calibration=cal, chunk_shots=chunk_shots, executor=ex,
                                       progress=bar.update, samples=list(samples) or None)
    stored = None
    if recorder is not None:
        from compquant.record.evidence import maps_evidence

        items = maps_evidence(result)
        recorder.check_samples(sorted({m["sample_id"] for m in items}))
    written = write_map_outputs(result, Path(out_dir))
    if recorder is not None:
        stored = recorder.store(items)
    for note in result.provenance.get("notes", []):
        click.echo(terminal_text(f"warning: {note}"), err=True)
    if not quiet:
        for sm in result.samples:
            g = sm.grid
            click.echo(
                f"{terminal_text(sm.sample_id)}: {g.nx} x {g.ny} nodes, step {g.dx_mm:g} x {g.dy_mm:g} mm, "
                f"{int(sm.shots.sum())} shots; maps: {', '.join(m.element for m in sm.maps)}"
            )
        click.echo(f"wrote {len(written)} files to {out_dir}")
        if stored is not None:
            click.echo(f"record: {len(stored)} map(s) stored with run {terminal_text(Path(run_path).name)} in "
                       f"{terminal_text(recorder.record.where)}")
