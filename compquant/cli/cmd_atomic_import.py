"""``compquant atomic-import``: bring a lab's own line data into a lab-local overlay."""

from __future__ import annotations

import click

from compquant.cli._common import folder_option
from compquant.errors import InputError


def _mapping(values) -> dict[str, str]:
    out = {}
    for v in values:
        if "=" not in v:
            raise InputError(f"column mapping {v!r} is not OURS=THEIRS", where="--map",
                             fix="write e.g. --map wavelength_nm=lambda_air")
        k, val = v.split("=", 1)
        out[k.strip()] = val.strip()
    return out


@click.command("atomic-import")
@click.argument("table", type=click.Path(dir_okay=False))
@folder_option(
    "--overlay",
    help="Overlay directory (created if absent); use it with COMPQUANT_ATOMIC_OVERLAY=<dir>.",
    required=True,
)
@click.option("--format", "fmt", type=click.Choice(["nist", "csv"]), default="nist", show_default=True,
              help="nist: NIST ASD tab-delimited line output; csv: any CSV with --map.")
@click.option("--map", "maps", multiple=True,
              help="csv: OURS=THEIRS column, e.g. wavelength_nm=lambda (repeatable).")
@click.option("--grade", default=None, help="csv: one accuracy grade (AAA..E) for rows without one.")
@click.option("--source", default=None, help="Source to record for every row (default: the file name).")
@click.option("--angstrom", is_flag=True, help="csv: the wavelength column is in angstrom.")
def command(table, overlay, fmt, maps, grade, source, angstrom):
    """Import TABLE into a lab-local atomic-data overlay.

    An overlay row replaces the shipped line of the same species within 0.0025 nm; other rows
    are added.  Within the overlay a later import replaces an earlier row of the same line id.
    TABLE is only read; the overlay's lines.csv is written atomically."""
    from compquant.atomic import overlay as ov

    if fmt == "nist":
        df = ov.read_nist_lines(table, source=source)
    else:
        df = ov.read_mapped_csv(table, _mapping(maps), source=source, grade=grade,
                                wavelength_unit="A" if angstrom else "nm")
    path = ov.add_to_overlay(df, overlay)
    click.echo(f"{len(df)} lines from {table} merged into {path}")
