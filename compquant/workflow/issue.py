"""How each certificate is issued: file names, and new / unchanged / revision (docs/certificate.md).

:func:`sample_stems` gives every sample a distinct file-name stem; :func:`plan_issue` compares each
draft with what the output folder already holds and decides, before anything is written, whether
it is issued, kept (the same result set is already issued) or refused unless a revision reason is
given.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path

from compquant.errors import InputError, OutputError
from compquant.fileio import safe_filename
from compquant.report import Certificate
from compquant.report.jsonform import canonical_json

_RESERVED = {"lims", "summary", "calibration", "manifest", "figures"}


def sample_stems(sample_ids) -> dict[str, str]:
    """File-name stems for the samples, distinct even on a case-blind file system.

    A stem that would clash (case-insensitively) with another sample's, with a run-level file or
    with the revision suffix ``-R<n>`` gets the first 8 hex digits of the SHA-256 of the sample id
    appended; should two stems still clash the analysis is refused before anything is written.
    """
    import re

    base = {sid: safe_filename(sid) for sid in sample_ids}
    count: dict[str, int] = {}
    for st in base.values():
        count[st.lower()] = count.get(st.lower(), 0) + 1
    out = {}
    for sid, st in base.items():
        if count[st.lower()] > 1 or st.lower() in _RESERVED or re.search(r"-R\d+$", st):
            st = f"{st}-{hashlib.sha256(sid.encode('utf-8', 'surrogatepass')).hexdigest()[:8]}"
        out[sid] = st
    seen: dict[str, str] = {}
    for sid, st in out.items():
        if st.lower() in seen:
            raise InputError(
                f"samples {seen[st.lower()]!r} and {sid!r} would share the file name {st!r}",
                where="sample ids",
                fix="give the samples ids that differ in more than case and punctuation",
            )
        seen[st.lower()] = sid
    return out


@dataclass
class _Issue:
    cert: Certificate
    stem: str
    write: bool  # False: the same result set is already issued in the folder; keep that file


def _issued(outdir: Path, stem: str, sid: str) -> list[dict]:
    """Certificates already issued in ``outdir`` for this sample (its stem, revisions ``-R<n>``)."""
    import json
    import re

    found = []
    if not outdir.is_dir():
        return found
    pat = re.compile(re.escape(stem) + r"(-R(\d+))?\.json$", re.IGNORECASE)
    for p in outdir.iterdir():
        m = pat.fullmatch(p.name)
        if not m:
            continue
        try:
            doc = json.loads(p.read_text("utf-8"))
        except (OSError, UnicodeDecodeError, ValueError):
            doc = None
        if not isinstance(doc, dict) or doc.get("schema") != "compquant-certificate":
            raise InputError("a file that is not a certificate holds this sample's name", where=str(p),
                             fix="move it away or choose another output folder")
        if str(doc.get("sample", {}).get("sample_id")) != sid:
            raise InputError(f"the file holds the certificate of sample {doc['sample'].get('sample_id')!r}, "
                             f"not {sid!r}", where=str(p), fix="choose another output folder")
        found.append({"path": p, "doc": doc, "revision": int(doc.get("revision", 0) or 0)})
    return sorted(found, key=lambda d: d["revision"])


def _same_as_issued(last: dict, cert: Certificate, review=None) -> bool:
    """True when ``cert``, numbered as the issued certificate ``last``, says exactly what it says.

    Compared as canonical JSON (figures aside: they are drawn from the same numbers), so another
    client name, issue time or lab profile is a different certificate.  When true, ``cert`` keeps
    the issued number, revision and supersedes; otherwise it is left as it was.
    """
    from compquant.report.jsonform import certificate_to_dict

    before = (cert.number, cert.revision, cert.supersedes, cert.revision_reason)
    sup = last.get("supersedes") or {}
    cert.number, cert.revision = str(last.get("number", "")), int(last.get("revision", 0) or 0)
    cert.supersedes, cert.revision_reason = str(sup.get("number", "")), str(sup.get("reason", ""))
    new = certificate_to_dict(cert, review)  # with the review state it is issued in
    old = dict(last)
    new.pop("figures", None)
    old.pop("figures", None)
    if canonical_json(new) == canonical_json(old):
        return True
    cert.number, cert.revision, cert.supersedes, cert.revision_reason = before
    return False


def plan_issue(outdir: Path, drafts, stems: dict, revise: str | None, review=None) -> list[_Issue]:
    """Decide, before writing anything, how each certificate is issued (docs/certificate.md).

    No certificate of the sample in the folder: issue it.  The latest one says exactly the same
    (:func:`_same_as_issued`): keep it, write nothing.  Otherwise refuse,
    unless ``revise`` gives the reason for a revision ``<first number>-R<n>`` that names the
    certificate it supersedes; the issued files stay as they are.
    """
    import re

    plan, refused = [], []
    for cert in drafts:
        sid = cert.sample.sample_id
        stem = stems[sid]
        issued = _issued(Path(outdir), stem, sid)
        if not issued:
            plan.append(_Issue(cert, stem, True))
            continue
        last = issued[-1]["doc"]
        if _same_as_issued(last, cert, review):
            plan.append(_Issue(cert, Path(issued[-1]["path"]).stem, False))
            continue
        if not revise:
            refused.append(f"{sid} ({last.get('number')})")
            continue
        n = issued[-1]["revision"] + 1
        base = re.sub(r"-R\d+$", "", str(issued[0]["doc"]["number"]))
        cert.number, cert.revision = f"{base}-R{n}", n
        cert.supersedes, cert.revision_reason = str(last["number"]), str(revise)
        plan.append(_Issue(cert, f"{stem}-R{n}", True))
    if refused:
        raise OutputError(
            f"certificates already issued in this folder would be replaced: {', '.join(refused)}",
            where=str(outdir),
            fix="choose another output folder, or issue revisions with --revise 'reason' (analyse(revise=...))",
        )
    return plan
