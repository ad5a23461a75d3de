"""Shared matplotlib plumbing for the PNG figures: the non-interactive backend and atomic saving.

matplotlib is imported only when a figure is drawn, so importing compquant stays light.
"""

from __future__ import annotations

from pathlib import Path

from compquant.errors import OutputError
from compquant.fileio import atomic_path


def plain_text() -> None:
    """Draw every text of every figure as plain text: no mathtext, no LaTeX.

    Sample ids, line ids and names come from files; ``$\\foo$`` in one of them must print as
    typed, not be parsed as mathtext (an unknown command would stop the figure). Labels that
    are meant as mathematics ask for it with ``parse_math=True`` (compquant.cflibs.plots).
    """
    import matplotlib

    matplotlib.rcParams["text.parse_math"] = False
    matplotlib.rcParams["text.usetex"] = False


def pyplot():
    """``matplotlib.pyplot`` on the non-interactive Agg backend (no display needed), plain text."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    plain_text()
    return plt


def save_png(fig, path, dpi: float | None = None) -> Path:
    """Write ``fig`` as PNG to ``path`` through :func:`compquant.fileio.atomic_path` and close it.

    ``dpi`` None keeps the figure's own resolution.  An OS error becomes
    :class:`~compquant.errors.OutputError` naming the path; the figure is closed either way.
    """
    out = Path(path)
    try:
        with atomic_path(out) as tmp:
            fig.savefig(tmp, format="png", **({} if dpi is None else {"dpi": dpi}))
    except OSError as exc:
        raise OutputError(
            f"cannot write ({exc.strerror})", where=str(out), fix="choose a writable output path"
        ) from exc
    finally:
        pyplot().close(fig)
    return out


__all__ = ["plain_text", "pyplot", "save_png"]
