"""``compquant cf RUN --method FILE -o cf.csv [--plots DIR]``: calibration-free analysis."""

from __future__ import annotations

import json
import math
import warnings
from pathlib import Path

import click

from compquant.cli._common import (
    SAFETY,
    folder_option,
    format_columns,
    method_option,
    output_option,
    progress_bar,
    run_argument,
    write_csv,
)
from compquant.errors import ConfigError, StandardsError
from compquant.fileio import atomic_write, json_ready, safe_filename, terminal_text

NOTE = ("Calibration-free results rest on LTE, an optically thin (or corrected) homogeneous plasma "
        "and the atomic data; read the flags. " + SAFETY)

def _certified(path: Path, standard_id: str) -> dict[str, float]:
    """Certified mass fractions (g/g) of one standard, read by :func:`compquant.calibrate.load_standards`."""
    from compquant.calibrate import load_standards

    tab = load_standards(path)
    rows = tab[tab["standard_id"].astype(str) == standard_id]
    if rows.empty:
        raise StandardsError(f"standard {standard_id!r} not in the standards file", where=str(path),
                             fix="check [cf] one_point_standard and the run's standard_ref")
    return {str(el): float(w) for el, w in zip(rows["element"], rows["mass_fraction"])}


def _screen(results) -> str:
    cols = ("sample", "species", "lines", "T/K", "ne/cm-3", "ne method", "w/%", "U/%", "flags")
    rows = [cols]
    for r in results:
        for row in r.summary_table().itertuples(index=False):
            rows.append((terminal_text(row.sample_id), row.species, str(row.n_lines), f"{row.T_K:.0f}±{row.u_T_K:.0f}",
                         f"{row.ne_cm3:.2e}", row.ne_method,
                         "n.d." if not math.isfinite(row.mass_fraction) else f"{100 * row.mass_fraction:.3f}",
                         "-" if not math.isfinite(row.U) else f"{100 * row.U:.3f}", row.flags or "-"))
    return format_columns(rows)


@click.command("cf", epilog=NOTE)
@run_argument
@method_option("Method file (TOML) with [[lines]] and an optional [cf] table.")
@output_option(
    "Summary CSV: sample, species, lines used, T, nₑ, mass fraction, U (k=2), flags. "
    "Also writes <stem>-results.csv (results table) and <stem>.json (full results).",
)
@folder_option(
    "--plots", "plots_dir",
    help="Folder for PNG Boltzmann and Saha–Boltzmann plots (one pair per sample).",
)
@click.option("--samples", default=None, help="Comma-separated sample ids [default: unknowns and checks].")
@click.option("--draws", type=int, default=None, help="Monte Carlo draws [method [cf] mc_draws, 300].")
@click.option("--seed", type=int, default=None, help="Monte Carlo seed [method [cf] seed].")
@click.option("--quiet", is_flag=True, help="No table on screen.")
def command(run_path, method_path, output, plots_dir, samples, draws, seed, quiet):
    """Calibration-free composition of the samples of RUN: line intensities are measured as the
    method says, then a joint Saha–Boltzmann fit gives the plasma temperature, the electron density
    comes from H-alpha, Stark widths or the Saha balance, LTE criteria are checked, self-absorption
    is detected (and corrected if [cf] asks), and closure gives mass fractions with Monte Carlo
    uncertainty (U = 2u). One-point calibration with a certified standard when [cf] names one."""
    from compquant.fileio import refuse_overwriting_inputs

    refuse_overwriting_inputs([output, plots_dir], [run_path, method_path])
    from compquant.cflibs import CFSettings, analyse_cf_samples
    from compquant.cflibs.capture import method_windows
    from compquant.method import load_method

    method = load_method(method_path)
    settings = CFSettings.from_section(method.sections.get("cf"), where=f"{method.where}: [cf]")
    if draws is not None and draws < 0:
        raise ConfigError("--draws must be ≥ 0", where="--draws", fix="e.g. --draws 300")
    m = _measure(run_path, method, quiet)
    ids = _sample_ids(m, samples)
    one_point = _one_point(m, method, settings)
    done = [0]

    def tick(k, total):  # analyse_cf_samples reports (done, total) before each sample and at the end
        bar.update(k - done[0])
        done[0] = k

    with progress_bar(len(ids), "calibration-free  ", enabled=not quiet) as bar, warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the result's own warnings are printed below
        results, failures = analyse_cf_samples(
            m["table"], sample_ids=ids, settings=settings, acquisition=m["acquisition"], instrument=m["instrument"],
            one_point=one_point, mc_draws=draws, seed=seed, intensity_basis=m["basis"], progress=tick,
            windows=method_windows(method, m["lm"].wavelength),  # window capture fractions (calibration-free.md §1a)
            measurement=m["lm"],
        )
    if failures and not results:  # before anything is written; the reasons in the line itself
        first, why = next(iter(failures.items()))
        more = f" (and {len(failures) - 1} more sample(s))" if len(failures) > 1 else ""
        raise ConfigError(f"no sample gave a calibration-free result; {first}: {why}{more}", where=str(run_path),
                          fix="check the method's lines and [cf] settings against the run")
    written = _write_outputs(Path(output), plots_dir, results, failures, one_point, run_path, m["run_sha"], method)
    for sid, why in failures.items():  # on stderr even with --quiet: a failure is never silent
        click.echo(terminal_text(f"no result for {sid}: {why}"), err=True)
    if not quiet:
        if results:
            click.echo(_screen(results))
        for r in results:
            for w in r.warnings:
                click.echo(terminal_text(f"note: {r.sample_id}: {w}"))
        click.echo("wrote " + ", ".join(written))


def _measure(run_path, method, quiet: bool) -> dict:
    """Measure the method's lines in the run; the line table and what the analysis needs of the run."""
    from compquant.cflibs import run_intensity_basis
    from compquant.lines import measure_run
    from compquant.run import Run

    with Run.open(run_path) as run:
        passes = 1 + (method.preprocess.shift != "none") + any(ln.mode == "fit" for ln in method.lines)
        with progress_bar(run.n_shots * passes, "measuring lines   ", enabled=not quiet) as bar:
            lm = measure_run(run, method, progress=bar.update)
        return {"lm": lm, "table": lm.table, "acquisition": dict(run.acquisition or {}),
                "instrument": dict(run.instrument or {}), "samples": run.samples.copy(), "run_sha": run.sha256(),
                "basis": run_intensity_basis(method, run)}


def _sample_ids(m: dict, samples: str | None) -> list[str]:
    """The samples named by ``--samples``, else the run's unknowns and checks, in run order."""
    known = list(dict.fromkeys(m["table"]["sample_id"].astype(str)))
    if samples:
        ids = [s.strip() for s in samples.split(",") if s.strip()]
        missing = [s for s in ids if s not in known]
        if missing:
            raise ConfigError(f"sample(s) {', '.join(missing)} not in the run", where="--samples",
                              fix=f"choose from {', '.join(known[:12])}")
        return ids
    st = m["samples"]
    roles = dict(zip(st["sample_id"].astype(str), st["role"].astype(str)))
    return [s for s in known if roles.get(s) in ("unknown", "check")]


def _one_point(m: dict, method, settings):
    """The one-point calibration of ``[cf] one_point_standard`` (None when the method names none)."""
    if not settings.one_point_standard:
        return None
    from compquant.cflibs import one_point_calibration

    sid = settings.one_point_standard
    if sid not in set(m["table"]["sample_id"].astype(str)):
        raise ConfigError(f"one-point standard {sid!r} is not a sample of the run",
                          where=f"{method.where}: [cf] one_point_standard", fix="use a sample id of the run")
    if not settings.standards_file:
        raise ConfigError("one-point calibration needs [cf] standards_file",
                          where=f"{method.where}: [cf]", fix="give the certified-standards CSV")
    st = m["samples"]
    ref = st.set_index(st["sample_id"].astype(str)).loc[sid].get("standard_ref") or sid
    cert = _certified(method.resolve_path(settings.standards_file), str(ref))
    return one_point_calibration(m["table"], cert, sample_id=sid, settings=settings, acquisition=m["acquisition"],
                                 instrument=m["instrument"], intensity_basis=m["basis"])


def _write_outputs(out: Path, plots_dir, results, failures, one_point, run_path, run_sha, method) -> list[str]:
    """The summary CSV, ``<stem>-results.csv`` (the results table), ``<stem>.json`` and the plots."""
    import pandas as pd

    from compquant.cflibs import results_table
    from compquant.cflibs.plots import plot_boltzmann, plot_saha_boltzmann

    stem = out.with_suffix("")
    summary = pd.concat([r.summary_table() for r in results], ignore_index=True) if results else \
        pd.DataFrame(columns=["sample_id", "species", "n_lines", "lines", "T_K", "u_T_K", "T_species_K",
                              "ne_cm3", "u_ne_cm3", "ne_method", "mass_fraction", "U", "flags"])
    write_csv(summary, out, float_format="%.8g")
    res_path = Path(f"{stem}-results.csv")
    write_csv(results_table(results), res_path, float_format="%.8g")
    js_path = Path(f"{stem}.json")
    doc = {"schema": "compquant.cf-run/1", "run": str(run_path), "run_sha256": run_sha,
           "method": method.provenance(), "results": [r.to_dict() for r in results],
           "failures": failures, "one_point": None if one_point is None else one_point.to_dict(),
           "note": "mass fractions in g/g; U = k·u with k = 2 (GUM)"}
    with atomic_write(js_path) as fh:
        json.dump(json_ready(doc), fh, indent=2, ensure_ascii=False, allow_nan=False)
    written = [str(out), str(res_path), str(js_path)]
    if plots_dir:
        pdir = Path(plots_dir)
        for r in results:
            stem_s = safe_filename(r.sample_id)
            p1, p2 = pdir / f"boltzmann_{stem_s}.png", pdir / f"saha_boltzmann_{stem_s}.png"
            plot_boltzmann(r, p1)
            plot_saha_boltzmann(r, p2)
            written += [str(p1), str(p2)]
    return written
