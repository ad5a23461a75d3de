"""The ``compquant`` command line: a thin shell over the Python API.

Each sub-command lives in its own module ``compquant/cli/cmd_<name>.py`` that
defines a click command called ``command``; the group below finds them by
name and imports a module only when its command is used.  ``compquant --help``
reads each command's one-line summary from its source (no import), so it starts
without numpy, pandas or h5py; adding a command touches no shared file.

Conventions shared by every command (added here, so a command module does not repeat them):

* ``-v`` / ``--verbose`` (more detail, repeatable) and ``-q`` / ``--quiet`` (no progress bars,
  notes or warnings: errors only; warnings stay in the outputs' flags), before or after the
  command name.  Messages go through the
  standard :mod:`logging` module (logger ``compquant``) to stderr;
* Python warnings raised while a command runs (e.g. a calibration-free fit outside its
  range) are collected while it runs (see :func:`safe_output` below) and, when it succeeds,
  sent to that log as one escaped line each, never printed raw with source lines;
* the short safety note under each command's help (``compquant.cli._common.SAFETY``) and
  ``compquant safety`` for the full notes.

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

import ast
import contextlib
import importlib
import logging
import pkgutil
import sys
import warnings
from pathlib import Path

import click

from compquant import __version__
from compquant.errors import CompquantError
from compquant.fileio import terminal_text, visible_text

EXIT_USER_ERROR = 2

log = logging.getLogger("compquant")


def _command_modules() -> dict[str, str]:
    import compquant.cli as pkg

    found = {}
    for info in pkgutil.iter_modules(pkg.__path__):
        if info.name.startswith("cmd_"):
            found[info.name[4:].replace("_", "-")] = f"compquant.cli.{info.name}"
    return found


def _short_help_from_source(modname: str) -> str:
    """First sentence of the docstring of the module's ``command`` function, read with :mod:`ast`."""
    path = Path(__file__).with_name(modname.rsplit(".", 1)[1] + ".py")
    try:
        tree = ast.parse(path.read_text(encoding="utf-8"))
    except (OSError, SyntaxError, ValueError):
        return ""
    for node in tree.body:
        if isinstance(node, ast.FunctionDef) and node.name == "command":
            doc = " ".join((ast.get_docstring(node) or "").split("\n\n")[0].split())
            return click.utils.make_default_short_help(doc, 50)
    return ""


# ------------------------------------------------------------------ logging and verbosity


class _ClickHandler(logging.Handler):
    """Log records as one line on stderr; on a terminal, clear a progress bar's line first."""

    def emit(self, record):
        try:
            msg = self.format(record)
            if sys.stderr.isatty():  # clear a bar's line (written raw: SafeStream would escape it)
                raw = getattr(sys.stderr, "_stream", sys.stderr)
                raw.write("\r\x1b[K")
            click.echo(msg, err=True)
        except Exception:  # pragma: no cover - logging must never raise
            self.handleError(record)


class _Formatter(logging.Formatter):
    def format(self, record):
        msg = record.getMessage()
        if record.levelno >= logging.WARNING:
            return f"{record.levelname.lower()}: {msg}"
        if record.levelno <= logging.DEBUG:
            return f"debug: {record.name}: {msg}"
        return msg


def set_verbosity(level: int) -> None:
    """Set the ``compquant`` log level from the verbosity (-q = -1, default 0, -v = 1, -vv = 2).

    -q: errors only (the outputs carry the warnings as flags); default: notes (INFO) and
    warnings; -v: details (DEBUG) of compquant; -vv: also the DEBUG messages of the libraries.
    """
    import compquant.cli._common as common

    common.VERBOSITY = level
    if not any(isinstance(h, _ClickHandler) for h in log.handlers):
        h = _ClickHandler()
        h.setFormatter(_Formatter())
        log.addHandler(h)
        log.propagate = False
    log.setLevel(logging.ERROR if level < 0 else logging.INFO if level == 0 else logging.DEBUG)
    if level >= 2:
        logging.basicConfig(level=logging.DEBUG)


def _show_warning_line(line: str) -> None:
    """Log one collected warning line (``warning: <kind>: <message>``, see :func:`safe_output`)."""
    import compquant.cli._common as common

    if common.VERBOSITY >= 0:
        logging.getLogger("compquant.warnings").warning("%s", line.removeprefix("warning: "))


def _verbosity_callback(ctx, param, value):
    obj = ctx.find_root().ensure_object(dict)
    if param.name == "verbose":
        obj["verbose"] = obj.get("verbose", 0) + int(value or 0)
    elif value:
        obj["quiet"] = obj.get("quiet", 0) + (value if isinstance(value, int) and not isinstance(value, bool) else 1)
    set_verbosity(obj.get("verbose", 0) - obj.get("quiet", 0))
    return value


def _add_verbosity_options(cmd: click.Command) -> click.Command:
    """Give ``cmd`` the -v/--verbose and -q/--quiet options (once), wired to the log level.

    A command that declares ``--quiet`` itself keeps receiving it as before; it also gets the
    short ``-q`` and the log level follows it.
    """
    if getattr(cmd, "_compquant_verbosity", False):
        return cmd
    names = {p.name for p in cmd.params}
    if "verbose" not in names:
        cmd.params.append(
            click.Option(["-v", "--verbose"], count=True, expose_value=False, is_eager=True,
                         callback=_verbosity_callback, help="More detail on stderr (-vv: also the libraries').")
        )
    if "quiet" in names:
        opt = next(p for p in cmd.params if p.name == "quiet")
        if "-q" not in opt.opts:
            opt.opts.insert(0, "-q")
        opt.callback = _verbosity_callback
    else:
        cmd.params.append(
            click.Option(["-q", "--quiet"], count=True, expose_value=False, is_eager=True,
                         callback=_verbosity_callback, help="No progress bars, notes or warnings: errors only.")
        )
    cmd._compquant_verbosity = True
    return cmd
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
                # the collected warnings, once each, through the log (so -q hides them)
                for line in warned:
                    _show_warning_line(line)
        sys.exit(code)

    def list_commands(self, ctx):
        return sorted(set(super().list_commands(ctx)) | set(_command_modules()))

    def get_command(self, ctx, name):
        cmd = super().get_command(ctx, name)
        if cmd is not None:
            return _add_verbosity_options(cmd)
        modname = _command_modules().get(name)
        if modname is None:
            return None
        module = importlib.import_module(modname)
        return _add_verbosity_options(module.command)

    def format_commands(self, ctx, formatter):
        """The command list of ``--help`` from the modules' source, without importing them."""
        mods = _command_modules()
        rows = []
        for name in self.list_commands(ctx):
            if name in mods:
                rows.append((name, _short_help_from_source(mods[name])))
            else:
                cmd = super().get_command(ctx, name)
                if cmd is not None and not cmd.hidden:
                    rows.append((name, cmd.get_short_help_str(60)))
        if rows:
            with formatter.section("Commands"):
                formatter.write_dl(rows)

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except CompquantError as exc:
            click.echo(f"error: {exc.one_line()}", err=True)
            ctx.exit(EXIT_USER_ERROR)


@click.group(cls=CompquantGroup, context_settings={"help_option_names": ["-h", "--help"]},
             epilog="Safety: see 'compquant safety' (laser, fumes, high voltage, UV, purge gas).")
@click.version_option(__version__, prog_name="compquant")
@click.option("-v", "--verbose", count=True, expose_value=False, is_eager=True, callback=_verbosity_callback,
              help="More detail on stderr (also after the command name).")
@click.option("-q", "--quiet", count=True, expose_value=False, is_eager=True, callback=_verbosity_callback,
              help="No progress bars, notes or warnings: errors only (also after the command name).")
def main():
    """compquant: concentrations you can sign, from one LIBS or spark-OES run.

    Reads a run file (dark frames, certified standards, blanks, check samples,
    unknowns), cleans the spectra, measures emission lines, calibrates from
    certified standards or estimates composition calibration-free, and writes
    a certificate of analysis per sample.
    """


__all__ = ["main", "CompquantGroup", "EXIT_USER_ERROR", "set_verbosity"]
