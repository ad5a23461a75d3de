"""``compquant quantify RUN --calibration cal.json -o results.csv``: concentrations with uncertainty."""

from __future__ import annotations

import json
from pathlib import Path

import click

from compquant.cli._common import SAFETY, is_stdio, method_option, output_option, run_argument, write_csv
from compquant.cli._stdin import table_input
from compquant.fileio import terminal_text


def _finite_json(o):
    """A copy of ``o`` with NaN / infinite floats as None and numpy scalars as Python numbers."""
    import math

    import numpy as np

    if isinstance(o, dict):
        return {str(k): _finite_json(v) for k, v in o.items()}
    if isinstance(o, (list, tuple)):
        return [_finite_json(v) for v in o]
    if isinstance(o, np.ndarray):
        return [_finite_json(v) for v in o.tolist()]
    if isinstance(o, np.generic):
        o = o.item()
    if isinstance(o, float) and not math.isfinite(o):
        return None
    return o


def _fmt(w: float, unit: str) -> str:
    from compquant.report.numbers import UNIT_FACTOR, finite, round_sig

    return f"{round_sig(w * UNIT_FACTOR[unit], 4)} {unit}" if finite(w) else "n.d."


def results_text(q) -> str:
    """Screen table: value and U of an element in one unit for the whole run (report.numbers)."""
    from compquant.report.numbers import UNIT_FACTOR, element_units, finite, value_and_u

    lines = []
    r = q.results
    units = element_units(zip(r["element"], r["mass_fraction"], r["lod"], r["below_lod"]))
    for row in r[r["role"].isin(["unknown", "check"])].itertuples(index=False):
        unit = units.get(row.element, "%")
        f = UNIT_FACTOR[unit]
        if row.below_lod:
            val = f"< LOD ({_fmt(row.lod, unit)})"
        elif not finite(row.mass_fraction):
            val = "not determined"
        else:
            v, U = value_and_u(row.mass_fraction * f, row.U * f if finite(row.U) else None)
            val = f"{v} +- {U} {unit}" if U else f"{v} {unit}"
        lines.append(f"{terminal_text(row.sample_id):<14} {row.element:<3} {row.basis:<11} {val:<32} {row.flags or ''}")
    from compquant.report.assemble import check_results
    from compquant.report.release import check_state

    spt = (q.provenance or {}).get("sigma_pt_rel")
    for c in check_results(q.checks, q.results) if len(q.checks) else []:  # states as on the certificate
        en = f"{c.En:+.2f}" if c.En is not None else "n/a"
        lines.append(f"check {terminal_text(c.sample_id)} ({c.standard_ref}) {c.element}: En = {en} "
                     f"{check_state(c, spt)}")
    if not q.valid_for_release:
        lines.append("a check sample failed: the run's results are NOT VALID FOR RELEASE")
    d = q.drift
    lines.append(
        "drift standardisation: "
        + (
            "applied ("
            + ", ".join(f"{k}: x{v['alpha']:.4f}{v['beta']:+.3g}" for k, v in d.get("coefficients", {}).items())
            + ")"
            if d.get("applied")
            else f"not applied ({d.get('reason', '')})"
        )
    )
    for nr in q.provenance.get("not_reported", []):
        lines.append(f"not reported: {terminal_text(nr['sample_id'])} {nr['element']}: {nr['reason']}")
    return "\n".join(lines)


@click.command("quantify", epilog=SAFETY)
@run_argument
@table_input("--calibration", "cal_path", what="calibration file", limit="MAX_CALIBRATION_BYTES", required=True,
             help="Calibration JSON written by 'compquant calibrate'.")
@method_option("Method file [default: the one recorded in the calibration; must be identical].", required=False)
@table_input(
    "--standards",
    "standards_path",
    default=None,
    what="standards file",
    help="Certified standards for the check samples [default: those stored in the calibration].",
)
@output_option(
    "Results CSV (one row per sample and element, mass fractions in g/g); '-': the results "
    "on standard output and no other file.",
)
@click.option("--quiet", is_flag=True, help="Do not print the results.")
def command(run_path, cal_path, method_path, standards_path, output, quiet):
    """Apply a calibration to RUN: drift standardisation with the setup samples, content of
    every sample with standard and expanded uncertainty (k = 2 unless the method says
    otherwise), LOD/LOQ, flags, and check samples against their certificates (E_n).
    Writes the results CSV, <stem>-checks.csv and <stem>-provenance.json."""
    from compquant.fileio import refuse_overwriting_inputs

    refuse_overwriting_inputs([output], [run_path, cal_path, method_path, standards_path])
    from compquant.calibrate import Calibration, load_standards
    from compquant.calibrate.apply import quantify
    from compquant.errors import CalibrationError
    from compquant.fileio import MAX_CALIBRATION_BYTES, STDIN_NAME, atomic_write, read_input
    from compquant.lines import measure_run
    from compquant.method import load_method
    from compquant.run import Run

    # read once ('-': standard input, read already): the bytes parsed are the bytes hashed
    cal_src = read_input(cal_path, "calibration file", limit=MAX_CALIBRATION_BYTES, error=CalibrationError)
    cal = Calibration.load(cal_src)
    mpath = method_path or cal.method_path
    if not mpath:
        raise CalibrationError("the calibration records no method file", where=cal_src.where,
                               fix="give --method FILE")
    method = load_method(mpath)
    cal.check_method(method.id, method.sha256, where=f"{cal_src.where} with {mpath}")
    standards = load_standards(standards_path) if standards_path else None
    with Run.open(run_path) as run:
        lm = measure_run(run, method)
        samples = run.samples
        run_sha = run.sha256()
    q = quantify(lm, cal, standards=standards, run_sha256=run_sha, samples=samples)
    out = Path(output)
    stem = out.with_suffix("")
    write_csv(q.results, out)
    if is_stdio(output):  # results on standard output, nothing else (see --help)
        return
    write_csv(q.checks, Path(f"{stem}-checks.csv"))
    prov = dict(q.provenance)
    prov.update(
        run_path=str(Path(run_path).resolve()),
        calibration_path=str(cal_src.path.resolve()) if cal_src.path is not None else STDIN_NAME,
        calibration_file={"name": cal_src.name, "sha256": cal_src.sha256},
        method_path=str(Path(mpath).resolve()),
        standards=None if standards is None else {"name": standards.attrs["name"], "path": standards.attrs["path"],
                                                  "sha256": standards.attrs["sha256"]},
        drift=q.drift,
        valid_for_release=q.valid_for_release,
        matrix_fraction_by_difference={k: {"w": v[0], "u": v[1]} for k, v in q.matrix_fraction.items()},
        lines=lm.provenance,
    )
    with atomic_write(Path(f"{stem}-provenance.json")) as fh:
        # strict JSON: a non-finite number (no estimate) is written as null
        json.dump(_finite_json(prov), fh, indent=2, sort_keys=True, default=str, allow_nan=False)
    if not quiet:
        click.echo(results_text(q))
        click.echo(f"wrote {out}, {stem}-checks.csv, {stem}-provenance.json")
