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
from compquant.report.release import (
    NOT_VALID_FOR_RELEASE,
    VALID_FOR_RELEASE,
    check_state,
    rule_of,
    sigma_pt_rel_of,
)

SCHEMA_NAME = "compquant-certificate"
SCHEMA_VERSION = 1
RELEASE_OK = VALID_FOR_RELEASE
RELEASE_BLOCKED = NOT_VALID_FOR_RELEASE


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


def _pick(obj, keys: str, conv: dict | None = None, rename: dict | None = None) -> dict:
    """``{key: value}`` for the space-separated ``keys``, each read from ``obj``'s attribute of the
    same name (or ``rename[key]``) and passed through ``conv[key]`` when given."""
    conv, rename = conv or {}, rename or {}
    out = {}
    for key in keys.split():
        v = getattr(obj, rename.get(key, key))
        out[key] = conv[key](v) if key in conv else v
    return out


def _as(kind, keys: str) -> dict:
    """``{key: kind}`` for the space-separated ``keys`` (the ``conv`` of :func:`_pick`)."""
    return dict.fromkeys(keys.split(), kind)


def _results_part(cert: Certificate) -> list[dict]:
    """``results``: one entry per element; a result below the LOD has no value, u or U."""
    out = []
    for r in cert.results:
        rep = r.reported()
        hide = bool(r.below_lod)
        entry = {
            "element": r.element,
            "mass_fraction": None if hide else _num(r.mass_fraction),
            "u": None if hide else _num(r.u),
            "U": None if hide else _num(r.U),
        }
        entry.update(_pick(r, "k lod loq", _as(_num, "k lod loq")))
        entry.update(_pick(r, "below_lod above_range", _as(bool, "below_lod above_range")))
        entry.update({"flags": r.all_flags(), "line_id": r.line_id, "basis": r.basis})
        entry["reported"] = _pick(rep, "unit value U lod loq")
        out.append(entry)
    return out


def _calibration_part(cert: Certificate) -> dict | None:
    """``calibration``: id, date, file, curves and the certified values of the standards used."""
    c = cert.calibration
    if c is None:
        return None
    out = _pick(c, "calibration_id created description file_name file_sha256")
    curve_keys = "element line_id model internal_standard range_low range_high n_standards r_squared lod_basis"
    curve_nums = _as(_num, "range_low range_high r_squared")
    out["curves"] = [_pick(cv, curve_keys, curve_nums) for cv in c.curves]
    std_nums = _as(_num, "mass_fraction U k")
    out["standards"] = [_pick(s, "standard_id element mass_fraction U k source", std_nums) for s in c.standards]
    return out


def _plasma_part(cert: Certificate) -> dict | None:
    """``plasma``: T and nₑ with their U (k = 2), the diagnostics and the LTE checks."""
    p = cert.plasma
    if p is None:
        return None
    nums = "temperature_K U_temperature_K electron_density_cm3 U_electron_density_cm3"
    out = _pick(p, nums + " method", _as(_num, nums))
    check_conv = {**_as(_num, "value limit"), "passed": bool}
    out["lte_checks"] = [_pick(c, "name criterion value limit unit passed", check_conv) for c in p.lte_checks]
    return out


def _quality_control_part(cert: Certificate) -> dict:
    """``quality_control``: drift standardisation, check samples with their state, blank, notes."""
    qc = cert.qc
    drift = _pick(qc.drift, "applied description setup_samples", {"applied": bool, "setup_samples": list})
    drift["factors"] = {k: _num(v) for k, v in qc.drift.factors.items()}
    check_keys = (
        "sample_id standard_ref element measured U_measured certified U_certified z En passed criterion flags loq"
    )
    check_conv = {**_as(_num, "measured U_measured certified U_certified z En loq"), "passed": bool, "flags": list}
    sigma_pt = sigma_pt_rel_of(cert)
    checks = [{**_pick(c, check_keys, check_conv), "state": check_state(c, sigma_pt)} for c in qc.check_samples]
    return {
        "drift": drift,
        "check_samples": checks,
        "not_evaluated": list(qc.not_evaluated),
        "blank": qc.blank,
        "notes": list(qc.notes),
    }


def _conformity_part(cert: Certificate) -> dict | None:
    """``conformity``: specification, decision rule, overall outcome and one entry per element."""
    cs = cert.conformity
    if cs is None:
        return None
    out = _pick(cs, "specification grade source")
    out.update({"decision_rule": cs.rule, "decision_rule_text": cs.rule_text})
    out.update(_pick(cs, "outcome statement"))
    el_nums = _as(_num, "min max value U")
    renamed = {"min": "lower", "max": "upper"}
    out["elements"] = [_pick(e, "element min max unit outcome reason value U", el_nums, renamed) for e in cs.elements]
    return out


def _release_part(reasons: list[str]) -> dict:
    """``release``: valid or not, its state name, the reasons and the rules they come from."""
    return {
        "valid": not reasons,
        "status": RELEASE_BLOCKED if reasons else RELEASE_OK,
        "reasons": reasons,
        "rules": sorted({rule_of(r) or "other" for r in reasons}),
    }


def _parties_part(cert: Certificate) -> dict:
    """``laboratory``, ``client``, ``method`` and ``sample``: who, how and what was tested."""
    return {
        "laboratory": _pick(cert.lab, "name address accreditation site phone email", {"address": list}),
        "client": _pick(cert.client, "name address reference", {"address": list}),
        "method": _pick(
            cert.method, "technique method_id version description file_name file_sha256 basis instrument"
        ),
        "sample": _pick(cert.sample, "sample_id description condition received measured n_shots run_file"),
    }


def _statements_part(cert: Certificate) -> dict:
    """``statements`` and ``flags_explained``: the fixed texts and the meaning of each flag used."""
    return {
        "statements": {
            "item_only": ITEM_ONLY_STATEMENT,
            "uncertainty": uncertainty_statement(cert.coverage_factors()),
            "lod": LOD_STATEMENT,
        },
        "flags_explained": [{"flag": f, "text": flag_text(f)} for f in cert.flags_used()],
    }


def _provenance_part(cert: Certificate) -> dict:
    """``provenance``: software, time of issue, SHA-256 of the run and of every file, parameters."""
    pv = cert.provenance
    out = _pick(pv, "software version issued_at run_sha256")
    out["files"] = [_pick(f, "role name sha256") for f in pv.files]
    out["parameters"] = {k: (_num(v) if isinstance(v, (int, float)) else v) for k, v in pv.parameters.items()}
    return out


def certificate_to_dict(cert: Certificate, review=None) -> dict:
    """Plain-data form of a certificate, following schema version 1 (``review``: a
    :class:`compquant.record.states.Review` or None, see :func:`review_fields`)."""
    cert.validate()
    doc = {
        "schema": SCHEMA_NAME,
        "schema_version": SCHEMA_VERSION,
        "title": cert.title,
        "number": cert.number,
        "revision": int(cert.revision),
        "issue_date": cert.issue_date,
        "release": _release_part(cert.release_reasons()),
        "supersedes": (
            {"number": cert.supersedes, "reason": cert.revision_reason} if cert.supersedes else None
        ),
        **_parties_part(cert),
        "results": _results_part(cert),
        **_statements_part(cert),
        "deviations": list(cert.deviations),
        "remarks": list(cert.remarks),
        "calibration": _calibration_part(cert),
        "plasma": _plasma_part(cert),
        "quality_control": _quality_control_part(cert),
        "conformity": _conformity_part(cert),
        "detected_not_quantified": list(cert.detected_not_quantified),
        "figures": [_pick(f, "title caption kind path") for f in cert.figures],
        "safety_notes": [_pick(n, "title text") for n in cert.safety_notes],
        "provenance": _provenance_part(cert),
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
