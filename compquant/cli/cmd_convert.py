"""``compquant convert``: build a run file from text/CSV spectra."""

from __future__ import annotations

import click

from compquant.cli._common import output_option
from compquant.cli._stdin import table_input
from compquant.errors import InputError


def _pairs(values, what):
    out = {}
    for v in values:
        if "=" not in v:
            raise InputError(f"{what} setting {v!r} is not KEY=VALUE", where=f"--{what}",
                             fix="write e.g. --acquisition gate_delay_us=1.5")
        k, val = v.split("=", 1)
        try:
            out[k.strip()] = float(val) if val.strip().lstrip("+-").replace(".", "", 1).isdigit() else val.strip()
        except ValueError:
            out[k.strip()] = val.strip()
    return out


@click.command("convert")
@click.option("--spectra", required=True, type=click.Path(exists=False),
              help="Folder of two-column files (one per shot) or one wide CSV table.")
@table_input(
    "--samples", "samples_csv",
    what="samples CSV",
    help="Samples CSV: sample_id, role, standard_ref, description [, files].",
    required=True,
)
@click.option("--dark", multiple=True, type=click.Path(), help="Dark-frame file or folder (repeatable).")
@click.option("--saturation", type=float, default=None, help="Detector saturation level in counts.")
@click.option("--medium", type=click.Choice(["air", "vacuum"]), default="air", show_default=True,
              help="Medium of the wavelength axis.")
@click.option("--instrument", multiple=True, help="Instrument setting KEY=VALUE (repeatable).")
@click.option("--acquisition", multiple=True, help="Acquisition setting KEY=VALUE, e.g. gate_delay_us=1.5.")
@click.option("--sentinel", "sentinels", multiple=True, type=float,
              help="A value the instrument writes for blanked or dead pixels, e.g. -9999 (repeatable); "
                   "such pixels are masked, like NaN, infinite and implausible values.")
@output_option("Run file to write (.h5).")
def command(spectra, samples_csv, dark, saturation, medium, instrument, acquisition, sentinels, output):
    """Build a compquant run from plain-text/CSV spectra plus a samples table.

    Inputs are only read; the run is written atomically."""
    from compquant.fileio import refuse_overwriting_inputs

    spectra_in = [spectra] if isinstance(spectra, str) else list(spectra)
    refuse_overwriting_inputs([output], [*spectra_in, samples_csv, *dark])
    from compquant.run.convert import convert_to_run

    report = convert_to_run(spectra, samples_csv, output, dark=dark, saturation=saturation, medium=medium,
                            instrument=_pairs(instrument, "instrument"),
                            acquisition=_pairs(acquisition, "acquisition"), sentinels=sentinels)
    click.echo(report.text())
