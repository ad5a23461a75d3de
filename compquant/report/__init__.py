"""Certificates of analysis: one :class:`Certificate` object, three forms (JSON, PDF, CSV).

- :mod:`~compquant.report.certificate` the data object and the certificate number;
- :mod:`~compquant.report.jsonform` canonical JSON (schema ``compquant-certificate`` v1);
- :mod:`~compquant.report.pdf` the PDF (ISO/IEC 17025:2017, 7.8);
- :mod:`~compquant.report.lims` one CSV per run for LIMS import;
- :mod:`~compquant.report.conformity` decision rules (ILAC G8:09/2019);
- :mod:`~compquant.report.release` the release rules (valid / not valid for release);
- :mod:`~compquant.report.config` lab profile and specification files;
- :mod:`~compquant.report.figures` spectrum, calibration curve and Boltzmann plot PNGs;
- :mod:`~compquant.report.safety` the safety notes.
"""

from __future__ import annotations

from compquant.report.certificate import (
    CalibrationInfo,
    Certificate,
    CheckResult,
    ClientInfo,
    CurveInfo,
    DriftInfo,
    FigureItem,
    FileRef,
    LabInfo,
    LTECheck,
    MethodInfo,
    PlasmaInfo,
    Provenance,
    QCInfo,
    ResultRow,
    SampleInfo,
    Signatory,
    StandardValue,
    certificate_number,
)
from compquant.report.config import (
    LabProfile,
    Specification,
    load_lab_profile,
    load_specification,
)
from compquant.report.conformity import assess_conformity, decide
from compquant.report.jsonform import certificate_json, certificate_to_dict, write_certificate_json
from compquant.report.lims import write_lims_csv
from compquant.report.pdf import render_pdf_bytes, write_pdf
from compquant.report.safety import SAFETY_NOTES, safety_markdown, safety_plain

__all__ = [
    "CalibrationInfo",
    "Certificate",
    "CheckResult",
    "ClientInfo",
    "CurveInfo",
    "DriftInfo",
    "FigureItem",
    "FileRef",
    "LabInfo",
    "LTECheck",
    "MethodInfo",
    "PlasmaInfo",
    "Provenance",
    "QCInfo",
    "ResultRow",
    "SampleInfo",
    "Signatory",
    "StandardValue",
    "certificate_number",
    "LabProfile",
    "Specification",
    "load_lab_profile",
    "load_specification",
    "assess_conformity",
    "decide",
    "certificate_json",
    "certificate_to_dict",
    "write_certificate_json",
    "write_lims_csv",
    "render_pdf_bytes",
    "write_pdf",
    "SAFETY_NOTES",
    "safety_markdown",
    "safety_plain",
]
