"""``[cf]`` settings of a method file, validated into :class:`CFSettings`.

Every key is optional; unknown keys and wrong types raise :class:`MethodError` naming the
key.  The keys are documented in ``docs/calibration-free.md``.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field, fields

from compquant.errors import MethodError

FIT_MODES = ("saha-boltzmann", "boltzmann")
NE_METHODS = ("auto", "h_alpha", "stark", "saha", "fixed")
SA_METHODS = ("none", "detect", "curve_of_growth", "columnar", "reference_line")
MISSING = ("omit", "error")
BASES = ("energy", "photon")


@dataclass
class CFSettings:
    """Settings of the calibration-free analysis (see docs/calibration-free.md)."""

    elements: list[str] | None = None
    exclude_elements: list[str] = field(default_factory=lambda: ["H", "He", "N", "O", "Ar"])
    exclude_flags: list[str] = field(default_factory=lambda: ["saturated", "not_found", "overlapped"])
    fit: str = "saha-boltzmann"
    ne_method: str = "auto"
    ne_fixed_cm3: float | None = None
    ne_fixed_u_rel: float = 0.1
    instrument_fwhm_nm: float | None = None
    u_rel_fwhm: float = 0.05
    h_alpha_relation_u_rel: float = 0.05
    stark_param_u_rel: float = 0.2
    stark_t_exponent: float = 0.0
    u_rel_floor: float = 0.005
    scale_by_chi2: bool = True
    include_ion3: bool = True
    ionisation_lowering: bool = True
    resolving_power: float | None = None
    t_start_k: float = 10000.0
    t_min_k: float = 3000.0
    t_max_k: float = 50000.0
    self_absorption: str = "detect"
    plasma_length_mm: float | None = None
    sa_flag_below: float = 0.9
    sa_width_from_measured: bool = False
    stark_fallback_fwhm_nm: float | None = None
    stark_fallback_ne_cm3: float = 1.0e17
    sa_min_factor: float = 0.1
    fixed: dict[str, float] = field(default_factory=dict)
    missing: str = "omit"
    mc_draws: int = 300
    mc_include_aki: bool = True
    seed: int = 20261201
    lte_f: float = 0.1
    lte_gaunt: float = 0.2
    lte_transient_ratio: float = 0.1
    lte_diffusion_ratio: float = 0.1
    gradient_length_mm: float | None = None
    one_point_standard: str | None = None
    standards_file: str | None = None
    # robust closure and failed measurements (docs/calibration-free.md §5a)
    elements_by_sample: dict[str, list[str]] = field(default_factory=dict)
    min_lines_per_element: int = 2
    single_line_min_snr: float = 10.0
    weak_element_closure_max: float = 0.2
    outlier_sigma: float = 4.0
    upper_limit_sigma: float = 3.0
    collapsed_fwhm_fraction: float = 0.5
    max_line_fwhm_nm: float | None = None
    # plausibility of the plasma solution (§4a)
    ne_agreement_factor: float = 2.0
    t_species_tolerance: float = 0.07
    t_thin_tolerance: float = 0.03
    sa_fit_p_min: float = 0.001
    plausible_length_mm: list[float] = field(default_factory=lambda: [0.01, 5.0])
    plausible_ne_cm3: list[float] = field(default_factory=lambda: [1.0e14, 1.0e19])
    # Monte Carlo inputs beyond intensities and A_ki (§8)
    mc_partition_u_rel: float = 0.03
    mc_sa_u_rel: float = 0.2
    response_u_rel: float = 0.0
    response_basis: str | None = None

    def to_dict(self) -> dict:
        return asdict(self)

    def elements_for(self, sample_id: str) -> list[str] | None:
        """Element list of one sample: the first ``elements_by_sample`` pattern (shell-style,
        :func:`fnmatch.fnmatchcase`) that matches the sample id, else ``elements``."""
        from fnmatch import fnmatchcase

        for pattern, els in self.elements_by_sample.items():
            if fnmatchcase(str(sample_id), pattern):
                return list(els)
        return self.elements

    @classmethod
    def from_section(cls, section: dict | None, where: str = "[cf]") -> CFSettings:
        """Validate a ``[cf]`` table (plain dict from the method file)."""
        if section is None:
            return cls()
        if isinstance(section, CFSettings):
            return section
        if not isinstance(section, dict):
            raise MethodError("[cf] must be a table", where=where, fix="write [cf] key = value lines")
        names = {f.name: f for f in fields(cls)}
        unknown = sorted(set(section) - set(names))
        if unknown:
            raise MethodError(f"unknown key(s) {', '.join(map(repr, unknown))}", where=where,
                              fix=f"allowed keys are {', '.join(sorted(names))}")
        out = cls()
        for key, val in section.items():
            setattr(out, key, _check(key, val, f"{where}.{key}"))
        if out.fit not in FIT_MODES:
            raise MethodError(f"fit must be one of {FIT_MODES}", where=f"{where}.fit", fix="pick one")
        if out.ne_method not in NE_METHODS:
            raise MethodError(f"ne_method must be one of {NE_METHODS}", where=f"{where}.ne_method",
                              fix="pick one")
        if out.ne_method == "fixed" and out.ne_fixed_cm3 is None:
            raise MethodError("ne_method = 'fixed' needs ne_fixed_cm3", where=f"{where}.ne_fixed_cm3",
                              fix="give the electron density in cm⁻³")
        if out.self_absorption not in SA_METHODS:
            raise MethodError(f"self_absorption must be one of {SA_METHODS}",
                              where=f"{where}.self_absorption", fix="pick one")
        if out.self_absorption == "curve_of_growth" and not out.plasma_length_mm:
            raise MethodError("curve_of_growth correction needs plasma_length_mm",
                              where=f"{where}.plasma_length_mm",
                              fix="give the plasma length in mm, or use self_absorption = 'columnar'")
        if out.missing not in MISSING:
            raise MethodError(f"missing must be one of {MISSING}", where=f"{where}.missing", fix="pick one")
        if out.t_min_k >= out.t_max_k:
            raise MethodError("t_min_k must be below t_max_k", where=where, fix="fix the range")
        if out.response_basis is not None and out.response_basis not in BASES:
            raise MethodError(f"response_basis must be one of {BASES}", where=f"{where}.response_basis",
                              fix="'energy' (radiance in W) or 'photon' (photon radiance)")
        for key in ("plausible_length_mm", "plausible_ne_cm3"):
            lo_hi = getattr(out, key)
            if len(lo_hi) != 2 or not (0 < lo_hi[0] < lo_hi[1]):
                raise MethodError("expected [low, high] with 0 < low < high", where=f"{where}.{key}",
                                  fix="e.g. [0.01, 5.0]")
        if len(out.fixed) > 1:
            raise MethodError("at most one element's content can be fixed", where=f"{where}.fixed",
                              fix="keep one element in [cf.fixed]")
        for el, v in out.fixed.items():
            if not (0.0 < v < 1.0):
                raise MethodError("a fixed content is a mass fraction between 0 and 1 (g/g)",
                                  where=f"{where}.fixed.{el}", fix="e.g. Fe = 0.68")
        return out


_FLOAT_POS = {"ne_fixed_u_rel", "u_rel_fwhm", "h_alpha_relation_u_rel", "stark_param_u_rel",
              "u_rel_floor", "t_start_k", "t_min_k", "t_max_k", "lte_f", "lte_gaunt",
              "lte_transient_ratio", "lte_diffusion_ratio", "single_line_min_snr", "outlier_sigma",
              "upper_limit_sigma", "ne_agreement_factor", "t_species_tolerance",
              "t_thin_tolerance", "sa_fit_p_min"}
_FLOAT_POS_OPT = {"ne_fixed_cm3", "plasma_length_mm", "gradient_length_mm", "resolving_power",
                  "stark_fallback_fwhm_nm", "stark_fallback_ne_cm3", "max_line_fwhm_nm"}
_FLOAT_NONNEG_OPT = {"instrument_fwhm_nm"}
_FRACTION = {"sa_flag_below", "sa_min_factor", "collapsed_fwhm_fraction", "weak_element_closure_max"}
_NONNEG = {"mc_partition_u_rel", "mc_sa_u_rel", "response_u_rel"}


def _num(val, where):
    if isinstance(val, bool) or not isinstance(val, (int, float)) or not math.isfinite(val):
        raise MethodError("expected a finite number", where=where, fix="write a number, e.g. 0.05")
    return float(val)


def _strlist(val, where):
    if not isinstance(val, list) or not all(isinstance(v, str) for v in val):
        raise MethodError("expected a list of element symbols", where=where, fix='e.g. ["Fe", "Cr"]')
    return list(val)


def _check(key, val, where):
    if key in ("elements",):
        return None if val is None else _strlist(val, where)
    if key in ("exclude_elements", "exclude_flags"):
        return _strlist(val, where)
    if key == "elements_by_sample":
        if not isinstance(val, dict):
            raise MethodError("expected a table sample-id pattern = list of elements", where=where,
                              fix='[cf.elements_by_sample] "MG-*" = ["Mg", "Al", "Zn", "Mn"]')
        return {str(k): _strlist(v, f"{where}.{k}") for k, v in val.items()}
    if key in ("plausible_length_mm", "plausible_ne_cm3"):
        if not isinstance(val, list):
            raise MethodError("expected [low, high]", where=where, fix="e.g. [0.01, 5.0]")
        return [_num(v, where) for v in val]
    if key == "min_lines_per_element":
        if isinstance(val, bool) or not isinstance(val, int) or val < 1:
            raise MethodError("expected a whole number ≥ 1", where=where, fix="e.g. 2")
        return int(val)
    if key in _NONNEG:
        v = _num(val, where)
        if v < 0:
            raise MethodError("must be ≥ 0", where=where, fix="a relative standard uncertainty, e.g. 0.03")
        return v
    if key in ("fit", "ne_method", "self_absorption", "missing", "one_point_standard", "standards_file",
               "response_basis"):
        if not isinstance(val, str):
            raise MethodError("expected text", where=where, fix="quote the value")
        return val
    if key in ("scale_by_chi2", "include_ion3", "ionisation_lowering", "sa_width_from_measured",
               "mc_include_aki"):
        if not isinstance(val, bool):
            raise MethodError("expected true or false", where=where, fix="write true or false")
        return val
    if key in ("mc_draws", "seed"):
        if isinstance(val, bool) or not isinstance(val, int) or val < 0:
            raise MethodError("expected a whole number ≥ 0", where=where, fix="e.g. 300")
        if key == "mc_draws" and val > 100000:
            raise MethodError("too many Monte Carlo draws (max 100000)", where=where, fix="e.g. 300")
        return int(val)
    if key == "fixed":
        if not isinstance(val, dict):
            raise MethodError("expected a table element = mass fraction", where=where,
                              fix="[cf.fixed] Fe = 0.68")
        return {str(k): _num(v, f"{where}.{k}") for k, v in val.items()}
    if key in _FLOAT_POS:
        v = _num(val, where)
        if v <= 0:
            raise MethodError("must be > 0", where=where, fix="give a positive number")
        return v
    if key in _FLOAT_POS_OPT:
        v = _num(val, where)
        if v <= 0:
            raise MethodError("must be > 0", where=where, fix="give a positive number")
        return v
    if key in _FLOAT_NONNEG_OPT:
        v = _num(val, where)
        if v < 0:
            raise MethodError("must be ≥ 0", where=where, fix="give a width in nm")
        return v
    if key in _FRACTION:
        v = _num(val, where)
        if not 0 < v <= 1:
            raise MethodError("must be in (0, 1]", where=where, fix="e.g. 0.9")
        return v
    if key == "stark_t_exponent":
        return _num(val, where)
    raise MethodError(f"unknown key {key!r}", where=where, fix="see docs/calibration-free.md")


__all__ = ["BASES", "CFSettings", "FIT_MODES", "MISSING", "NE_METHODS", "SA_METHODS"]
