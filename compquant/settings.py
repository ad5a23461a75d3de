"""One declarative mechanism for the settings tables of compquant's TOML files.

Each ``[table]`` of a method file (and of the other TOML files) is described once, by the
package that uses it, as a :class:`Table` of :class:`Setting` entries: key, type, range
(minimum / maximum, each inclusive or exclusive), choices, default, unit and a one-line doc.
:meth:`Table.parse` is the one validator: it refuses unknown keys, checks each value and
fills in the defaults, raising the caller's :class:`~compquant.errors.CompquantError` child
with a one-line ``where: what; fix`` message::

    error: m.toml: [preprocess.qc].k: value -1 out of range; use a finite value > 0

Rules that tie several settings together (``t_min_k < t_max_k``, "method 'lines' needs
reference lines" ...) stay as plain code in the owning module, after :meth:`Table.parse`.
The same tables generate the method-file reference (:func:`reference_markdown`,
``scripts/make_method_reference.py`` -> ``docs/method-reference.md``) and feed the fuzz
tests (``tests/test_fuzz_methods.py`` draws keys and values from them).

Value rules (the same for every table):

* ``bool``: ``true`` or ``false`` only;
* ``int``: a whole number (``3`` or ``3.0``; never a boolean), returned as ``int``;
* ``float``: a finite number (an integer is accepted), returned as ``float``;
* ``str``: text; ``choices`` restrict it;
* ``list``: a TOML array; ``item`` gives the type of its entries, ``length`` its size;
* ``table``: a TOML table; ``item`` gives the type of its values;
* ``any``: kept as given (checked by the owner).

A setting whose default is ``None`` is optional without a value (``None`` is accepted for it
from Python callers); ``aliases`` maps text accepted in place of the value (``"auto"`` ->
``None``).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from typing import Any

from compquant.errors import MethodError

#: marks a setting without a default: the key is required
REQUIRED = object()

TYPES = ("bool", "int", "float", "str", "list", "table", "any")
_TYPE_WORDS = {
    "bool": "true / false",
    "int": "integer",
    "float": "number",
    "str": "text",
    "list": "list",
    "table": "table",
    "any": "value",
}


@dataclass(frozen=True)
class Setting:
    """One key of a settings table.

    Parameters
    ----------
    key : str
        The TOML key.
    type : str
        One of :data:`TYPES`.
    default : object
        Value when the key is absent; :data:`REQUIRED` for a required key.
    doc : str
        One line saying what it does (generated reference).
    unit : str
        Unit of a number (``"nm"``, ``"K"``, ``"cm⁻³"``, ``"g/g"`` ...), empty for none.
    min, max : float, optional
        Range of a number (or of each number of a list); ``min_open`` / ``max_open`` make the
        bound exclusive.
    choices : tuple, optional
        The allowed values of a text (or of each item of a list).
    item : str, optional
        Type of the items of a ``list`` or of the values of a ``table``.
    length : int, optional
        Required number of items of a list.
    nonempty : bool
        Refuse an empty text or list.
    aliases : dict, optional
        Text accepted in place of the value, with the value it stands for.
    fix : str, optional
        The hint printed after a refused value (else one derived from the rule).
    check : callable, optional
        ``check(value, where, error) -> value``: a further rule of this one value (after the
        type, range and choices), e.g. "an element symbol".
    """

    key: str
    type: str
    default: Any = None
    doc: str = ""
    unit: str = ""
    min: float | None = None
    max: float | None = None
    min_open: bool = False
    max_open: bool = False
    choices: tuple | None = None
    item: str | None = None
    length: int | None = None
    nonempty: bool = False
    aliases: dict | None = None
    fix: str | None = None
    check: Callable | None = field(default=None, compare=False)

    def __post_init__(self):
        if self.type not in TYPES or (self.item is not None and self.item not in TYPES):
            raise ValueError(f"setting {self.key!r}: unknown type {self.type!r} / {self.item!r}")

    @property
    def required(self) -> bool:
        return self.default is REQUIRED

    # ------------------------------------------------------------------ description
    def range_text(self) -> str:
        """The range as ``(0, 1]``, ``> 0``, ``>= 0``; empty when unbounded."""
        lo, hi = self.min, self.max
        if lo is not None and hi is not None:
            return f"{'(' if self.min_open else '['}{_fmt(lo)}, {_fmt(hi)}{')' if self.max_open else ']'}"
        if lo is not None:
            return f"{'>' if self.min_open else '>='} {_fmt(lo)}"
        if hi is not None:
            return f"{'<' if self.max_open else '<='} {_fmt(hi)}"
        return ""

    def type_text(self) -> str:
        if self.type in ("list", "table") and self.item:
            n = f"{self.length} " if self.length else ""
            return f"{self.type} of {n}{_TYPE_WORDS[self.item]}"
        return _TYPE_WORDS[self.type]

    def default_text(self) -> str:
        if self.required:
            return "required"
        if self.default is None:
            return "not set"
        return f"`{_toml(self.default)}`"

    # ------------------------------------------------------------------ validation
    def _range_ok(self, v: float) -> bool:
        if self.min is not None and (v < self.min or (self.min_open and v == self.min)):
            return False
        return not (self.max is not None and (v > self.max or (self.max_open and v == self.max)))

    def _scalar(self, kind: str, v, where: str, error: type, *, in_list: bool = False):
        if kind == "any":
            return v
        if kind == "bool":
            if not isinstance(v, bool):
                raise error(f"expected true or false, got {v!r}", where=where, fix=self.fix or "write true or false")
            return v
        if kind in ("int", "float"):
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                raise error(f"expected a number, got {v!r}", where=where, fix=self.fix or "write a plain number")
            if kind == "int" and not (math.isfinite(v) and float(v).is_integer()):
                raise error(f"expected a whole number, got {v!r}", where=where, fix=self.fix or "write an integer")
            if not math.isfinite(v) or not self._range_ok(v):
                rng = self.range_text()
                hint = f"use a finite value {rng}" if rng and not rng.startswith(("[", "(")) else (
                    f"use a finite value in {rng}" if rng else "use a finite value")
                raise error(f"value {v!r} out of range", where=where, fix=self.fix or hint)
            return int(v) if kind == "int" else float(v)
        if kind == "str":
            if not isinstance(v, str):
                raise error(f"expected text, got {v!r}", where=where, fix=self.fix or "quote the value")
            if self.choices is not None and v not in self.choices:
                raise error(f"unknown value {v!r}", where=where,
                            fix=f"use one of {', '.join(map(str, self.choices))}")
            if self.nonempty and not in_list and not v.strip():
                raise error("expected a non-empty text", where=where, fix=self.fix or 'write key = "..."')
            return v
        raise error(f"expected a {kind}, got {v!r}", where=where, fix=self.fix or "see the documentation")

    def validate(self, v, where: str, error: type = MethodError):
        """The checked (and converted) value of this setting; ``error`` naming ``where`` if not valid."""
        if v is None and self.default is None:
            return None
        if self.aliases and isinstance(v, str) and v.strip().lower() in self.aliases:
            return self.aliases[v.strip().lower()]
        if self.type == "list":
            if not isinstance(v, list) or (self.length is not None and len(v) != self.length) or (
                    self.nonempty and not v):
                size = f" {self.length}" if self.length else ""
                word = f" {_TYPE_WORDS[self.item]}" if self.item and self.item != "any" else ""
                of = f" of{size}{word} values" if size or word else ""
                raise error(f"expected a {'non-empty ' if self.nonempty else ''}list{of}, got {_short(v)}",
                            where=where, fix=self.fix or f"write {self.key} = [...]")
            v = [self._scalar(self.item or "any", x, where, error, in_list=True) for x in v]
        elif self.type == "table":
            if not isinstance(v, dict):
                raise error(f"expected a table, got {_short(v)}", where=where,
                            fix=self.fix or f"write [{self.key}] with key = value lines")
            v = {str(k): self._scalar(self.item or "any", x, f"{where}.{k}", error) for k, x in v.items()}
        else:
            v = self._scalar(self.type, v, where, error)
        return self.check(v, where, error) if self.check is not None else v


def _short(v) -> str:
    r = repr(v)
    return r if len(r) <= 60 else r[:57] + "..."


def _fmt(x: float) -> str:
    if isinstance(x, float) and x.is_integer() and abs(x) < 1e6:
        return str(int(x))
    return f"{x:g}"


def toml_text(v) -> str:
    """A value as written in TOML (for references and hints)."""
    return _toml(v)


def _toml(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return f'"{v}"'
    if isinstance(v, float):
        return _fmt(v) if not v.is_integer() or abs(v) >= 1e6 else f"{v:.1f}"
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k} = {_toml(x)}" for k, x in v.items()) + "}"
    return str(v)


@dataclass(frozen=True)
class Table:
    """The settings of one TOML table: ``name`` as written in the file (``"preprocess.qc"``).

    ``sub`` names tables or arrays of tables written under this one (``[calibration.pls]``,
    ``[[calibration.analytes]]``) that have their own :class:`Table`; ``notes`` are printed
    under the table in the generated reference (the rules that tie settings together).
    """

    name: str
    settings: tuple[Setting, ...]
    doc: str = ""
    owner: str = ""
    notes: tuple[str, ...] = ()
    array: bool = False  # an array of tables: [[name]]

    def __post_init__(self):
        keys = [s.key for s in self.settings]
        if len(keys) != len(set(keys)):
            raise ValueError(f"table {self.name}: a key is declared twice")

    @property
    def keys(self) -> tuple[str, ...]:
        return tuple(s.key for s in self.settings)

    def __getitem__(self, key: str) -> Setting:
        for s in self.settings:
            if s.key == key:
                return s
        raise KeyError(key)

    def defaults(self) -> dict:
        """Every setting's default (required ones left out)."""
        return {s.key: s.default for s in self.settings if not s.required}

    def check_table(self, data, where: str, error: type = MethodError) -> dict:
        """Refuse a value that is not a table, unknown keys and missing required keys."""
        if not isinstance(data, dict):
            label = f"[[{self.name}]]" if self.array else f"[{self.name}]"
            raise error(f"{label} must be a table", where=where, fix=f"write {label} with key = value lines")
        unknown = sorted(set(data) - set(self.keys), key=str)
        if unknown:
            raise error(f"unknown key(s) {', '.join(map(repr, unknown))}", where=where,
                        fix=f"allowed keys are {', '.join(sorted(self.keys))}")
        missing = [s.key for s in self.settings if s.required and s.key not in data]
        if missing:
            raise error(f"missing required key(s) {', '.join(map(repr, missing))}", where=where,
                        fix="add them; see the file's documentation")
        return data

    def parse(self, data, where: str, error: type = MethodError, *, only: Iterable[str] | None = None) -> dict:
        """Validate ``data`` (a parsed TOML table) and return every setting's value.

        Absent keys get their defaults.  ``where`` names the table (``"m.toml: [cf]"``); a
        refused value is named ``<where>.<key>``.  ``only`` limits the result to those keys
        (the others are still checked for being known).
        """
        self.check_table(data, where, error)
        out = {}
        for s in self.settings:
            if only is not None and s.key not in only:
                continue
            if s.key in data:
                out[s.key] = s.validate(data[s.key], f"{where}.{s.key}", error)
            elif not s.required:
                out[s.key] = _copy(s.default)
        return out


def _annotation(s: Setting) -> str:
    base = {"bool": "bool", "int": "int", "float": "float", "str": "str", "list": "list", "table": "dict",
            "any": "object"}[s.type]
    if isinstance(s.default, tuple):
        base = "tuple"
    return f"{base} | None" if s.default is None else base


def settings_dataclass(table: Table, name: str, *, module: str, bases: tuple = (), frozen: bool = False,
                       doc: str = "", leading: tuple = (), skip: Iterable[str] = (), defaults: dict | None = None):
    """A dataclass with one field per setting of ``table`` (same order, types and defaults), so a
    settings object is declared once, by its table.  Methods come from ``bases`` (a mix-in class;
    its ``__post_init__``, if any, runs after ``__init__``).  Mutable defaults are copied per
    instance.  ``leading`` adds required fields ``(name, annotation)`` first (values resolved by
    the owner, e.g. a line's id), ``skip`` leaves settings out and ``defaults`` replaces defaults."""
    import dataclasses

    specs = list(leading)
    skip, defaults = set(skip), defaults or {}
    for s in table.settings:
        if s.key in skip:
            continue
        if s.key in defaults:
            s = dataclasses.replace(s, default=defaults[s.key])
        if s.required:
            specs.append((s.key, _annotation(s)))
        elif isinstance(s.default, (list, dict)):
            specs.append((s.key, _annotation(s), dataclasses.field(default_factory=lambda d=s.default: _copy(d))))
        else:
            specs.append((s.key, _annotation(s), dataclasses.field(default=s.default)))
    cls = dataclasses.make_dataclass(name, specs, bases=bases, frozen=frozen, namespace={"__module__": module})
    cls.__qualname__ = name
    cls.__doc__ = (doc or f"Settings of [{table.name}].") + "\n\nFields: the settings of " + (
        f"``[{table.name}]`` (generated from its :class:`compquant.settings.Table`)")
    cls.TABLE = table
    return cls


def _copy(v):
    if isinstance(v, list):
        return [_copy(x) for x in v]
    if isinstance(v, dict):
        return {k: _copy(x) for k, x in v.items()}
    return v


# ---------------------------------------------------------------------- the generated reference
def table_markdown(t: Table) -> str:
    """One table's reference: a heading, its doc, one row per setting, and its notes."""
    head = f"[[{t.name}]]" if t.array else f"[{t.name}]"
    out = [f"## `{head}`", ""]
    if t.doc:
        out += [t.doc, ""]
    if t.owner:
        out += [f"Parsed by `{t.owner}`.", ""]
    out += ["| key | type | default | allowed | unit | meaning |", "|---|---|---|---|---|---|"]
    for s in t.settings:
        allowed = s.range_text()
        if s.choices:
            allowed = ", ".join(f"`{_toml(c)}`" for c in s.choices)
        if s.aliases:
            allowed = (allowed + "; " if allowed else "") + " or ".join(f"`\"{a}\"`" for a in s.aliases)
        doc = s.doc.replace("|", "\\|")
        out.append(f"| `{s.key}` | {s.type_text()} | {s.default_text()} | {allowed} | {s.unit} | {doc} |")
    if t.notes:
        out += [""] + [f"- {n}" for n in t.notes]
    return "\n".join(out) + "\n"


def reference_markdown(tables: Iterable[Table], title: str, intro: str = "") -> str:
    """The generated reference page of a file kind: every table, in the order given."""
    parts = [f"# {title}", ""]
    if intro:
        parts += [intro, ""]
    for t in tables:
        parts.append(table_markdown(t))
    return "\n".join(parts).rstrip("\n") + "\n"


__all__ = ["REQUIRED", "TYPES", "Setting", "Table", "reference_markdown",
           "settings_dataclass", "table_markdown", "toml_text"]
