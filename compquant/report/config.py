"""Lab profile and specification files (TOML), validated with clear errors.

Lab profile (``lab.toml``, see ``docs/certificate.md``)::

    [lab]
    name = "..."                      # required
    address = ["line 1", "line 2"]    # required (a string or a list of lines)
    site = "..."                      # where the work was done (default: the address)
    accreditation = "..."             # accreditation / status statement, printed as given
    certificate_prefix = "HMTL"       # required, 1-12 letters or digits
    phone = "..."  email = "..."      # optional

    [signatory]                       # who authorises certificates; required
    name = "..."  title = "..."

    [client]                          # optional defaults for the certificate's client block
    name = "..."  address = [...]  reference = "..."

    [samples]                         # optional: facts of the items of the runs named
    condition = "..."  received = "YYYY-MM-DD"  runs = ["run.h5", "<SHA-256 of a run>"]

    [review]                          # optional (compquant.record, docs/record.md)
    required = true                   # false: issue certificates authorised by the signatory, no DRAFT

Specification (``spec-<grade>.toml``)::

    [specification]
    name = "..."  grade = "..."  source = "..."
    decision_rule = "guard-band"      # simple-acceptance | guard-band-binary | guard-band

    [limits.Cu]
    min = 57.0  max = 59.0  unit = "%"   # unit: "%", "mg/kg" or "g/g"; min and/or max
    [limits.Zn]
    remainder = true                  # balance element: reported, no limit checked
"""

from __future__ import annotations

import datetime as _dt
import math
import re
from dataclasses import dataclass, field

from compquant.errors import ConfigError
from compquant.fileio import STDIN_NAME, check_keys, parse_toml, read_input
from compquant.report.conformity import RULES
from compquant.settings import REQUIRED, Setting, Table

#: mass fraction units accepted in specification and standards files -> factor to g/g
UNIT_TO_GG = {"%": 1e-2, "mg/kg": 1e-6, "g/g": 1.0}

#: the 118 element symbols (IUPAC), checked in tests against periodictable
ELEMENT_SYMBOLS = frozenset(
    "H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co Ni Cu Zn Ga Ge As Se "
    "Br Kr Rb Sr Y Zr Nb Mo Tc Ru Rh Pd Ag Cd In Sn Sb Te I Xe Cs Ba La Ce Pr Nd Pm Sm Eu Gd Tb "
    "Dy Ho Er Tm Yb Lu Hf Ta W Re Os Ir Pt Au Hg Tl Pb Bi Po At Rn Fr Ra Ac Th Pa U Np Pu Am Cm "
    "Bk Cf Es Fm Md No Lr Rf Db Sg Bh Hs Mt Ds Rg Cn Nh Fl Mc Lv Ts Og".split()
)

_PREFIX = re.compile(r"[A-Za-z0-9]{1,12}")  # whole text only (fullmatch: a trailing newline is refused)

#: longest text accepted in a one-line field of the certificate (names, titles, address lines,
#: client, ids) and in a description; longer text cannot be laid out on an A4 page without
#: breaking the page layout, so it is refused with one line before any work is done
MAX_FIELD_CHARS = 200
MAX_DESCRIPTION_CHARS = 2000
MAX_LINES = 8
MAX_ID_CHARS = 300
_BREAKS = frozenset("\r\n\v\f\x85\u2028\u2029")


def check_printed_text(text: str, where: str, limit: int = MAX_FIELD_CHARS) -> None:
    """Refuse text too long for its place on the certificate, or holding a line break where one
    line is printed, with one clear line (before any work)."""
    if len(text) > limit:
        raise ConfigError(f"text of {len(text)} characters is too long for the certificate (at most {limit})",
                          where=where, fix="shorten it; put long notes in a separate document")
    if limit == MAX_FIELD_CHARS and _BREAKS.intersection(text):
        raise ConfigError("text holds a line break where one line is printed", where=where,
                          fix="write it on one line (use a list of lines for an address)")


def check_certificate_texts(ids, descriptions, client, where: str) -> None:
    """The run's sample ids and descriptions and the client name fit on a certificate: lengths
    within the limits above, and every character of an id drawable by the certificate font (an
    id printed as empty boxes could not be told from another one)."""
    from compquant.report.pdf import missing_glyphs

    for sid, desc in zip(ids, descriptions):
        sid, desc = str(sid), str(desc)
        check_printed_text(sid, f"{where}: sample id {sid[:40]!r}", MAX_ID_CHARS)
        check_printed_text(desc, f"{where}: description of sample {sid[:40]!r}", MAX_DESCRIPTION_CHARS)
        miss = missing_glyphs(sid)
        if miss:
            codes = " ".join(f"U+{ord(c):04X}" for c in miss[:6])
            raise ConfigError(f"sample id {sid[:40]!r} holds characters the certificate font cannot show ({codes})",
                              where=where, fix="give the sample an id in Latin, Greek or Cyrillic letters and digits")
    if client:
        check_printed_text(str(client), "--client")


@dataclass
class LabProfile:
    """The issuing laboratory: printed on every certificate (ISO/IEC 17025:2017, 7.8.2.1 b, o)."""

    name: str
    address: list[str]
    certificate_prefix: str
    signatory_name: str
    signatory_title: str
    accreditation: str = ""
    site: str = ""
    phone: str = ""
    email: str = ""
    client_name: str = ""
    client_address: list[str] = field(default_factory=list)
    client_reference: str = ""
    sample_condition: str = ""
    sample_received: str = ""
    sample_runs: list[str] = field(default_factory=list)  # run file names / SHA-256 they hold for
    source: str = ""
    sha256: str = ""
    review_required: bool = True  # certificates are issued as DRAFT until a reviewer releases them


    def sample_facts(self, run_name: str, run_sha256: str) -> tuple[str, str]:
        """``(condition, received)`` of the items of the run ``run_name`` (file name) / ``run_sha256``:
        the ``[samples]`` values when its ``runs`` names that run, else ``("", "")`` (not recorded).

        A lab profile serves every run; the condition and date of receipt are facts of the items
        (ISO/IEC 17025:2017, 7.8.2.1 e, f), so they are stated only for the runs they are given for."""
        if run_name in self.sample_runs or (run_sha256 and run_sha256.lower() in
                                             (r.lower() for r in self.sample_runs)):
            return self.sample_condition, self.sample_received
        return "", ""


def _text_check(required: bool):
    def check(v, where, error):
        key = where.rsplit(".", 1)[-1]
        if not isinstance(v, str) or (required and not v.strip()):
            raise error(f"{key!r} must be a non-empty text string", where=where, fix=f'write {key} = "..."')
        check_printed_text(v, where)
        return v

    return check


def _lines_check(required: bool):
    return lambda v, where, error: _lines_value(v, where, error, required)


def _lines_value(v, where, error, required):
    key = where.rsplit(".", 1)[-1]
    if isinstance(v, str):
        v = [v]
    if not isinstance(v, list) or not all(isinstance(x, str) for x in v) or (required and not v):
        raise error(f"{key!r} must be a string or a list of strings", where=where,
                    fix=f'write {key} = ["line 1", "line 2"]')
    if len(v) > MAX_LINES:
        raise error(f"{key!r} has {len(v)} lines, more than the {MAX_LINES} the certificate prints", where=where,
                    fix="shorten it")
    for i, x in enumerate(v):
        check_printed_text(x, f"{where}[{i}]")
    return list(v)


def _date_check(v, where, error):
    key = where.rsplit(".", 1)[-1]
    if isinstance(v, _dt.datetime):
        return v.date().isoformat()
    if isinstance(v, _dt.date):
        return v.isoformat()
    if isinstance(v, str):
        try:
            return _dt.date.fromisoformat(v).isoformat()
        except ValueError:
            pass
    raise error(f"{key!r} must be a date YYYY-MM-DD", where=where, fix=f"write {key} = 2026-12-01")


def _text(key, doc, required=False):
    return Setting(key, "any", REQUIRED if required else "", doc, check=_text_check(required))


def _lines_s(key, doc, required=False):
    return Setting(key, "any", REQUIRED if required else [], doc + " (a string or a list of lines)",
                   check=_lines_check(required))


_LAB = "compquant.report.config"
LAB_TABLE = Table("lab", (
    _text("name", "laboratory name", True),
    _lines_s("address", "laboratory address", True),
    _text("site", "where the work was done (default: the address)"),
    _text("accreditation", "accreditation / status statement, printed as given"),
    _text("certificate_prefix", "prefix of certificate numbers: 1-12 letters or digits", True),
    _text("phone", "telephone"),
    _text("email", "e-mail address"),
), "The issuing laboratory (ISO/IEC 17025:2017, 7.8.2.1 b).", _LAB)
SIGNATORY_TABLE = Table("signatory", (_text("name", "who authorises certificates", True),
                                      _text("title", "their title", True)), "Required.", _LAB)
CLIENT_TABLE = Table("client", (_text("name", "client"), _lines_s("address", "client address"),
                                _text("reference", "client's reference")),
                     "Optional defaults for the certificate's client block.", _LAB)
SAMPLES_TABLE = Table("samples", (_text("condition", "condition of the items on receipt"),
                                  Setting("received", "any", "", "date of receipt YYYY-MM-DD", check=_date_check),
                                  _lines_s("runs", "the runs (file name or SHA-256) whose items the condition "
                                           "and date of receipt are true of; required with either")),
                      "Optional: the items' condition and date of receipt, for the runs named.", _LAB)
REVIEW_TABLE = Table("review", (
    Setting("required", "bool", True, "issue certificates as DRAFT until a reviewer releases them",
            fix="write required = true (certificates issued as DRAFT until released)"),
), "Optional (compquant.record, docs/record.md).", _LAB)
LAB_PROFILE_TABLES = (LAB_TABLE, SIGNATORY_TABLE, CLIENT_TABLE, SAMPLES_TABLE, REVIEW_TABLE)
_FIELD_PREFIX = {"lab": "", "signatory": "signatory_", "client": "client_", "samples": "sample_"}


def _read_toml(source, what: str):
    """``(data, src)``: a TOML file, ``-`` (standard input) or an :class:`~compquant.fileio.InputBytes`
    read once (:func:`compquant.fileio.read_input`, at most ``MAX_TABLE_BYTES``) and parsed; the
    bytes parsed are the bytes hashed (``src.sha256``)."""
    src = read_input(source, what, error=ConfigError)
    return parse_toml(src.text(ConfigError, what), src.where), src


def _source_name(src) -> str:
    """The path provenance keeps for an input: the file's path, or ``<stdin>``."""
    return str(src.path) if src.path is not None else STDIN_NAME


def load_lab_profile(path) -> LabProfile:
    """Read and validate a lab profile TOML file; raise :class:`ConfigError` naming file and key.

    ``path``: the file, ``-`` for standard input (:func:`compquant.fileio.read_stdin`: refused when
    a terminal or empty, at most 16 MiB) or an :class:`~compquant.fileio.InputBytes` already read.
    ``source`` is the path (``<stdin>`` for standard input) and ``sha256`` the SHA-256 (FIPS 180-4)
    of the bytes parsed.
    """
    data, src = _read_toml(path, "lab profile")
    w = src.where
    check_keys(data, {t.name for t in LAB_PROFILE_TABLES}, w, required={"lab", "signatory"})
    v = {t.name: t.parse(data.get(t.name, {}), f"{w} [{t.name}]", ConfigError) for t in LAB_PROFILE_TABLES}
    prefix = v["lab"]["certificate_prefix"]
    if not _PREFIX.fullmatch(prefix):
        raise ConfigError(
            f"certificate_prefix {prefix!r} must be 1 to 12 letters or digits",
            where=f"{w} [lab].certificate_prefix",
            fix='e.g. certificate_prefix = "HMTL"',
        )
    # LabProfile's fields are the tables' keys, prefixed by their table (signatory_name ...)
    kw = {_FIELD_PREFIX[t] + k: x for t, vals in v.items() if t in _FIELD_PREFIX for k, x in vals.items()}
    kw["certificate_prefix"] = prefix.upper()
    smp = v["samples"]
    if (smp["condition"] or smp["received"]) and not smp["runs"]:
        raise ConfigError(
            "[samples] states a condition or date of receipt but names no run: they are facts of the items, "
            "not of the laboratory, and would be printed on every certificate",
            where=f"{w} [samples]",
            fix='add runs = ["RUN.h5"] (the run files they are true of), or give analyse --received per run',
        )
    return LabProfile(**kw, source=_source_name(src), sha256=src.sha256, review_required=v["review"]["required"])


@dataclass
class ElementLimit:
    """Limits for one element, in g/g inside; ``unit`` is how the specification states them."""

    element: str
    lower: float | None
    upper: float | None
    unit: str
    remainder: bool = False


@dataclass
class Specification:
    """A material specification (grade): element limits and the agreed decision rule."""

    name: str
    grade: str
    decision_rule: str
    limits: list[ElementLimit]
    source: str = ""
    path: str = ""
    sha256: str = ""

    def limit(self, element: str) -> ElementLimit | None:
        for lim in self.limits:
            if lim.element == element:
                return lim
        return None


def _number(v, where: str, error=ConfigError) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(float(v)) or v < 0:
        raise error("must be a finite number >= 0", where=where, fix="write e.g. max = 0.35")
    return float(v)


SPECIFICATION_TABLE = Table("specification", (
    _text("name", "specification name", True),
    _text("grade", "material grade", True),
    _text("source", "where the limits come from"),
    _text("decision_rule", f"decision rule: {', '.join(sorted(RULES))}", True),
), "The material specification (grade) a result is compared with (docs/certificate.md).", _LAB)
LIMIT_TABLE = Table("limits.<El>", (
    Setting("min", "any", None, "lower limit, in unit", check=lambda v, w, e: _number(v, w, e)),
    Setting("max", "any", None, "upper limit, in unit", check=lambda v, w, e: _number(v, w, e)),
    Setting("unit", "any", None, "unit of min and max: %, mg/kg or g/g"),
    Setting("remainder", "bool", False, "balance element: reported, no limit checked",
            fix="write remainder = true"),
), "Limits of one element: min and/or max with unit, or remainder = true.", _LAB)


def load_specification(path) -> Specification:
    """Read and validate a specification TOML file; raise :class:`ConfigError` naming file and key.

    ``path``: the file, ``-`` for standard input or an :class:`~compquant.fileio.InputBytes`
    already read, as for :func:`load_lab_profile`; ``path`` of the result is the file's path
    (``<stdin>`` for standard input), ``sha256`` that of the bytes parsed.
    """
    data, src = _read_toml(path, "specification")
    w = src.where
    check_keys(data, {"specification", "limits"}, w, required={"specification", "limits"})
    spec = SPECIFICATION_TABLE.parse(data["specification"], f"{w} [specification]", ConfigError)
    rule = spec["decision_rule"]
    if rule not in RULES:
        raise ConfigError(
            f"unknown decision_rule {rule!r}",
            where=f"{w} [specification].decision_rule",
            fix=f"use one of {', '.join(sorted(RULES))}",
        )
    lims = data["limits"]
    if not isinstance(lims, dict) or not lims:
        raise ConfigError(
            "no element limits",
            where=f"{w} [limits]",
            fix="add tables such as [limits.Cu] with min / max / unit",
        )
    out = []
    for el, t in lims.items():
        wl = f"{w} [limits.{el}]"
        if el not in ELEMENT_SYMBOLS:
            raise ConfigError(f"{el!r} is not an element symbol", where=wl, fix="use symbols such as Cu, Pb")
        lim = LIMIT_TABLE.parse(t, wl, ConfigError, only=("remainder",))
        if lim["remainder"]:
            if "min" in t or "max" in t:
                raise ConfigError(
                    "a remainder element takes no min / max",
                    where=wl,
                    fix="remove min and max, or remove remainder",
                )
            out.append(ElementLimit(el, None, None, t.get("unit", "%"), remainder=True))
            continue
        if "min" not in t and "max" not in t:
            raise ConfigError("needs min, max or both", where=wl, fix="add e.g. max = 0.35")
        unit = t.get("unit")
        if not isinstance(unit, str) or unit not in UNIT_TO_GG:
            raise ConfigError(
                f"unit {unit!r} is not one of %, mg/kg, g/g",
                where=f"{wl}.unit",
                fix='write unit = "%" or unit = "mg/kg"',
            )
        f = UNIT_TO_GG[unit]
        lim = LIMIT_TABLE.parse(t, wl, ConfigError)
        lo = lim["min"] * f if lim["min"] is not None else None
        hi = lim["max"] * f if lim["max"] is not None else None
        if lo is not None and hi is not None and lo > hi:
            raise ConfigError("min is above max", where=wl, fix="swap the values")
        if (hi is not None and hi > 1.0) or (lo is not None and lo > 1.0):
            raise ConfigError("a limit above 100 % mass fraction", where=wl, fix="check the unit")
        out.append(ElementLimit(el, lo, hi, unit))
    return Specification(
        name=spec["name"],
        grade=spec["grade"],
        decision_rule=rule,
        limits=out,
        source=spec["source"],
        path=_source_name(src),
        sha256=src.sha256,
    )


__all__ = [
    "LAB_PROFILE_TABLES",
    "LIMIT_TABLE",
    "SPECIFICATION_TABLE",
    "UNIT_TO_GG",
    "ELEMENT_SYMBOLS",
    "LabProfile",
    "ElementLimit",
    "Specification",
    "load_lab_profile",
    "load_specification",
]
