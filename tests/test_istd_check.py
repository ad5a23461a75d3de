"""Internal-standard line warnings (compquant.calibrate.istd_check).

Level energies: from memory of the NIST Atomic Spectra Database — Al I 394.401 nm and Cu I
324.754 nm end on their atoms' ground states (Al 3s²3p ²P°₁/₂, Cu 3d¹⁰4s ²S₁/₂); Cu I 510.554 nm
ends on the metastable 3d⁹4s² ²D₅/₂ level at 1.39 eV.
"""

from __future__ import annotations

from compquant.calibrate.istd_check import internal_standard_warnings


def test_resonance_internal_standard_warns_and_suggests_non_resonance_lines():
    warns, alts = internal_standard_warnings("Al I 394.401", analyte_id="Si I 288.158")
    assert any("resonance line" in w for w in warns)
    assert alts and all(a.startswith("Al ") and a != "Al I 394.401" for a in alts)
    from compquant.atomic import load_line_list

    ll = load_line_list().set_index("line_id")
    assert all(ll.loc[a, "ei_ev"] > 0.1 for a in alts)  # none of them a resonance line
    warns, _ = internal_standard_warnings("Cu I 324.754")
    assert any("resonance" in w for w in warns)


def test_non_resonance_standard_with_matched_upper_level_is_quiet():
    # Cu I 510.554 (E_k 3.82 eV) against Zn I 472.215 is a non-resonance pair, but the upper
    # levels differ by 2.8 eV: only the temperature warning
    warns, _ = internal_standard_warnings("Cu I 510.554", analyte_id="Zn I 472.215")
    assert len(warns) == 1 and "differ by more than 1 eV" in warns[0]
    warns, alts = internal_standard_warnings("Cu I 510.554", analyte_id="Cu I 578.213")
    assert warns == [] and alts == []
    warns, _ = internal_standard_warnings("Cu I 510.554", self_absorbed={"Cu I 510.554"})
    assert any("self-absorbed" in w for w in warns)
