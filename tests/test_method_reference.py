"""The declarative settings mechanism (compquant.settings) and the reference generated from it."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest

from compquant.errors import ConfigError, MethodError
from compquant.settings import REQUIRED, Setting, Table

ROOT = Path(__file__).resolve().parents[1]


def _script():
    path = ROOT / "scripts" / "make_method_reference.py"
    spec = importlib.util.spec_from_file_location("make_method_reference", path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_committed_method_reference_is_up_to_date():
    """docs/method-reference.md is what scripts/make_method_reference.py writes from the tables."""
    mod = _script()
    committed = (ROOT / "docs" / "method-reference.md").read_text(encoding="utf-8")
    assert committed == mod.render(), "run: python scripts/make_method_reference.py"


def test_reference_lists_every_key_of_every_table():
    mod = _script()
    text = mod.render()
    for t in mod.method_tables():
        head = f"[[{t.name}]]" if t.array else f"[{t.name}]"
        assert f"## `{head}`" in text
        for key in t.keys:
            assert f"| `{key}` |" in text


T = Table("demo", (
    Setting("n", "int", 3, "count", min=1),
    Setting("x", "float", 0.5, "fraction", min=0, max=1, min_open=True),  # (0, 1]
    Setting("how", "str", "a", "choice", choices=("a", "b")),
    Setting("on", "bool", True, "switch"),
    Setting("name", "str", REQUIRED, "required text"),
    Setting("pair", "list", [1.0, 2.0], "two numbers", item="float", length=2),
    Setting("r", "float", None, "optional, or auto", aliases={"auto": None}, min=0, min_open=True),
))


def test_parse_fills_defaults_and_converts():
    v = T.parse({"name": "m", "n": 4.0, "x": 1, "r": "Auto"}, "f.toml: [demo]")
    assert v == {"n": 4, "x": 1.0, "how": "a", "on": True, "name": "m", "pair": [1.0, 2.0], "r": None}
    assert isinstance(v["n"], int) and isinstance(v["x"], float)


@pytest.mark.parametrize(
    "data,where,what,fix",
    [
        ({"name": "m", "colour": 1}, "f.toml: [demo]", "unknown key(s) 'colour'", "allowed keys are"),
        ({}, "f.toml: [demo]", "missing required key(s) 'name'", "add them"),
        ({"name": "m", "n": 2.5}, "f.toml: [demo].n", "expected a whole number, got 2.5", "write an integer"),
        ({"name": "m", "n": True}, "f.toml: [demo].n", "expected a number, got True", "plain number"),
        ({"name": "m", "n": 0}, "f.toml: [demo].n", "value 0 out of range", "use a finite value >= 1"),
        # ISO 80000-2:2019 interval notation: ( ) exclusive, [ ] inclusive bounds
        ({"name": "m", "x": 0}, "f.toml: [demo].x", "value 0 out of range", "use a finite value in (0, 1]"),
        ({"name": "m", "x": float("nan")}, "f.toml: [demo].x", "out of range", "finite"),
        ({"name": "m", "how": "c"}, "f.toml: [demo].how", "unknown value 'c'", "use one of a, b"),
        ({"name": "m", "on": 1}, "f.toml: [demo].on", "expected true or false, got 1", "write true or false"),
        ({"name": 5}, "f.toml: [demo].name", "expected text, got 5", "quote the value"),
        ({"name": "m", "pair": [1.0]}, "f.toml: [demo].pair", "expected a list of 2 number values", "pair"),
        ({"name": "m", "r": "fit"}, "f.toml: [demo].r", "expected a number, got 'fit'", "plain number"),
    ],
)
def test_one_line_messages_name_file_table_and_key(data, where, what, fix):
    with pytest.raises(ConfigError) as ei:
        T.parse(data, "f.toml: [demo]", ConfigError)
    e = ei.value
    assert e.where == where and what in e.what and fix in e.fix
    assert e.one_line() == f"{e.where}: {e.what}; {e.fix}" and "\n" not in e.one_line()


def test_method_file_errors_name_the_key(tmp_path):
    from compquant.method import method_from_dict

    doc = {"method": {"id": "m"}, "lines": [{"id": "Cu I 324.754"}], "preprocess": {"qc": {"k": -1}}}
    with pytest.raises(MethodError) as ei:
        method_from_dict(doc, source="m.toml")
    assert ei.value.one_line() == "m.toml: [preprocess.qc].k: value -1 out of range; use a finite value > 0"


def _doc_keys(text: str) -> dict[str, set[str]]:
    """Keys in the first column of each table of docs/method-file.md, by the table heading above."""
    import re

    out: dict[str, set[str]] = {}
    current = None
    for line in text.splitlines():
        m = re.match(r"^#{2,3} `\[\[?([a-z_.]+)\]?\]`", line)
        if m:
            current = m.group(1)
            out.setdefault(current, set())
        elif line.startswith("## ") or line.startswith("### "):
            current = None
        elif current and line.startswith("| `"):
            first = line.split("|")[1]
            out[current].update(re.findall(r"`([a-z_]+)`", first))
    return out


def test_method_file_page_names_exactly_the_declared_keys():
    """The prose page (docs/method-file.md) explains every key of the tables compquant.method owns,
    and no key the tables do not know (its tables were typed by hand before the declarations)."""
    from compquant.method import TABLES

    documented = _doc_keys((ROOT / "docs" / "method-file.md").read_text(encoding="utf-8"))
    for t in TABLES:
        assert documented.get(t.name) == set(t.keys), t.name
