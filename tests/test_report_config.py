"""Lab profile and specification files: the demo files load; mistakes give clear ConfigErrors."""

from __future__ import annotations

from pathlib import Path

import periodictable
import pytest

from compquant.errors import ConfigError, InputError
from compquant.report.config import ELEMENT_SYMBOLS, load_lab_profile, load_specification

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_runs"


def test_element_symbols_match_periodictable():
    # reference: periodictable's element table (Z = 1..118)
    ref = {el.symbol for el in periodictable.elements if 1 <= el.number <= 118}
    assert ELEMENT_SYMBOLS == ref


def test_demo_lab_profile_loads():
    lab = load_lab_profile(DEMO / "lab.toml")
    assert lab.name == "Harbourside Materials Testing Laboratory"
    assert lab.certificate_prefix == "HMTL"
    assert lab.signatory_name and lab.signatory_title
    assert lab.sample_received == "2026-11-13"
    assert len(lab.sha256) == 64


def test_demo_spec_loads_in_g_per_g():
    spec = load_specification(next(DEMO.glob("spec-*.toml")))
    cu = spec.limit("Cu")
    assert cu.lower == pytest.approx(0.57) and cu.upper == pytest.approx(0.595)
    assert spec.limit("Zn").remainder
    assert spec.decision_rule in ("simple-acceptance", "guard-band-binary", "guard-band")


def _write(tmp_path, text, name="f.toml"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


LAB_OK = """
[lab]
name = "X Lab"
address = "1 Road"
certificate_prefix = "XL"
[signatory]
name = "A. Person"
title = "Manager"
"""


@pytest.mark.parametrize(
    "text,where,what",
    [
        (LAB_OK.replace('[signatory]\nname = "A. Person"\ntitle = "Manager"\n', ""), "f.toml", "signatory"),
        (
            LAB_OK.replace('certificate_prefix = "XL"', 'certificate_prefix = "X/L"'),
            "certificate_prefix",
            "letters",
        ),
        (LAB_OK.replace('name = "X Lab"', 'name = "X Lab"\nnmae = "typo"'), "[lab]", "nmae"),
        (LAB_OK.replace('address = "1 Road"', "address = 5"), "address", "list of strings"),
        (LAB_OK + '[samples]\nreceived = "yesterday"\n', "received", "date"),
        ("[lab\nname=", "f.toml", "TOML"),
    ],
)
def test_lab_profile_errors(tmp_path, text, where, what):
    with pytest.raises(ConfigError) as ei:
        load_lab_profile(_write(tmp_path, text))
    msg = ei.value.one_line()
    assert where in msg and what in msg
    assert ei.value.fix


def test_lab_profile_missing_file(tmp_path):
    with pytest.raises(InputError):
        load_lab_profile(tmp_path / "nope.toml")


SPEC_OK = """
[specification]
name = "S"
grade = "G"
decision_rule = "guard-band"
[limits.Cu]
min = 57.0
max = 59.0
unit = "%"
"""


@pytest.mark.parametrize(
    "text,what",
    [
        (SPEC_OK.replace('"guard-band"', '"nearest"'), "decision_rule"),
        (SPEC_OK.replace('unit = "%"', 'unit = "ppm"'), "unit"),
        (SPEC_OK.replace("min = 57.0", "min = 60.0"), "min is above max"),
        (SPEC_OK.replace("[limits.Cu]", "[limits.Cx]"), "not an element symbol"),
        (SPEC_OK.replace("max = 59.0", "max = -1"), "finite number"),
        (SPEC_OK.replace("max = 59.0", "max = 590.0"), "above 100 %"),
        (SPEC_OK.replace("min = 57.0\nmax = 59.0\n", ""), "needs min, max"),
        (SPEC_OK + "[limits.Zn]\nremainder = true\nmax = 3\n", "remainder"),
        (SPEC_OK.replace('[limits.Cu]\nmin = 57.0\nmax = 59.0\nunit = "%"\n', ""), "limits"),
    ],
)
def test_spec_errors(tmp_path, text, what):
    with pytest.raises(ConfigError) as ei:
        load_specification(_write(tmp_path, text))
    assert what in ei.value.one_line()
