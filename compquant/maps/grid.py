"""The raster grid of a rastered run, and a streaming accumulator of per-shot values on it.

A rastered run stores each shot's stage position ``x_mm``, ``y_mm`` (docs/run-format.md,
"Rastered runs"). The grid is rectangular with steps ``dx``, ``dy`` (mm): node ``(i, j)``
sits at ``x = x0 + i·dx``, ``y = y0 + j·dy`` with ``x0``, ``y0`` the smallest positions.
Each shot is assigned to its nearest node, ``i = rint((x - x0)/dx)``; several shots on one
node (repeated pulses on a spot) are averaged. Steps are inferred from the positions (the
median spacing of the distinct coordinates) unless the method's ``[map] step_mm`` sets them.
Stray positions (a coordinate beyond Tukey's far-out fences, 3 interquartile ranges outside
the quartiles) do not stretch the grid: they are left off it, and the map says how many.

The accumulator adds per-shot values chunk by chunk into per-node sums and counts, so a map
of millions of shots needs memory for the grid only. Sums are formed with ``np.bincount``
(sequential in shot order), chunk after chunk in shot order, so the map is the same number
for number whatever executor produced the per-shot values.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compquant.errors import DataQualityError, ResourceLimitError

#: largest grid accepted (nodes); 4096 x 4096
MAX_NODES = 4096 * 4096

_ROUND_MM = 1e-6  # positions are compared after rounding to 1 nm


def _step_of(values: np.ndarray) -> float | None:
    """Grid step along one axis from jittered coordinates.

    Distinct coordinates are grouped into rows (columns): a gap larger than half the typical
    large gap starts a new group. The step is the median spacing of the group centres, so
    stage jitter up to about a quarter step does not change it.
    """
    u = np.unique(np.round(values / _ROUND_MM) * _ROUND_MM)
    if u.size < 2:
        return None
    d = np.diff(u)
    if d.max() <= 10 * _ROUND_MM:
        return None
    typical = float(np.median(d[d > 0.4 * d.max()]))
    breaks = np.flatnonzero(d > 0.5 * typical)
    starts = np.concatenate([[0], breaks + 1])
    stops = np.concatenate([breaks + 1, [u.size]])
    centres = np.array([u[a:b].mean() for a, b in zip(starts, stops)])
    if centres.size < 2:
        return None
    return float(np.median(np.diff(centres)))


#: Tukey's far-out fence factor: a coordinate further than this many interquartile ranges
#: outside the quartiles is a stray stage position (Tukey, Exploratory Data Analysis, 1977)
OUTLIER_FENCE = 3.0


def _inliers(v: np.ndarray) -> np.ndarray:
    """Coordinates inside Tukey's far-out fences; at least half of the shots always stay.

    A raster covers its range evenly, so its quartiles lie well inside it and its whole extent
    sits within 1.5 interquartile ranges of them; one stray position (x = 1e9 mm) is far outside.
    When the quartiles coincide (most shots at one coordinate) the fence is the jitter floor.
    """
    q1, q3 = np.percentile(v, [25, 75])
    span = max(q3 - q1, 10 * _ROUND_MM)
    return (v >= q1 - OUTLIER_FENCE * span) & (v <= q3 + OUTLIER_FENCE * span)


@dataclass(frozen=True)
class RasterGrid:
    """Rectangular grid: origin ``x0_mm, y0_mm``, steps ``dx_mm, dy_mm``, size ``nx, ny``."""

    x0_mm: float
    y0_mm: float
    dx_mm: float
    dy_mm: float
    nx: int
    ny: int

    @classmethod
    def from_positions(
        cls, x_mm, y_mm, step_mm: float | tuple[float, float] | None = None, where: str = "positions"
    ) -> RasterGrid:
        """Infer the grid from shot positions (finite values only)."""
        x = np.asarray(x_mm, dtype=np.float64)
        y = np.asarray(y_mm, dtype=np.float64)
        ok = np.isfinite(x) & np.isfinite(y)
        if not ok.any():
            raise DataQualityError(
                "no shot has a finite x, y position",
                where=where,
                fix="map a rastered sample (shots/x_mm and shots/y_mm set)",
            )
        x, y = x[ok], y[ok]
        keep = _inliers(x) & _inliers(y)
        x, y = x[keep], y[keep]
        if step_mm is not None:
            dx, dy = (float(step_mm), float(step_mm)) if np.isscalar(step_mm) else map(float, step_mm)
            if not (np.isfinite(dx) and np.isfinite(dy) and dx > 0 and dy > 0):
                raise DataQualityError(
                    f"map step {step_mm!r} mm is not a positive finite number",
                    where="[map] step_mm",
                    fix="give the raster step in mm, e.g. step_mm = 0.05",
                )
        else:
            dx, dy = _step_of(x), _step_of(y)
            if dx is None and dy is None:
                raise DataQualityError(
                    "all shots sit at one position: nothing to map",
                    where=where,
                    fix="map a rastered sample, or set [map] step_mm",
                )
            dx = dx if dx is not None else dy
            dy = dy if dy is not None else dx
        x0, y0 = float(x.min()), float(y.min())
        nx = int(np.rint((x.max() - x0) / dx)) + 1
        ny = int(np.rint((y.max() - y0) / dy)) + 1
        if nx * ny > MAX_NODES:
            raise ResourceLimitError(
                f"the raster grid would have {nx} x {ny} nodes (step {dx:g} x {dy:g} mm)",
                where=where,
                fix="set a coarser [map] step_mm",
            )
        return cls(x0, y0, dx, dy, nx, ny)

    @property
    def x_mm(self) -> np.ndarray:
        """Node x positions (mm), length nx."""
        return self.x0_mm + self.dx_mm * np.arange(self.nx)

    @property
    def y_mm(self) -> np.ndarray:
        """Node y positions (mm), length ny."""
        return self.y0_mm + self.dy_mm * np.arange(self.ny)

    def node_index(self, x_mm, y_mm) -> np.ndarray:
        """Flat node index ``j·nx + i`` of each position; -1 where the position is not finite."""
        x = np.asarray(x_mm, dtype=np.float64)
        y = np.asarray(y_mm, dtype=np.float64)
        ok = np.isfinite(x) & np.isfinite(y)
        i = np.zeros(x.shape, dtype=np.int64)
        j = np.zeros(x.shape, dtype=np.int64)
        i[ok] = np.rint((x[ok] - self.x0_mm) / self.dx_mm).astype(np.int64)
        j[ok] = np.rint((y[ok] - self.y0_mm) / self.dy_mm).astype(np.int64)
        ok &= (i >= 0) & (i < self.nx) & (j >= 0) & (j < self.ny)
        return np.where(ok, j * self.nx + i, -1)


class GridAccumulator:
    """Per-node sums and counts of ``n_quantities`` per-shot values, added chunk by chunk.

    ``add(nodes, values)`` takes the flat node index of each shot (-1 = not on the grid)
    and a ``(n_shots, n_quantities)`` array; NaN values (rejected or unmeasured shots) are
    left out of that quantity's mean. ``mean()`` gives ``(n_quantities, ny, nx)`` maps, NaN
    where a node has no accepted shot.
    """

    def __init__(self, grid: RasterGrid, n_quantities: int):
        self.grid = grid
        self.n = int(n_quantities)
        size = grid.nx * grid.ny
        self.sums = np.zeros((self.n, size), dtype=np.float64)
        self.counts = np.zeros((self.n, size), dtype=np.int64)
        self.shots = np.zeros(size, dtype=np.int64)

    def add(self, nodes, values) -> None:
        nodes = np.asarray(nodes, dtype=np.int64)
        v = np.asarray(values, dtype=np.float64)
        if v.ndim == 1:
            v = v[:, None]
        if v.shape != (nodes.size, self.n):
            raise ValueError(f"values have shape {v.shape}, expected ({nodes.size}, {self.n})")
        on = nodes >= 0
        size = self.sums.shape[1]
        self.shots += np.bincount(nodes[on], minlength=size)
        for q in range(self.n):
            good = on & np.isfinite(v[:, q])
            self.sums[q] += np.bincount(nodes[good], weights=v[good, q], minlength=size)
            self.counts[q] += np.bincount(nodes[good], minlength=size)

    def mean(self) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            m = np.where(self.counts > 0, self.sums / np.maximum(self.counts, 1), np.nan)
        return m.reshape(self.n, self.grid.ny, self.grid.nx)

    def count_map(self) -> np.ndarray:
        """Shots per node (all shots, accepted or not), ``(ny, nx)``."""
        return self.shots.reshape(self.grid.ny, self.grid.nx)


__all__ = ["MAX_NODES", "GridAccumulator", "RasterGrid"]
