"""``compquant upgrade RUN -o NEW.h5``: a copy of an older run with the NeXus axes, data unchanged."""

from __future__ import annotations

import click


@click.command("upgrade")
@click.argument("run_path", metavar="RUN", type=click.Path(dir_okay=False))
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False), help="Run file to write (.h5).")
def command(run_path, output):
    """Copy a run written before the NeXus NXdata group and HDF5 dimension scales existed into
    one that has them, so xarray and NeXus/HDF5 viewers show the wavelength axis. Every dataset
    keeps its bytes; RUN is only read and OUTPUT is written atomically (the run's SHA-256, and so
    the provenance of later analyses, is that of the new file)."""
    from compquant.fileio import refuse_overwriting_inputs
    from compquant.run.writer import add_axes

    refuse_overwriting_inputs([output], [run_path])
    added = add_axes(run_path, output)
    from compquant.fileio import sha256_file

    what = "added the NXdata group and dimension scales" if added else "it had them already: copied unchanged"
    click.echo(f"wrote {output} ({what}; sha256 {sha256_file(output)})")
