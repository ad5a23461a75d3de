"""Small helpers shared by the CLI commands: the safety epilog, plain-text tables, CSV output.

Not a command module (no ``cmd_`` prefix), so the lazy command discovery skips it.
"""

from __future__ import annotations

from collections.abc import Collection, Sequence
from pathlib import Path

from compquant.errors import OutputError
from compquant.fileio import atomic_write, csv_cell, terminal_text, write_text_atomic

#: the usual cautions printed under a command's help (common practice of laser and
#: spark-source labs; local regulations and the licensed safety officer decide)
SAFETY = (
    "Safety: LIBS uses Class 4 lasers (eye and skin hazard: wear eyewear of the right optical "
    "density for the laser wavelength, keep interlocks and a controlled area); ablation makes "
    "fumes and particles, some toxic (Pb, Cd, Be): use fume extraction; spark and flashlamp "
    "sources use high voltage and emit UV; argon purge gas can displace air in closed rooms. "
    "Follow local regulations and your laser safety officer."
)


def write_csv(df, path, float_format: str = "%.10g", sep: str = ",") -> None:
    """Write ``df`` (no index) to ``path`` through :func:`compquant.fileio.atomic_write`.

    Every text cell and column name goes through :func:`compquant.fileio.csv_cell` (no formula,
    no raw newline or control character); an infinite number is written as an empty cell, like
    NaN (the flags of the row say why). An OS error becomes
    :class:`~compquant.errors.OutputError` naming the path.
    """
    df = safe_frame(df)
    try:
        with atomic_write(Path(path), "w", newline="") as fh:
            df.to_csv(fh, index=False, float_format=float_format, sep=sep)
    except OSError as exc:
        raise OutputError(
            f"cannot write ({exc.strerror})", where=str(path), fix="choose a writable output path"
        ) from exc


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


__all__ = ["SAFETY", "format_columns", "report_runs", "safe_frame", "write_csv"]
