"""The ``compquant`` command line: a thin shell over the Python API.

Each sub-command lives in its own module ``compquant/cli/cmd_<name>.py`` that
defines a click command called ``command``; the group below finds them by
name and imports a module only when its command is used, so ``compquant
--help`` stays fast and adding a command touches no shared file.

User errors (:class:`compquant.errors.CompquantError`) are printed as one line,
``error: <where>: <what>; <fix>``, on stderr with exit code 2; so are click's own usage
errors (a missing option, a folder where a file is expected ...).  Any other
exception is a bug and keeps its traceback.

Everything the commands print goes through :class:`SafeStream`: control characters, escape
sequences and bidirectional or other invisible format characters from file contents or names
are shown as visible escapes (compquant.fileio.visible_text), so a run cannot recolour,
reorder or overwrite the user's terminal.  numpy's floating-point warnings are not printed
(the values are checked and flagged where they matter); other warnings become one ``warning:``
line each, shown once, after a command that succeeds: a failing command prints its one
``error:`` line and nothing else.
"""

from __future__ import annotations

import contextlib
import importlib
import pkgutil
import sys
import warnings

import click

from compquant import __version__
from compquant.errors import CompquantError
from compquant.fileio import terminal_text, visible_text

EXIT_USER_ERROR = 2


def _command_modules() -> dict[str, str]:
    import compquant.cli as pkg

    found = {}
    for info in pkgutil.iter_modules(pkg.__path__):
        if info.name.startswith("cmd_"):
            found[info.name[4:].replace("_", "-")] = f"compquant.cli.{info.name}"
    return found


class SafeStream:
    """A text stream that shows hidden and control characters as visible escapes.

    Newlines and tabs pass (tables span lines); a carriage return passes only to a terminal
    (progress bars); everything else that is not printable text -- ESC, C1 controls, the
    bidirectional overrides and isolates, zero-width characters -- is escaped.
    """

    def __init__(self, stream):
        self._stream = stream
        try:
            tty = bool(stream.isatty())
        except (AttributeError, ValueError):
            tty = False
        self._keep = "\n\t\r" if tty else "\n\t"

    def write(self, s):
        if isinstance(s, str):
            s = visible_text(s, keep=self._keep)
        return self._stream.write(s)

    def __getattr__(self, name):
        return getattr(self._stream, name)


@contextlib.contextmanager
def safe_output():
    """Escape what is printed and collect warnings, for the duration of a command.

    Yields the list of warning lines (``warning: <kind>: <message>``, each once); the caller
    prints them when the command succeeds. When it fails, its one ``error:`` line is all the
    user sees on stderr.
    """
    old_out, old_err = sys.stdout, sys.stderr
    sys.stdout, sys.stderr = SafeStream(old_out), SafeStream(old_err)
    collected: list[str] = []

    def show(message, category, filename, lineno, file=None, line=None):
        text = f"warning: {category.__name__}: {' '.join(terminal_text(message).split())}"
        if text not in collected:
            collected.append(text)

    try:
        with warnings.catch_warnings():
            # floating-point warnings from numpy (overflow, invalid value, mean of empty slice ...)
            # are handled where they matter: the values are checked and flagged, not printed
            warnings.simplefilter("ignore", RuntimeWarning)
            warnings.showwarning = show
            yield collected
    finally:
        sys.stdout, sys.stderr = old_out, old_err


def usage_error_line(exc: click.ClickException) -> str:
    """Click's usage error as one ``error:`` line: the command, what is wrong, where to look."""
    ctx = getattr(exc, "ctx", None)
    cmd = ctx.command_path if ctx is not None else "compquant"
    msg = " ".join(terminal_text(exc.format_message()).split()).rstrip(".")
    fix = f"see '{cmd} --help'" if isinstance(exc, click.UsageError) else "check the command line"
    return f"error: {cmd}: {msg}; {fix}"


class CompquantGroup(click.Group):
    """Click group that discovers commands lazily and turns user errors into one line."""

    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True, **extra):
        if not standalone_mode:
            return super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
        with safe_output() as warned:
            try:
                rv = super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
            except click.ClickException as exc:
                click.echo(usage_error_line(exc), err=True)
                sys.exit(EXIT_USER_ERROR)
            except click.Abort:
                click.echo("error: compquant: aborted; nothing more was written", err=True)
                sys.exit(1)
            code = rv if isinstance(rv, int) else 0
            if code == 0:
                for line in warned:
                    click.echo(line, err=True)
        sys.exit(code)

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
