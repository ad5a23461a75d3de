"""``compquant lines RUN --method FILE -o lines.csv``: measure a method's lines in a run."""

from __future__ import annotations

import json
from pathlib import Path

import click

from compquant.errors import OutputError
from compquant.fileio import atomic_write

SAFETY = (
    "Safety: LIBS uses Class 4 lasers (eye and skin hazard: wear eyewear of the right optical "
    "density, keep interlocks and a controlled area); ablation makes fumes and particles, some "
    "toxic (Pb, Cd, Be): use fume extraction; spark sources use high voltage and emit UV. "
    "Follow local regulations and your laser safety officer."
)


def _write_csv(df, path: Path) -> None:
    try:
        with atomic_write(path, "w", newline="") as fh:
            df.to_csv(fh, index=False, float_format="%.10g")
    except OSError as exc:
        raise OutputError(
            f"cannot write ({exc.strerror})", where=str(path), fix="choose a writable output path"
        ) from exc


def _columns(rows) -> str:
    w = [max(len(x[i]) for x in rows) for i in range(len(rows[0]))]
    return "\n".join(
        "  ".join(c.ljust(w[i]) if i < 2 or i == len(row) - 1 else c.rjust(w[i]) for i, c in enumerate(row))
        for row in rows
    )


def _short_table(table, max_rows: int = 60) -> str:
    """The line table when short; otherwise one summary row per sample."""
    if len(table) <= max_rows:
        rows = [("sample_id", "line_id", "intensity", "u_intensity", "n_shots", "snr", "flags")]
        for r in table.itertuples(index=False):
            rows.append(
                (
                    str(r.sample_id),
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
                str(sid),
                str(role),
                str(int(g["n_shots"].max())),
                str(len(g)),
                str(found),
                f"{len(flagged)} ({', '.join(kinds)})" if kinds else "0",
            )
        )
    return _columns(rows)


@click.command("lines", epilog=SAFETY)
@click.argument("run_path", metavar="RUN", type=click.Path(dir_okay=False))
@click.option(
    "--method",
    "method_path",
    required=True,
    type=click.Path(dir_okay=False),
    help="Method file (TOML, docs/method-file.md).",
)
@click.option(
    "-o",
    "--output",
    required=True,
    type=click.Path(dir_okay=False),
    help="Line table CSV (one row per sample and line).",
)
@click.option(
    "--shots",
    "shots_path",
    type=click.Path(dir_okay=False),
    default=None,
    help="Per-shot CSV [default: <output stem>-shots.csv beside the output].",
)
@click.option("--no-shots", is_flag=True, help="Do not write the per-shot CSV.")
@click.option(
    "--qc",
    "qc_path",
    type=click.Path(dir_okay=False),
    default=None,
    help="Shot-QC report CSV [default: <output stem>-qc.csv].",
)
@click.option(
    "--chunk-shots",
    type=int,
    default=None,
    help="Shots processed per chunk (memory ~ chunk x pixels x 24 bytes) [method default 4096].",
)
@click.option(
    "--threads",
    type=click.IntRange(1, 64),
    default=1,
    show_default=True,
    help="Worker threads (numpy releases the GIL; results are identical).",
)
@click.option("--quiet", is_flag=True, help="No progress bar and no table on screen.")
def command(run_path, method_path, output, shots_path, no_shots, qc_path, chunk_shots, threads, quiet):
    """Preprocess every shot of RUN as the method says (dark, response, saturation, shot QC,
    baseline, normalisation, shift) and measure its lines: intensity with standard uncertainty,
    centre, FWHM, signal-to-noise and flags per sample. Writes the line table, the per-shot
    intensities and the shot-QC report as CSV (atomic writes; the run is opened read-only)."""
    from compquant.lines import measure_run
    from compquant.method import load_method
    from compquant.run import Run

    method = load_method(method_path)
    out = Path(output)
    stem = out.with_suffix("")
    shots_out = None if no_shots else Path(shots_path or f"{stem}-shots.csv")
    qc_out = Path(qc_path or f"{stem}-qc.csv")
    with Run.open(run_path) as run:
        passes = 1 + (method.preprocess.shift != "none") + any(ln.mode == "fit" for ln in method.lines)
        total = run.n_shots * passes
        if quiet or total < 20000:
            lm = measure_run(run, method, chunk_shots=chunk_shots, threads=threads)
        else:
            with click.progressbar(length=total, label="measuring", file=click.get_text_stream("stderr")) as bar:
                lm = measure_run(run, method, chunk_shots=chunk_shots, progress=bar.update, threads=threads)
    _write_csv(lm.table, out)
    if shots_out is not None:
        _write_csv(lm.shots, shots_out)
    qc = lm.qc.merge(lm.shifts, on="sample_id", how="left")
    _write_csv(qc, qc_out)
    prov_path = Path(f"{stem}-provenance.json")
    with atomic_write(prov_path) as fh:
        json.dump(lm.provenance, fh, indent=2, sort_keys=True, default=str)
    if not quiet:
        click.echo(_short_table(lm.table))
        rej = lm.qc[lm.qc["n_rejected"] > 0]
        for r in rej.itertuples(index=False):
            click.echo(f"shot QC: {r.sample_id}: {r.n_rejected} of {r.n_shots} shots rejected ({r.reasons})")
        for note in lm.provenance.get("notes", []):
            click.echo(f"note: {note}")
        written = [str(out)] + ([str(shots_out)] if shots_out else []) + [str(qc_out), str(prov_path)]
        click.echo("wrote " + ", ".join(written))
