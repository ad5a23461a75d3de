"""The certificate of analysis as one data object, rendered three ways (JSON, PDF, CSV).

Contents follow ISO/IEC 17025:2017 clause 7.8 (7.8.2.1 common items, 7.8.3 test
reports, 7.8.6 statements of conformity).  Mass fractions are g/g inside; the
display unit and rounding are decided once, in :meth:`ResultRow.reported`, so
all three forms print the same numbers.

Certificate number (deterministic, documented in ``docs/certificate.md``)::

    <PREFIX>-<YYYYMMDD>-<H>[-R<revision>]
    H = first 10 hex digits, upper case, of
        SHA-256( "<PREFIX>\\n<run sha256, lower case>\\n<sample id>\\n<issue date YYYY-MM-DD>"
                 [+ "\\n<result-set digest>"] )  (UTF-8)

The result-set digest (:func:`result_set_digest`) is the SHA-256 of the basis, the files the
results rest on and every number and flag printed, so two result sets -- e.g. the calibration
and the calibration-free certificate of one sample on one day -- never share a number, and the
same inputs always give the same number.  A revision keeps the number of the certificate it
supersedes and appends ``-R<n>``.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, field

from compquant.report.conformity import ConformityStatement
from compquant.report.numbers import UNIT_FACTOR, choose_unit, finite, round_sig, value_and_u
from compquant.report.safety import SAFETY_NOTES, SafetyNote

TITLE = "Certificate of analysis"

ITEM_ONLY_STATEMENT = (
    "The results relate only to the item tested, as received unless stated otherwise. "
    "This certificate shall not be reproduced except in full without the written "
    "approval of the laboratory."
)

UNCERTAINTY_STATEMENT = (
    "U is the expanded uncertainty of measurement, the standard uncertainty multiplied "
    "by a coverage factor k = 2, which for a normal distribution corresponds to a "
    "coverage probability of approximately 95 % (JCGM 100:2008)."
)

LOD_STATEMENT = (
    "LOD: limit of detection, 3 s_blank / slope; LOQ: limit of quantification, "
    '10 s_blank / slope (IUPAC practice). "< LOD" means the element was not detected '
    "above the LOD shown."
)

#: plain-word meanings of result and line flags
FLAG_TEXT = {
    "below_lod": "not detected: the signal is below the limit of detection; the LOD is given instead of a value",
    "lod_from_result": "not detected, but this result's own uncertainty is larger than the method's detection "
    "limit assumes (blank scatter only): the limit given is the upper end of its expanded uncertainty "
    "interval, not the method's LOD",
    "below_loq": "detected but below the limit of quantification: the value is indicative and has a "
    "large relative uncertainty",
    "above_range": "above the calibrated range: the value is above the highest standard's mass fraction "
    "(calibration section), or the curve is extrapolated beyond the highest standard, and is less reliable",
    "below_range": "below the calibrated range: the value is below the lowest standard's mass fraction "
    "(calibration section), or the curve is extrapolated below the lowest standard",
    "saturated": "a detector pixel of the line reached saturation in some shots; affected shots were "
    "treated as the method prescribes",
    "not_found": "the line's net signal did not stand out from its own noise (signal-to-noise ratio below "
    "the method's detection threshold), or its profile fit failed; with a calibration curve the "
    "blank-based LOD decides detection",
    "overlapped": "the analytical line overlaps a line of another element; the overlap was corrected "
    "or the value is less reliable",
    "low_snr": "the line's signal-to-noise ratio is low",
    "shifted": "the line centre is shifted from its table wavelength beyond the method tolerance",
    "single_shot": "the value rests on a single accepted shot; no shot-to-shot repeatability is known",
    "drift_corrected": "intensities were corrected for instrument drift with setup samples",
    "lte_not_met": "a criterion for local thermodynamic equilibrium was not met; calibration-free "
    "values are not reliable",
    "no_uncertainty": "no expanded uncertainty could be evaluated for this value",
    "closure": "calibration-free value: concentrations are normalised so that all quantified elements sum to 100 %",
    "interference_corrected": "the value is corrected for a spectral interference from another element",
    "negative_net": "the line's net signal is below zero in this sample: another element's line lies in the "
    "line's background windows, so the background was over-estimated; the calibration corrects this only "
    "as far as the sample resembles the standards, and U includes the size of that over-estimate (the value "
    "is indicative; measure on another line for a firm value)",
    "check_failed": "a check sample of this run failed its acceptance criterion; results are not valid for release",
    "no_drift_correction": "no drift standardisation: the run has no usable setup samples",
    "partial_drift_correction": "drift standardisation was possible for only some lines",
    "by_difference": "matrix element obtained by difference from 100 % (closure), not measured directly",
    "not_reported": "the element could not be quantified in this sample (see remarks)",
    "istd_not_positive": "the internal-standard line had no positive intensity in some shots; those "
    "shots were left out of the ratio",
    "outside_model_space": "multivariate (PLS) prediction outside the space spanned by the standards: an extrapolation",
    "cf_fit_poor": "calibration-free: the Boltzmann / Saha-Boltzmann fit is poor (chi-square test), the "
    "uncertainty is enlarged accordingly",
    "single_line": "calibration-free: the element rests on a single line",
    "self_absorbed": "a line of the element is self-absorbed (optically thick); its intensity is too low "
    "for its concentration",
    "self_absorption_corrected": "the line intensities were corrected for self-absorption",
    "sa_correction_capped": "the self-absorption correction reached its limit; the value may be low",
    "no_concentration_uncertainty": "calibration-free: no Monte Carlo uncertainty could be evaluated; U "
    "covers the plasma-temperature and density terms only",
    "mc_draws_invalid": "calibration-free: some Monte Carlo draws had no solution and were left out",
    "no_one_point_factor": "calibration-free: no one-point correction factor for this element",
    "fixed_content": "content fixed by the method (not measured)",
    "no_usable_lines": "the element has no usable line in this sample",
    "lte_mcwhirter_failed": "the McWhirter criterion for local thermodynamic equilibrium is not met",
    "lte_transient_failed": "the plasma changes faster than it relaxes to equilibrium (transient criterion not met)",
    "lte_inhomogeneous_failed": "the plasma is too inhomogeneous for local equilibrium (diffusion criterion not met)",
    "masked": "a detector pixel of the line is marked bad in some shots; those shots were left out of this line",
    "window_clips": "part of the line lies outside its integration window, so its intensity may be low",
    "wavelength_refs_disagree": "the sample's wavelength reference lines disagree about its wavelength shift; "
    "line positions are less certain",
    "not_determined": "calibration-free: the element could not be determined in this sample (too few or "
    "too weak lines, or lines that contradict each other); no value is given",
    "plasma_inconsistent": "calibration-free: the fitted plasma failed a physical check (see remarks); no "
    "mass fraction of this sample is certified",
    "closure_incomplete": "calibration-free: an element was left out of the 100 % closure, so the other "
    "values are high by its share",
    "species_temperatures_disagree": "calibration-free: one species' own temperature disagrees with the "
    "plasma temperature, so the single-temperature (equilibrium) model is in doubt",
    "species_mean_temperature_disagrees": "calibration-free: the species' own temperatures, taken together, "
    "disagree with the plasma temperature, so the single-temperature (equilibrium) model is in doubt",
    "line_widths_inconsistent": "calibration-free: the measured line widths are narrower than the fitted "
    "electron density allows; the electron density is in doubt",
    "sa_length_at_bound": "calibration-free: the fitted self-absorbing plasma length reached its search "
    "limit; the self-absorption model may not describe the lines",
}


def flag_text(flag: str) -> str:
    """Plain words for a flag; unknown flags are shown by name."""
    return FLAG_TEXT.get(flag, f"flag '{flag}' set by the analysis (see the method documentation)")


def certificate_number(
    prefix: str, run_sha256: str, sample_id: str, issue_date: str, revision: int = 0, result_digest: str = ""
) -> str:
    """Deterministic unique certificate number (see module docstring)."""
    parts = [prefix, run_sha256.lower(), sample_id, issue_date] + ([result_digest] if result_digest else [])
    key = "\n".join(parts).encode("utf-8", "surrogatepass")
    h = hashlib.sha256(key).hexdigest()[:10].upper()
    num = f"{prefix}-{issue_date.replace('-', '')}-{h}"
    if revision:
        num += f"-R{int(revision)}"
    return num


def result_set_digest(basis: str, files, rows) -> str:
    """SHA-256 (hex) of a result set: basis, ``(role, sha256)`` of every input file, and per
    result the element, value, U, LOD and flags (repr of the floats, so exact).

    Files the analysis wrote itself (role ending in ``(written)``, e.g. the calibration JSON of
    this run) are left out: they are derived from the inputs already counted, and their bytes
    hold where the inputs were read from, so the same inputs read from another folder give the
    same digest and the same certificate number."""
    h = hashlib.sha256()
    h.update(f"basis={basis}\n".encode())
    for f in sorted((str(f.role), str(f.sha256)) for f in files if not str(f.role).endswith("(written)")):
        h.update(f"file={f[0]}:{f[1]}\n".encode())
    for r in rows:
        line = f"{r.element}|{r.mass_fraction!r}|{r.U!r}|{r.lod!r}|{int(r.below_lod)}|{';'.join(r.all_flags())}"
        h.update((line + "\n").encode("utf-8", "surrogatepass"))
    return h.hexdigest()


def uncertainty_statement(ks) -> str:
    """The uncertainty statement for the coverage factors actually used (k = 2 or Student t)."""
    ks = sorted({round(float(k), 2) for k in ks if k is not None and math.isfinite(float(k))})
    if not ks or ks == [2.0]:
        return UNCERTAINTY_STATEMENT
    return (
        "U is the expanded uncertainty of measurement, the standard uncertainty multiplied by the coverage "
        "factor k given for each result (Student t for the effective degrees of freedom, JCGM 100:2008 "
        "G.4), which corresponds to a coverage probability of approximately 95 %."
    )


@dataclass
class LabInfo:
    """Issuing laboratory (7.8.2.1 b) and where the work was done."""

    name: str
    address: list[str]
    accreditation: str = ""
    site: str = ""
    phone: str = ""
    email: str = ""

    @classmethod
    def from_profile(cls, profile) -> LabInfo:
        return cls(
            profile.name,
            list(profile.address),
            profile.accreditation,
            profile.site,
            profile.phone,
            profile.email,
        )


@dataclass
class Signatory:
    """Person authorising the certificate (7.8.2.1 o)."""

    name: str
    title: str


@dataclass
class ClientInfo:
    name: str = ""
    address: list[str] = field(default_factory=list)
    reference: str = ""


@dataclass
class MethodInfo:
    """Identification of the method used (7.8.2.1 f)."""

    technique: str
    method_id: str
    version: str
    description: str = ""
    file_name: str = ""
    file_sha256: str = ""
    basis: str = "calibration"  # calibration | cf | pls
    instrument: str = ""


@dataclass
class SampleInfo:
    """Identification, description and condition of the item (7.8.2.1 g, h, i)."""

    sample_id: str
    description: str = ""
    condition: str = ""
    received: str = ""  # YYYY-MM-DD or "" (not recorded)
    measured: str = ""  # ISO 8601 date or date-time
    n_shots: int | None = None
    run_file: str = ""


@dataclass
class Reported:
    """A result as printed (text) in its display unit."""

    unit: str
    value: str  # "< LOD" when below the LOD
    U: str
    lod: str
    loq: str


@dataclass
class ResultRow:
    """One element's result; all mass fractions in g/g."""

    element: str
    mass_fraction: float | None
    U: float | None
    k: float = 2.0
    u: float | None = None
    lod: float | None = None
    loq: float | None = None
    below_lod: bool = False
    above_range: bool = False
    flags: list[str] = field(default_factory=list)
    line_id: str = ""
    basis: str = "calibration"
    unit: str = ""  # forced display unit ("%" or "mg/kg"); "" chooses automatically

    def display_unit(self) -> str:
        if self.unit:
            return self.unit
        return choose_unit(self.mass_fraction, self.lod, self.below_lod)

    def all_flags(self) -> list[str]:
        """Result flags plus those implied by the numbers, unique, in a stable order."""
        out = list(dict.fromkeys(self.flags))
        if self.below_lod and "below_lod" not in out:
            out.insert(0, "below_lod")
        if (
            not self.below_lod
            and finite(self.mass_fraction)
            and finite(self.loq)
            and self.mass_fraction < self.loq
            and "below_loq" not in out
        ):
            out.append("below_loq")
        if self.above_range and "above_range" not in out:
            out.append("above_range")
        return out

    def reported(self) -> Reported:
        unit = self.display_unit()
        f = UNIT_FACTOR[unit]
        lod = round_sig(self.lod * f, 2) if finite(self.lod) and self.lod > 0 else ""
        loq = round_sig(self.loq * f, 2) if finite(self.loq) and self.loq > 0 else ""
        if self.below_lod:
            return Reported(unit, "< LOD", "", lod, loq)
        if not finite(self.mass_fraction):
            return Reported(unit, "not determined", "", lod, loq)
        U = self.U * f if finite(self.U) else None
        v, u_txt = value_and_u(self.mass_fraction * f, U)
        return Reported(unit, v, u_txt, lod, loq)


@dataclass
class StandardValue:
    """A certified value of a reference material used for calibration."""

    standard_id: str
    element: str
    mass_fraction: float  # g/g
    U: float | None = None  # g/g
    k: float = 2.0
    source: str = ""


@dataclass
class CurveInfo:
    """One calibration curve (element, line, model, calibrated range in g/g)."""

    element: str
    line_id: str
    model: str = ""
    internal_standard: str = ""
    range_low: float | None = None
    range_high: float | None = None
    n_standards: int | None = None
    r_squared: float | None = None
    lod_basis: str = ""


@dataclass
class CalibrationInfo:
    """The calibration used (7.8.3 and the design's section 8)."""

    calibration_id: str
    created: str
    description: str = ""
    curves: list[CurveInfo] = field(default_factory=list)
    standards: list[StandardValue] = field(default_factory=list)
    file_name: str = ""
    file_sha256: str = ""


@dataclass
class LTECheck:
    """One criterion for local thermodynamic equilibrium and whether it was met."""

    name: str
    criterion: str
    value: float | None = None
    limit: float | None = None
    unit: str = ""
    passed: bool = True


@dataclass
class PlasmaInfo:
    """Plasma conditions of a calibration-free analysis."""

    temperature_K: float
    U_temperature_K: float | None = None
    electron_density_cm3: float | None = None
    U_electron_density_cm3: float | None = None
    method: str = ""
    lte_checks: list[LTECheck] = field(default_factory=list)


@dataclass
class DriftInfo:
    """Drift standardisation applied before quantification."""

    applied: bool = False
    description: str = ""
    setup_samples: list[str] = field(default_factory=list)
    factors: dict[str, float] = field(default_factory=dict)  # line id or element -> factor


@dataclass
class CheckResult:
    """A check sample (control material) measured in the run, per element.

    ``En = (x - X) / sqrt(U_x^2 + U_X^2)`` and ``z = (x - X) / sigma_pt`` with sigma_pt the
    target standard deviation (ISO 13528:2015; from memory of ISO 13528).
    """

    sample_id: str
    standard_ref: str
    element: str
    measured: float | None  # g/g
    U_measured: float | None
    certified: float
    U_certified: float | None
    z: float | None = None
    En: float | None = None
    passed: bool = True
    criterion: str = "|En| <= 1"
    flags: list[str] = field(default_factory=list)  # flags of the check sample's result
    loq: float | None = None  # LOQ of the element in the check sample (g/g)


@dataclass
class QCInfo:
    drift: DriftInfo = field(default_factory=DriftInfo)
    check_samples: list[CheckResult] = field(default_factory=list)
    blank: str = ""  # where s_blank for LOD came from
    notes: list[str] = field(default_factory=list)
    not_evaluated: list[str] = field(default_factory=list)  # check samples held by the run, not evaluated


@dataclass
class FigureItem:
    """A figure on the certificate: PNG bytes in memory, or a path to a PNG file."""

    title: str
    caption: str = ""
    kind: str = ""  # spectrum | calibration | boltzmann | other
    png: bytes | None = None
    path: str = ""


@dataclass
class FileRef:
    role: str  # run | method | standards | calibration | lab profile | specification | ...
    name: str
    sha256: str


@dataclass
class Provenance:
    """Where every number came from (the design's section 4)."""

    software: str
    version: str
    issued_at: str  # ISO 8601 UTC, e.g. 2026-12-01T21:00:00Z
    run_sha256: str
    files: list[FileRef] = field(default_factory=list)
    parameters: dict[str, str | int | float | bool] = field(default_factory=dict)


@dataclass
class Certificate:
    """Everything a certificate of analysis shows (ISO/IEC 17025:2017, 7.8)."""

    number: str
    issue_date: str  # YYYY-MM-DD
    lab: LabInfo
    signatory: Signatory
    client: ClientInfo
    method: MethodInfo
    sample: SampleInfo
    results: list[ResultRow]
    provenance: Provenance
    title: str = TITLE
    deviations: list[str] = field(default_factory=list)
    calibration: CalibrationInfo | None = None
    plasma: PlasmaInfo | None = None
    qc: QCInfo = field(default_factory=QCInfo)
    conformity: ConformityStatement | None = None
    detected_not_quantified: list[str] = field(default_factory=list)
    figures: list[FigureItem] = field(default_factory=list)
    safety_notes: list[SafetyNote] = field(default_factory=lambda: list(SAFETY_NOTES))
    remarks: list[str] = field(default_factory=list)
    release_blocks: list[str] = field(default_factory=list)  # reasons worked out from the whole run
    revision: int = 0
    supersedes: str = ""  # number of the certificate this revision replaces
    revision_reason: str = ""  # why it was revised

    # -- derived -------------------------------------------------------------------------------
    def release_reasons(self) -> list[str]:
        """Why the certificate is not valid for release (empty list: valid); the rules live in
        :mod:`compquant.report.release`."""
        from compquant.report.release import certificate_reasons

        return certificate_reasons(self)

    @property
    def valid_for_release(self) -> bool:
        return not self.release_reasons()

    def coverage_factors(self) -> list[float]:
        return sorted({float(r.k) for r in self.results if not r.below_lod and finite(r.k)})

    def flags_used(self) -> list[str]:
        out: dict[str, None] = {}
        for r in self.results:
            for f in r.all_flags():
                out[f] = None
        return list(out)

    def validate(self) -> None:
        """Internal consistency checks (a failure is a bug in the caller, not user input)."""
        if not self.number or not self.issue_date:
            raise ValueError("certificate needs a number and an issue date")
        for r in self.results:
            for name in ("mass_fraction", "U", "lod", "loq"):
                v = getattr(r, name)
                if v is not None and not (isinstance(v, (int, float)) and (math.isfinite(v) or math.isnan(v))):
                    raise ValueError(f"result {r.element}.{name} is not a number")
            if r.unit and r.unit not in UNIT_FACTOR:
                raise ValueError(f"result {r.element} has unknown unit {r.unit!r}")


__all__ = [
    "TITLE",
    "ITEM_ONLY_STATEMENT",
    "UNCERTAINTY_STATEMENT",
    "LOD_STATEMENT",
    "FLAG_TEXT",
    "flag_text",
    "uncertainty_statement",
    "certificate_number",
    "result_set_digest",
    "LabInfo",
    "Signatory",
    "ClientInfo",
    "MethodInfo",
    "SampleInfo",
    "Reported",
    "ResultRow",
    "StandardValue",
    "CurveInfo",
    "CalibrationInfo",
    "LTECheck",
    "PlasmaInfo",
    "DriftInfo",
    "CheckResult",
    "QCInfo",
    "FigureItem",
    "FileRef",
    "Provenance",
    "Certificate",
]
