"""The canonical JSON form of a certificate (schema ``compquant-certificate``, version 1).

Canonical means: the same certificate always gives the same bytes.  Keys are
sorted, indentation is two spaces, text is UTF-8 (non-ASCII kept, control
characters escaped by JSON), the file ends with one newline, and every float
is written as the shortest text that round-trips its value rounded to 12
significant digits (``repr(float(f"{x:.12g}"))``); NaN and infinities become
``null``.  The schema ships as package data
(``compquant/data/schemas/certificate-v1.schema.json``) and is described
field by field in ``docs/certificate.md``.
"""

from __future__ import annotations

import json
import math
from importlib import resources

from compquant.fileio import write_text_atomic
from compquant.report.certificate import (
    ITEM_ONLY_STATEMENT,
    LOD_STATEMENT,
    Certificate,
    flag_text,
    uncertainty_statement,
)

SCHEMA_NAME = "compquant-certificate"
SCHEMA_VERSION = 1
RELEASE_OK = "valid for release"
RELEASE_BLOCKED = "NOT VALID FOR RELEASE"


def _num(x):
    if x is None or isinstance(x, bool):
        return x
    x = float(x)
    return x if math.isfinite(x) else None


def _canon(obj, indent: int = 0) -> str:
    pad = "  " * (indent + 1)
    end = "  " * indent
    if obj is None:
        return "null"
    if obj is True:
        return "true"
    if obj is False:
        return "false"
    if isinstance(obj, int):
        return str(obj)
    if isinstance(obj, float):
        if not math.isfinite(obj):
            return "null"
        v = float(f"{obj:.12g}")
        if v == 0:
            return "0.0"
        return repr(v)
    if isinstance(obj, str):
        return json.dumps(obj, ensure_ascii=False)
    if isinstance(obj, dict):
        if not obj:
            return "{}"
        items = []
        for k in sorted(obj):
            if not isinstance(k, str):
                raise TypeError("JSON keys must be strings")
            items.append(f"{pad}{json.dumps(k, ensure_ascii=False)}: {_canon(obj[k], indent + 1)}")
        return "{\n" + ",\n".join(items) + "\n" + end + "}"
    if isinstance(obj, (list, tuple)):
        if not obj:
            return "[]"
        return "[\n" + ",\n".join(pad + _canon(v, indent + 1) for v in obj) + "\n" + end + "]"
    raise TypeError(f"cannot write {type(obj).__name__} to canonical JSON")


def canonical_json(obj) -> str:
    """Canonical JSON text of plain data (dict / list / str / int / float / bool / None)."""
    return _canon(obj) + "\n"


def review_fields(cert: Certificate, review) -> dict:
    """``authorised_by`` and ``review`` for the review state (None: the lab profile's signatory,
    no ``review`` key, as before the review step existed)."""
    if review is None:
        return {"authorised_by": {"name": cert.signatory.name, "title": cert.signatory.title}}
    if review.state == "released":
        who = {"name": review.reviewer, "title": review.role}
    else:
        who = {"name": "nobody yet (draft awaiting review)", "title": ""}
    return {"authorised_by": who, "review": review.as_dict()}


def certificate_to_dict(cert: Certificate, review=None) -> dict:
    """Plain-data form of a certificate, following schema version 1 (``review``: a
    :class:`compquant.record.states.Review` or None, see :func:`review_fields`)."""
    cert.validate()
    reasons = cert.release_reasons()
    results = []
    for r in cert.results:
        rep = r.reported()
        results.append(
            {
                "element": r.element,
                "mass_fraction": None if r.below_lod else _num(r.mass_fraction),
                "u": None if r.below_lod else _num(r.u),
                "U": None if r.below_lod else _num(r.U),
                "k": _num(r.k),
                "lod": _num(r.lod),
                "loq": _num(r.loq),
                "below_lod": bool(r.below_lod),
                "above_range": bool(r.above_range),
                "flags": r.all_flags(),
                "line_id": r.line_id,
                "basis": r.basis,
                "reported": {
                    "unit": rep.unit,
                    "value": rep.value,
                    "U": rep.U,
                    "lod": rep.lod,
                    "loq": rep.loq,
                },
            }
        )
    cal = None
    if cert.calibration is not None:
        c = cert.calibration
        cal = {
            "calibration_id": c.calibration_id,
            "created": c.created,
            "description": c.description,
            "file_name": c.file_name,
            "file_sha256": c.file_sha256,
            "curves": [
                {
                    "element": cv.element,
                    "line_id": cv.line_id,
                    "model": cv.model,
                    "internal_standard": cv.internal_standard,
                    "range_low": _num(cv.range_low),
                    "range_high": _num(cv.range_high),
                    "n_standards": cv.n_standards,
                    "r_squared": _num(cv.r_squared),
                    "lod_basis": cv.lod_basis,
                }
                for cv in c.curves
            ],
            "standards": [
                {
                    "standard_id": s.standard_id,
                    "element": s.element,
                    "mass_fraction": _num(s.mass_fraction),
                    "U": _num(s.U),
                    "k": _num(s.k),
                    "source": s.source,
                }
                for s in c.standards
            ],
        }
    plasma = None
    if cert.plasma is not None:
        p = cert.plasma
        plasma = {
            "temperature_K": _num(p.temperature_K),
            "U_temperature_K": _num(p.U_temperature_K),
            "electron_density_cm3": _num(p.electron_density_cm3),
            "U_electron_density_cm3": _num(p.U_electron_density_cm3),
            "method": p.method,
            "lte_checks": [
                {
                    "name": c.name,
                    "criterion": c.criterion,
                    "value": _num(c.value),
                    "limit": _num(c.limit),
                    "unit": c.unit,
                    "passed": bool(c.passed),
                }
                for c in p.lte_checks
            ],
        }
    qc = cert.qc
    qc_d = {
        "drift": {
            "applied": bool(qc.drift.applied),
            "description": qc.drift.description,
            "setup_samples": list(qc.drift.setup_samples),
            "factors": {k: _num(v) for k, v in qc.drift.factors.items()},
        },
        "check_samples": [
            {
                "sample_id": c.sample_id,
                "standard_ref": c.standard_ref,
                "element": c.element,
                "measured": _num(c.measured),
                "U_measured": _num(c.U_measured),
                "certified": _num(c.certified),
                "U_certified": _num(c.U_certified),
                "z": _num(c.z),
                "En": _num(c.En),
                "passed": bool(c.passed),
                "criterion": c.criterion,
            }
            for c in qc.check_samples
        ],
        "blank": qc.blank,
        "notes": list(qc.notes),
    }
    conf = None
    if cert.conformity is not None:
        cs = cert.conformity
        conf = {
            "specification": cs.specification,
            "grade": cs.grade,
            "source": cs.source,
            "decision_rule": cs.rule,
            "decision_rule_text": cs.rule_text,
            "outcome": cs.outcome,
            "statement": cs.statement,
            "elements": [
                {
                    "element": e.element,
                    "min": _num(e.lower),
                    "max": _num(e.upper),
                    "unit": e.unit,
                    "outcome": e.outcome,
                    "reason": e.reason,
                    "value": _num(e.value),
                    "U": _num(e.U),
                }
                for e in cs.elements
            ],
        }
    pv = cert.provenance
    doc = {
        "schema": SCHEMA_NAME,
        "schema_version": SCHEMA_VERSION,
        "title": cert.title,
        "number": cert.number,
        "revision": int(cert.revision),
        "issue_date": cert.issue_date,
        "release": {
            "valid": not reasons,
            "status": RELEASE_BLOCKED if reasons else RELEASE_OK,
            "reasons": reasons,
        },
        "laboratory": {
            "name": cert.lab.name,
            "address": list(cert.lab.address),
            "accreditation": cert.lab.accreditation,
            "site": cert.lab.site,
            "phone": cert.lab.phone,
            "email": cert.lab.email,
        },
        "client": {
            "name": cert.client.name,
            "address": list(cert.client.address),
            "reference": cert.client.reference,
        },
        "method": {
            "technique": cert.method.technique,
            "method_id": cert.method.method_id,
            "version": cert.method.version,
            "description": cert.method.description,
            "file_name": cert.method.file_name,
            "file_sha256": cert.method.file_sha256,
            "basis": cert.method.basis,
            "instrument": cert.method.instrument,
        },
        "sample": {
            "sample_id": cert.sample.sample_id,
            "description": cert.sample.description,
            "condition": cert.sample.condition,
            "received": cert.sample.received,
            "measured": cert.sample.measured,
            "n_shots": cert.sample.n_shots,
            "run_file": cert.sample.run_file,
        },
        "results": results,
        "statements": {
            "item_only": ITEM_ONLY_STATEMENT,
            "uncertainty": uncertainty_statement(cert.coverage_factors()),
            "lod": LOD_STATEMENT,
        },
        "flags_explained": [{"flag": f, "text": flag_text(f)} for f in cert.flags_used()],
        "deviations": list(cert.deviations),
        "remarks": list(cert.remarks),
        "calibration": cal,
        "plasma": plasma,
        "quality_control": qc_d,
        "conformity": conf,
        "detected_not_quantified": list(cert.detected_not_quantified),
        "figures": [{"title": f.title, "caption": f.caption, "kind": f.kind, "path": f.path} for f in cert.figures],
        "safety_notes": [{"title": n.title, "text": n.text} for n in cert.safety_notes],
        "provenance": {
            "software": pv.software,
            "version": pv.version,
            "issued_at": pv.issued_at,
            "run_sha256": pv.run_sha256,
            "files": [{"role": f.role, "name": f.name, "sha256": f.sha256} for f in pv.files],
            "parameters": {k: (_num(v) if isinstance(v, (int, float)) else v) for k, v in pv.parameters.items()},
        },
    }
    doc.update(review_fields(cert, review))
    return doc


def certificate_json(cert: Certificate, review=None) -> str:
    """Canonical JSON text of a certificate."""
    return canonical_json(certificate_to_dict(cert, review))


def write_certificate_json(cert: Certificate, path, review=None) -> None:
    """Write the canonical JSON atomically."""
    write_text_atomic(path, certificate_json(cert, review))


def read_certificate_json(path) -> dict:
    """Read a certificate JSON file and check its schema name and version (plain data back)."""
    from compquant.errors import InputError
    from compquant.fileio import require_file

    p = require_file(path, "certificate JSON")
    try:
        doc = json.loads(p.read_text("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"not a JSON file ({exc})", where=str(p), fix="give a certificate .json file") from exc
    if not isinstance(doc, dict) or doc.get("schema") != SCHEMA_NAME:
        raise InputError("not a compquant certificate", where=str(p), fix="give a certificate .json file")
    if doc.get("schema_version") != SCHEMA_VERSION:
        raise InputError(
            f"certificate schema version {doc.get('schema_version')!r} is not supported",
            where=str(p),
            fix=f"this compquant reads version {SCHEMA_VERSION}",
        )
    return doc


def load_schema() -> dict:
    """The JSON Schema (draft 2020-12) of certificate version 1, from package data."""
    text = resources.files("compquant").joinpath("data/schemas/certificate-v1.schema.json").read_text("utf-8")
    return json.loads(text)


__all__ = [
    "SCHEMA_NAME",
    "SCHEMA_VERSION",
    "RELEASE_OK",
    "RELEASE_BLOCKED",
    "canonical_json",
    "certificate_to_dict",
    "review_fields",
    "certificate_json",
    "write_certificate_json",
    "load_schema",
    "read_certificate_json",
]
