"""The LIMS form: one CSV for the run, one row per sample and element.

Columns (header row)::

    sample_id, element, value, unit, U, k, LOD, LOQ, flag, certificate_number, release,
    mass_fraction_g_g, U_g_g, LOD_g_g, LOQ_g_g, certificate_revision, supersedes,
    measured, run_file, run_sha256, method_id, method_version

``value``, ``U``, ``LOD`` and ``LOQ`` are the texts printed on the certificate, in ``unit`` (one
unit per element for the whole run); below the LOD ``value`` is empty and ``flag`` holds
``below_lod``; a result not determined has an empty ``value`` and the flag ``not_reported``.
``flag`` joins all flags with ``;``.  ``release`` is the release state in words (``valid for
release`` / ``not valid for release``, :mod:`compquant.report.release`).  The ``*_g_g``
columns hold the unrounded numbers in g/g (shortest text that round-trips the float; empty when
there is none), for calculations in the LIMS; the printed texts stay beside them.

Dialects: ``"rfc4180"`` (default): RFC 4180, UTF-8, comma separator, decimal point, CRLF line
ends.  ``"semicolon"``: the same with ``;`` as separator and a decimal comma in every number
(the usual spreadsheet setting where the comma is the decimal mark).  A cell that a spreadsheet
would read as a formula (starting with ``=``, ``+``, ``-``, ``@``, tab or carriage return, also
after leading spaces or in full-width form) is prefixed with an apostrophe (OWASP guidance on CSV
injection), and control characters are shown as ``\\xNN``, as on the PDF:
:func:`compquant.fileio.csv_cell`, the rule of every CSV compquant writes.
"""

from __future__ import annotations

import csv
import io
import math

from compquant.errors import ConfigError
from compquant.fileio import csv_cell, write_text_atomic
from compquant.report.certificate import Certificate
from compquant.report.release import release_status

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
    "mass_fraction_g_g",
    "U_g_g",
    "LOD_g_g",
    "LOQ_g_g",
    "certificate_revision",
    "supersedes",
    "measured",
    "run_file",
    "run_sha256",
    "method_id",
    "method_version",
]

#: dialect name -> (separator, decimal mark)
DIALECTS = {"rfc4180": (",", "."), "semicolon": (";", ",")}

#: the columns that hold numbers (their decimal mark follows the dialect)
NUMERIC = {"value", "U", "k", "LOD", "LOQ", "mass_fraction_g_g", "U_g_g", "LOD_g_g", "LOQ_g_g"}


def _cell(s) -> str:
    # the one CSV escaping policy of compquant (also leading spaces and full-width ＝＋－＠)
    return csv_cell("" if s is None else str(s))


def _raw(x, below: bool = False) -> str:
    if below or x is None or isinstance(x, bool):
        return ""
    x = float(x)
    return repr(x) if math.isfinite(x) else ""


def lims_rows(certs) -> list[list[str]]:
    rows = []
    for cert in certs:
        rel = release_status(cert.valid_for_release)
        pv = cert.provenance
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
                    _raw(r.mass_fraction, r.below_lod),
                    _raw(r.U, r.below_lod),
                    _raw(r.lod),
                    _raw(r.loq),
                    str(int(cert.revision)),
                    _cell(cert.supersedes),
                    _cell(cert.sample.measured),
                    _cell(cert.sample.run_file),
                    pv.run_sha256 if pv else "",
                    _cell(cert.method.method_id),
                    _cell(cert.method.version),
                ]
            )
    return rows


def lims_csv(certs: list[Certificate], dialect: str = "rfc4180") -> str:
    if dialect not in DIALECTS:
        raise ConfigError(f"LIMS CSV dialect {dialect!r} is not known", where="lims dialect",
                          fix=f"use one of {', '.join(DIALECTS)}")
    sep, mark = DIALECTS[dialect]
    num = [i for i, c in enumerate(COLUMNS) if c in NUMERIC]
    buf = io.StringIO()
    w = csv.writer(buf, delimiter=sep, lineterminator="\r\n")
    w.writerow(COLUMNS)
    for row in lims_rows(certs):
        if mark != ".":
            row = [c.replace(".", mark) if i in num else c for i, c in enumerate(row)]
        w.writerow(row)
    return buf.getvalue()


def write_lims_csv(certs: list[Certificate], path, dialect: str = "rfc4180") -> None:
    """Write the run's LIMS CSV atomically."""
    write_text_atomic(path, lims_csv(certs, dialect))


__all__ = ["COLUMNS", "DIALECTS", "lims_rows", "lims_csv", "write_lims_csv"]
