"""Bring-your-own atomic data: NIST ASD and mapped-CSV importers, the lab overlay and its precedence.

The NIST ASD text below follows the column headings of the ASD's tab-delimited output as the NIST
ASD Lines Help documents them ("Output for Lines", physics.nist.gov/PhysRefData/ASD/Html/
lineshelp.html, and the ASDCache documentation's data schema, which lists the tab-separated
line table's headings: element, sp_num, obs_wl_vac(nm), unc_obs_wl, ritz_wl_vac(nm), unc_ritz_wl,
wn(cm-1), intens, Aki(s^-1), fik, S(a.u.), log_gf, Acc, Ei(cm-1), Ek(cm-1), conf_i, term_i, J_i,
conf_k, term_k, J_k, g_i, g_k, Type, tp_ref, line_ref; the air columns and the eV energy unit are
the same headings with the form's other choices).  Level output: Configuration, Term, J, g,
Level (eV), Uncertainty (eV), Reference, with a "Limit" row for the ionisation limit.  The Aki of
Cu I 324.754 in it is invented (1.234e8 s^-1) so that the test can see which value wins; the
other numbers are from memory of the NIST ASD Cu I entries.
"""

from __future__ import annotations

import pytest
from click.testing import CliRunner

import compquant.atomic as atomic
from compquant.atomic import overlay
from compquant.cli import main
from compquant.errors import AtomicDataError

NIST_LINES = (
    "element\tsp_num\tobs_wl_air(nm)\tritz_wl_air(nm)\tAki(s^-1)\tAcc\tEi(eV)\tEk(eV)\tconf_i\tterm_i\tJ_i\t"
    "conf_k\tterm_k\tJ_k\tg_i\tg_k\tType\n"
    'Cu\t1\t="324.754"\t="324.7540"\t="1.234e+08"\tAA\t="0.000000"\t="3.8166920"\t3d10.4s\t2S\t1/2\t'
    "3d10.4p\t2P*\t3/2\t2\t4\t\n"
    'Cu\t1\t\t="330.7950"\t="3.9e+05"\tC\t="[3.786]"\t="(7.5332)"\t3d9.4s.4p\t4P*\t3/2\t'
    "3d9.4s.5s\t4D\t5/2\t4\t6\t\n"
    'Cu\t1\t="331.000"\t\t\t\t="1.0"\t="4.7"\t\t\t\t\t\t\t2\t4\t\n'
)
NIST_LEVELS = (
    "Configuration\tTerm\tJ\tg\tLevel (eV)\tUncertainty (eV)\tReference\n"
    '3d10.4s\t2S\t1/2\t2\t="0.0000000"\t\tL1\n'
    '3d9.4s2\t2D\t5/2\t6\t="1.3889"\t\tL1\n'
    '3d9.4s2\t2D\t3/2\t4\t="[1.6422]"\t\tL1\n'
)


@pytest.fixture(autouse=True)
def _no_overlay(monkeypatch):
    monkeypatch.delenv(overlay.ENV_VAR, raising=False)
    overlay.use_overlay(None)
    yield
    overlay.use_overlay(None)


def _write(tmp_path, name, text):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_nist_lines_import_reads_asd_cells(tmp_path):
    df = overlay.read_nist_lines(_write(tmp_path, "cu.tsv", NIST_LINES))
    assert len(df) == 2  # the row without Aki cannot serve the physics
    first, second = df.iloc[0], df.iloc[1]
    assert (first["element"], first["ion"], first["wavelength_nm"]) == ("Cu", 1, 324.754)
    assert first["aki"] == 1.234e8 and first["aki_grade"] == "AA" and (first["gi"], first["gk"]) == (2, 4)
    # Ritz wavelength where no observed one; bracketed / parenthesised energies are numbers
    assert second["wavelength_nm"] == 330.795 and second["ei_ev"] == 3.786 and second["ek_ev"] == 7.5332
    assert "NIST ASD export cu.tsv" in first["source"]


def test_overlay_takes_precedence_and_keeps_provenance(tmp_path, monkeypatch):
    src = _write(tmp_path, "cu.tsv", NIST_LINES)
    before = src.read_bytes()
    shipped = atomic.load_line_list()
    old = atomic.find_line("Cu I", 324.754)
    ov = tmp_path / "overlay"
    overlay.add_to_overlay(overlay.read_nist_lines(src), ov)
    assert src.read_bytes() == before  # the input is never modified
    monkeypatch.setenv(overlay.ENV_VAR, str(ov))
    overlay.use_overlay(None)
    new = atomic.load_line_list()
    row = new[new["line_id"] == "Cu I 324.754"].iloc[0]
    assert row["aki"] == 1.234e8 and row["aki"] != old["aki"]
    assert "NIST ASD export" in row["source"] and "lab overlay" in row["grade_basis"]
    # one shipped line replaced, the Ritz line added unless the shipped list already holds it
    added = 0 if atomic.find_line("Cu I", 330.795, lines=shipped) is not None else 1
    assert len(new) == len(shipped) + added
    assert atomic.find_line("Cu I", 330.795, lines=new)["aki"] == 3.9e5
    # without the overlay the shipped value is back
    monkeypatch.delenv(overlay.ENV_VAR)
    overlay.use_overlay(None)
    assert atomic.find_line("Cu I", 324.754)["aki"] == old["aki"]


def test_later_import_replaces_earlier_overlay_row(tmp_path):
    ov = tmp_path / "ov"
    overlay.add_to_overlay(overlay.read_nist_lines(_write(tmp_path, "a.tsv", NIST_LINES)), ov)
    csv = _write(tmp_path, "lab.csv", "el,st,lam,A,lo,up,g1,g2\nCu,1,3247.54,1.111e8,0,3.8167,2,4\n")
    mapping = {"element": "el", "ion": "st", "wavelength_nm": "lam", "aki": "A", "ei_ev": "lo", "ek_ev": "up",
               "gi": "g1", "gk": "g2"}
    df = overlay.read_mapped_csv(csv, mapping, grade="B", wavelength_unit="A", source="lab book 7")
    assert df.iloc[0]["wavelength_nm"] == pytest.approx(324.754)
    overlay.add_to_overlay(df, ov)
    overlay.use_overlay(ov)
    row = atomic.find_line("Cu I", 324.754)
    assert row["aki"] == 1.111e8 and row["source"] == "lab book 7" and row["aki_grade"] == "B"


def test_mapped_csv_errors_name_the_problem(tmp_path):
    csv = _write(tmp_path, "lab.csv", "el,st\nCu,1\n")
    with pytest.raises(AtomicDataError, match="lacks"):
        overlay.read_mapped_csv(csv, {"element": "el"})
    full = {"element": "el", "ion": "st", "wavelength_nm": "x", "aki": "x", "ei_ev": "x", "ek_ev": "x",
            "gi": "x", "gk": "x"}
    with pytest.raises(AtomicDataError, match="not in the file"):
        overlay.read_mapped_csv(csv, full, grade="B")


def test_nist_levels_import_gives_a_level_table(tmp_path):
    lev = overlay.read_nist_levels(_write(tmp_path, "lev.tsv", NIST_LEVELS))
    assert list(lev["g"]) == [2, 6, 4] and lev["energy_ev"].iloc[2] == 1.6422
    kt = atomic.K_B_EV * 8000.0
    u = atomic.partition_function("Cu I", 8000.0, levels=lev)
    assert u == pytest.approx(2 + 6 * 2.718281828459045 ** (-1.3889 / kt) + 4 * 2.718281828459045 ** (-1.6422 / kt))


def test_cli_import_and_bad_mapping(tmp_path):
    src = _write(tmp_path, "cu.tsv", NIST_LINES)
    ov = tmp_path / "ov"
    r = CliRunner().invoke(main, ["atomic-import", str(src), "--overlay", str(ov)])
    assert r.exit_code == 0, r.output
    assert (ov / "lines.csv").exists() and "2 lines" in r.output
    csv = _write(tmp_path, "lab.csv", "a,b\n1,2\n")
    r = CliRunner().invoke(main, ["atomic-import", str(csv), "--overlay", str(ov), "--format", "csv",
                                  "--map", "element"])
    assert r.exit_code == 2
    assert r.output.strip().startswith("error: --map:")


# the ASD's default output: vacuum wavelengths below 200 nm / air above, energies in cm^-1; here
# the all-vacuum choice with cm^-1 (headings as in the ASD documentation, see the module docstring)
NIST_LINES_VAC_CM = (
    "element\tsp_num\tobs_wl_vac(nm)\tunc_obs_wl\tritz_wl_vac(nm)\tunc_ritz_wl\twn(cm-1)\tintens\tAki(s^-1)\t"
    "fik\tS(a.u.)\tlog_gf\tAcc\tEi(cm-1)\tEk(cm-1)\tconf_i\tterm_i\tJ_i\tconf_k\tterm_k\tJ_k\tg_i\tg_k\tType\t"
    "tp_ref\tline_ref\n"
    'Cu\t1\t="324.8476"\t="0.0002"\t="324.84762"\t="0.00002"\t="30784.0"\t="10000"\t="1.39e+08"\t'
    '="0.439"\t="1.88"\t="-0.058"\tAA\t="0.000"\t="30783.697"\t3d10.4s\t2S\t1/2\t3d10.4p\t2P*\t3/2\t2\t4\t'
    "\tT1\tL1\n"
)


def test_nist_lines_vacuum_wavelengths_and_wavenumber_energies(tmp_path):
    df = overlay.read_nist_lines(_write(tmp_path, "cu_vac.tsv", NIST_LINES_VAC_CM))
    row = df.iloc[0]
    # vacuum 324.8476 nm -> standard air 324.7540 nm (NIST ASD air value of Cu I 324.754, from memory)
    assert row["wavelength_nm"] == pytest.approx(324.7540, abs=2e-4)
    # 30 783.697 cm^-1 x h c / e (CODATA, scipy.constants) = 3.81669 eV (NIST ASD Cu I 4p 2P3/2, from memory)
    from scipy import constants

    assert row["ek_ev"] == pytest.approx(30783.697 * constants.h * constants.c * 100 / constants.e, rel=1e-12)
    assert row["ek_ev"] == pytest.approx(3.81669, abs=2e-5)
    assert row["ei_ev"] == 0.0 and row["aki"] == 1.39e8 and row["aki_grade"] == "AA"


def test_nist_lines_gA_column_and_missing_columns(tmp_path):
    text = NIST_LINES.replace("Aki(s^-1)", "gA(s^-1)")
    df = overlay.read_nist_lines(_write(tmp_path, "ga.tsv", text))
    # gA / g_k (g_k = 4 for the 4p 2P3/2 level)
    assert df.iloc[0]["aki"] == pytest.approx(1.234e8 / 4)
    with pytest.raises(AtomicDataError, match="wavelength column"):
        overlay.read_nist_lines(_write(tmp_path, "nowl.tsv", NIST_LINES.replace("obs_wl_air(nm)", "x")
                                       .replace("ritz_wl_air(nm)", "y")))
    with pytest.raises(AtomicDataError, match="Ei"):
        overlay.read_nist_lines(_write(tmp_path, "noe.tsv", NIST_LINES.replace("Ei(eV)", "z")))


def test_nist_levels_limit_row_wavenumbers_and_unresolved_j(tmp_path):
    text = (
        "Configuration\tTerm\tJ\tLevel (cm-1)\tUncertainty (cm-1)\tReference\n"
        '3d10.4s\t2S\t1/2\t="0.000"\t\tL1\n'
        '3d9.4s2\t2D\t5/2\t="11202.565"\t\tL1\n'
        '3d10.nf\t\t"2,3"\t="61000.0"\t\tL1\n'
        'Cu II (3d10 1S<0>)\tLimit\t\t="62317.46"\t\tL2\n'
    )
    lev = overlay.read_nist_levels(_write(tmp_path, "lev_cm.tsv", text))
    # g = 2J + 1 without a g column; "2,3" (levels not resolved) -> 5 + 7; the Limit row is no level
    assert list(lev["g"]) == [2, 6, 12]
    # 11 202.565 cm^-1 = 1.38895 eV (NIST ASD Cu I 3d9 4s2 2D5/2, from memory)
    assert lev["energy_ev"].iloc[1] == pytest.approx(1.38895, abs=2e-5)
