"""LTE composition solver: (T, n_e, elemental fractions) -> density of every species.

For each element the stage ratios follow the Saha equation
(:func:`compquant.plasma.saha.saha_ratio`); with r_1 = 1 and
r_{z+1} = r_z * S_z(T, n_e) the fraction of the element in stage z is
f_z = r_z / sum_z r_z.  Charge neutrality (quasi-neutrality, e.g. Griem 1964,
sec. 6-1) fixes the total density of heavy particles n_h::

    n_e = n_h * sum_el x_el * sum_z (z - 1) f_{el,z}

so that the density of species (el, z) is ``n_h x_el f_{el,z}`` (cm^-3).  The
Debye-Hueckel lowering depends on T and n_e only (electron Debye length), so no
iteration is needed; the solution satisfies neutrality to rounding.

The solver is data-agnostic: give ``partition_function(species, T)`` and
``ionisation_energy(species)`` callables (species named ``"Cu I"``,
``"Cu II"`` ...), or leave them ``None`` to use :mod:`compquant.atomic`.
Every function broadcasts over arrays of T and n_e (e.g. one value per shot).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np

from compquant.atomic.elements import species_name
from compquant.errors import PhysicsError
from compquant.plasma.saha import ionisation_lowering_ev, saha_ratio

#: stages this solver handles (it builds names with :func:`compquant.atomic.species_name`)
ROMAN = ("I", "II", "III", "IV")


def species_stage(species: str) -> int:
    """``"Cu II" -> 2`` (stage 1 = neutral) for the solver's own keys, any element symbol
    (toy elements too: the solver is data-agnostic); names are built by
    :func:`compquant.atomic.species_name`, strict parsing is :func:`compquant.atomic.parse_species`."""
    return ROMAN.index(species.split()[1]) + 1


def mass_to_number_fractions(mass_fractions: Mapping[str, float], masses_u: Mapping[str, float]) -> dict:
    """Number (atom) fractions from mass fractions: ``x_i = (w_i/M_i) / sum_j (w_j/M_j)``.

    ``masses_u`` are atomic masses in u.  The result sums to 1 whatever the sum of
    the mass fractions (they are normalised).
    """
    moles = {}
    for el, w in mass_fractions.items():
        if el not in masses_u:
            raise PhysicsError(
                f"no atomic mass for element {el!r}", where="composition", fix="give its mass or remove the element"
            )
        w = float(w)
        if not np.isfinite(w) or w < 0:
            raise PhysicsError(
                f"mass fraction of {el} is {w}", where="composition", fix="mass fractions must be finite and >= 0"
            )
        moles[el] = w / float(masses_u[el])
    total = sum(moles.values())
    if total <= 0:
        raise PhysicsError(
            "composition has no element with a positive mass fraction",
            where="composition",
            fix="give at least one positive mass fraction",
        )
    return {el: m / total for el, m in moles.items()}


def number_to_mass_fractions(number_fractions: Mapping[str, float], masses_u: Mapping[str, float]) -> dict:
    """Mass fractions from number fractions: ``w_i = x_i M_i / sum_j x_j M_j``."""
    mass = {el: float(x) * float(masses_u[el]) for el, x in number_fractions.items()}
    total = sum(mass.values())
    return {el: m / total for el, m in mass.items()}


def _default_partition():
    from compquant.atomic import partition_function

    return partition_function


def _default_ionisation():
    from compquant.atomic import ionisation_energy

    return ionisation_energy


@dataclass(frozen=True)
class LTEState:
    """Result of :func:`solve_lte`.  Densities in cm^-3, arrays of the broadcast T/n_e shape.

    Attributes
    ----------
    temperature_k, ne_cm3 : ndarray
    n_heavy_cm3 : ndarray
        Total density of atoms and ions (all elements, all stages).
    densities : dict species -> ndarray
        Number density of each species (``"Cu I"``, ``"Cu II"`` ...).
    partition : dict species -> ndarray
        U_s(T) used.
    stage_fraction : dict species -> ndarray
        Fraction of its element in that stage.
    lowering_ev : dict species -> ndarray
        Ionisation-energy lowering applied to the ionisation *from* that species.
    number_fractions : dict element -> float
    """

    temperature_k: np.ndarray
    ne_cm3: np.ndarray
    n_heavy_cm3: np.ndarray
    densities: dict
    partition: dict
    stage_fraction: dict
    lowering_ev: dict
    number_fractions: dict = field(default_factory=dict)

    def element_density(self, element: str) -> np.ndarray:
        """Total density of one element over its stages (cm^-3)."""
        return sum(v for k, v in self.densities.items() if k.split()[0] == element)

    def charge_density(self) -> np.ndarray:
        """``sum_s (z_s - 1) n_s`` (cm^-3): equals n_e when neutrality holds."""
        total = np.zeros_like(self.n_heavy_cm3)
        for sp, n in self.densities.items():
            z = species_stage(sp)
            total = total + (z - 1) * n
        return total


#: atomic numbers of the elements that can be fully stripped within max_stage <= 3
_LIGHT_Z = {"H": 1, "He": 2}


def _partition(partition_function, element, stage, t):
    """U of a species; a bare nucleus (e.g. H II) has U = 1 exactly."""
    if _LIGHT_Z.get(element) == stage - 1:
        return np.ones_like(np.asarray(t, dtype=float))
    return partition_function(species_name(element, stage), t)


def stage_fractions(
    temperature_k,
    ne_cm3,
    element: str,
    *,
    partition_function: Callable,
    ionisation_energy: Callable,
    max_stage: int = 2,
    lowering: bool = True,
):
    """Fractions of one element in stages 1..max_stage, plus U and lowering per stage.

    Returns ``(fractions, partitions, lowerings)``: lists indexed by stage - 1 of
    arrays with the broadcast shape of T and n_e.
    """
    t = np.asarray(temperature_k, dtype=float)
    ne = np.asarray(ne_cm3, dtype=float)
    shape = np.broadcast(t, ne).shape
    u = [
        np.broadcast_to(np.asarray(_partition(partition_function, element, z, t), float), shape)
        for z in range(1, max_stage + 1)
    ]
    ratios = [np.ones(shape)]
    lows = []
    for z in range(1, max_stage):
        e_ion = float(ionisation_energy(species_name(element, z)))
        d = ionisation_lowering_ev(t, ne, charge_produced=z) if lowering else np.zeros(shape)
        d = np.broadcast_to(d, shape)
        lows.append(d)
        ratios.append(ratios[-1] * saha_ratio(t, ne, u[z - 1], u[z], e_ion, d))
    lows.append(np.zeros(shape))
    total = sum(ratios)
    return [r / total for r in ratios], u, lows


def solve_lte(
    temperature_k,
    ne_cm3,
    number_fractions: Mapping[str, float],
    *,
    partition_function: Callable | None = None,
    ionisation_energy: Callable | None = None,
    max_stage: int = 2,
    lowering: bool = True,
) -> LTEState:
    """Species densities in LTE at given T (K) and n_e (cm^-3) with charge neutrality.

    ``number_fractions`` maps element symbol -> atom fraction (normalised here).
    ``max_stage`` 2 (I, II) or 3 (I, II, III; needs U and ionisation energy of
    stage II -> III).  ``lowering`` applies Debye-Hueckel ionisation-energy
    lowering (Griem 1964).  Equations: see the module docstring.
    """
    if max_stage not in (1, 2, 3):
        raise PhysicsError(
            f"max_stage must be 1, 2 or 3, not {max_stage}",
            where="solve_lte",
            fix="use 2 (neutral and singly ionised) unless the plasma is very hot",
        )
    t = np.asarray(temperature_k, dtype=float)
    ne = np.asarray(ne_cm3, dtype=float)
    if np.any(~np.isfinite(t)) or np.any(t <= 0) or np.any(~np.isfinite(ne)) or np.any(ne <= 0):
        raise PhysicsError(
            "temperature and electron density must be finite and > 0",
            where="solve_lte",
            fix="check the plasma conditions",
        )
    pf = partition_function or _default_partition()
    ie = ionisation_energy or _default_ionisation()
    xs = {el: float(x) for el, x in number_fractions.items() if float(x) > 0}
    tot = sum(xs.values())
    if tot <= 0:
        raise PhysicsError(
            "no element with a positive fraction", where="solve_lte", fix="give at least one positive number fraction"
        )
    xs = {el: x / tot for el, x in xs.items()}
    shape = np.broadcast(t, ne).shape
    per_el = {}
    mean_charge = np.zeros(shape)
    for el, x in xs.items():
        f, u, low = stage_fractions(
            t, ne, el, partition_function=pf, ionisation_energy=ie, max_stage=max_stage, lowering=lowering
        )
        per_el[el] = (f, u, low)
        mean_charge = mean_charge + x * sum((z) * f[z] for z in range(len(f)))
    if max_stage == 1 or np.any(mean_charge <= 0):
        raise PhysicsError(
            "no ions: charge neutrality cannot supply the electron density",
            where="solve_lte",
            fix="allow max_stage >= 2",
        )
    n_heavy = np.broadcast_to(ne, shape) / mean_charge
    dens, parts, fracs, lows = {}, {}, {}, {}
    for el, (f, u, low) in per_el.items():
        for z in range(1, max_stage + 1):
            sp = species_name(el, z)
            dens[sp] = n_heavy * xs[el] * f[z - 1]
            parts[sp] = u[z - 1]
            fracs[sp] = f[z - 1]
            lows[sp] = low[z - 1]
    return LTEState(
        temperature_k=np.broadcast_to(t, shape).copy(),
        ne_cm3=np.broadcast_to(ne, shape).copy(),
        n_heavy_cm3=n_heavy,
        densities=dens,
        partition=parts,
        stage_fraction=fracs,
        lowering_ev=lows,
        number_fractions=xs,
    )


__all__ = [
    "LTEState",
    "ROMAN",
    "mass_to_number_fractions",
    "number_to_mass_fractions",
    "solve_lte",
    "species_name",
    "species_stage",
    "stage_fractions",
]
