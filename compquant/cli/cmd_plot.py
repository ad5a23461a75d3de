"""``compquant plot RUN --sample ID [--method FILE] -o plot.png``: a sample's mean spectrum."""

from __future__ import annotations

from pathlib import Path

import click

from compquant.cli._common import method_option, output_option, run_argument
from compquant.errors import InputError


def plot_sample(
    run,
    method,
    sample_id: str,
    output,
    *,
    measurement=None,
    title: str | None = None,
    wl_range: tuple[float, float] | None = None,
):
    """Draw the preprocessed mean spectrum of ``sample_id`` with the method's lines marked.

    When ``measurement`` (a :class:`~compquant.lines.LineMeasurement`) is given, each marked
    line is labelled with its id and flags (red: saturated or not found; orange: other flags).
    ``wl_range`` = (lo, hi) nm zooms into part of the spectrum.  Written atomically as PNG (matplotlib Agg).
    """
    import numpy as np

    from compquant.lines import mean_spectrum
    from compquant.plotting import pyplot, save_png

    plt = pyplot()

    wl, mean, info = mean_spectrum(run, method, sample_id)
    if wl_range is not None:
        keep = (wl >= wl_range[0]) & (wl <= wl_range[1])
        if not keep.any():
            raise InputError(
                f"no pixels between {wl_range[0]} and {wl_range[1]} nm",
                where="--range",
                fix=f"choose a range inside {wl[0]:.2f}-{wl[-1]:.2f} nm",
            )
        wl, mean = wl[keep], mean[keep]
    fig, ax = plt.subplots(figsize=(11, 4.5), dpi=110)
    ax.plot(wl, mean, lw=0.7, color="0.15")
    ymax = float(np.nanmax(mean)) if mean.size else 1.0
    flags = {}
    if measurement is not None:
        t = measurement.table
        for r in t[t["sample_id"] == sample_id].itertuples(index=False):
            flags[r.line_id] = r.flags
    lo_nm, hi_nm = (float(wl[0]), float(wl[-1])) if wl_range is None else wl_range
    shown = sorted((ln for ln in method.lines if lo_nm <= ln.wavelength_nm <= hi_nm), key=lambda ln: ln.wavelength_nm)
    # labels in up to 6 staggered rows so that neighbours do not overwrite each other
    min_gap = 0.012 * (hi_nm - lo_nm)
    last_x = [-np.inf] * 6
    for ln in shown:
        x = ln.wavelength_nm
        fl = flags.get(ln.line_id, "")
        serious = any(f in fl for f in ("saturated", "not_found"))
        col = "tab:red" if serious else ("tab:orange" if fl else "tab:blue")
        ax.axvline(x, color=col, lw=0.6, ls="--", alpha=0.7)
        row = next((r for r in range(6) if x - last_x[r] >= min_gap), int(np.argmin(last_x)))
        last_x[row] = x
        lab = (ln.label or ln.line_id) + (f" [{fl}]" if fl else "")
        ax.text(x, ymax * (0.99 - 0.16 * row), lab, rotation=90, va="top", ha="right", fontsize=6.5, color=col)
    sh = f", shift {info['shift_nm']:+.4f} nm" if info["shift_nm"] else ""
    ax.set_title(title or f"{sample_id}: mean of {info['n_accepted']} of {info['n_shots']} shots{sh}", fontsize=10)
    ax.set_xlabel(f"wavelength / nm ({run.medium})")
    ax.set_ylabel("intensity (preprocessed, counts)")
    ax.set_xlim(lo_nm, hi_nm)
    fig.tight_layout()
    return save_png(fig, output)


@click.command("plot")
@run_argument
@click.option("--sample", "sample_id", required=True, help="Sample id (see 'compquant inspect').")
@method_option("Method file: its preprocessing is applied and its lines are marked and measured.", required=False)
@output_option("PNG file [default: <sample>.png, name made safe].", required=False)
@click.option(
    "--range", "wl_range", type=(float, float), default=None, metavar="LO HI", help="Wavelength range to show, nm."
)
def command(run_path, sample_id, method_path, output, wl_range):
    """Plot the mean spectrum of one sample's accepted shots (PNG), with the method's lines
    marked and labelled (red: flagged, e.g. saturated or not found). Without --method the
    spectrum is only dark- and response-corrected."""
    from compquant.fileio import refuse_overwriting_inputs

    refuse_overwriting_inputs([output], [run_path, method_path])
    from compquant.fileio import safe_filename
    from compquant.lines import measure_run
    from compquant.method import load_method
    from compquant.run import Run

    out = Path(output) if output else Path(f"{safe_filename(sample_id)}.png")
    with Run.open(run_path) as run:
        if method_path:
            method = load_method(method_path)
            lm = measure_run(run, method)
        else:
            method = _no_lines_method()
            lm = None
        if wl_range is not None and not wl_range[0] < wl_range[1]:
            raise InputError("--range LO HI needs LO < HI", where="--range", fix="e.g. --range 400 410")
        plot_sample(run, method, sample_id, out, measurement=lm, wl_range=wl_range)
    click.echo(f"wrote {out}")


def _no_lines_method():
    from compquant.method import MeasureConfig, Method, PreprocessConfig

    pre = PreprocessConfig(baseline="none", baseline_params={}, qc=False)
    return Method(
        id="plot-default",
        version="1",
        technique="other",
        description="",
        preprocess=pre,
        measure=MeasureConfig(),
        lines=[],
        sections={},
    )
