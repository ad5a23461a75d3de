"""Atomic reference data: line list, energy levels, partition functions, elements.

Public API (units: nm in standard air, eV, K, s^-1, cm^-3):

- :func:`load_line_list` -- the shipped line database (built from published compilations by
  ``scripts/build_atomic_data.py``, every row with source and grade, plus the lab overlay of
  :mod:`compquant.atomic.overlay`) or the user's own CSV, validated;
  :func:`lines_for` -- lines of a species or element in a wavelength window;
  :func:`find_line` -- resolve a line id within :data:`LINE_ID_TOLERANCE_NM`.
- :func:`partition_function` -- U(T) by level summation or from Barklem & Collet (2016);
  :func:`load_levels` -- the user's own level table; :func:`levels` -- shipped table.
- :func:`element` -> :class:`Element`; :func:`ionisation_energy`;
  :func:`load_element_table` -- shipped or user element table.
- :func:`parse_species`, :func:`species_name` -- ``"Cu II" <-> ("Cu", 2)``.
- :func:`aki_relative_uncertainty` (NIST grade -> bound),
  :func:`aki_standard_uncertainty` (bound / sqrt(3), rectangular).
- :func:`air_to_vacuum`, :func:`vacuum_to_air` -- Edlén/Birch & Downs form of
  Morton (2000, ApJS 130, 403).

Sources and conventions: ``docs/atomic-data.md``.  Every shipped row names its
published source and carries an accuracy grade on the NIST letter scale.
"""

from __future__ import annotations

from compquant.atomic.airvac import air_to_vacuum, refractive_index_air, vacuum_to_air
from compquant.atomic.elements import (
    Element,
    element,
    element_table,
    ionisation_energy,
    load_element_table,
    nist_ionisation_energies,
    parse_species,
    species_name,
)
from compquant.atomic.lines import (
    AKI_GRADES,
    LINE_COLUMNS,
    LINE_ID_TOLERANCE_NM,
    aki_relative_uncertainty,
    aki_standard_uncertainty,
    find_line,
    lines_for,
    load_line_list,
)
from compquant.atomic.partition import (
    K_B_EV,
    level_index,
    levels,
    load_levels,
    partition_function,
    partition_function_completeness,
    partition_index,
    species_with_levels,
    species_with_partition_function,
)

__all__ = [
    "AKI_GRADES",
    "LINE_ID_TOLERANCE_NM",
    "find_line",
    "nist_ionisation_energies",
    "partition_index",
    "species_with_partition_function",
    "K_B_EV",
    "LINE_COLUMNS",
    "Element",
    "aki_relative_uncertainty",
    "aki_standard_uncertainty",
    "air_to_vacuum",
    "element",
    "element_table",
    "ionisation_energy",
    "level_index",
    "levels",
    "lines_for",
    "load_element_table",
    "load_levels",
    "load_line_list",
    "parse_species",
    "partition_function",
    "partition_function_completeness",
    "refractive_index_air",
    "species_name",
    "species_with_levels",
    "vacuum_to_air",
]
