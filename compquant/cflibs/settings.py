"""``[cf]`` settings of a method file, validated into :class:`CFSettings`.

Every key is optional; the table is declared once as :data:`CF_TABLE` (compquant.settings):
unknown keys, wrong types and values out of range raise :class:`MethodError` naming the key.
The keys are documented in ``docs/calibration-free.md``.
"""

from __future__ import annotations

from dataclasses import asdict

from compquant.errors import MethodError
from compquant.settings import Setting, Table, settings_dataclass

FIT_MODES = ("saha-boltzmann", "boltzmann")
NE_METHODS = ("auto", "h_alpha", "stark", "saha", "fixed")
SA_METHODS = ("none", "detect", "curve_of_growth", "columnar", "reference_line")
MISSING = ("omit", "error")
BASES = ("energy", "photon")


class _CFSettingsMethods:
    """Methods of :class:`CFSettings` (its fields are generated from :data:`CF_TABLE`)."""

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
    def from_section(cls, section: dict | None, where: str = "[cf]"):
        """Validate a ``[cf]`` table (plain dict from the method file) through :data:`CF_TABLE`,
        then the rules that tie settings together."""
        if section is None:
            return cls()
        if isinstance(section, cls):
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


_POS = {"min": 0, "min_open": True}
_FRAC = {"min": 0, "max": 1, "min_open": True, "fix": "e.g. 0.9"}
_NONNEG = {"min": 0, "fix": "a relative standard uncertainty, e.g. 0.03"}
_ELS = {"item": "str", "fix": 'e.g. ["Fe", "Cr"]'}


def _s(key, type_, default, doc, unit="", **kw):
    return Setting(key, type_, default, doc, unit, **kw)


#: the ``[cf]`` table (docs/calibration-free.md has the equations behind each setting)
CF_TABLE = Table("cf", (
    _s("elements", "list", None, "elements to report; not set: all with lines", **_ELS),
    _s("exclude_elements", "list", ['H', 'He', 'N', 'O', 'Ar'], "never in the closure", **_ELS),
    _s("exclude_flags", "list", ['saturated', 'not_found', 'overlapped'], "line-table flags that drop a line", **_ELS),
    _s("fit", "str", 'saha-boltzmann', "Boltzmann or Saha-Boltzmann plot", choices=FIT_MODES),
    _s("ne_method", "str", 'auto', "route to the electron density", choices=NE_METHODS),
    _s("ne_fixed_cm3", "float", None, "fixed electron density (ne_method = fixed, or the last route of auto)", "cm⁻³",
       **_POS),
    _s("ne_fixed_u_rel", "float", 0.1, "relative standard uncertainty of the fixed nₑ", **_POS),
    _s("instrument_fwhm_nm", "float", None, "instrumental width; not set: from the run", "nm", min=0,
       fix="give a width in nm"),
    _s("u_rel_fwhm", "float", 0.05, "relative u of measured widths", **_POS),
    _s("h_alpha_relation_u_rel", "float", 0.05, "relative u of the H-alpha width-density relation", **_POS),
    _s("stark_param_u_rel", "float", 0.2, "relative u of tabulated Stark widths", **_POS),
    _s("stark_t_exponent", "float", 0.0, "a in (T/T_ref)^a of Stark widths"),
    _s("u_rel_floor", "float", 0.005, "smallest relative u of a plot ordinate", **_POS),
    _s("scale_by_chi2", "bool", True, "Birge-ratio widening of uncertainties"),
    _s("include_ion3", "bool", True, "stage III where data exist"),
    _s("ionisation_lowering", "bool", True, "Debye-Hückel lowering of ionisation energies"),
    _s("resolving_power", "float", None, "λ/Δλ of the instrument; not set: from the run", **_POS),
    _s("t_start_k", "float", 10000.0, "start temperature of the fit", "K", **_POS),
    _s("t_min_k", "float", 3000.0, "lowest accepted temperature", "K", **_POS),
    _s("t_max_k", "float", 50000.0, "highest accepted temperature", "K", **_POS),
    _s("self_absorption", "str", 'detect', "self-absorption treatment", choices=SA_METHODS),
    _s("plasma_length_mm", "float", None, "slab length for curve_of_growth", "mm", **_POS),
    _s("sa_flag_below", "float", 0.9, "lines with SA factor below are flagged", **_FRAC),
    _s("sa_width_from_measured", "bool", False, "line widths for self-absorption from the measured FWHM"),
    _s("stark_fallback_fwhm_nm", "float", None, "assumed Stark FWHM of lines without data", "nm", **_POS),
    _s("stark_fallback_ne_cm3", "float", 1e+17, "nₑ at which stark_fallback_fwhm_nm holds", "cm⁻³", **_POS),
    _s("sa_min_factor", "float", 0.1, "lines with a smaller SA factor are dropped", **_FRAC),
    _s("fixed", "table", {}, "[cf.fixed] element = mass fraction (g/g) held fixed (one element at most)", "g/g",
       item="float", fix="[cf.fixed] Fe = 0.68"),
    _s("missing", "str", 'omit', "an element without usable lines: omit it or stop", choices=MISSING),
    _s("mc_draws", "int", 300, "Monte Carlo draws", min=0, max=100000, fix="e.g. 300 (at most 100000)"),
    _s("mc_include_aki", "bool", True, "draw A_ki within their accuracy grades"),
    _s("seed", "int", 20261201, "seed of the Monte Carlo draws", min=0, fix="e.g. 300"),
    _s("lte_f", "float", 0.1, "LTE criterion: McWhirter factor", **_POS),
    _s("lte_gaunt", "float", 0.2, "LTE criterion: Gaunt factor", **_POS),
    _s("lte_transient_ratio", "float", 0.1, "LTE criterion: relaxation time / gate delay at most", **_POS),
    _s("lte_diffusion_ratio", "float", 0.1, "LTE criterion: diffusion length / gradient length at most", **_POS),
    _s("gradient_length_mm", "float", None, "gradient length of the plume for the diffusion criterion", "mm", **_POS),
    _s("one_point_standard", "str", None, "standard for the one-point calibration"),
    _s("standards_file", "str", None, "standards CSV for the one-point calibration"),
    _s("elements_by_sample", "table", {}, '[cf.elements_by_sample] "MG-*" = ["Mg", "Al"]: element list by sample-id '
       "pattern", check=_element_lists, fix='[cf.elements_by_sample] "MG-*" = ["Mg", "Al", "Zn", "Mn"]'),
    _s("min_lines_per_element", "int", 2, "lines an element needs (rule 1, §5a)", min=1, fix="e.g. 2"),
    _s("single_line_min_snr", "float", 10.0, "SNR a single-line element needs", **_POS),
    _s("weak_element_closure_max", "float", 0.2, "largest closure share of weak elements", **_FRAC),
    _s("outlier_sigma", "float", 4.0, "residual limit of outlying lines (rule 2)", **_POS),
    _s("upper_limit_sigma", "float", 3.0, "limit of non-detections used as upper limits (rule 3)", **_POS),
    _s("collapsed_fwhm_fraction", "float", 0.5, "a fitted FWHM below this fraction of the instrument width failed",
       **_FRAC),
    _s("max_line_fwhm_nm", "float", None, "a fitted FWHM above this failed", "nm", **_POS),
    _s("ne_agreement_factor", "float", 2.0, "nₑ routes agree within this factor (§4a)", **_POS),
    _s("t_species_tolerance", "float", 0.07, "species temperatures agree within this fraction", **_POS),
    _s("t_species_mean_z", "float", 3.0, "largest |z| of the species' weighted-mean Boltzmann slope against the joint "
       "one (two-sided; 3: p = 0.0027), when the two temperatures also differ by more than t_species_tolerance (§4a)",
       **_POS),
    _s("t_thin_tolerance", "float", 0.03, "thin-line temperature agrees within this fraction", **_POS),
    _s("sa_fit_p_min", "float", 0.001, "smallest χ² p-value of a self-absorption fit", **_POS),
    _s("plausible_length_mm", "list", [0.01, 5.0], "[low, high] plausible slab length", "mm", item="float",
       fix="e.g. [0.01, 5.0]"),
    _s("plausible_ne_cm3", "list", [1.0e14, 1.0e19], "[low, high] plausible electron density", "cm⁻³",
       item="float",
       fix="e.g. [1e14, 1e19]"),
    _s("mc_partition_u_rel", "float", 0.03, "relative u of partition functions (Monte Carlo)", **_NONNEG),
    _s("mc_sa_u_rel", "float", 0.2, "relative u of self-absorption factors (Monte Carlo)", **_NONNEG),
    _s("response_u_rel", "float", 0.0, "relative u of the response curve (Monte Carlo)", **_NONNEG),
    _s("blend_correction", "bool", True, "correct window-integrated lines for predicted interference of other lines "
       "(thin modes and the slab self-absorption modes, §1b)"),
    _s("blend_u_rel", "float", 0.15, "relative u of a predicted interfering line's area beyond its A_ki grade (§1b)",
       **_NONNEG),
    _s("blend_min_self_share", "float", 0.5, "lines whose window is predicted less than this share their own are "
       "dropped (§1b)", **_FRAC),
    _s("blend_max_passes", "int", 6, "passes of the blend correction (§1b)", min=1, max=20, fix="e.g. 6"),
    _s("blend_tolerance", "float", 0.002, "the blend correction has settled when no line's area moves by more than "
       "this fraction (§1b)", **_POS),
    _s("response_basis", "str", None, "basis of the run's response when the run does not record it", choices=BASES),
    _s("width_stark_factor", "float", 2.5, "line_widths check: factor by which the assumed Stark widths may overstate "
       "the true ones (§4a)", min=1, fix="e.g. 2.5"),
    _s("width_ratio_min", "float", 0.85, "line_widths check: smallest median ratio of measured to least predicted "
       "FWHM (§4a)", **_FRAC),
), "Calibration-free analysis (docs/calibration-free.md).", "compquant.cflibs",
    notes=("ne_method = \"fixed\" needs ne_fixed_cm3; self_absorption = \"curve_of_growth\" needs "
           "plasma_length_mm; t_min_k < t_max_k; plausible ranges are [low, high] with 0 < low < high; "
           "[cf.fixed] holds one element with 0 < w < 1.",))


#: numpydoc docstring of :class:`CFSettings` (``settings_dataclass`` appends the "Fields" line)
_CF_DOC = """Settings of the calibration-free analysis (see docs/calibration-free.md).

The ``[cf]`` table of a method file, validated by :meth:`from_section` through :data:`CF_TABLE`
(every key with its type, default, unit and range: docs/method-reference.md), then the rules
that tie settings together: ``ne_method = "fixed"`` needs ``ne_fixed_cm3``;
``self_absorption = "curve_of_growth"`` needs ``plasma_length_mm``; ``t_min_k < t_max_k``.

Attributes
----------
fit : {"saha-boltzmann", "boltzmann"}, default "saha-boltzmann"
    Boltzmann or Saha-Boltzmann plot (docs/calibration-free.md §2).
ne_method : str, default "auto"
    Route to the electron density (§3); ``ne_fixed_cm3`` (cm⁻³) for ``"fixed"``.
t_min_k, t_max_k : float, default 3000.0, 50000.0
    Accepted temperature range, K.
self_absorption : str, default "detect"
    Self-absorption treatment (§6); ``plasma_length_mm`` (mm) for ``"curve_of_growth"``.
lte_f, lte_gaunt, lte_transient_ratio : float
    LTE criteria (§4): McWhirter factor, Gaunt factor, relaxation time / gate delay at most.
mc_draws, seed : int, default 300, 20261201
    Monte Carlo draws and their seed (§8).
elements, exclude_elements, exclude_flags : list
    Elements to report, elements never in the closure, line-table flags that drop a line.
fixed : dict
    ``[cf.fixed]`` element = mass fraction (g/g) held fixed (one element at most).

See Also
--------
analyse_cf : uses them.
compquant.settings.Table : the declaration the fields are generated from.

References
----------
.. [1] Ciucci et al., Appl. Spectrosc. 53 (1999) 960 (calibration-free LIBS).
.. [2] Cristoforetti et al., Spectrochim. Acta B 65 (2010) 86 (McWhirter criterion as written
   there; transient and inhomogeneous plasmas).
.. [3] compquant documentation: docs/calibration-free.md §10 (``[cf]`` settings) and the
   generated docs/method-reference.md.

Examples
--------
>>> from compquant import CFSettings
>>> s = CFSettings.from_section({"ne_method": "stark", "mc_draws": 200})
>>> s.fit, s.ne_method, s.self_absorption, s.mc_draws
('saha-boltzmann', 'stark', 'detect', 200)
"""

CFSettings = settings_dataclass(
    CF_TABLE, "CFSettings", module=__name__, bases=(_CFSettingsMethods,), doc=_CF_DOC)

__all__ = ["BASES", "CF_TABLE", "CFSettings", "FIT_MODES", "MISSING", "NE_METHODS", "SA_METHODS"]
