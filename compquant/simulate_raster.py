"""Rastered samples with a known, spatially varying composition, simulated shot by shot.

A raster scan fires the laser on a rectangular grid of spots (``nx`` x ``ny`` nodes, step
``step_mm``), ``shots_per_spot`` pulses on each, and stores every shot's stage position in
the run (``shots/x_mm``, ``shots/y_mm``; docs/run-format.md, "Rastered runs"). The sample's
composition (mass fractions, g/g) is a function of position:

* the matrix composition everywhere;
* :class:`DiffusionProfile` -- one element's mass fraction changed near an edge by
  diffusion from (or loss to) the surface, the constant-surface-concentration solution for
  a semi-infinite medium (Crank, *The Mathematics of Diffusion*, 2nd ed. 1975, eq. 3.13;
  from memory of that book)::

      c(d) = c_bulk + (c_surface - c_bulk) · erfc(d / L),   L = 2·sqrt(D·t)  (mm)

  with ``d >= 0`` the distance (mm) from the edge into the sample;
* :class:`Inclusion` -- a disc of radius ``r`` (mm) of another composition (sharp edge).

The balance element absorbs the changes so every composition sums to 1. Shots are then
made by the forward model (:class:`compquant.plasma.forward.SpectrumModel`): one model
call per distinct composition, with per-shot plasma temperature and electron density.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
from scipy.special import erfc

from compquant.errors import ConfigError


def _check_composition(comp: Mapping[str, float], where: str) -> dict[str, float]:
    out = {str(k): float(v) for k, v in comp.items()}
    if not out:
        raise ConfigError("composition is empty", where=where, fix="give element = mass fraction pairs")
    bad = [k for k, v in out.items() if not (0.0 <= v <= 1.0)]
    if bad:
        raise ConfigError(
            f"mass fraction of {', '.join(bad)} outside 0..1",
            where=where,
            fix="give mass fractions in g/g (0.3 for 30 %)",
        )
    total = sum(out.values())
    if abs(total - 1.0) > 1e-6:
        raise ConfigError(
            f"mass fractions sum to {total:.6g}, not 1",
            where=where,
            fix="make the composition add up to 1 (include the balance element)",
        )
    return out


@dataclass(frozen=True)
class Inclusion:
    """A disc-shaped inclusion: centre ``(x_mm, y_mm)``, ``radius_mm``, its own composition."""

    x_mm: float
    y_mm: float
    radius_mm: float
    composition: Mapping[str, float]

    def inside(self, x, y) -> np.ndarray:
        return (np.asarray(x) - self.x_mm) ** 2 + (np.asarray(y) - self.y_mm) ** 2 <= self.radius_mm**2


@dataclass(frozen=True)
class DiffusionProfile:
    """``element``'s mass fraction goes from ``surface_fraction`` at the edge to the bulk value.

    ``edge_mm``: position of the edge on ``axis`` (``"x"`` or ``"y"``); the sample lies at
    coordinates >= ``edge_mm`` (``direction = +1``) or <= it (``direction = -1``).
    ``length_mm``: the diffusion length ``L = 2·sqrt(D·t)`` (mm).
    """

    element: str
    surface_fraction: float
    edge_mm: float
    length_mm: float
    axis: str = "x"
    direction: int = 1

    def distance(self, x, y) -> np.ndarray:
        c = np.asarray(x if self.axis == "x" else y, dtype=np.float64)
        return np.maximum(0.0, (c - self.edge_mm) * (1 if self.direction >= 0 else -1))

    def fraction(self, bulk: float, x, y) -> np.ndarray:
        """``c(d) = c_bulk + (c_s - c_bulk) erfc(d / L)`` (Crank 1975, eq. 3.13)."""
        return bulk + (self.surface_fraction - bulk) * erfc(self.distance(x, y) / self.length_mm)


@dataclass
class RasterSample:
    """A rastered sample: grid, matrix composition, balance element and features.

    Shot order (as stored in the run): row by row in y (``j = 0 .. ny-1``), x increasing
    along each row (``serpentine=True`` reverses every other row, as a stage that scans
    back and forth does), ``shots_per_spot`` consecutive shots on each node.
    """

    sample_id: str
    matrix: Mapping[str, float]
    balance: str
    nx: int
    ny: int
    step_mm: float
    x0_mm: float = 0.0
    y0_mm: float = 0.0
    shots_per_spot: int = 1
    serpentine: bool = False
    inclusions: list[Inclusion] = field(default_factory=list)
    profiles: list[DiffusionProfile] = field(default_factory=list)
    description: str = "rastered sample (simulated)"

    def __post_init__(self):
        where = f"raster sample {self.sample_id!r}"
        self.matrix = _check_composition(self.matrix, f"{where} matrix")
        if self.balance not in self.matrix:
            raise ConfigError(
                f"balance element {self.balance!r} is not in the matrix",
                where=where,
                fix="name the main element of the matrix as balance",
            )
        if self.nx < 1 or self.ny < 1 or not self.step_mm > 0 or self.shots_per_spot < 1:
            raise ConfigError(
                "grid needs nx, ny, shots_per_spot >= 1 and step_mm > 0",
                where=where,
                fix="e.g. nx = 40, ny = 30, step_mm = 0.05",
            )
        for k, inc in enumerate(self.inclusions):
            _check_composition(inc.composition, f"{where} inclusion {k + 1}")
            if not inc.radius_mm > 0:
                raise ConfigError(
                    "inclusion radius must be > 0 mm", where=f"{where} inclusion {k + 1}", fix="give radius_mm > 0"
                )
        for p in self.profiles:
            if p.element == self.balance or p.element not in self.matrix:
                raise ConfigError(
                    f"profile element {p.element!r} must be a matrix element other than the balance",
                    where=where,
                    fix="profile an alloying element of the matrix",
                )
            if not p.length_mm > 0 or p.axis not in ("x", "y"):
                raise ConfigError(
                    "profile needs length_mm > 0 and axis 'x' or 'y'",
                    where=where,
                    fix="e.g. axis = 'x', length_mm = 0.3",
                )

    @property
    def elements(self) -> list[str]:
        els = list(self.matrix)
        for inc in self.inclusions:
            els += [e for e in inc.composition if e not in els]
        return els

    @property
    def n_shots(self) -> int:
        return self.nx * self.ny * self.shots_per_spot

    def node_positions(self) -> tuple[np.ndarray, np.ndarray]:
        """Node x, y (mm) in scan order, one entry per node."""
        j, i = np.divmod(np.arange(self.nx * self.ny), self.nx)
        if self.serpentine:
            i = np.where(j % 2 == 1, self.nx - 1 - i, i)
        return self.x0_mm + self.step_mm * i, self.y0_mm + self.step_mm * j

    def shot_positions(self) -> tuple[np.ndarray, np.ndarray]:
        """x, y (mm) of every shot in stored order."""
        x, y = self.node_positions()
        return np.repeat(x, self.shots_per_spot), np.repeat(y, self.shots_per_spot)

    def composition_at(self, x, y) -> dict[str, np.ndarray]:
        """Mass fractions (g/g) of every element at positions ``x, y`` (mm)."""
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        comp = {e: np.zeros(x.shape) for e in self.elements}
        for e, v in self.matrix.items():
            comp[e] += v
        for p in self.profiles:
            comp[p.element] = p.fraction(self.matrix[p.element], x, y)
        others = [e for e in self.matrix if e != self.balance]
        comp[self.balance] = 1.0 - sum(comp[e] for e in others if e in comp)
        for inc in self.inclusions:
            m = inc.inside(x, y)
            for e in comp:
                comp[e] = np.where(m, float(inc.composition.get(e, 0.0)), comp[e])
        return comp


def distinct_compositions(comp: Mapping[str, np.ndarray], decimals: int = 9) -> tuple[list[dict], np.ndarray]:
    """Group positions of equal composition: ``(list of compositions, group index per position)``."""
    elements = list(comp)
    table = np.round(np.stack([np.asarray(comp[e]) for e in elements], axis=1), decimals)
    uniq, inverse = np.unique(table, axis=0, return_inverse=True)
    groups = [{e: float(v) for e, v in zip(elements, row) if v > 0} for row in uniq]
    return groups, inverse.reshape(-1)


__all__ = ["DiffusionProfile", "Inclusion", "RasterSample", "distinct_compositions"]
