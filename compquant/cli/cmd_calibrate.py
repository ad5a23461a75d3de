"""``compquant calibrate RUN --method FILE --standards FILE -o cal.json``: curves from certified standards."""

from __future__ import annotations

from pathlib import Path

import click

from compquant.cli._common import (
    SAFETY,
    folder_option,
    format_columns,
    method_option,
    output_option,
    run_argument,
)
from compquant.cli._stdin import table_input


def curve_table(cal) -> str:
    """Plain-text table of the curves: analyte, line, model, n, R^2, residual sd, LOD, LOQ, range."""
    cols = ("analyte", "line", "model", "n", "R2", "resid_sd", "LOD", "LOQ", "range (g/g)", "LOD from")
    rows = [cols]
    for el, c in cal.curves.items():
        n = sum(1 for s in c.standards if s["used"])
        line = c.line_id + (f" / {c.internal_standard}" if c.internal_standard else "")
        rows.append(
            (
                el,
                line,
                c.model + (" (origin)" if c.through_origin else ""),
                str(n),
                f"{c.r2:.5f}",
                f"{c.residual_sd:.3g}",
                f"{c.lod:.3g}",
                f"{c.loq:.3g}",
                f"{c.range_mass_fraction[0]:.4g}-{c.range_mass_fraction[1]:.4g}",
                "blank" if c.lod_source.startswith("blank") else "residuals",
            )
        )
    lines = format_columns(rows).split("\n")
    for el, why in cal.rejected.items():
        lines.append(f"not calibrated: {el}: {why}")
    for el, c in cal.curves.items():
        for s in c.standards:
            if not s["used"]:
                lines.append(f"{el}: standard {s['standard_id']} ({s['sample_id']}) not used: {s['reason']}")
            elif s.get("outlier"):
                lines.append(
                    f"{el}: standard {s['standard_id']} flagged as outlier "
                    f"(studentised residual {s['studentized']:.2f})"
                )
        lof = c.diagnostics.get("lack_of_fit")
        if lof and lof["significant"]:
            lines.append(
                f"{el}: lack of fit significant against {lof['basis']} (F = {lof['F']:.3g}, p = {lof['p_value']:.2g})"
            )
    return "\n".join(lines)


@click.command("calibrate", epilog=SAFETY)
@run_argument
@method_option("Method file (TOML) with [calibration] and [[calibration.analytes]].")
@table_input(
    "--standards",
    "standards_path",
    required=True,
    what="standards file",
    help="Certified standards (CSV or TOML, see docs/calibration.md).",
)
@output_option("Calibration JSON to write.")
@folder_option("--plots", "plots_dir", help="Folder for one PNG per curve (standards, fit, prediction band, samples).")
@click.option("--quiet", is_flag=True, help="Do not print the table of curves.")
def command(run_path, method_path, standards_path, output, plots_dir, quiet):
    """Fit a calibration curve per analyte from the certified standards measured in RUN:
    line intensity (or its ratio to the internal-standard line) against certified mass
    fraction, with diagnostics, detection limits and the setup samples' reference
    intensities for drift standardisation. Writes the calibration as versioned JSON."""
    from compquant.fileio import refuse_overwriting_inputs

    refuse_overwriting_inputs([output, plots_dir], [run_path, method_path, standards_path])
    from compquant.calibrate import calibrate, load_standards, parse_calibration_section
    from compquant.calibrate.apply import quantify
    from compquant.calibrate.pls import fit_pls_block
    from compquant.lines import measure_run
    from compquant.method import load_method
    from compquant.run import Run

    method = load_method(method_path)
    cfg = parse_calibration_section(method.sections.get("calibration"), method.where)
    standards = load_standards(standards_path)
    with Run.open(run_path) as run:
        lm = measure_run(run, method)
        samples = run.samples
        run_sha = run.sha256()
    shots = lm.shot_view  # per-shot values per sample and line, not the whole long table
    pls = fit_pls_block(cfg, lm, samples, standards) if cfg.pls else None
    cal = calibrate(
        lm.table,
        standards,
        cfg,
        shot_table=shots,
        samples=samples,
        method_id=method.id,
        method_version=method.version,
        method_sha256=method.sha256 or "",
        run_sha256=run_sha,
        run_path=str(Path(run_path).resolve()),
        pls=pls,
        method_path=str(Path(method_path).resolve()),
    )
    cal.save(output)
    if plots_dir:
        from compquant.calibrate.plots import plot_all

        q = quantify(lm, cal, run_sha256=run_sha, samples=samples)
        marks = {}
        r = q.results[q.results["role"].isin(["unknown", "check"])]
        for el, c in cal.curves.items():
            sub = r[r["element"] == el]
            pts = []
            for row in sub.itertuples(index=False):
                wm = q.matrix_fraction.get(row.sample_id, (1.0, 0.0))[0] if c.basis == "ratio" else 1.0
                y = c.response(row.mass_fraction / wm)[0]
                pts.append((row.sample_id, row.mass_fraction / wm, row.u / wm, float(y)))
            marks[el] = pts
        written = plot_all(cal, plots_dir, marks)
    if not quiet:
        click.echo(curve_table(cal))
        if cal.pls:
            unit = "(mass-fraction ratio to the matrix)" if cal.pls.get("target") == "ratio" else "g/g"
            for el, m in cal.pls["models"].items():
                click.echo(f"PLS {el}: {m['n_components']} components, RMSECV {m['rmsecv']:.3g} {unit} "
                           f"({m['cv']}); T2 limit {m['t2_limit']:.3g}, Q limit {m['q_limit']:.3g}")
        click.echo(f"wrote {output}" + (f" and {len(written)} plots in {plots_dir}" if plots_dir else ""))
