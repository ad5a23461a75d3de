"""What the review page reads from the record: read-only queries, and files found by id and hash.

Nothing here writes: the review actions call :mod:`compquant.record.review` directly.  A file is
served only when the record names it (a certificate file by its row id, a figure by its SHA-256
among the certificate's recorded figures) and only when the bytes on disk still have the SHA-256
the record holds; no path ever comes from the request.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import sqlalchemy as sa

from compquant.record import schema as S
from compquant.record.queries import run_chart_violations

C = S.certificates
R = S.runs


def list_runs(conn) -> list[dict]:
    """Every analysed run, newest first, with its number of samples and certificates per state."""
    runs = [dict(r) for r in conn.execute(sa.select(
        R.c.id, R.c.file_name, R.c.sha256, R.c.measured_at, R.c.analysed_at, R.c.analyst, R.c.method_id,
        R.c.method_version, R.c.basis).order_by(R.c.analysed_at.desc(), R.c.id.desc())).mappings()]
    n_samples = dict(conn.execute(sa.select(S.samples.c.run_id, sa.func.count()).group_by(S.samples.c.run_id)).all())
    states: dict[int, dict[str, int]] = {}
    for run_id, state, n in conn.execute(sa.select(C.c.run_id, C.c.state, sa.func.count())
                                         .group_by(C.c.run_id, C.c.state)).all():
        states.setdefault(run_id, {})[state] = n
    for r in runs:
        r["n_samples"] = n_samples.get(r["id"], 0)
        r["states"] = states.get(r["id"], {})
    return runs


def _certificate_summary(row) -> dict:
    d = dict(row)
    d["flags"] = json.loads(d["flags"])
    d["reasons"] = json.loads(d["reasons"])
    return d


def run_detail(conn, run_id: int) -> dict | None:
    """One run: its record row, samples (with their certificates), check samples, drift, chart tests."""
    run = conn.execute(sa.select(R).where(R.c.id == run_id)).mappings().first()
    if run is None:
        return None
    samples = [dict(r) for r in conn.execute(sa.select(S.samples).where(S.samples.c.run_id == run_id)
                                             .order_by(S.samples.c.id)).mappings()]
    n_res = dict(conn.execute(sa.select(S.results.c.sample_row, sa.func.count()).where(
        S.results.c.run_id == run_id).group_by(S.results.c.sample_row)).all())
    certs = [_certificate_summary(r) for r in conn.execute(sa.select(
        C.c.id, C.c.number, C.c.revision, C.c.sample_id, C.c.state, C.c.flags, C.c.reasons, C.c.valid_for_release,
        C.c.reviewer, C.c.reviewed_at).where(C.c.run_id == run_id).order_by(C.c.id)).mappings()]
    by_sample: dict[str, list[dict]] = {}
    for c in certs:
        by_sample.setdefault(c["sample_id"], []).append(c)
    for s in samples:
        s["n_results"] = n_res.get(s["id"], 0)
        s["certificates"] = by_sample.get(s["sample_id"], [])
    checks = [dict(r) for r in conn.execute(sa.select(S.checks).where(S.checks.c.run_id == run_id)
                                            .order_by(S.checks.c.id)).mappings()]
    drift = [dict(r) for r in conn.execute(sa.select(S.drift_factors).where(S.drift_factors.c.run_id == run_id)
                                           .order_by(S.drift_factors.c.id)).mappings()]
    chart_msgs, blocking = run_chart_violations(conn, run_id)
    return {"run": dict(run), "samples": samples, "certificates": certs, "checks": checks, "drift": drift,
            "chart": chart_msgs, "chart_blocks": blocking,
            "awaiting": [c for c in certs if c["state"] == "draft"]}


def certificate_detail(conn, number: str) -> dict | None:
    """The latest row of a certificate number: document, figures (title, SHA-256), files, run, chart tests."""
    row = conn.execute(sa.select(C).where(C.c.number == number).order_by(C.c.id.desc())).mappings().first()
    if row is None:
        return None
    doc = json.loads(row["document"])
    shas = {f["path"]: f["sha256"] for f in json.loads(row["figures"])}
    figures = [{**f, "sha256": shas[f["path"]]} for f in doc.get("figures", []) if f.get("path") in shas]
    files = [dict(r) for r in conn.execute(sa.select(S.certificate_files).where(
        S.certificate_files.c.certificate_id == row["id"]).order_by(S.certificate_files.c.id)).mappings()]
    run = conn.execute(sa.select(R.c.id, R.c.file_name).where(R.c.id == row["run_id"])).mappings().one()
    chart_msgs, blocking = run_chart_violations(conn, row["run_id"])
    revisions = [dict(r) for r in conn.execute(sa.select(C.c.number, C.c.revision, C.c.state).where(
        C.c.base_number == row["base_number"]).order_by(C.c.revision)).mappings()]
    sample_row = conn.execute(sa.select(S.samples.c.id).where(S.samples.c.run_id == row["run_id"],
                                                              S.samples.c.sample_id == row["sample_id"])).scalar()
    return {"cert": _certificate_summary(row), "doc": doc, "figures": figures, "files": files, "run": dict(run),
            "sample_row": sample_row,
            "chart": chart_msgs, "chart_blocks": blocking, "revisions": revisions}


def _verified_bytes(path: Path, sha256: str) -> bytes | None:
    """The file's bytes when it still has the recorded SHA-256; None when missing or different."""
    try:
        data = path.read_bytes()
    except OSError:
        return None
    return data if hashlib.sha256(data).hexdigest() == sha256 else None


def certificate_file(conn, file_id: int) -> tuple[bytes, str, str] | None:
    """(bytes, format, file name) of a recorded certificate file, by its row id; None if gone or altered."""
    row = conn.execute(sa.select(S.certificate_files).where(S.certificate_files.c.id == file_id)).mappings().first()
    if row is None or row["format"] not in ("pdf", "json"):
        return None
    data = _verified_bytes(Path(row["path"]), row["sha256"])
    return None if data is None else (data, row["format"], Path(row["path"]).name)


def figure_png(conn, cert_id: int, sha256: str) -> bytes | None:
    """A figure recorded with certificate ``cert_id``, by its SHA-256; None if not one of its figures."""
    row = conn.execute(sa.select(C.c.figures, C.c.folder).where(C.c.id == cert_id)).mappings().first()
    if row is None:
        return None
    folder = Path(row["folder"]).resolve()
    for f in json.loads(row["figures"]):
        if f["sha256"] == sha256:
            p = (folder / f["path"]).resolve()
            if not p.is_relative_to(folder):  # the record's own relative path, kept inside its folder
                return None
            return _verified_bytes(p, sha256)
    return None


def sample_row(conn, row: int) -> dict | None:
    """A recorded sample (by its row id) with its run, results, certificates and what evidence exists."""
    from compquant.record.evidence import read_items

    s = conn.execute(sa.select(S.samples).where(S.samples.c.id == row)).mappings().first()
    if s is None:
        return None
    s = dict(s)
    run = dict(conn.execute(sa.select(R.c.id, R.c.file_name, R.c.basis, R.c.method_id, R.c.analysed_at)
                            .where(R.c.id == s["run_id"])).mappings().one())
    results = [dict(r) for r in conn.execute(sa.select(S.results).where(S.results.c.sample_row == row)
                                             .order_by(S.results.c.id)).mappings()]
    certs = [dict(r) for r in conn.execute(sa.select(C.c.id, C.c.number, C.c.state, C.c.revision).where(
        C.c.run_id == s["run_id"], C.c.sample_id == s["sample_id"]).order_by(C.c.id)).mappings()]
    E, A = S.evidence, S.evidence_arrays
    kinds = {k for (k,) in conn.execute(sa.select(E.c.kind).where(E.c.run_id == s["run_id"], sa.or_(
        E.c.sample_row == row, E.c.sample_row.is_(None))).distinct()).all()}
    has_spectrum = conn.execute(sa.select(sa.func.count()).select_from(A).where(
        A.c.sample_row == row, A.c.name == "mean_spectrum")).scalar_one() > 0
    curves = [c["element"] for c in read_items(conn, s["run_id"], "curve", run_wide=True)]
    maps = [m["name"] for m in read_items(conn, s["run_id"], "map", row)]
    latest = certificate_detail(conn, certs[-1]["number"]) if certs else None
    return {"sample": s, "run": run, "results": results, "certificates": certs, "spectrum": has_spectrum,
            "lines": "line" in kinds, "curves": curves, "boltzmann": "boltzmann" in kinds, "maps": maps,
            "latest": latest}


def evidence_spectrum(conn, row: int) -> tuple | None:
    """(wavelength, mean spectrum, [(line id, nm)]) of a recorded sample; None without them."""
    from compquant.record.evidence import read_array, read_items

    s = conn.execute(sa.select(S.samples.c.run_id).where(S.samples.c.id == row)).scalar()
    if s is None:
        return None
    wl, y = read_array(conn, s, None, "wavelength"), read_array(conn, s, row, "mean_spectrum")
    if wl is None or y is None or wl.shape != y.shape:
        return None
    lines = [(it["line_id"], it["wavelength_nm"]) for it in read_items(conn, s, "line", row)]
    used = {c["line_id"] for c in read_items(conn, s, "curve", run_wide=True)}
    used |= {c["internal_standard"] for c in read_items(conn, s, "curve", run_wide=True) if c["internal_standard"]}
    if used:  # as the certificate's figure: the lines the numbers rest on
        lines = [ln for ln in lines if ln[0] in used] or lines
    return wl, y, sorted(lines, key=lambda t: t[1])


def evidence_items(conn, row: int, kind: str) -> list[dict]:
    """Evidence items of ``kind`` for a recorded sample (run-wide for curves)."""
    from compquant.record.evidence import read_items

    run_id = conn.execute(sa.select(S.samples.c.run_id).where(S.samples.c.id == row)).scalar()
    if run_id is None:
        return []
    return read_items(conn, run_id, kind, None if kind == "curve" else row, run_wide=kind == "curve")


__all__ = ["list_runs", "run_detail", "certificate_detail", "certificate_file", "figure_png", "sample_row",
           "evidence_spectrum", "evidence_items"]
