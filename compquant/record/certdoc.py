"""A certificate's JSON document (schema ``compquant-certificate`` v1) back into a Certificate.

The record keeps each certificate's canonical JSON; releasing a draft re-renders the final PDF and
JSON from it, with the reviewer's authorisation and the figures checked against their SHA-256.
``certificate_to_dict(certificate_from_dict(doc))`` gives ``doc`` back (tested), so the released
certificate carries exactly the numbers of the reviewed draft.
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
)
from compquant.report.conformity import ConformityStatement, ElementConformity
from compquant.report.safety import SafetyNote


def _results(doc: dict) -> list[ResultRow]:
    rows = []
    for r in doc["results"]:
        rows.append(ResultRow(
            r["element"], r["mass_fraction"], r["U"], k=r["k"], u=r["u"], lod=r["lod"], loq=r["loq"],
            below_lod=r["below_lod"], above_range=r["above_range"], flags=list(r["flags"]), line_id=r["line_id"],
            basis=r["basis"], unit=r["reported"]["unit"],
        ))
    return rows


def _calibration(c: dict | None) -> CalibrationInfo | None:
    if c is None:
        return None
    return CalibrationInfo(
        c["calibration_id"], c["created"], c["description"],
        [CurveInfo(v["element"], v["line_id"], v["model"], v["internal_standard"], v["range_low"], v["range_high"],
                   v["n_standards"], v["r_squared"], v["lod_basis"]) for v in c["curves"]],
        [StandardValue(s["standard_id"], s["element"], s["mass_fraction"], s["U"], s["k"], s["source"])
         for s in c["standards"]],
        c["file_name"], c["file_sha256"],
    )


def _plasma(p: dict | None) -> PlasmaInfo | None:
    if p is None:
        return None
    return PlasmaInfo(
        p["temperature_K"], p["U_temperature_K"], p["electron_density_cm3"], p["U_electron_density_cm3"], p["method"],
        [LTECheck(c["name"], c["criterion"], c["value"], c["limit"], c["unit"], c["passed"]) for c in p["lte_checks"]],
    )


def _qc(q: dict) -> QCInfo:
    d = q["drift"]
    return QCInfo(
        DriftInfo(d["applied"], d["description"], list(d["setup_samples"]), dict(d["factors"])),
        [CheckResult(c["sample_id"], c["standard_ref"], c["element"], c["measured"], c["U_measured"], c["certified"],
                     c["U_certified"], c["z"], c["En"], c["passed"], c["criterion"]) for c in q["check_samples"]],
        q["blank"], list(q["notes"]),
    )


def _conformity(c: dict | None) -> ConformityStatement | None:
    if c is None:
        return None
    return ConformityStatement(
        c["specification"], c["grade"], c["decision_rule"], c["decision_rule_text"],
        [ElementConformity(e["element"], e["min"], e["max"], e["unit"], e["outcome"], e["reason"], e["value"], e["U"])
         for e in c["elements"]],
        c["outcome"], c["statement"], c["source"],
    )


def certificate_from_dict(doc: dict) -> Certificate:
    """Rebuild the Certificate of a JSON document.  Figures keep their relative paths and no
    image: the caller loads (and checks) the PNG bytes before rendering."""
    lab, m, s, cl, pv = doc["laboratory"], doc["method"], doc["sample"], doc["client"], doc["provenance"]
    figures = [FigureItem(f["title"], f["caption"], f["kind"], None, f["path"]) for f in doc["figures"]]
    cert = Certificate(
        number=doc["number"],
        issue_date=doc["issue_date"],
        lab=LabInfo(lab["name"], list(lab["address"]), lab["accreditation"], lab["site"], lab["phone"], lab["email"]),
        signatory=Signatory(doc["authorised_by"]["name"], doc["authorised_by"]["title"]),
        client=ClientInfo(cl["name"], list(cl["address"]), cl["reference"]),
        method=MethodInfo(m["technique"], m["method_id"], m["version"], m["description"], m["file_name"],
                          m["file_sha256"], m["basis"], m["instrument"]),
        sample=SampleInfo(s["sample_id"], s["description"], s["condition"], s["received"], s["measured"],
                          s["n_shots"], s["run_file"]),
        results=_results(doc),
        provenance=Provenance(pv["software"], pv["version"], pv["issued_at"], pv["run_sha256"],
                              [FileRef(f["role"], f["name"], f["sha256"]) for f in pv["files"]],
                              dict(pv["parameters"])),
        title=doc["title"],
        deviations=list(doc["deviations"]),
        calibration=_calibration(doc["calibration"]),
        plasma=_plasma(doc["plasma"]),
        qc=_qc(doc["quality_control"]),
        conformity=_conformity(doc["conformity"]),
        detected_not_quantified=list(doc["detected_not_quantified"]),
        figures=figures,
        safety_notes=[SafetyNote(n["title"], n["text"]) for n in doc["safety_notes"]],
        remarks=list(doc["remarks"]),
        revision=int(doc["revision"]),
    )
    derived = set(cert.release_reasons())
    cert.release_blocks = [r for r in doc["release"]["reasons"] if r not in derived]
    return cert


__all__ = ["certificate_from_dict"]
