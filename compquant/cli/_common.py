"""Small helpers shared by the CLI commands: the safety epilog, plain-text tables, CSV output,
progress bars that follow the verbosity (-q / -v).

Not a command module (no ``cmd_`` prefix), so the lazy command discovery skips it.
"""

from __future__ import annotations

import sys
from collections.abc import Collection, Sequence
from pathlib import Path

import click

from compquant.errors import OutputError
from compquant.fileio import atomic_write, csv_cell, terminal_text, write_text_atomic

#: the short safety note under every command's help; the full notes (compquant.report.safety,
#: also on every certificate) are printed by ``compquant safety``.  Common practice of laser and
#: spark-source labs; local regulations and the licensed safety officer decide.
SAFETY = (
    "Safety: LIBS and spark OES involve Class 4 laser radiation (eyes, skin, fire), toxic ablation "
    "fumes (Pb, Cd, Be), high voltage, UV and ozone, and argon purge gas in closed rooms. Local "
    "regulations and your licensed laser safety officer take precedence. Full notes: 'compquant safety'."
)


#: -q / -v of the running command (compquant.cli.set_verbosity): below 0 quiet (errors only),
#: 0 default, 1 and more: details
VERBOSITY = 0


class _NoBar:
    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False

    def update(self, n: int = 1, current_item=None) -> None:
        pass


def progress_bar(length: int, label: str, *, enabled: bool = True):
    """A click progress bar on stderr (context manager with ``update(n)``), or one that draws
    nothing when ``-q`` was given, ``enabled`` is false or stderr is not a terminal."""
    raw = getattr(sys.stderr, "_stream", sys.stderr)
    try:
        tty = bool(raw.isatty())
    except (AttributeError, ValueError):
        tty = False
    # only on a terminal: in a log or a pipe a bar is just its label, a line that is no
    # error, warning or note (stderr keeps its one-line-per-message form)
    if not enabled or VERBOSITY < 0 or not tty:
        return _NoBar()
    # the label is escaped here; the bar itself is drawn on the raw stderr, because the
    # command's SafeStream (compquant.cli.safe_output) would show its cursor codes as escapes
    return click.progressbar(length=max(int(length), 1), label=terminal_text(label), file=raw)


def write_csv(df, path, float_format: str = "%.10g", sep: str = ",") -> None:
    """Write ``df`` (no index) to ``path`` through :func:`compquant.fileio.atomic_write`;
    ``-`` writes it to standard output instead.

    Every text cell and column name goes through :func:`compquant.fileio.csv_cell` (no formula,
    no raw newline or control character); an infinite number is written as an empty cell, like
    NaN (the flags of the row say why). An OS error becomes
    :class:`~compquant.errors.OutputError` naming the path.
    """
    df = safe_frame(df)
    if is_stdio(path):
        df.to_csv(sys.stdout, index=False, float_format=float_format)
        return
    try:
        with atomic_write(Path(path), "w", newline="") as fh:
            df.to_csv(fh, index=False, float_format=float_format, sep=sep)
    except OSError as exc:
        raise OutputError(
            f"cannot write ({exc.strerror})", where=str(path), fix="choose a writable output path"
        ) from exc


def scheduler_file_option(fn):
    """``--scheduler-file FILE`` for commands with ``--scheduler``: the file a Dask scheduler writes
    (``dask scheduler --scheduler-file FILE``); the command passes it on with :func:`fold_scheduler`."""
    return click.option(
        "--scheduler-file", type=click.Path(exists=True, dir_okay=False), default=None,
        help="Compute on the existing Dask cluster described by this scheduler file.",
    )(fn)


def run_argument(fn):
    """The ``RUN`` argument of the commands that read one run file."""
    return click.argument("run_path", metavar="RUN", type=click.Path(dir_okay=False))(fn)


def file_option(*decls: str, help: str, required: bool = False, **kwargs):
    """``click.option`` for one input or output file (not a folder): ``--method``, ``--standards``,
    ``--calibration``, ``-o``; ``decls`` are the option names and the parameter name."""
    return click.option(*decls, required=required, type=click.Path(dir_okay=False), help=help, **kwargs)


def folder_option(*decls: str, help: str, required: bool = False, **kwargs):
    """``click.option`` for a folder (``--plots``, an output folder)."""
    return click.option(*decls, required=required, type=click.Path(file_okay=False), help=help, **kwargs)


def method_option(help: str = "Method file (TOML, docs/method-file.md).", *, required: bool = True):
    """``--method FILE`` (parameter ``method_path``)."""
    return file_option("--method", "method_path", required=required, help=help)


def output_option(help: str, *, required: bool = True, dest: str | None = None, folder: bool = False):
    """``-o/--output``: a file (default), a folder (``folder=True``) or either (``folder=None``)."""
    decls = ("-o", "--output") + ((dest,) if dest else ())
    if folder is None:
        return click.option(*decls, required=required, type=click.Path(), help=help)
    return (folder_option if folder else file_option)(*decls, required=required, help=help)


def fold_scheduler(scheduler: str | None, scheduler_file: str | None) -> str | None:
    """One ``scheduler`` argument for :func:`compquant.parallel.open_executor`, which reads a
    value naming an existing file as a scheduler file."""
    if scheduler and scheduler_file:
        raise click.UsageError("give --scheduler or --scheduler-file, not both")
    return scheduler_file or scheduler


def is_stdio(path) -> bool:
    """True for the path ``-``: standard input or output, for commands that read or write one table."""
    return path is not None and str(path) == "-"
def safe_frame(df):
    """A copy of ``df`` ready for CSV: text cells through :func:`csv_cell`, infinities as missing."""
    import numpy as np

    out = df.copy()
    out.columns = [csv_cell(str(c)) for c in out.columns]
    for i, dt in enumerate(out.dtypes):
        col = out.iloc[:, i]
        if str(dt) in ("object", "string", "category", "str"):
            out.isetitem(i, col.map(csv_cell).astype(object))
        elif np.issubdtype(dt, np.floating) and np.isinf(col.to_numpy()).any():
            out.isetitem(i, col.where(np.isfinite(col.to_numpy())))
    return out


def report_runs(outcomes, out_dir: Path, echo) -> list:
    """Print one ``failed:`` line per run that failed and keep bugs' tracebacks in a file.

    A run that failed on a user error shows its one-line reason; one that hit a bug in
    compquant says so and its traceback goes to ``OUT_DIR/runs-failures.txt`` (not on the
    screen), so the screen keeps one line per run and the call's one ``error:`` line at the
    end. Returns the failed outcomes.
    """
    failed = [oc for oc in outcomes if not oc.ok]
    traces = []
    for oc in failed:
        line = terminal_text(oc.error.one_line())
        if oc.error.traceback:
            line += f" (a bug in compquant, not in the run: please report it with {out_dir / 'runs-failures.txt'})"
            traces.append(f"run {oc.run}\n{oc.error.traceback}\n")
        echo(f"failed: {line}", err=True)
    if traces:
        write_text_atomic(Path(out_dir) / "runs-failures.txt", "\n".join(traces))
    return failed


def format_columns(rows: Sequence[Sequence[str]], *, right: Collection[int] = (), indent: str = "") -> str:
    """Rows of strings (the first usually the header) as aligned text columns.

    Columns are padded to their widest cell and joined by two spaces; the column indices in
    ``right`` are right-aligned (numbers), the others left-aligned.  Every line starts with
    ``indent``.
    """
    w = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    return "\n".join(
        indent + "  ".join(c.rjust(w[i]) if i in right else c.ljust(w[i]) for i, c in enumerate(row))
        for row in rows
    )


__all__ = [
    "SAFETY",
    "VERBOSITY",
    "file_option",
    "fold_scheduler",
    "folder_option",
    "format_columns",
    "is_stdio",
    "method_option",
    "output_option",
    "progress_bar",
    "report_runs",
    "run_argument",
    "safe_frame",
    "scheduler_file_option",
    "write_csv",
]
