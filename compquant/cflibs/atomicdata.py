"""Where the calibration-free analysis gets its atomic data.

The analysis needs, per species, the partition function U(T) and the ionisation energy,
per element the atomic mass, and per line g_k, A_ki (with its accuracy grade), E_i, E_k
and Stark parameters.  :class:`PackageAtomicData` reads them from :mod:`compquant.atomic`
(the shipped tables); :class:`TableAtomicData` takes them from plain Python values (for
users' own data and for the tests' hand calculations).  Both implement the same four
methods, which is all the analysis uses.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Mapping

import numpy as np
import pandas as pd

from compquant.errors import AtomicDataError

_ROMAN = {"I": 1, "II": 2, "III": 3, "IV": 4}
_ROMAN_INV = {v: k for k, v in _ROMAN.items()}
_SPECIES_RE = re.compile(r"^\s*([A-Z][a-z]?)\s+(I|II|III|IV)\s*$")


def split_species(species: str) -> tuple[str, int]:
    """``"Fe II"`` → ``("Fe", 2)``."""
    m = _SPECIES_RE.match(str(species))
    if not m:
        raise AtomicDataError(f"not a species name: {species!r}", where="species",
                              fix='write species as "<Element> <roman numeral>", e.g. "Fe II"')
    return m.group(1), _ROMAN[m.group(2)]


def species_name(element: str, ion: int) -> str:
    """``("Fe", 2)`` → ``"Fe II"``."""
    return f"{element} {_ROMAN_INV[int(ion)]}"


class PackageAtomicData:
    """Atomic data from :mod:`compquant.atomic` (imported on first use)."""

    def __init__(self):
        import compquant.atomic as atomic

        self._atomic = atomic

    #: temperature grid (K) on which U(T) is tabulated once per species and then
    #: interpolated by a cubic spline in ln U (the level sum of compquant.atomic costs
    #: ~0.5 ms per call, and the fits call it thousands of times); the spline error on
    #: this 5 K grid is < 1e-10 relative for the shipped tables
    T_GRID = np.arange(1000.0, 60000.0 + 1.0, 5.0)

    def partition_function(self, species: str, T) -> np.ndarray:
        T = np.asarray(T, dtype=float)
        if not hasattr(self, "_spl"):
            self._spl = {}
        spl = self._spl.get(species)
        if spl is None:
            from scipy.interpolate import CubicSpline

            u = np.asarray(self._atomic.partition_function(species, self.T_GRID), dtype=float)
            spl = self._spl[species] = CubicSpline(self.T_GRID, np.log(u))
        inside = (T >= self.T_GRID[0]) & (T <= self.T_GRID[-1])
        if np.all(inside):
            return np.exp(spl(T))
        out = np.empty(T.shape)
        out[inside] = np.exp(spl(T[inside]))
        out[~inside] = np.asarray(self._atomic.partition_function(species, T[~inside]), dtype=float)
        return out

    def has_partition_function(self, species: str) -> bool:
        try:
            v = self.partition_function(species, np.array([10000.0]))
        except Exception:
            return False
        return bool(np.all(np.isfinite(v)) and np.all(v > 0))

    def ionisation_energy(self, species: str) -> float:
        return float(self._atomic.ionisation_energy(species))

    def mass_u(self, element: str) -> float:
        return float(self._atomic.element(element).mass_u)

    def aki_relative_uncertainty(self, grade) -> float:
        """Relative *standard* uncertainty of A_ki: the NIST grade bound read as the half-width
        of a rectangular distribution, bound/√3 (GUM 4.3.7; compquant.atomic convention)."""
        return float(self._atomic.aki_standard_uncertainty(str(grade)))

    def line_list(self) -> pd.DataFrame:
        if not hasattr(self, "_lines"):
            self._lines = self._atomic.load_line_list()
        return self._lines


#: NIST ASD accuracy grades → relative *standard* uncertainty of A_ki: the grade's bound
#: (NIST ASD "Accuracy" legend, from memory of the NIST Atomic Spectra Database
#: documentation, verify) divided by √3 (rectangular distribution, GUM 4.3.7)
NIST_GRADE_U = {g: b / 3**0.5 for g, b in {
    "AAA": 0.003, "AA": 0.01, "A+": 0.02, "A": 0.03, "B+": 0.07, "B": 0.10,
    "C+": 0.18, "C": 0.25, "D+": 0.40, "D": 0.50, "E": 1.00}.items()}


class TableAtomicData:
    """Atomic data given as plain values.

    Parameters
    ----------
    partition : mapping species → number or callable U(T)
    ionisation_ev : mapping species → ionisation energy of that species (eV)
    masses_u : mapping element → atomic mass (u)
    lines : optional line list DataFrame (same columns as compquant.atomic.load_line_list)
    grade_u : mapping Aki grade → relative uncertainty (default NIST_GRADE_U)
    """

    def __init__(self, partition: Mapping[str, float | Callable], ionisation_ev: Mapping[str, float],
                 masses_u: Mapping[str, float], lines: pd.DataFrame | None = None,
                 grade_u: Mapping[str, float] | None = None):
        self._u = dict(partition)
        self._ie = dict(ionisation_ev)
        self._m = dict(masses_u)
        self._lines = lines
        self._grade = dict(NIST_GRADE_U if grade_u is None else grade_u)

    def partition_function(self, species: str, T) -> np.ndarray:
        if species not in self._u:
            raise AtomicDataError("no partition function", where=species,
                                  fix="add the species to the partition-function table")
        f = self._u[species]
        T = np.asarray(T, dtype=float)
        v = f(T) if callable(f) else np.full(T.shape, float(f))
        return np.asarray(v, dtype=float)

    def has_partition_function(self, species: str) -> bool:
        return species in self._u

    def ionisation_energy(self, species: str) -> float:
        if species not in self._ie:
            raise AtomicDataError("no ionisation energy", where=species,
                                  fix="add the species to the ionisation-energy table")
        return float(self._ie[species])

    def mass_u(self, element: str) -> float:
        if element not in self._m:
            raise AtomicDataError("no atomic mass", where=element, fix="add the element's mass")
        return float(self._m[element])

    def aki_relative_uncertainty(self, grade) -> float:
        if grade is None or (isinstance(grade, float) and np.isnan(grade)) or grade == "":
            return 0.0
        key = str(grade).strip()
        if key not in self._grade:
            raise AtomicDataError(f"unknown A_ki accuracy grade {key!r}", where="aki_grade",
                                  fix=f"use one of {', '.join(self._grade)}")
        return float(self._grade[key])

    def line_list(self) -> pd.DataFrame:
        if self._lines is None:
            raise AtomicDataError("no line list given", where="TableAtomicData",
                                  fix="pass lines=<DataFrame> or give atomic columns in the line table")
        return self._lines


_DEFAULT: list = []


def default_atomic_data():
    """The shipped atomic data (:class:`PackageAtomicData`), one shared instance so that its
    partition-function tables are built once per process."""
    if _DEFAULT:
        return _DEFAULT[0]
    try:
        _DEFAULT.append(PackageAtomicData())
        return _DEFAULT[0]
    except ImportError as exc:
        raise AtomicDataError("the atomic-data module compquant.atomic is not installed",
                              where="compquant.atomic",
                              fix="install a compquant version with atomic data, or pass atomic=") from exc


__all__ = [
    "NIST_GRADE_U",
    "PackageAtomicData",
    "TableAtomicData",
    "default_atomic_data",
    "species_name",
    "split_species",
]
