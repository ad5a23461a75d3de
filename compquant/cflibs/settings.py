"""``[cf]`` settings of a method file, validated into :class:`CFSettings`.

Every key is optional; the table is declared once as :data:`CF_TABLE` (compquant.settings):
unknown keys, wrong types and values out of range raise :class:`MethodError` naming the key.
The keys are documented in ``docs/calibration-free.md``.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

from compquant.errors import MethodError
from compquant.settings import Setting, Table

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
        """Validate a ``[cf]`` table (plain dict from the method file) through :data:`CF_TABLE`,
        then the rules that tie settings together."""
        if section is None:
            return cls()
        if isinstance(section, CFSettings):
            return section
        if not isinstance(section, dict):
            raise MethodError("[cf] must be a table", where=where, fix="write [cf] key = value lines")
        out = cls(**CF_TABLE.parse(section, where, MethodError))
        if out.ne_method == "fixed" and out.ne_fixed_cm3 is None:
            raise MethodError("ne_method = 'fixed' needs ne_fixed_cm3", where=f"{where}.ne_fixed_cm3",
                              fix="give the electron density in cm⁻³")
        if out.self_absorption == "curve_of_growth" and not out.plasma_length_mm:
            raise MethodError("curve_of_growth correction needs plasma_length_mm",
                              where=f"{where}.plasma_length_mm",
                              fix="give the plasma length in mm, or use self_absorption = 'columnar'")
        if out.t_min_k >= out.t_max_k:
            raise MethodError("t_min_k must be below t_max_k", where=where, fix="fix the range")
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


def _element_lists(val, where, error):
    """``[cf.elements_by_sample]``: each value a list of element symbols."""
    for k, v in val.items():
        if not isinstance(v, list) or not all(isinstance(x, str) for x in v):
            raise error("expected a list of element symbols", where=f"{where}.{k}", fix='e.g. ["Fe", "Cr"]')
    return {k: list(v) for k, v in val.items()}


_D = CFSettings()  # the defaults are the dataclass's (declared once, above)
_POS = {"min": 0, "min_open": True}
_FRAC = {"min": 0, "max": 1, "min_open": True, "fix": "e.g. 0.9"}
_NONNEG = {"min": 0, "fix": "a relative standard uncertainty, e.g. 0.03"}
_ELS = {"item": "str", "fix": 'e.g. ["Fe", "Cr"]'}


def _s(key, type_, doc, unit="", **kw):
    return Setting(key, type_, getattr(_D, key), doc, unit, **kw)


#: the ``[cf]`` table (docs/calibration-free.md has the equations behind each setting)
CF_TABLE = Table("cf", (
    _s("elements", "list", "elements to report; not set: all with lines", **_ELS),
    _s("exclude_elements", "list", "never in the closure", **_ELS),
    _s("exclude_flags", "list", "line-table flags that drop a line", **_ELS),
    _s("fit", "str", "Boltzmann or Saha-Boltzmann plot", choices=FIT_MODES),
    _s("ne_method", "str", "route to the electron density", choices=NE_METHODS),
    _s("ne_fixed_cm3", "float", "fixed electron density (ne_method = fixed, or the last route of auto)", "cm⁻³",
       **_POS),
    _s("ne_fixed_u_rel", "float", "relative standard uncertainty of the fixed nₑ", **_POS),
    _s("instrument_fwhm_nm", "float", "instrumental width; not set: from the run", "nm", min=0,
       fix="give a width in nm"),
    _s("u_rel_fwhm", "float", "relative u of measured widths", **_POS),
    _s("h_alpha_relation_u_rel", "float", "relative u of the H-alpha width-density relation", **_POS),
    _s("stark_param_u_rel", "float", "relative u of tabulated Stark widths", **_POS),
    _s("stark_t_exponent", "float", "a in (T/T_ref)^a of Stark widths"),
    _s("u_rel_floor", "float", "smallest relative u of a plot ordinate", **_POS),
    _s("scale_by_chi2", "bool", "Birge-ratio widening of uncertainties"),
    _s("include_ion3", "bool", "stage III where data exist"),
    _s("ionisation_lowering", "bool", "Debye-Hückel lowering of ionisation energies"),
    _s("resolving_power", "float", "λ/Δλ of the instrument; not set: from the run", **_POS),
    _s("t_start_k", "float", "start temperature of the fit", "K", **_POS),
    _s("t_min_k", "float", "lowest accepted temperature", "K", **_POS),
    _s("t_max_k", "float", "highest accepted temperature", "K", **_POS),
    _s("self_absorption", "str", "self-absorption treatment", choices=SA_METHODS),
    _s("plasma_length_mm", "float", "slab length for curve_of_growth", "mm", **_POS),
    _s("sa_flag_below", "float", "lines with SA factor below are flagged", **_FRAC),
    _s("sa_width_from_measured", "bool", "line widths for self-absorption from the measured FWHM"),
    _s("stark_fallback_fwhm_nm", "float", "assumed Stark FWHM of lines without data", "nm", **_POS),
    _s("stark_fallback_ne_cm3", "float", "nₑ at which stark_fallback_fwhm_nm holds", "cm⁻³", **_POS),
    _s("sa_min_factor", "float", "lines with a smaller SA factor are dropped", **_FRAC),
    _s("fixed", "table", "[cf.fixed] element = mass fraction (g/g) held fixed (one element at most)", "g/g",
       item="float", fix="[cf.fixed] Fe = 0.68"),
    _s("missing", "str", "an element without usable lines: omit it or stop", choices=MISSING),
    _s("mc_draws", "int", "Monte Carlo draws", min=0, max=100000, fix="e.g. 300 (at most 100000)"),
    _s("mc_include_aki", "bool", "draw A_ki within their accuracy grades"),
    _s("seed", "int", "seed of the Monte Carlo draws", min=0, fix="e.g. 300"),
    _s("lte_f", "float", "LTE criterion: McWhirter factor", **_POS),
    _s("lte_gaunt", "float", "LTE criterion: Gaunt factor", **_POS),
    _s("lte_transient_ratio", "float", "LTE criterion: relaxation time / gate delay at most", **_POS),
    _s("lte_diffusion_ratio", "float", "LTE criterion: diffusion length / gradient length at most", **_POS),
    _s("gradient_length_mm", "float", "gradient length of the plume for the diffusion criterion", "mm", **_POS),
    _s("one_point_standard", "str", "standard for the one-point calibration"),
    _s("standards_file", "str", "standards CSV for the one-point calibration"),
    _s("elements_by_sample", "table", '[cf.elements_by_sample] "MG-*" = ["Mg", "Al"]: element list by sample-id '
       "pattern", check=_element_lists, fix='[cf.elements_by_sample] "MG-*" = ["Mg", "Al", "Zn", "Mn"]'),
    _s("min_lines_per_element", "int", "lines an element needs (rule 1, §5a)", min=1, fix="e.g. 2"),
    _s("single_line_min_snr", "float", "SNR a single-line element needs", **_POS),
    _s("weak_element_closure_max", "float", "largest closure share of weak elements", **_FRAC),
    _s("outlier_sigma", "float", "residual limit of outlying lines (rule 2)", **_POS),
    _s("upper_limit_sigma", "float", "limit of non-detections used as upper limits (rule 3)", **_POS),
    _s("collapsed_fwhm_fraction", "float", "a fitted FWHM below this fraction of the instrument width failed",
       **_FRAC),
    _s("max_line_fwhm_nm", "float", "a fitted FWHM above this failed", "nm", **_POS),
    _s("ne_agreement_factor", "float", "nₑ routes agree within this factor (§4a)", **_POS),
    _s("t_species_tolerance", "float", "species temperatures agree within this fraction", **_POS),
    _s("t_thin_tolerance", "float", "thin-line temperature agrees within this fraction", **_POS),
    _s("sa_fit_p_min", "float", "smallest χ² p-value of a self-absorption fit", **_POS),
    _s("plausible_length_mm", "list", "[low, high] plausible slab length", "mm", item="float",
       fix="e.g. [0.01, 5.0]"),
    _s("plausible_ne_cm3", "list", "[low, high] plausible electron density", "cm⁻³", item="float",
       fix="e.g. [1e14, 1e19]"),
    _s("mc_partition_u_rel", "float", "relative u of partition functions (Monte Carlo)", **_NONNEG),
    _s("mc_sa_u_rel", "float", "relative u of self-absorption factors (Monte Carlo)", **_NONNEG),
    _s("response_u_rel", "float", "relative u of the response curve (Monte Carlo)", **_NONNEG),
    _s("response_basis", "str", "basis of the run's response when the run does not record it", choices=BASES),
), "Calibration-free analysis (docs/calibration-free.md).", "compquant.cflibs",
    notes=("ne_method = \"fixed\" needs ne_fixed_cm3; self_absorption = \"curve_of_growth\" needs "
           "plasma_length_mm; t_min_k < t_max_k; plausible ranges are [low, high] with 0 < low < high; "
           "[cf.fixed] holds one element with 0 < w < 1.",))


__all__ = ["BASES", "CF_TABLE", "CFSettings", "FIT_MODES", "MISSING", "NE_METHODS", "SA_METHODS"]
