"""``compquant simulate SCENARIO.toml -o RUN.h5 [--seed N]``: make a simulated run."""

from __future__ import annotations

from pathlib import Path

import click


@click.command("simulate")
@click.argument("scenario", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "-o",
    "--output",
    required=True,
    type=click.Path(dir_okay=False, path_type=Path),
    help="run file to write (HDF5, compquant run format).",
)
@click.option("--seed", type=int, default=None, help="random seed (default: [scenario] seed).")
@click.option(
    "--truth",
    "truth_path",
    type=click.Path(dir_okay=False, path_type=Path),
    default=None,
    help="also write the true compositions (CSV) for accuracy checks; never stored in the run.",
)
@click.option("--no-noise", is_flag=True, help="expected counts only: no shot-to-shot or detector noise.")
def command(scenario, output, seed, truth_path, no_noise):
    """Simulate a LIBS run from a scenario file (docs/scenario.md).

    The scenario gives the samples (certified standards, blank, check, setup
    and unknown samples with their true compositions), the plasma (T, n_e,
    length, fluctuations), the laser and the spectrometer with its detector.
    The same scenario and seed always give the same spectra.

    The run is synthetic; a real measurement uses a Class 4 laser: wear eyewear
    of the right optical density for the laser wavelength, keep interlocks and a
    controlled area, extract ablation fumes (samples may hold lead), and follow
    local regulations and the lab's laser safety officer.
    """
    from compquant.fileio import refuse_overwriting_inputs

    refuse_overwriting_inputs([output, truth_path], [scenario])
    from compquant.cli._common import write_csv
    from compquant.simulate import load_scenario, simulate_run, truth_table

    sc = load_scenario(scenario)
    res = simulate_run(sc, output, seed=seed, noise=not no_noise)
    click.echo(
        f"wrote {res.path}: {res.n_shots} shots x {res.n_pixels} pixels, {res.n_dark} dark frames, "
        f"{res.bytes / 1e6:.2f} MB in {res.seconds:.1f} s"
    )
    if truth_path is not None:
        df = truth_table(sc)
        write_csv(df, truth_path, float_format="%.8g")
        click.echo(f"wrote true compositions to {truth_path}")
