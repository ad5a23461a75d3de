"""The ``compquant`` command line: a thin shell over the Python API.

Each sub-command lives in its own module ``compquant/cli/cmd_<name>.py`` that
defines a click command called ``command``; the group below finds them by
name and imports a module only when its command is used, so ``compquant
--help`` stays fast and adding a command touches no shared file.

User errors (:class:`compquant.errors.CompquantError`) are printed as one line,
``error: <where>: <what>; <fix>``, on stderr with exit code 2.  Any other
exception is a bug and keeps its traceback.
"""

from __future__ import annotations

import importlib
import pkgutil

import click

from compquant import __version__
from compquant.errors import CompquantError

EXIT_USER_ERROR = 2


def _command_modules() -> dict[str, str]:
    import compquant.cli as pkg

    found = {}
    for info in pkgutil.iter_modules(pkg.__path__):
        if info.name.startswith("cmd_"):
            found[info.name[4:].replace("_", "-")] = f"compquant.cli.{info.name}"
    return found


class CompquantGroup(click.Group):
    """Click group that discovers commands lazily and turns user errors into one line."""

    def list_commands(self, ctx):
        return sorted(set(super().list_commands(ctx)) | set(_command_modules()))

    def get_command(self, ctx, name):
        cmd = super().get_command(ctx, name)
        if cmd is not None:
            return cmd
        modname = _command_modules().get(name)
        if modname is None:
            return None
        module = importlib.import_module(modname)
        return module.command

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except CompquantError as exc:
            click.echo(f"error: {exc.one_line()}", err=True)
            ctx.exit(EXIT_USER_ERROR)


@click.group(cls=CompquantGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="compquant")
def main():
    """compquant: concentrations you can sign, from one LIBS or spark-OES run.

    Reads a run file (dark frames, certified standards, blanks, check samples,
    unknowns), cleans the spectra, measures emission lines, calibrates from
    certified standards or estimates composition calibration-free, and writes
    a certificate of analysis per sample.
    """


__all__ = ["main", "CompquantGroup", "EXIT_USER_ERROR"]
