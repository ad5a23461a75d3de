"""Certified-standards files: loading, unit conversion, and every kind of bad input."""

from __future__ import annotations

import periodictable
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from compquant.calibrate.standards import ELEMENT_SYMBOLS, load_standards
from compquant.errors import StandardsError

HEADER = "standard_id,matrix,element,mass_fraction,expanded_uncertainty,k,unit,source\n"
GOOD = HEADER + (
    "CRM-A,Cu,Zn,12.5,0.2,2,%,invented demo lot\n"
    "CRM-A,Cu,Pb,850,30,2,mg/kg,invented demo lot\n"
    "CRM-B,Cu,Zn,0.05,0.001,2,g/g,invented demo lot\n"
)


def test_symbols_match_periodictable():
    # periodictable (outside reference) lists the elements by Z (neutron "n" at Z = 0)
    ref = [el.symbol for el in periodictable.elements if el.number >= 1]
    assert ELEMENT_SYMBOLS == ref


def test_load_csv_converts_units(tmp_path):
    p = tmp_path / "s.csv"
    p.write_text(GOOD)
    df = load_standards(p)
    zn = df[(df.standard_id == "CRM-A") & (df.element == "Zn")].iloc[0]
    assert zn.mass_fraction == pytest.approx(0.125)
    assert zn.u == pytest.approx(0.001)  # u = U/k = 0.2 % / 2
    pb = df[df.element == "Pb"].iloc[0]
    assert pb.mass_fraction == pytest.approx(850e-6)
    assert pb.U == pytest.approx(30e-6)
    assert len(df.attrs["sha256"]) == 64


def test_load_toml(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text(
        '[[standard]]\nid = "CRM-A"\nmatrix = "Cu"\nsource = "invented"\n'
        '[standard.elements]\nZn = {value = 12.5, U = 0.2, k = 2, unit = "%"}\n'
        'Pb = {value = 850, U = 30, k = 2, unit = "mg/kg"}\n'
    )
    df = load_standards(p)
    assert set(df.element) == {"Zn", "Pb"}
    assert df[df.element == "Zn"].mass_fraction.iloc[0] == pytest.approx(0.125)


@pytest.mark.parametrize(
    "row,needle,column",
    [
        ("CRM-C,Cu,Zx,1,0.1,2,%,x", "unknown element 'Zx'", "element"),
        ("CRM-C,Cu,zn,1,0.1,2,%,x", "did you mean 'Zn'", "element"),
        ("CRM-C,Cu,Zn,,0.1,2,%,x", "missing value", "mass_fraction"),
        ("CRM-C,Cu,Zn,-1,0.1,2,%,x", "negative value", "mass_fraction"),
        ("CRM-C,Cu,Zn,1,-0.1,2,%,x", "negative value", "expanded_uncertainty"),
        ("CRM-C,Cu,Zn,1,0.1,0,%,x", "must be > 0", "'k'"),
        ("CRM-C,Cu,Zn,1,0.1,-2,%,x", "must be > 0", "'k'"),
        ("CRM-C,Cu,Zn,1,0.1,2,ppb,x", "bad unit 'ppb'", "unit"),
        ("CRM-C,Cu,Zn,abc,0.1,2,%,x", "not a number", "mass_fraction"),
        ("CRM-C,Cu,Zn,150,0.1,2,%,x", "above 1", ""),
        ("CRM-A,Cu,Zn,12.5,0.2,2,%,again", "duplicated entry", ""),
        ("CRM-C,Cu,Zn,1,0.1,2,%", "fields", ""),
    ],
)
def test_bad_rows_name_file_row_and_column(tmp_path, row, needle, column):
    p = tmp_path / "bad.csv"
    p.write_text(GOOD + row + "\n")
    with pytest.raises(StandardsError) as ei:
        load_standards(p)
    msg = ei.value.one_line()
    assert needle in msg
    assert "bad.csv" in msg and "line 5" in msg
    assert column in msg
    assert ei.value.fix


def test_bad_header_and_empty(tmp_path):
    p = tmp_path / "h.csv"
    p.write_text("standard_id,element,mass_fraction\nA,Zn,1\n")
    with pytest.raises(StandardsError, match="missing column"):
        load_standards(p)
    e = tmp_path / "e.csv"
    e.write_text("")
    with pytest.raises(StandardsError, match="empty"):
        load_standards(e)
    with pytest.raises(Exception, match="not found"):
        load_standards(tmp_path / "nope.csv")


_FIELD = st.one_of(st.sampled_from(["", "Zn", "zn", "Cu", "%", "mg/kg", "g/g", "ppb", "-1", "0", "2",
                                    "1e400", "nan", "0.5", "abc", '"a,b"']),
                   st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=6))


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(rows=st.lists(st.lists(_FIELD, min_size=6, max_size=9), min_size=1, max_size=4))
def test_fuzzed_rows_never_escape_the_error_family(tmp_path, rows):
    # any file either loads into finite, valid values or raises StandardsError (never another error)
    p = tmp_path / "fuzz.csv"
    p.write_text(HEADER + "\n".join(",".join(r) for r in rows) + "\n", encoding="utf-8")
    try:
        df = load_standards(p)
    except StandardsError as exc:
        assert exc.where and "fuzz.csv" in exc.one_line()
        return
    assert (df["mass_fraction"] >= 0).all() and (df["mass_fraction"] <= 1).all()
    assert (df["k"] > 0).all() and df["u"].notna().all()
