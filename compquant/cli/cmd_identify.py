"""``compquant identify RUN [--sample ID] [--method FILE] -o identify.csv``: which elements are present."""

from __future__ import annotations

from pathlib import Path

import click

from compquant.cli._common import (
    SAFETY,
    file_option,
    format_columns,
    method_option,
    output_option,
    run_argument,
    write_csv,
)
from compquant.errors import InputError
from compquant.fileio import safe_filename, terminal_text


def render_table(table) -> str:
    """Readable text of the identification table: detected and possible species, then the rest in one line."""
    out = []
    for sid, t in table.groupby("sample_id", sort=False):
        shown = t[t["status"] != "not detected"]
        rows = [("element", "ion", "status", "score", "found/expected", "best lines")]
        for r in shown.itertuples(index=False):
            rows.append((r.element, r.species.split(" ", 1)[1], r.status, f"{r.score:.2f}",
                         f"{r.lines_found:g}/{r.lines_expected}", r.best_lines or "-"))
        out.append(f"sample {terminal_text(sid)} (T = {t['temperature_k'].iloc[0]:.0f} K"
                   f"{' fitted' if t['temperature_fitted'].iloc[0] else ''}, R = {t['resolving_power'].iloc[0]:.0f})")
        out.append(format_columns(rows, right={3}, indent="  "))
        nd = sorted(set(t.loc[t["status"] == "not detected", "element"]) - set(shown["element"]))
        out.append("  not detected: " + (", ".join(nd) if nd else "-"))
    return "\n".join(out)


@click.command("identify", epilog=SAFETY)
@run_argument
@click.option("--sample", "samples", multiple=True,
              help="Sample id (repeat for several) [default: every sample of the run].")
@method_option(
    "Method file: its preprocessing, [identify] settings and analyte lines (interference map).",
    required=False,
)
@output_option("Identification CSV (one row per sample and candidate species).")
@file_option(
    "--interference", "imap_path",
    help="Interference-map CSV [default with --method: <output stem>-interference.csv].",
)
@file_option(
    "--peaks", "peaks_path",
    help="Also write the detected peaks (with the lines explaining them) to this CSV.",
)
@file_option(
    "--plot", "plot_path",
    help="PNG of the spectrum with identified lines labelled (one file per sample: "
    "<stem>-<sample>.png when several samples).",
)
@file_option(
    "--lines", "lines_path",
    help="Line database CSV in the columns of docs/atomic-data.md [default: the shipped list].",
)
@click.option("--temperature", type=float, default=None,
              help="Excitation temperature for the LTE estimate, K [default: method, else fitted].")
@click.option("--resolving-power", type=float, default=None,
              help="Resolving power λ/Δλ [default: method, else the run's instrument, else estimated].")
@click.option("--quiet", is_flag=True, help="No table on screen.")
def command(run_path, samples, method_path, output, imap_path, peaks_path, plot_path, lines_path, temperature,
            resolving_power, quiet):
    """Qualitative analysis: detect the peaks of each sample's preprocessed mean spectrum, match them
    to the line database, score every element and ion stage against an LTE estimate of its
    relative line intensities, and report it as detected / possible / not detected with the lines
    behind it. With --method, also map the interferences of other detected elements on the
    method's analyte lines and suggest interference-free alternatives. The run is read-only;
    outputs are written atomically. Rules: docs/identification.md."""
    import pandas as pd

    from compquant.fileio import refuse_overwriting_inputs

    refuse_overwriting_inputs([output, imap_path, peaks_path, plot_path], [run_path, method_path, lines_path])
    from compquant.identify.plot import plot_identification
    from compquant.identify.sample import default_method, identify_sample, identify_table, sample_interference
    from compquant.identify.settings import settings_from_method
    from compquant.method import load_method
    from compquant.run import Run

    for name, val in (("--temperature", temperature), ("--resolving-power", resolving_power)):
        if val is not None and not val > 0:
            raise InputError(f"{name} must be positive, got {val}", where=name, fix="give a positive number")
    from compquant.atomic import load_line_list

    line_list = load_line_list(lines_path) if lines_path else None
    method = load_method(method_path) if method_path else default_method()
    st = settings_from_method(method).with_overrides(temperature_k=temperature, resolving_power=resolving_power)
    out = Path(output)
    tables, imaps, peak_tables = [], [], []
    unexplained: dict[str, str] = {}
    n_unexplained: dict[str, int] = {}
    with Run.open(run_path) as run:
        ids = list(samples) or list(run.samples["sample_id"])
        known = set(run.samples["sample_id"])
        for sid in ids:
            if sid not in known:
                raise InputError(f"no sample {sid!r} in this run", where=str(run.path),
                                 fix="list the samples with 'compquant inspect'")
        medium = run.medium
        for sid in ids:
            ident = identify_sample(run, sid, method, settings=st, line_list=line_list)
            tables.append(identify_table(ident, sid))
            un = ident.unexplained_peaks
            unexplained[sid] = ", ".join(f"{c:.3f}" for c in un.nlargest(8, "snr")["centre_nm"].sort_values())
            n_unexplained[sid] = len(un)
            if method_path and method.lines:
                imaps.append(sample_interference(ident, method, sid))
            if peaks_path:
                peak_tables.append(ident.peaks.assign(sample_id=sid))
            if plot_path:
                p = Path(plot_path)
                target = p if len(ids) == 1 else p.with_name(f"{p.stem}-{safe_filename(sid)}{p.suffix or '.png'}")
                plot_identification(ident, target, medium=medium, title=f"{sid}: identified lines "
                                    f"(T = {ident.temperature_k:.0f} K, R = {ident.resolving_power:.0f})")
    table = pd.concat(tables, ignore_index=True)
    written = _write_tables(table, out, imaps, imap_path, peak_tables, peaks_path)
    if not quiet:
        _echo_results(table, n_unexplained, unexplained, imaps)
    for w in written:
        click.echo(f"wrote {w}", err=quiet)


def _write_tables(table, out: Path, imaps, imap_path, peak_tables, peaks_path) -> list[Path]:
    """The identification CSV, the interference map (with --method) and the peak list (--peaks)."""
    import pandas as pd

    write_csv(table, out, float_format="%.6g")
    written = [out]
    if imaps:
        ip = Path(imap_path) if imap_path else Path(f"{out.with_suffix('')}-interference.csv")
        write_csv(pd.concat(imaps, ignore_index=True), ip, float_format="%.6g")
        written.append(ip)
    if peak_tables:
        pt = pd.concat(peak_tables, ignore_index=True)
        write_csv(pt[["sample_id"] + [c for c in pt.columns if c != "sample_id"]], Path(peaks_path),
                  float_format="%.6g")
        written.append(Path(peaks_path))
    return written


def _echo_results(table, n_unexplained: dict, unexplained: dict, imaps) -> None:
    """The table on screen, the unexplained peaks and the overlaps on the method's lines."""
    import pandas as pd

    click.echo(render_table(table))
    for sid, n in n_unexplained.items():
        if n:
            click.echo(f"unexplained peaks in {terminal_text(sid)}: {n} (strongest at {unexplained[sid]} nm; "
                       "lines missing from the line database, or noise)")
    if imaps:
        im = pd.concat(imaps, ignore_index=True)
        ov = im[im["overlapped"] & (im["interferer_line_id"] != "")]
        for r in ov.itertuples(index=False):
            size = (f"{r.relative_contribution:.1%} of the analyte signal" if r.analyte_signal > 0
                    else f"{r.interferer_snr:.0f} sigma, analyte not seen")
            click.echo(f"overlap: {terminal_text(r.sample_id)}: {r.line_id} <- {r.interferer_line_id} ({size}); "
                       f"alternatives: {r.alternatives or 'none free'}")
