"""Element data (Z, mass, ionisation energies) and species names.

The shipped table ``compquant/data/atomic/elements.csv`` (Z = 1..92) is made by
``compquant/atomic/_make_elements.py`` from the mendeleev database (IUPAC
standard atomic weights, NIST ionisation energies); the tests compare it with
mendeleev and, for masses, with periodictable.

Species are written ``"<Element> <roman>"`` with the spectroscopic ion stage:
``"Cu I"`` is neutral copper (ion = 1), ``"Cu II"`` singly ionised (ion = 2).
"""

from __future__ import annotations

import functools
import os
import re
import warnings
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

import numpy as np
import pandas as pd

from compquant.errors import AtomicDataError, InputError

__all__ = [
    "Element",
    "element",
    "element_table",
    "load_element_table",
    "ionisation_energy",
    "parse_species",
    "species_name",
    "known_symbols",
]

_ROMAN = ["I", "II", "III", "IV", "V", "VI", "VII", "VIII", "IX", "X"]
_SPECIES_RE = re.compile(r"^\s*([A-Z][a-z]?)\s*(I|II|III|IV|V|VI|VII|VIII|IX|X)\s*$")
ELEMENT_COLUMNS = ("Z", "symbol", "name", "mass_u", "ie1_ev", "ie2_ev", "source")


def _data_dir() -> Path:
    return Path(str(resources.files("compquant") / "data" / "atomic"))


@dataclass(frozen=True)
class Element:
    """One chemical element.

    Attributes: ``symbol``, ``Z``, ``name``, ``mass_u`` (standard atomic weight,
    u), ``ie1_ev`` and ``ie2_ev`` (first and second ionisation energies, eV;
    NaN where the stage does not exist, e.g. ``ie2_ev`` of H).
    """

    symbol: str
    Z: int
    name: str
    mass_u: float
    ie1_ev: float
    ie2_ev: float


def species_name(el: str, ion: int) -> str:
    """``species_name("Cu", 2) -> "Cu II"`` (ion stage 1 = neutral)."""
    try:
        ion_i = int(ion)
    except (TypeError, ValueError) as exc:
        raise AtomicDataError(
            f"ion stage {ion!r} is not an integer",
            where=f"species {el!r}",
            fix="use 1 for neutral atoms, 2 for singly ionised",
        ) from exc
    if not 1 <= ion_i <= len(_ROMAN) or ion_i != ion:
        raise AtomicDataError(
            f"ion stage {ion!r} is out of range",
            where=f"species {el!r}",
            fix="use 1 for neutral atoms, 2 for singly ionised, ...",
        )
    return f"{el} {_ROMAN[ion_i - 1]}"


def parse_species(species: str) -> tuple[str, int]:
    """``parse_species("Cu II") -> ("Cu", 2)``.

    Raises :class:`~compquant.errors.AtomicDataError` for a malformed name or
    an unknown element symbol.
    """
    m = _SPECIES_RE.match(str(species))
    if not m:
        raise AtomicDataError(
            f"cannot read species name {species!r}",
            where="species",
            fix='write the element symbol and a roman ion stage, e.g. "Cu I" or "Fe II"',
        )
    sym, roman = m.group(1), m.group(2)
    if sym not in known_symbols():
        raise AtomicDataError(
            f"unknown element symbol {sym!r}",
            where=f"species {species!r}",
            fix="use a chemical symbol with Z = 1..92, e.g. Cu, Zn, Fe",
        )
    return sym, _ROMAN.index(roman) + 1


def _read_csv(path: Path, what: str, required: tuple[str, ...] = ()) -> pd.DataFrame:
    """Read a user or shipped CSV table as strings; any read problem -> InputError, a column of
    ``required`` missing from the header -> AtomicDataError."""
    try:
        with warnings.catch_warnings():
            # a row with more fields than the header must not be silently cut or shifted
            warnings.simplefilter("error", pd.errors.ParserWarning)
            raw = pd.read_csv(
                path,
                dtype=str,
                keep_default_na=False,
                skipinitialspace=True,
                skip_blank_lines=False,
                index_col=False,
            )
    except pd.errors.ParserWarning as exc:
        raise InputError(
            f"a row of the {what} has more fields than the header",
            where=str(path),
            fix="check for unquoted commas (quote text that contains commas)",
        ) from exc
    except FileNotFoundError as exc:
        raise InputError(f"{what} not found", where=str(path), fix="check the path") from exc
    except (OSError, UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise InputError(
            f"cannot read {what} ({exc})", where=str(path), fix="save it as UTF-8 CSV with a header row"
        ) from exc
    raw.columns = [str(c).strip() for c in raw.columns]
    missing = [c for c in required if c not in raw.columns]
    if missing:
        raise AtomicDataError(
            f"missing column(s) {', '.join(missing)}",
            where=str(path),
            fix=f"the header must hold {', '.join(required)}",
        )
    raw = raw.apply(lambda col: col.str.strip())
    # drop blank lines but remember each row's line number in the file (header = line 1)
    raw = raw[(raw != "").any(axis=1)] if len(raw.columns) else raw
    lines = raw.index.to_numpy() + 2
    raw = raw.reset_index(drop=True)
    raw.attrs["file_lines"] = lines
    return raw


def _fail(path, row, col, what, fix):
    where = f"{path}, line {row}" + (f", column {col!r}" if col else "")
    raise AtomicDataError(what, where=where, fix=fix)


def load_element_table(path: str | os.PathLike | None = None) -> pd.DataFrame:
    """Load and validate an element table (columns ``Z, symbol, name, mass_u,
    ie1_ev, ie2_ev, source``); ``None`` loads the shipped table.

    Energies in eV, masses in u.  ``ie2_ev`` may be empty (NaN).  Returns a
    DataFrame indexed by ``symbol``.
    """
    if path is None:
        return _shipped_elements().copy()
    return _read_element_table(Path(path))


def _read_element_table(path: Path) -> pd.DataFrame:
    df = _read_csv(path, "element table", ELEMENT_COLUMNS)
    ln = df.attrs["file_lines"]
    out = pd.DataFrame(
        {
            "symbol": df["symbol"].str.strip(),
            "name": df["name"].str.strip(),
            "source": df["source"].str.strip(),
        }
    )
    for col, required in (("Z", True), ("mass_u", True), ("ie1_ev", True), ("ie2_ev", False)):
        vals = np.empty(len(df))
        for i, raw in enumerate(df[col].str.strip()):
            if raw == "" and not required:
                vals[i] = np.nan
                continue
            try:
                v = float(raw)
            except ValueError:
                _fail(path, ln[i], col, f"value {raw!r} is not a number", "write a plain decimal number")
            if not np.isfinite(v) or v <= 0:
                _fail(path, ln[i], col, f"value {raw!r} must be a positive number", "correct the value")
            vals[i] = v
        out[col] = vals
    if (out["Z"] != np.round(out["Z"])).any():
        i = int(np.flatnonzero(out["Z"] != np.round(out["Z"]))[0])
        _fail(path, ln[i], "Z", "Z must be a whole number", "correct the value")
    out["Z"] = out["Z"].astype(int)
    for i, sym in enumerate(out["symbol"]):
        if not re.fullmatch(r"[A-Z][a-z]?", sym):
            _fail(path, ln[i], "symbol", f"{sym!r} is not an element symbol", "write e.g. Cu, Zn, Fe")
    dup = out["symbol"].duplicated()
    if dup.any():
        i = int(np.flatnonzero(dup)[0])
        _fail(path, ln[i], "symbol", f"element {out['symbol'][i]!r} is listed twice", "keep one row")
    return out.set_index("symbol", drop=False)[list(ELEMENT_COLUMNS)]


@functools.lru_cache(maxsize=1)
def _shipped_elements() -> pd.DataFrame:
    return _read_element_table(_data_dir() / "elements.csv")


def element_table() -> pd.DataFrame:
    """The shipped element table (a copy), indexed by symbol."""
    return _shipped_elements().copy()


@functools.lru_cache(maxsize=1)
def known_symbols() -> frozenset[str]:
    """Symbols of the shipped element table (Z = 1..92)."""
    return frozenset(_shipped_elements()["symbol"])


def element(symbol: str) -> Element:
    """Return the :class:`Element` for a chemical symbol (``"Cu"``)."""
    return _element(str(symbol).strip())


@functools.cache
def _element(sym: str) -> Element:
    """:func:`element` of a stripped symbol, made once per symbol (the shipped table is fixed and
    :class:`Element` frozen; a lookup in the pandas table per call cost ~4 % of a
    calibration-free analysis).  Unknown symbols raise, and are not cached."""
    tab = _shipped_elements()
    if sym not in tab.index:
        raise AtomicDataError(
            f"unknown element symbol {sym!r}",
            where="element",
            fix="use a chemical symbol with Z = 1..92, e.g. Cu, Zn, Fe",
        )
    r = tab.loc[sym]
    return Element(
        symbol=sym,
        Z=int(r["Z"]),
        name=str(r["name"]),
        mass_u=float(r["mass_u"]),
        ie1_ev=float(r["ie1_ev"]),
        ie2_ev=float(r["ie2_ev"]),
    )


@functools.cache
def _ionisation_energy_cached(species: str) -> float:
    sym, ion = parse_species(species)
    el = element(sym)
    if ion == 1:
        return el.ie1_ev
    if ion == 2 and np.isfinite(el.ie2_ev):
        return el.ie2_ev
    nist = nist_ionisation_energies()
    name = species_name(sym, ion)
    if ion >= 3 and name in nist.index:
        return float(nist.loc[name, "ie_ev"])
    raise AtomicDataError(
        f"no ionisation energy for {species!r}",
        where="element table",
        fix="stages I-III are tabulated (a bare nucleus such as H II has none)",
    )


@functools.lru_cache(maxsize=1)
def nist_ionisation_energies() -> pd.DataFrame:
    """NIST ASD ionisation energies of stages I-III, Z = 1..92 (``compquant/data/atomic/
    ionisation.csv``: ``Z, species, ie_ev, uncertainty_ev, source``; copied by
    scripts/build_atomic_data.py from the table in the exojax 2.6.0 wheel), indexed by species."""
    return pd.read_csv(_data_dir() / "ionisation.csv").set_index("species", drop=False)


def ionisation_energy(species: str) -> float:
    """Energy (eV) to ionise ``species`` to the next stage.

    ``ionisation_energy("Cu I")`` is the first ionisation energy of Cu
    (Cu -> Cu+), ``ionisation_energy("Cu II")`` the second (Cu+ -> Cu2+).
    Values from the shipped element table (NIST via mendeleev) for stages I and
    II, and from the NIST ASD table :func:`nist_ionisation_energies` for stage III.
    """
    return _ionisation_energy_cached(str(species))
