"""The per-shot table of a line measurement, read from its compact arrays only where needed.

:attr:`compquant.lines.LineMeasurement.shots` is the long table ``sample_id, shot, line_id,
intensity, accepted, saturated``: one row per shot x line, about 35 bytes each once built (two
object columns), so a run of 2 million shots with 20 lines would need 1.4 GB for it.  The steps
that use it need much less:

* a calibration or quantification needs, for one analyte line (and its internal-standard line),
  each sample's accepted shots: :meth:`ShotView.line_frames` builds them per sample from one
  column of ``shot_intensity`` (n_shots values, whatever the number of lines);
* the per-shot CSV of ``compquant lines`` needs every row, in run order:
  :meth:`ShotView.frames` yields the long table in blocks of a bounded number of rows.

Both read ``shot_intensity`` and ``shot_saturated`` in blocks of rows; when they are read-only
memory maps of a spill file (:mod:`compquant.lines.shotstore`), the pages read are handed back
to the system after each block (``madvise(MADV_DONTNEED)``), so they do not stay in the
process's resident memory either.  The values are the very numbers the long table holds: the
blocks concatenated equal :meth:`ShotView.to_frame`, and the per-sample frames equal the rows
of the long table for that sample and line, in the same order.
"""

from __future__ import annotations

import mmap
from collections.abc import Iterator

import numpy as np
import pandas as pd

from compquant.lines._table import SHOT_TABLE_COLUMNS

#: shot x line cells per block of :meth:`ShotView.frames` (about 10 MB of long-table rows)
BLOCK_CELLS = 1 << 18
#: bytes of a memory-mapped array read between two page releases
READ_BYTES = 16 * 2**20


def _release(arr) -> None:
    """Hand the pages of a memory-mapped array back to the system (they are re-read from the
    file on the next access); a no-op for arrays in memory."""
    m = getattr(arr, "_mmap", None)
    if m is not None and hasattr(m, "madvise") and hasattr(mmap, "MADV_DONTNEED"):
        try:
            m.madvise(mmap.MADV_DONTNEED)
        except (OSError, ValueError):  # closed map or a system that refuses: pages stay cached
            pass


def _rows(arr: np.ndarray, start: int, stop: int) -> np.ndarray:
    """A copy of ``arr[start:stop]`` that does not keep a memory map's pages resident."""
    out = np.array(arr[start:stop])
    _release(arr)
    return out


class ShotView:
    """The long per-shot table of a measurement, kept as its compact arrays.

    Parameters
    ----------
    sample_ids : sample id of each sample index.
    line_ids : line id of each column of ``intensity``.
    shot_sample : (n_shots,) sample index of each shot.
    shot_number : (n_shots,) shot number.
    intensity : (n_shots, n_lines) float64 normalised intensities (array or memory map).
    accepted : (n_shots,) bool, shot QC.
    saturated : (n_shots, n_lines) bool.
    """

    columns = SHOT_TABLE_COLUMNS

    def __init__(self, sample_ids, line_ids, shot_sample, shot_number, intensity, accepted, saturated):
        self.sample_ids = list(sample_ids)
        self.line_ids = list(line_ids)
        self.shot_sample = np.asarray(shot_sample)
        self.shot_number = np.asarray(shot_number)
        self.intensity = intensity
        self.accepted = np.asarray(accepted, dtype=bool)
        self.saturated = saturated
        self._groups = None

    def __len__(self) -> int:
        """Rows of the long table (shots x lines)."""
        return int(self.intensity.shape[0] * self.intensity.shape[1])

    @property
    def n_shots(self) -> int:
        return int(self.intensity.shape[0])

    # ------------------------------------------------------------------ per line, per sample
    def column(self, line_id: str) -> np.ndarray | None:
        """Intensities of one line for every shot (n_shots,), read in row blocks; None if the
        line is not measured."""
        try:
            j = self.line_ids.index(line_id)
        except ValueError:
            return None
        n, k = self.intensity.shape
        step = max(1, READ_BYTES // max(1, 8 * k))
        out = np.empty(n, dtype=np.float64)
        for a in range(0, n, step):
            b = min(n, a + step)
            out[a:b] = _rows(self.intensity, a, b)[:, j]
        return out

    def _accepted_groups(self) -> dict[str, np.ndarray]:
        """Per sample its accepted rows, in run order (samples without one are left out)."""
        if self._groups is None:
            idx = np.flatnonzero(self.accepted)
            order = idx[np.argsort(self.shot_sample[idx], kind="stable")]
            cut = np.flatnonzero(np.diff(self.shot_sample[order])) + 1
            self._groups = ({self.sample_ids[int(self.shot_sample[p[0]])]: p for p in np.split(order, cut)}
                            if order.size else {})
        return self._groups

    def line_frames(self, line_id: str) -> dict[str, pd.DataFrame]:
        """Per sample, the accepted shots of one line as a frame ``shot, intensity`` (rows in run
        order): the rows of the long table with that line and sample and ``accepted`` true.
        Samples without an accepted shot, and lines not measured, give no entry."""
        col = self.column(line_id)
        if col is None:
            return {}
        return {sid: pd.DataFrame({"shot": self.shot_number[rows], "intensity": col[rows]})
                for sid, rows in self._accepted_groups().items()}

    # ------------------------------------------------------------------ the long table
    def frames(self, block_cells: int | None = None) -> Iterator[pd.DataFrame]:
        """The long table in blocks of whole shots (at most ``block_cells`` rows, at least one
        shot); always at least one frame (empty for a run without shots or lines)."""
        n, k = self.intensity.shape
        step = max(1, int(BLOCK_CELLS if block_cells is None else block_cells) // max(1, k))
        if n == 0 or k == 0:
            yield self._frame(0, 0)
            return
        for a in range(0, n, step):
            yield self._frame(a, min(n, a + step))

    def _frame(self, a: int, b: int) -> pd.DataFrame:
        k = self.intensity.shape[1]
        sid = np.asarray(self.sample_ids, dtype=object)[self.shot_sample[a:b]]
        return pd.DataFrame(
            {
                "sample_id": np.repeat(sid, k),
                "shot": np.repeat(self.shot_number[a:b], k),
                "line_id": np.tile(np.asarray(self.line_ids, dtype=object), b - a),
                "intensity": _rows(self.intensity, a, b).reshape(-1),
                "accepted": np.repeat(self.accepted[a:b], k),
                "saturated": _rows(self.saturated, a, b).reshape(-1),
            },
            columns=SHOT_TABLE_COLUMNS,
        )

    def to_frame(self) -> pd.DataFrame:
        """The whole long table (shots x lines rows) in memory."""
        return self._frame(0, self.n_shots)


__all__ = ["ShotView"]
