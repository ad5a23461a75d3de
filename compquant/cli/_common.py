"""Small helpers shared by the CLI commands: the safety epilog, plain-text tables, CSV output.

Not a command module (no ``cmd_`` prefix), so the lazy command discovery skips it.
"""

from __future__ import annotations

from collections.abc import Collection, Sequence
from pathlib import Path

from compquant.errors import OutputError
from compquant.fileio import atomic_write

#: the usual cautions printed under a command's help (common practice of laser and
#: spark-source labs; local regulations and the licensed safety officer decide)
SAFETY = (
    "Safety: LIBS uses Class 4 lasers (eye and skin hazard: wear eyewear of the right optical "
    "density for the laser wavelength, keep interlocks and a controlled area); ablation makes "
    "fumes and particles, some toxic (Pb, Cd, Be): use fume extraction; spark and flashlamp "
    "sources use high voltage and emit UV; argon purge gas can displace air in closed rooms. "
    "Follow local regulations and your laser safety officer."
)


def write_csv(df, path, float_format: str = "%.10g") -> None:
    """Write ``df`` (no index) to ``path`` through :func:`compquant.fileio.atomic_write`.

    An OS error becomes :class:`~compquant.errors.OutputError` naming the path.
    """
    try:
        with atomic_write(Path(path), "w", newline="") as fh:
            df.to_csv(fh, index=False, float_format=float_format)
    except OSError as exc:
        raise OutputError(
            f"cannot write ({exc.strerror})", where=str(path), fix="choose a writable output path"
        ) from exc


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


__all__ = ["SAFETY", "format_columns", "write_csv"]
