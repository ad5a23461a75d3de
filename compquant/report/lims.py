"""The LIMS form: one CSV for the run, one row per sample and element.

Columns (RFC 4180 CSV, UTF-8, CRLF line ends, header row)::

    sample_id, element, value, unit, U, k, LOD, LOQ, flag, certificate_number, release

``value``, ``U``, ``LOD`` and ``LOQ`` are the texts printed on the certificate, in ``unit``;
below the LOD ``value`` is empty and ``flag`` holds ``below_lod``.  ``flag`` joins all
flags with ``;``.  ``release`` is ``valid`` or ``not valid``.  A cell that a spreadsheet
would read as a formula (starting with ``=``, ``+``, ``-``, ``@``, tab or carriage
return, also after leading spaces or in full-width form) is prefixed with an apostrophe
(OWASP guidance on CSV injection), and control characters are shown as ``\\xNN``, as on the
PDF: :func:`compquant.fileio.csv_cell`, the rule of every CSV compquant writes.
"""

from __future__ import annotations

import csv
import io

from compquant.fileio import csv_cell, write_text_atomic
from compquant.report.certificate import Certificate

COLUMNS = [
    "sample_id",
    "element",
    "value",
    "unit",
    "U",
    "k",
    "LOD",
    "LOQ",
    "flag",
    "certificate_number",
    "release",
]


def _cell(s) -> str:
    # the one CSV escaping policy of compquant (also leading spaces and full-width ＝＋－＠)
    return csv_cell("" if s is None else str(s))


def lims_rows(certs) -> list[list[str]]:
    rows = []
    for cert in certs:
        rel = "valid" if cert.valid_for_release else "not valid"
        for r in cert.results:
            rep = r.reported()
            value = "" if r.below_lod or rep.value == "not determined" else rep.value
            k = f"{r.k:g}" if isinstance(r.k, (int, float)) else ""
            rows.append(
                [
                    _cell(cert.sample.sample_id),
                    _cell(r.element),
                    value,
                    rep.unit,
                    rep.U,
                    k,
                    rep.lod,
                    rep.loq,
                    _cell(";".join(r.all_flags())),
                    _cell(cert.number),
                    rel,
                ]
            )
    return rows


def lims_csv(certs: list[Certificate]) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\r\n")
    w.writerow(COLUMNS)
    w.writerows(lims_rows(certs))
    return buf.getvalue()


def write_lims_csv(certs: list[Certificate], path) -> None:
    """Write the run's LIMS CSV atomically."""
    write_text_atomic(path, lims_csv(certs))


__all__ = ["COLUMNS", "lims_rows", "lims_csv", "write_lims_csv"]
