"""Energy-level tables and internal partition functions U(T).

The internal partition function of a species is the level sum

    U(T) = sum_j g_j exp(-E_j / (k_B T)),   over levels with E_j < E_ion - dE

with ``g_j = 2J + 1``, ``E_j`` in eV above the ground level, ``k_B`` from
scipy.constants (CODATA), ``E_ion`` the ionisation energy of the species
(:func:`~compquant.atomic.ionisation_energy`) and ``dE >= 0`` an optional
lowering of the ionisation energy (e.g. the Debye-Hückel lowering the plasma
module computes; default 0).  This is the usual truncated level sum (e.g.
Drawin & Felenbok 1965; Irwin 1981, ApJS 45, 621, discusses the cut-off).

Shipped tables ``compquant/data/atomic/levels/<El>_<ion>.csv`` (columns
``energy_ev, g, source``) list the low-lying levels of each species; the index
``levels/index.csv`` gives, per species, ``complete_to_ev``: the energy up to
which the table is meant to hold every level (fine-structure levels may be
merged into one term with the summed g, which changes U by far less than 1 %
at T >= 4000 K when the term splitting is small).  Levels above
``complete_to_ev`` are missing, so U is an *under*-estimate by roughly
``sum_missing g exp(-E/kT)``; :func:`partition_function_completeness` gives
Boltzmann factor ``exp(-complete_to_ev / kT)`` as a rough guide.  Validity:
4 000-25 000 K; at the top of that range the sum for the complex neutral atoms
(Fe I, Ni I, Mn I, ...) depends noticeably on the levels near the ionisation
limit and on the cut-off, as for any truncated level sum.
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
    "partition_function",
    "partition_function_completeness",
    "level_index",
    "species_with_levels",
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
    raw = _read_csv(path, "level table")
    ln = raw.attrs["file_lines"]
    missing = [c for c in LEVEL_COLUMNS if c not in raw.columns]
    if missing:
        raise AtomicDataError(
            f"missing column(s) {', '.join(missing)}",
            where=str(path),
            fix="the header must hold energy_ev, g, source",
        )
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
def level_index() -> pd.DataFrame:
    """Index of shipped level tables: ``species, file, complete_to_ev, note``."""
    return pd.read_csv(_data_dir() / "levels" / "index.csv", keep_default_na=False).set_index("species", drop=False)


def species_with_levels() -> list[str]:
    """Species that have a shipped level table."""
    return list(level_index()["species"])


@functools.cache
def _shipped_levels(species: str) -> pd.DataFrame:
    idx = level_index()
    if species not in idx.index:
        raise AtomicDataError(
            f"no shipped energy levels for {species!r}",
            where="partition function",
            fix="pass your own level table with levels=load_levels(path)",
        )
    return load_levels(_data_dir() / "levels" / idx.loc[species, "file"])


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

    A bare nucleus (``"H II"``) has U = 1.  Valid 4 000-25 000 K for the shipped tables (see
    :func:`partition_function_completeness`).
    """
    sym, ion = parse_species(species)
    name = species_name(sym, ion)
    if levels is None and ion == _atomic_number(sym) + 1:
        # a bare nucleus (H II) has no bound electron: U = 1 at every T
        T_arr = _check_t(T, species)
        return np.ones_like(T_arr) if T_arr.ndim else 1.0
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


def partition_function_completeness(species: str, T):
    """``exp(-complete_to_ev / (k_B T))``: the Boltzmann factor at the energy up
    to which the shipped table of ``species`` is complete.  Multiplied by the
    statistical weight of the missing levels it bounds roughly the missing part
    of U; values below ~1e-3 mean the missing levels hardly matter.
    """
    name = species_name(*parse_species(species))
    idx = level_index()
    if name not in idx.index:
        raise AtomicDataError(
            f"no shipped energy levels for {species!r}",
            where="partition function",
            fix="pass your own level table with levels=load_levels(path)",
        )
    T_arr = np.asarray(T, dtype=float)
    out = np.exp(-float(idx.loc[name, "complete_to_ev"]) / (K_B_EV * T_arr))
    return out if out.ndim else float(out)
