"""The public API: ``from compquant import ...`` gives every name of ``compquant.__all__``,
lazily (PEP 562 module ``__getattr__``, https://peps.python.org/pep-0562/), so that
``import compquant`` alone loads no numerical library (the CLI's ``--help`` imports it)."""

from __future__ import annotations

import importlib
import subprocess
import sys

import pytest

import compquant


@pytest.mark.parametrize("name", sorted(set(compquant.__all__)))
def test_every_public_name_imports(name):
    ns: dict = {}
    exec(f"from compquant import {name}", ns)  # the statement a notebook writes
    assert ns[name] is getattr(compquant, name)
    assert name in dir(compquant)


def test_unknown_name_is_an_attribute_error():
    with pytest.raises(AttributeError, match="no attribute 'no_such_step'"):
        compquant.no_such_step  # noqa: B018


def test_import_is_cheap():
    """``import compquant`` loads neither numpy nor any step package (fresh interpreter)."""
    code = (
        "import sys, compquant; "
        "heavy = [m for m in ('numpy', 'pandas', 'scipy', 'h5py', 'compquant.run', 'compquant.lines') "
        "if m in sys.modules]; print(','.join(heavy))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


@pytest.mark.parametrize("name", ["analyse", "calibrate"])
def test_function_named_like_its_module(name, monkeypatch):
    """``compquant.calibrate`` / ``compquant.analyse`` are the modules (attributes still reach
    them) and, called, call the function of the same name."""
    mod = importlib.import_module(f"compquant.{name}")
    assert getattr(compquant, name) is mod
    seen = []
    monkeypatch.setattr(mod, name, lambda *a, **k: seen.append((a, k)) or "called")
    assert getattr(compquant, name)(1, key=2) == "called"
    assert seen == [((1,), {"key": 2})]


def test_public_names_are_the_implementations():
    from compquant.calibrate.apply import quantify
    from compquant.cflibs.analysis import analyse_cf
    from compquant.run.reader import Run

    assert compquant.quantify is quantify
    assert compquant.analyse_cf is analyse_cf
    assert compquant.Run is Run
