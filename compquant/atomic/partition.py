"""Energy-level tables and internal partition functions U(T).

Two kinds of shipped data, one per species (``compquant/data/atomic/partition_index.csv``, built
by ``scripts/build_atomic_data.py``; docs/atomic-data.md):

``levels``: the truncated level sum

    U(T) = sum_j g_j exp(-E_j / (k_B T)),   over levels with E_j < E_ion - dE

with ``g_j = 2J + 1``, ``E_j`` in eV above the ground level (the NIST levels as compiled in van
Hoof's Atomic Line List v3, ``levels.csv.gz``), ``k_B`` from scipy.constants (CODATA), ``E_ion``
the NIST ionisation energy (:func:`~compquant.atomic.ionisation_energy`) and ``dE >= 0`` an optional
lowering of the ionisation energy (e.g. the Debye-Hückel lowering the plasma module computes;
default 0); Irwin 1981 (ApJS 45, 621) discusses the cut-off.  A species gets this kind only
where the sum agrees with Barklem & Collet (2016, A&A 588, A96, table 8) within 3 % at
5 000-10 000 K, or where Barklem & Collet do not cover it.

``tabulated``: Barklem & Collet (2016) table 8 up to 10 000 K (interpolated linearly in
ln U - ln T), and above 10 000 K a level sum or Irwin's (1981) polynomial scaled to meet the
table at 10 000 K (``partition.csv.gz``, 1 000-25 000 K in 250 K steps).  The lowering of
the ionisation energy is not applied to these species (their tables have no level list).

Validity: 1 000-25 000 K; outside it the tabulated values are held at the end of the grid.
"""

from __future__ import annotations

import functools
import os
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import constants

from compquant.atomic.elements import (
    _data_dir,
    _fail,
    _read_csv,
    element,
    ionisation_energy,
    parse_species,
    species_name,
)
from compquant.errors import AtomicDataError

__all__ = [
    "K_B_EV",
    "load_levels",
    "levels",
    "dln_partition_functions_dln_t",
    "partition_function",
    "partition_function_completeness",
    "level_index",
    "species_with_levels",
    "species_with_partition_function",
    "partition_index",
]

#: Boltzmann constant in eV/K (CODATA via scipy.constants)
K_B_EV = constants.k / constants.e

LEVEL_COLUMNS = ("energy_ev", "g", "source")


def load_levels(path: str | os.PathLike) -> pd.DataFrame:
    """Load and validate an energy-level table (``energy_ev, g, source``).

    ``energy_ev``: level energy above the ground level (eV, >= 0, one level at
    0); ``g``: statistical weight (positive whole number, the sum of 2J+1 where
    a row merges the levels of a term).  Returns a DataFrame sorted by energy.
    """
    path = Path(path)
    raw = _read_csv(path, "level table", LEVEL_COLUMNS)
    ln = raw.attrs["file_lines"]
    if len(raw) == 0:
        raise AtomicDataError("the level table has no rows", where=str(path), fix="add levels")
    out = {}
    for col in ("energy_ev", "g"):
        vals = np.empty(len(raw))
        for i, v in enumerate(raw[col].str.strip()):
            try:
                x = float(v)
            except ValueError:
                _fail(path, ln[i], col, f"value {v!r} is not a number", "write a plain decimal number")
            if not np.isfinite(x) or x < 0 or (col == "g" and (x <= 0 or x != round(x))):
                _fail(
                    path,
                    ln[i],
                    col,
                    f"value {v!r} is out of range",
                    "energies must be >= 0 eV, g a positive whole number",
                )
            vals[i] = x
        out[col] = vals
    src = raw["source"].str.strip()
    for i, s in enumerate(src):
        if not s:
            _fail(path, ln[i], "source", "every level needs a source", "name where the value comes from")
    if not np.any(out["energy_ev"] == 0.0):
        raise AtomicDataError(
            "no ground level (energy_ev = 0)", where=str(path), fix="add the ground level with energy 0"
        )
    df = pd.DataFrame({"energy_ev": out["energy_ev"], "g": out["g"].astype(int), "source": src})
    return df.sort_values("energy_ev", kind="stable").reset_index(drop=True)


@functools.lru_cache(maxsize=1)
def partition_index() -> pd.DataFrame:
    """Every species with a shipped partition function: ``species, method`` (``levels`` or
    ``tabulated``), ``source``, ``complete_to_ev`` (highest listed level, levels only)."""
    idx = pd.read_csv(_data_dir() / "partition_index.csv")
    idx["file"] = np.where(idx["method"] == "levels", "levels.csv.gz", "partition.csv.gz")
    idx["note"] = idx["source"]
    return idx.set_index("species", drop=False)


@functools.lru_cache(maxsize=1)
def level_index() -> pd.DataFrame:
    """Index of shipped level tables: ``species, file, complete_to_ev, note`` (species whose
    partition function is a level sum)."""
    idx = partition_index()
    return idx[idx["method"] == "levels"][["species", "file", "complete_to_ev", "note", "source"]]


def species_with_levels() -> list[str]:
    """Species that have a shipped level table."""
    return list(level_index()["species"])


def species_with_partition_function() -> list[str]:
    """Species with a shipped partition function (level sum or tabulated)."""
    return list(partition_index()["species"])


@functools.lru_cache(maxsize=1)
def _all_levels() -> dict[str, pd.DataFrame]:
    from compquant.atomic._cache import cached

    path = _data_dir() / "levels.csv.gz"
    return cached("levels", [path], lambda: _read_levels(path))


def _read_levels(path: Path) -> dict[str, pd.DataFrame]:
    df = pd.read_csv(path, dtype={"species": object, "source": object})
    df["g"] = df["g"].astype(int)
    return {k: g.drop(columns="species").reset_index(drop=True) for k, g in df.groupby("species", sort=False)}


@functools.lru_cache(maxsize=1)
def _all_tabulated() -> dict[str, tuple[np.ndarray, np.ndarray]]:
    from compquant.atomic._cache import cached

    path = _data_dir() / "partition.csv.gz"
    return cached("partition", [path], lambda: _read_tabulated(path))


def _read_tabulated(path: Path) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    df = pd.read_csv(path, dtype={"species": object})
    out = {}
    for k, g in df.groupby("species", sort=False):
        t = g["t_k"].to_numpy(dtype=float)
        lu = np.log(g["u"].to_numpy(dtype=float))
        t.flags.writeable = False
        lu.flags.writeable = False
        out[k] = (t, lu)
    return out


def _index_row(species: str, asked: str | None = None) -> pd.Series:
    """Row of the shipped level index for ``species`` (canonical name); AtomicDataError if none."""
    idx = level_index()
    if species not in idx.index:
        raise AtomicDataError(
            f"no shipped energy levels for {asked or species!r}",
            where="partition function",
            fix="pass your own level table with levels=load_levels(path)",
        )
    return idx.loc[species]


@functools.cache
def _shipped_levels(species: str) -> pd.DataFrame:
    _index_row(species)
    return _all_levels()[species]


@functools.cache
def _shipped_arrays(species: str) -> tuple[np.ndarray, np.ndarray]:
    lev = _shipped_levels(species)
    e = lev["energy_ev"].to_numpy(dtype=float).copy()
    g = lev["g"].to_numpy(dtype=float).copy()
    e.flags.writeable = False
    g.flags.writeable = False
    return e, g


def levels(species: str) -> pd.DataFrame:
    """The shipped level table of ``species`` (a copy)."""
    return _shipped_levels(species_name(*parse_species(species))).copy()


@functools.cache
def _atomic_number(sym: str) -> int:
    return element(sym).Z


def _check_t(T, species: str) -> np.ndarray:
    T_arr = np.asarray(T, dtype=float)
    if not np.all(np.isfinite(T_arr)) or np.any(T_arr <= 0):
        raise AtomicDataError(
            "temperature must be finite and > 0 K",
            where=f"partition function of {species}",
            fix="pass T in kelvin",
        )
    return T_arr


def partition_function(
    species: str,
    T,
    *,
    levels: pd.DataFrame | None = None,
    lowering_ev=0.0,
    ionisation_ev: float | None = None,
):
    """Internal partition function U(T) of ``species`` by level summation.

    ``U(T) = sum g_j exp(-E_j / (k_B T))`` over levels with
    ``E_j < E_ion - lowering_ev`` (see the module docstring).

    Parameters
    ----------
    species : str
        ``"Cu I"``, ``"Fe II"``, ...
    T : float or array-like
        Temperature(s) in K (> 0).  Array in -> array of the same shape out.
    levels : DataFrame, optional
        A table from :func:`load_levels`; default: the shipped table.
    lowering_ev : float or array-like
        Lowering of the ionisation energy (eV, >= 0) used in the cut-off; an
        array is broadcast against ``T`` (one cut-off per temperature, e.g. a
        density-dependent lowering along a grid).
    ionisation_ev : float, optional
        Ionisation energy used for the cut-off; default the tabulated one.

    A bare nucleus (``"H II"``) has U = 1.  Valid 1 000-25 000 K for the shipped data (see the
    module docstring); ``lowering_ev`` applies to level sums only.
    """
    sym, ion = parse_species(species)
    name = species_name(sym, ion)
    if levels is None and ion == _atomic_number(sym) + 1:
        # a bare nucleus (H II) has no bound electron: U = 1 at every T
        T_arr = _check_t(T, species)
        return np.ones_like(T_arr) if T_arr.ndim else 1.0
    if levels is None and _method(name) == "tabulated":
        T_arr = _check_t(T, species)
        t, lu = _all_tabulated()[name]
        u = np.exp(np.interp(T_arr, t, lu))
        return u if u.ndim else float(u)
    if levels is None:
        e, g = _shipped_arrays(name)
    else:
        e = levels["energy_ev"].to_numpy(dtype=float)
        g = levels["g"].to_numpy(dtype=float)
    e_ion = ionisation_energy(name) if ionisation_ev is None else float(ionisation_ev)
    low = np.asarray(lowering_ev, dtype=float)
    if not np.all(np.isfinite(low)) or np.any(low < 0):
        raise AtomicDataError(
            f"lowering of the ionisation energy {lowering_ev!r} eV must be >= 0",
            where=f"partition function of {species}",
            fix="pass a value >= 0",
        )
    if np.any(low >= e_ion):
        raise AtomicDataError(
            f"lowering of the ionisation energy (up to {float(np.max(low))} eV) is not below the "
            f"ionisation energy ({e_ion} eV)",
            where=f"partition function of {species}",
            fix="the plasma is outside the range where a bound-level sum makes sense",
        )
    T_arr = _check_t(T, species)
    if low.ndim == 0:
        keep = e < e_ion - float(low)
        e, g = e[keep], g[keep]
        beta = 1.0 / (K_B_EV * T_arr.reshape(-1))
        u = np.exp(-np.outer(beta, e)) @ g
        u = u.reshape(T_arr.shape)
    else:  # one lowering per temperature (broadcast): cut-off differs per element
        try:
            T_b, low_b = np.broadcast_arrays(T_arr, low)
        except ValueError as exc:
            raise AtomicDataError(
                f"temperature shape {T_arr.shape} and lowering shape {low.shape} do not broadcast",
                where=f"partition function of {species}",
                fix="pass lowering_ev as a scalar or with the shape of T",
            ) from exc
        beta = 1.0 / (K_B_EV * T_b.reshape(-1))
        w = np.exp(-np.outer(beta, e)) * (e[None, :] < (e_ion - low_b.reshape(-1))[:, None])
        u = (w @ g).reshape(T_b.shape)
    return u if u.ndim else float(u)


@functools.lru_cache(maxsize=32)
def _dlnu_plan(names: tuple[str, ...]):
    """The data of :func:`dln_partition_functions_dln_t` for ``names``, looked up once: per species
    its kind (0 bare nucleus, 1 tabulated, 2 level sum), the tables, and the level sums' levels
    below the ionisation energy concatenated (as :func:`partition_function`'s default path)."""
    kinds, tabs, e_parts, g_parts, starts = [], {}, [], [], []
    n = 0
    for k, sp in enumerate(names):
        sym, ion = parse_species(sp)
        name = species_name(sym, ion)
        if ion == _atomic_number(sym) + 1:
            kinds.append(0)
        elif _method(name) == "tabulated":
            kinds.append(1)
            tabs[k] = _all_tabulated()[name]
        else:
            e, g = _shipped_arrays(name)
            keep = e < ionisation_energy(name)
            if not np.any(keep):
                raise AtomicDataError(f"no level of {sp} below its ionisation energy",
                                      where="partition function derivative", fix="check the level table")
            kinds.append(2)
            e_parts.append(e[keep])
            g_parts.append(g[keep])
            starts.append(n)
            n += int(keep.sum())
    e_all = np.concatenate(e_parts) if e_parts else np.empty(0)
    g_all = np.concatenate(g_parts) if g_parts else np.empty(0)
    return np.array(kinds), tabs, e_all, g_all, np.array(starts, dtype=np.intp)


def dln_partition_functions_dln_t(names: tuple[str, ...], T: float) -> np.ndarray:
    """Logarithmic temperature derivative d ln U/d ln T of each species of ``names`` at one
    temperature T (K), for :func:`partition_function`'s default path (shipped data, no lowering).

    Level sum U = Σ_j g_j e^{−E_j/kT} (Irwin 1981, ApJS 45, 621)::

        d ln U/d ln T = ⟨E⟩/kT = Σ_j g_j E_j e^{−E_j/kT} / (kT · U)

    (the mean excitation energy in units of kT; levels below the ionisation energy, as in the sum);
    a tabulated species, U = exp(interp(T, t, ln U)) (linear in ln U between the table's
    temperatures): T · (ln U_{k+1} − ln U_k)/(t_{k+1} − t_k) on the segment holding T (the right
    one at a table temperature), 0 outside the table (held at its ends); a bare nucleus, 0.
    Exact derivatives of the functions :func:`partition_function` evaluates; the tests compare
    them with central differences of it.
    """
    T = float(T)
    _check_t(np.array([T]), names[0] if names else "partition function derivative")
    kinds, tabs, e_all, g_all, starts = _dlnu_plan(tuple(names))
    out = np.zeros(len(names))
    if e_all.size:
        beta = 1.0 / (K_B_EV * T)
        w = g_all * np.exp(-beta * e_all)
        u = np.add.reduceat(w, starts)
        eu = np.add.reduceat(w * e_all, starts)
        out[kinds == 2] = beta * eu / u
    for k, (t, lu) in tabs.items():
        if t[0] <= T < t[-1]:
            i = int(np.searchsorted(t, T, side="right")) - 1
            out[k] = T * (lu[i + 1] - lu[i]) / (t[i + 1] - t[i])
    return out


def _method(name: str) -> str:
    idx = partition_index()
    if name not in idx.index:
        raise AtomicDataError(
            f"no shipped partition function for {name!r}",
            where="partition function",
            fix="pass your own level table with levels=load_levels(path)",
        )
    return str(idx.loc[name, "method"])


def partition_function_completeness(species: str, T):
    """``exp(-complete_to_ev / (k_B T))``: the Boltzmann factor at the energy up
    to which the shipped table of ``species`` is complete.  Multiplied by the
    statistical weight of the missing levels it bounds roughly the missing part
    of U; values below ~1e-3 mean the missing levels hardly matter.
    """
    name = species_name(*parse_species(species))
    T_arr = np.asarray(T, dtype=float)
    if _method(name) == "tabulated":  # complete by construction (published table)
        out = np.zeros_like(T_arr)
        return out if out.ndim else 0.0
    row = _index_row(name, species)
    out = np.exp(-float(row["complete_to_ev"]) / (K_B_EV * T_arr))
    return out if out.ndim else float(out)
