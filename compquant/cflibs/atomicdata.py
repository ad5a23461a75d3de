"""Where the calibration-free analysis gets its atomic data.

The analysis needs, per species, the partition function U(T) and the ionisation energy,
per element the atomic mass, and per line g_k, A_ki (with its accuracy grade), E_i, E_k
and Stark parameters.  :class:`PackageAtomicData` reads them from :mod:`compquant.atomic`
(the shipped tables); :class:`TableAtomicData` takes them from plain Python values (for
users' own data and for the tests' hand calculations).  Both implement the same four
methods, which is all the analysis needs; :class:`PackageAtomicData` also offers
``partition_functions(names, T)`` (all species in one call), which the analysis uses where
present.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

import numpy as np
import pandas as pd

import compquant.atomic as atomic
from compquant.errors import AtomicDataError


class PackageAtomicData:
    """Atomic data from :mod:`compquant.atomic` (the shipped tables).

    Partition functions are memoised per (species, temperature): the self-absorption fit asks
    for U(T) of every species at every trial temperature, and a finite-difference Jacobian
    repeats each temperature for all other parameters, so most calls hit the memo.  The memo
    returns copies of exactly what :func:`compquant.atomic.partition_function` returned (same
    numbers, not an interpolation) and holds at most ``MEMO_SIZE`` entries of ≤ ``MEMO_MAX_T``
    temperatures each (batched Monte Carlo calls pass through uncached).
    """

    MEMO_SIZE = 4096
    MEMO_MAX_T = 8
    #: group evaluators kept (one per set of species evaluated together)
    GROUPS_KEPT = 16

    def __init__(self):
        self._atomic = atomic
        self._u_memo: dict = {}
        self._has_u: dict[str, bool] = {}
        self._u_eval: dict[str, Callable | None] = {}
        self._asked: dict[str, None] = {}
        self._epoch = None
        self._groups: dict[tuple, Callable] = {}
        self._uu_memo: dict = {}

    def partition_function(self, species: str, T) -> np.ndarray:
        """U(T) by the level sum of :func:`compquant.atomic.partition_function` (vectorised over T),
        memoised for small T arrays.

        On a miss at a new temperature, the species asked for since the previous new temperature
        are evaluated at it together, in one vectorised pass (:func:`_group_evaluator`), and
        kept: the analysis asks for all its species at each trial temperature, so the others
        then hit.  Exact cache keyed on the temperatures'
        bytes; the values are bit-identical to :func:`compquant.atomic.partition_function`
        (tests/test_cflibs_speed.py).
        """
        T = np.asarray(T, dtype=float)
        if T.size > self.MEMO_MAX_T:
            return self._u_uncached(species, T)
        self._asked[species] = None
        key = (species, T.shape, T.tobytes())
        u = self._u_memo.get(key)
        if u is None:
            u = self._u_fill(species, T, key)
        return u.copy()

    def partition_functions(self, names, T) -> np.ndarray:
        """U(T) of each species of ``names`` (a tuple): shape ``T.shape + (len(names),)``, column k
        the same numbers as ``partition_function(names[k], T)`` (one call for all the species of
        an analysis; same memo).  For small T the array is kept and returned read-only (the
        solver and the curve of growth ask again at the same T)."""
        T = np.asarray(T, dtype=float)
        if T.size > self.MEMO_MAX_T or not names:
            return np.stack([self.partition_function(sp, T) for sp in names], axis=-1) if names else (
                np.empty(T.shape + (0,)))
        tail = (T.shape, T.tobytes())
        whole = self._uu_memo.get((names,) + tail)
        if whole is not None:
            for sp in names:
                self._asked[sp] = None
            return whole
        memo = self._u_memo
        cols = []
        for sp in names:
            self._asked[sp] = None
            key = (sp,) + tail
            u = memo.get(key)
            if u is None:
                u = self._u_fill(sp, T, key)
            cols.append(u)
        whole = np.concatenate(cols)[None, :] if T.shape == (1,) else np.stack(cols, axis=-1)
        whole.flags.writeable = False
        if len(self._uu_memo) >= 64:
            self._uu_memo.clear()
        self._uu_memo[(names,) + tail] = whole
        return whole

    def _u_fill(self, species: str, T: np.ndarray, key) -> np.ndarray:
        """Compute U(T) of ``species`` — at a new temperature together with the species asked
        for since the previous new temperature — keep the values in the memo and return the
        one asked for."""
        memo = self._u_memo
        epoch = key[1:]
        ok = bool(self._evaluator(species)) and bool(np.isfinite(T).all() and (T > 0).all())
        if not ok or epoch == self._epoch:
            u = self._u_uncached(species, T)  # alone: the usual path and its usual errors
            values = {species: u}
        else:
            asked, self._asked, self._epoch = self._asked, {species: None}, epoch
            asked[species] = None  # (also if another thread swapped the set in between)
            names = tuple(sorted(sp for sp in asked if self._evaluator(sp)))  # one group per set
            group = self._groups.get(names)
            if group is None:
                if len(self._groups) >= self.GROUPS_KEPT:
                    self._groups.clear()
                group = self._groups[names] = _group_evaluator(names, self._evaluator)
            values = group(T)
        if len(memo) + len(values) > self.MEMO_SIZE:
            memo.clear()
        for sp, v in values.items():
            memo[(sp,) + epoch] = v
        return values[species]

    def _evaluator(self, species: str):
        """The per-species evaluator of :func:`_u_evaluator` (``None``: use
        :func:`compquant.atomic.partition_function` itself), looked up once per species."""
        ev = self._u_eval.get(species, False)
        if ev is False:
            ev = _u_evaluator(species) if self._atomic is atomic else None
            self._u_eval[species] = ev
        return ev

    def _u_uncached(self, species: str, T: np.ndarray) -> np.ndarray:
        """:func:`compquant.atomic.partition_function` of ``species`` at ``T`` (no lowering).

        The species' kind (bare nucleus, tabulated, level sum) and its level arrays are looked
        up once per species; the arithmetic is the same as in
        :func:`compquant.atomic.partition_function` (same operations in the same order, so the
        same numbers; tests/test_cflibs_speed.py checks them bit for bit).  Species the
        evaluator does not know go through :func:`compquant.atomic.partition_function` itself,
        which raises its usual error.
        """
        ev = self._evaluator(species)
        if ev is None:
            return np.asarray(self._atomic.partition_function(species, T), dtype=float)
        return np.asarray(ev(T), dtype=float)

    def has_partition_function(self, species: str) -> bool:
        """True when the shipped tables give a finite, positive U for ``species``: a shipped level
        table, or a bare nucleus (U = 1).  Decided once per species, without raising."""
        known = self._has_u.get(species)
        if known is None:
            known = self._check_has_u(species)
            self._has_u[species] = known
        return known

    def _check_has_u(self, species: str) -> bool:
        sym, ion = atomic.parse_species(species)
        name = atomic.species_name(sym, ion)
        bare = ion == self._atomic.element(sym).Z + 1
        if not bare and name not in set(self._atomic.species_with_levels()):
            return False
        v = self.partition_function(name, np.array([10000.0]))
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


def _package_grade_u(grade) -> float:
    """Relative standard uncertainty of A_ki from :func:`compquant.atomic.aki_standard_uncertainty`
    (NIST grade bound / √3, GUM 4.3.7): the one shipped grade table."""
    return float(atomic.aki_standard_uncertainty(str(grade)))


def _checked_t(T, species: str, part) -> np.ndarray:
    """``T`` as a float array, finite and > 0 K, else the error of
    :func:`compquant.atomic.partition_function` (a cheaper test of the same condition)."""
    T_arr = np.asarray(T, dtype=float)
    if np.isfinite(T_arr).all() and (T_arr > 0).all():
        return T_arr
    return part._check_t(T, species)


def _u_evaluator(species: str):
    """U(T) of one shipped species as a function of T, with the per-species look-ups done once;
    ``None`` where :func:`compquant.atomic.partition_function` would raise or needs data it reads
    per call.  Mirrors that function's default path (no level table given, no lowering):
    U = 1 for a bare nucleus; ``exp(interp(T, t, ln U))`` for tabulated species; else
    ``exp(-outer(1/(k_B T), E)) @ g`` over the levels below the ionisation energy
    (Irwin 1981, ApJS 45, 621; see :mod:`compquant.atomic.partition`)."""
    from compquant.atomic import partition as part

    sym, ion = atomic.parse_species(species)
    name = atomic.species_name(sym, ion)
    if ion == part._atomic_number(sym) + 1:
        def bare(T):
            T_arr = _checked_t(T, species, part)
            return np.ones_like(T_arr) if T_arr.ndim else 1.0
        return bare
    idx = part.partition_index()
    if name not in idx.index:
        return None
    if str(idx.loc[name, "method"]) == "tabulated":
        t, lu = part._all_tabulated()[name]

        def tabulated(T):
            T_arr = _checked_t(T, species, part)
            u = np.exp(np.interp(T_arr, t, lu))
            return u if u.ndim else float(u)
        return tabulated
    e, g = part._shipped_arrays(name)
    e_ion = atomic.ionisation_energy(name)
    if not 0.0 < e_ion:
        return None
    keep = e < e_ion - float(np.asarray(0.0, dtype=float))
    e, g = e[keep], g[keep]
    k_b = part.K_B_EV

    def level_sum(T):
        T_arr = _checked_t(T, species, part)
        beta = 1.0 / (k_b * T_arr.reshape(-1))
        u = np.exp(-np.outer(beta, e)) @ g
        u = u.reshape(T_arr.shape)
        return u if u.ndim else float(u)
    level_sum.levels = (e, g)  # for _group_evaluator
    return level_sum


def _group_evaluator(species, evaluator: Callable):
    """U(T) of several species at once: ``T -> {species: U(T)}`` for finite T > 0.

    The level sums of all the species are one array operation: ``β = 1/(k_B T)``, the Boltzmann
    factors ``exp(-outer(β, E))`` of every species' levels concatenated (elementwise, so each
    factor is the same number as in the species' own call), then per species the same matrix
    product with its g (on its columns, contiguous as in :func:`compquant.atomic.partition_function`).
    The arrays returned are the memo's: callers hand out copies.  Tabulated species and bare nuclei use their
    own evaluators.  Same numbers as the per-species evaluators, bit for bit (the level sum of
    Irwin 1981, ApJS 45, 621; see :mod:`compquant.atomic.partition`).
    """
    from compquant.atomic import partition as part

    evs = {sp: evaluator(sp) for sp in species}
    sums = [sp for sp in species if getattr(evs[sp], "levels", None) is not None]
    others = [(sp, evs[sp]) for sp in species if sp not in sums]
    if sums:
        e_all = np.concatenate([evs[sp].levels[0] for sp in sums])
        bounds = np.cumsum([0] + [evs[sp].levels[0].size for sp in sums])
        cols = [(sp, int(a), int(b), evs[sp].levels[1]) for sp, a, b in zip(sums, bounds[:-1], bounds[1:])]
    k_b = part.K_B_EV

    def group(T: np.ndarray) -> dict[str, np.ndarray]:
        out = {}
        if sums:
            beta = 1.0 / (k_b * T.reshape(-1))
            w = np.exp(-np.outer(beta, e_all))
            if T.ndim == 1 and T.size == 1:  # the usual case: w is one row, its slices contiguous
                for sp, a, b, g in cols:
                    out[sp] = w[:, a:b] @ g
            else:
                for sp, a, b, g in cols:
                    out[sp] = (np.ascontiguousarray(w[:, a:b]) @ g).reshape(T.shape)
        for sp, ev in others:
            out[sp] = np.asarray(ev(T), dtype=float)
        return out
    return group


class TableAtomicData:
    """Atomic data given as plain values.

    Parameters
    ----------
    partition : mapping species → number or callable U(T)
    ionisation_ev : mapping species → ionisation energy of that species (eV)
    masses_u : mapping element → atomic mass (u)
    lines : optional line list DataFrame (same columns as compquant.atomic.load_line_list)
    grade_u : mapping Aki grade → relative standard uncertainty (default: the shipped NIST grade
        table, :func:`compquant.atomic.aki_standard_uncertainty`)
    """

    def __init__(self, partition: Mapping[str, float | Callable], ionisation_ev: Mapping[str, float],
                 masses_u: Mapping[str, float], lines: pd.DataFrame | None = None,
                 grade_u: Mapping[str, float] | None = None):
        self._u = dict(partition)
        self._ie = dict(ionisation_ev)
        self._m = dict(masses_u)
        self._lines = lines
        self._grade = None if grade_u is None else dict(grade_u)

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
        if self._grade is None:
            return _package_grade_u(key)
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
    """The shipped atomic data (:class:`PackageAtomicData`), one shared instance per process (its
    line list is read once)."""
    if not _DEFAULT:
        _DEFAULT.append(PackageAtomicData())
    return _DEFAULT[0]


__all__ = [
    "PackageAtomicData",
    "TableAtomicData",
    "default_atomic_data",
]
