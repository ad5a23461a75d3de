"""``compquant analyse RUN --method FILE ...``: the whole job, certificates out."""

from __future__ import annotations

import click

from compquant.cli._common import SAFETY as _EPILOG  # short note; full text: compquant safety
from compquant.cli._common import (
    fold_scheduler,
    folder_option,
    method_option,
    progress_bar,
    scheduler_file_option,
)
from compquant.cli._stdin import table_input


class StageProgress:
    """Click progress bars, one per stage of :func:`compquant.analyse.analyse`, on stderr."""

    LABELS = {
        "measure": "measuring lines  ",
        "calibrate": "calibrating      ",
        "quantify": "quantifying      ",
        "certificates": "writing certificates",
    }

    def __init__(self, enabled: bool = True):
        self.enabled = enabled
        self.stage = None
        self.bar = None
        self.done = 0

    def __call__(self, stage: str, done: int, total: int) -> None:
        if not self.enabled:
            return
        if stage != self.stage:
            self.close()
            self.stage = stage
            self.done = 0
            self.bar = progress_bar(total, self.LABELS.get(stage, stage))  # compquant.cli._common
            self.bar.__enter__()
        if done > self.done:
            self.bar.update(done - self.done)
            self.done = done

    def close(self) -> None:
        if self.bar is not None:
            self.bar.__exit__(None, None, None)
            self.bar = None


def _release_words():
    """The release-state words and exit code (imported when used: ``--help`` stays light)."""
    from compquant.report.release import EXIT_NOT_VALID, NOT_VALID_FOR_RELEASE, release_status

    return EXIT_NOT_VALID, NOT_VALID_FOR_RELEASE, release_status


def summary_table(out) -> str:
    """Plain-text table: one row per certificate, one column per element (printed values)."""
    from compquant.fileio import visible_text

    _, _, release_status = _release_words()
    elements = []
    for c in out.certificates:
        for r in c.results:
            if r["element"] not in elements:
                elements.append(r["element"])
    head = ["sample", "certificate", "release", "conformity"] + elements
    rows = [head]
    for c in out.certificates:
        vals = {}
        for r in c.results:
            if r["value"] in ("< LOD", "not determined"):
                vals[r["element"]] = "< LOD" if r["value"] == "< LOD" else "n.d."
            else:
                vals[r["element"]] = f"{r['value']} {r['unit']}" + ("*" if r["flags"] else "")
        sid = visible_text(c.sample_id)
        if len(sid) > 24:
            sid = sid[:21] + "..."
        rows.append(
            [sid, c.number, release_status(c.valid_for_release), c.conformity or "-"]
            + [vals.get(e, "-") for e in elements]
        )
    widths = [max(len(r[i]) for r in rows) for i in range(len(head))]
    lines = ["  ".join(cell.ljust(w) for cell, w in zip(r, widths)).rstrip() for r in rows]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def report_outputs(out) -> None:
    from compquant.fileio import terminal_text

    click.echo("")
    click.echo(summary_table(out))
    click.echo("")
    click.echo("* value carries a flag; n.d. not determined; see the certificates.")
    click.echo(f"certificates: {out.outdir} ({len(out.certificates)} PDF + JSON)")
    click.echo(f"LIMS CSV:     {out.lims_csv}")
    click.echo(f"run summary:  {out.summary_json}")
    if out.calibration_json:
        click.echo(f"calibration:  {out.calibration_json}")
    for sid, why in sorted(out.failures.items()):
        click.echo(terminal_text(f"warning: sample {sid}: {why}"), err=True)
    click.echo(release_block(out), err=True, nl=False)


def release_block(out) -> str:
    """The warning block: every analyte not reported and every reason a certificate is not valid."""
    from compquant.fileio import visible_text

    EXIT_NOT_VALID, NOT_VALID_FOR_RELEASE, _ = _release_words()
    lines = []
    if out.not_reported:
        lines.append("WARNING: analytes of the method not reported:")
        groups: dict = {}
        for d in out.not_reported:
            groups.setdefault((d["element"], d["reason"]), []).append(visible_text(d["sample_id"]))
        for (el, why), sids in groups.items():
            lines.append(f"  {el} in {', '.join(sids)}: {visible_text(why)}")
    bad = [c for c in out.certificates if not c.valid_for_release]
    if bad:
        lines.append(f"{NOT_VALID_FOR_RELEASE.upper()}: {len(bad)} of {len(out.certificates)} certificates "
                     f"(exit code {EXIT_NOT_VALID}):")
        same: dict = {}
        for c in bad:
            same.setdefault(tuple(c.reasons), []).append(visible_text(c.sample_id))
        for reasons, sids in same.items():
            lines.append(f"  {', '.join(sids)}:")
            lines += [f"    - {visible_text(r)}" for r in reasons]
    return "".join(line + "\n" for line in lines)


def release_block_from_summary(summary_json, run_name: str) -> str:
    """The warning block of one run of several, read back from its ``summary.json``."""
    import json
    from types import SimpleNamespace

    with open(summary_json, encoding="utf-8") as fh:
        doc = json.load(fh)
    certs = [
        SimpleNamespace(sample_id=c["sample_id"], valid_for_release=c["valid_for_release"],
                        reasons=c.get("release_reasons", []), number=c["number"])
        for c in doc.get("certificates", [])
    ]
    out = SimpleNamespace(not_reported=doc.get("not_reported", []), certificates=certs)
    return "".join(f"{run_name}: {line}\n" for line in release_block(out).splitlines())


def _many_runs(run_paths, method_path, outdir, workers, scheduler, quiet, options) -> bool:
    """Several runs (or folders of runs): one output set per run, a combined LIMS CSV, runs.csv.

    Returns True when every certificate of every run is valid for release.
    """
    from pathlib import Path

    import pandas as pd

    from compquant.analyse import verify_output_set
    from compquant.cli._common import report_runs, write_csv
    from compquant.errors import CompquantError, OutputError
    from compquant.fileio import terminal_text
    from compquant.parallel import analyse_runs, collect_runs, open_executor, run_output_folders

    paths = collect_runs(run_paths)
    sep = ";" if options.get("lims_dialect") == "semicolon" else ","
    out = Path(outdir)
    if out.exists() and not out.is_dir():
        raise OutputError("output path exists and is not a folder", where=str(out), fix="choose a folder")
    folders = run_output_folders(paths, out)
    with open_executor(workers, scheduler) as ex:
        if not quiet:
            click.echo(f"analysing {len(paths)} runs on {ex.describe()}", err=True)
        with progress_bar(len(paths), "runs              ", enabled=not quiet) as bar:  # one step per run
            outcomes = analyse_runs(ex, paths, method_path, folders, progress=lambda oc: bar.update(1), **options)
    frames, status = [], []
    for oc in outcomes:
        if oc.ok:
            v = oc.value
            verify_output_set(v["outdir"])  # the set is whole before its rows are combined
            lims = pd.read_csv(v["lims_csv"], dtype=str, keep_default_na=False, sep=sep)
            lims.insert(0, "run", oc.run)
            frames.append(lims)
            status.append(
                {
                    "run": oc.run,
                    "status": "ok",
                    "outputs": v["outdir"],
                    "certificates": v["n_certificates"],
                    "valid_for_release": v["valid_for_release"],
                    "error": "",
                }
            )
            click.echo(terminal_text(
                f"ok: {oc.run} -> {v['outdir']} ({v['n_certificates']} certificates"
                f"{'' if v['valid_for_release'] else ', NOT VALID FOR RELEASE'})"
            ))
            for sid, why in sorted(v["failures"].items()):
                click.echo(terminal_text(f"warning: {oc.run}: sample {sid}: {why}"), err=True)
            if not v["valid_for_release"]:
                click.echo(release_block_from_summary(v["summary_json"], oc.run), err=True, nl=False)
        else:
            status.append(
                {
                    "run": oc.run,
                    "status": "failed",
                    "outputs": "",
                    "certificates": 0,
                    "valid_for_release": False,
                    "error": oc.error.one_line(),
                }
            )
    failed = [oc.run for oc in report_runs(outcomes, out, click.echo)]
    if frames:
        write_csv(pd.concat(frames, ignore_index=True), out / "lims-all.csv", sep=sep)
    cols = ["run", "status", "outputs", "certificates", "valid_for_release", "error"]
    write_csv(pd.DataFrame(status, columns=cols), out / "runs.csv")
    click.echo(terminal_text(
        f"combined LIMS CSV: {out / 'lims-all.csv'} ({len(frames)} of {len(outcomes)} runs); status: {out / 'runs.csv'}"
    ))
    all_valid = all(oc.ok and oc.value["valid_for_release"] and not oc.value["failures"] for oc in outcomes)
    if failed:
        raise CompquantError(
            f"{len(failed)} of {len(outcomes)} runs failed: {', '.join(failed)}",
            where=str(out),
            fix="see the 'failed:' lines above and runs.csv; the other runs' outputs are complete",
        )
    return all_valid


@click.command("analyse", epilog=_EPILOG)
@click.argument("run_paths", metavar="RUN...", nargs=-1, required=True, type=click.Path())
@method_option("Method file (TOML).")
@table_input(
    "--standards",
    what="standards file",
    help="Certified-standards file: calibrate from the standards measured in this run.",
)
@table_input(
    "--calibration",
    what="calibration file",
    limit="MAX_CALIBRATION_BYTES",
    help="Saved calibration (JSON): apply it, with drift standardisation from setup samples.",
)
@click.option("--cf", is_flag=True, help="Calibration-free analysis (plasma physics, closure to 100 %).")
@table_input("--lab", what="lab profile", help="Lab profile (TOML): name, address, signatory.")
@table_input("--spec", what="specification",
             help="Specification (TOML): element limits and decision rule for a conformity statement.")
@folder_option("-o", "--outdir", help="Output folder.", required=True)
@click.option("--client", help="Client name (overrides the lab profile's default).")
@click.option("--received", metavar="YYYY-MM-DD", help="Date the samples were received.")
@click.option("--issued-at", metavar="ISO-8601", help="Issue time in UTC (default: now); fixes the outputs.")
@click.option("--no-figures", is_flag=True, help="Leave the figures out of the certificates.")
@click.option("--chunk-shots", type=click.IntRange(1), help="Shots per streamed chunk (memory use).")
@click.option(
    "--workers", type=int, default=None, help="Compute on a local Dask cluster of N worker processes (loopback only)."
)
@click.option("--scheduler", default=None,
              help="Compute on an existing Dask cluster at this address (default: DASK_SCHEDULER_ADDRESS if set).")
@scheduler_file_option
@click.option(
    "--measured", metavar="ISO-8601", help="Start time of the measurement, for a run that states none (converted)."
)
@click.option(
    "--revise",
    metavar="REASON",
    help="Re-issue certificates already issued in OUTDIR as revisions -R<n>, giving the reason.",
)
@click.option(
    "--lims-dialect",
    type=click.Choice(["rfc4180", "semicolon"]),
    default="rfc4180",
    show_default=True,
    help="lims.csv: comma and decimal point, or ';' and decimal comma (UTF-8 either way).",
)
@click.option("--quiet", is_flag=True, help="No progress bars.")
@click.option("--db", metavar="PATH|URL", help="Store the analysis in the lab's record (default: $COMPQUANT_DB).")
@click.pass_context
def command(ctx, run_paths, method_path, outdir, no_figures, workers, scheduler, scheduler_file, quiet, **options):
    """Analyse a run and write a certificate of analysis per unknown sample.

    Preprocesses every shot, measures the method's lines, calibrates from the
    run's certified standards (--standards), applies a saved calibration
    (--calibration) or works calibration-free (--cf), checks the check
    samples, quantifies every unknown and writes into OUTDIR one PDF and one
    JSON certificate per unknown, one LIMS CSV and a run summary.

    Several runs, or folders of runs: each run gets its own output set in OUTDIR/<run name>/,
    plus OUTDIR/lims-all.csv (every run's LIMS rows, a run column first) and OUTDIR/runs.csv.
    A run that fails is named and the others still complete. --workers N / --scheduler ADDRESS
    compute on Dask (one run per task, or the chunks of a single run), with the same numbers.

    \b
    Exit codes: 0 every certificate is valid for release; 3 the analysis completed but a
    certificate is not valid for release (the reasons are printed and on the certificates);
    2 an input error (nothing written).
    """
    from pathlib import Path

    from compquant.analyse import analyse
    from compquant.parallel import chunk_mapper, open_executor

    scheduler = fold_scheduler(scheduler, scheduler_file)
    options["figures"] = not no_figures  # the other options are analyse()'s keywords of the same names
    if len(run_paths) > 1 or Path(run_paths[0]).is_dir():
        if not _many_runs(run_paths, method_path, outdir, workers, scheduler, quiet, options):
            ctx.exit(_release_words()[0])
        return
    run_path = run_paths[0]
    prog = StageProgress(enabled=not quiet)
    try:
        with open_executor(workers, scheduler) as ex:
            out = analyse(run_path, method_path, outdir=outdir, progress=prog, chunk_mapper=chunk_mapper(ex), **options)
    finally:
        prog.close()
    report_outputs(out)
    _report_record(options["db"])
    if out.exit_code:
        ctx.exit(out.exit_code)


def _report_record(db) -> None:
    """Where the analysis was recorded (compquant.record), and what comes next."""
    from compquant.record.db import configured, shown

    if configured(db):
        click.echo(f"record:       {shown(configured(db))} (see 'compquant record pending'; drafts leave the "
                   "lab only after 'compquant record release')")
