"""``compquant simulate-raster RASTER.toml -o RUN.h5``: a rastered sample with known composition map."""

from __future__ import annotations

from pathlib import Path

import click


@click.command("simulate-raster")
@click.argument("raster_file", metavar="RASTER", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "-o", "--output", required=True, type=click.Path(dir_okay=False, path_type=Path), help="Run file to write (HDF5)."
)
@click.option("--seed", type=int, default=None, help="Random seed (default: the scenario's).")
@click.option("--no-noise", is_flag=True, help="Expected counts only.")
def command(raster_file, output, seed, no_noise):
    """Simulate a raster scan of one sample whose composition varies in space (inclusions,
    diffusion profiles; docs/scale.md), shot by shot with the forward model and detector of the
    scenario the raster file names, after that scenario's own samples. Positions go to
    shots/x_mm, shots/y_mm. The run is synthetic; real rastering uses a Class 4 laser: eyewear,
    interlocks, fume extraction, and your laser safety officer's rules apply."""
    from compquant.fileio import refuse_overwriting_inputs

    refuse_overwriting_inputs([output], [raster_file])
    from compquant.simulate.raster import load_raster, simulate_raster_run

    sc, sample, include = load_raster(raster_file)
    res = simulate_raster_run(sc, sample, output, seed=seed, noise=not no_noise, include_scenario_samples=include)
    click.echo(
        f"wrote {res['path']}: {res['n_shots']} shots ({res['n_raster_shots']} rastered on "
        f"{sample.nx} x {sample.ny} spots, step {sample.step_mm:g} mm)"
    )
