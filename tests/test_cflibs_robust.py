"""Robust closure, failed measurements, plasma checks, nₑ routes and the intensity basis.

The line intensities are the hand LTE calculations of ``tests/cf_hand.py`` (CODATA constants
via scipy.constants, Griem 1964 Saha equation); the composition given to them is the truth.
The Mn lines below are invented for the tests (plausible magnitudes only, like cf_hand's).
"""

from __future__ import annotations

import math
import warnings

import cf_hand
import numpy as np
import pandas as pd
import pytest
from scipy import constants as sc

from compquant.cflibs import CFSettings, analyse_cf
from compquant.cflibs.consistency import plasma_checks, species_t_check
from compquant.errors import InputError, MethodError, PhysicsError

# invented Mn lines: (element, ion, wavelength nm, Ek eV, Ei eV, gk*Aki 1/s, grade)
MN_LINES = [
    ("Mn", 1, 279.482, 4.435, 0.000, 2.96e9, "B"),
    ("Mn", 1, 280.108, 4.425, 0.000, 1.20e9, "B"),
    ("Mn", 1, 403.076, 3.076, 0.000, 1.02e8, "B"),
    ("Mn", 1, 403.307, 3.073, 0.000, 1.00e8, "B"),
    ("Mn", 2, 257.610, 4.810, 0.000, 2.50e9, "B"),
    ("Mn", 1, 404.136, 5.181, 2.114, 7.90e8, "C"),
]
W_MN = {"Fe": 0.6995, "Cr": 0.18, "Ni": 0.12, "Mn": 0.0005}
T0, NE0 = 10500.0, 5e16


def run(lt, **settings):
    s = {"mc_draws": 0, **settings}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse_cf(lt, atomic=cf_hand.atomic(), settings=s, instrument={"instrument_fwhm_nm": 0.05})


def mn_table():
    return cf_hand.line_table(W_MN, T0, NE0, lines=cf_hand.LINES + MN_LINES)


def without_mn(w):
    tot = sum(v for k, v in W_MN.items() if k != "Mn")
    return {k: v / tot for k, v in W_MN.items() if k != "Mn"}


def _hide(lt, lids, u_factor=10.0):
    """Mark lines as looked for and not found: noise u = u_factor × their true intensity."""
    m = lt["line_id"].isin(lids)
    lt.loc[m, "u_intensity"] = u_factor * lt.loc[m, "intensity"]
    lt.loc[m, "flags"] = "not_found"
    return lt


# ------------------------------------------------------------------ robust closure
def test_single_noise_line_does_not_hijack_the_closure():
    # the magnesium-alloy case: one Mn line at SNR 3.5, 10⁴× its LTE intensity (noise spike or
    # blend), while five stronger Mn lines were looked for and not found
    lt = mn_table()
    trace = "Mn I 404.136"
    others = [x for x in lt["line_id"] if x.startswith("Mn") and x != trace]
    lt = _hide(lt, others)
    m = lt["line_id"] == trace
    lt.loc[m, "intensity"] *= 1e4
    lt.loc[m, "u_intensity"] = lt.loc[m, "intensity"] / 3.5
    for extra in ({}, {"single_line_min_snr": 3.0}):  # rule 1 alone, then rule 3 alone
        r = run(lt, **extra)
        mn = r.element("Mn")
        assert not mn.determined and math.isnan(mn.mass_fraction) and "not_determined" in mn.flags
        tab = r.results_table().set_index("element")
        assert math.isnan(tab.loc["Mn", "mass_fraction"]) and "not_determined" in tab.loc["Mn", "flags"]
        for e, w in without_mn(W_MN).items():  # the others close without Mn, at the truth
            assert r.element(e).mass_fraction == pytest.approx(w, rel=1e-6)
        assert r.temperature_k == pytest.approx(T0, rel=1e-6)
        assert "closure_incomplete" in r.flags  # Mn's true share is missing from the closure
    # with rule 1 off, the reason is the non-detections: the 279.482 resonance line predicted
    # far above its limit
    assert "non-detection" in " ".join(mn.reasons)
    ul = {c["line_id"]: c for c in r.upper_limits}
    assert ul["Mn I 279.482"]["contradicted"] and ul["Mn I 279.482"]["ratio"] > 100
    # the missing share is bounded by the non-detections (here above the true 0.0005, below
    # 2 %), and every other element's U carries it
    rm = run(lt, single_line_min_snr=3.0, mc_draws=100, mc_include_aki=False, mc_partition_u_rel=0.0)
    bound = rm.monte_carlo["missing_share_bound"]["Mn"]
    assert W_MN["Mn"] <= bound < 0.02
    assert rm.element("Fe").u >= 0.6995 * bound / math.sqrt(3.0)


def test_single_strong_line_consistent_with_nondetections_is_used():
    lt = mn_table()
    keep = "Mn I 279.482"
    lt = _hide(lt, [x for x in lt["line_id"] if x.startswith("Mn") and x != keep])
    m = lt["line_id"] == keep
    lt.loc[m, "u_intensity"] = lt.loc[m, "intensity"] / 50.0  # SNR 50 ≥ single_line_min_snr
    r = run(lt)
    assert r.element("Mn").determined and "single_line" in r.element("Mn").flags
    for e, w in W_MN.items():
        assert r.element(e).mass_fraction == pytest.approx(w, rel=1e-6)
    assert r.upper_limits and not any(c["contradicted"] for c in r.upper_limits)


def test_blended_line_is_rejected_and_reported():
    lt = cf_hand.line_table(cf_hand_w(), T0, NE0)
    m = lt["line_id"] == "Fe I 438.354"
    lt.loc[m, ["intensity", "u_intensity"]] *= 20.0  # a blend at 20× the predicted intensity
    r = run(lt)
    assert [x["line_id"] for x in r.rejected_lines] == ["Fe I 438.354"]
    assert "blend" in r.rejected_lines[0]["reason"]
    assert any(x["line_id"] == "Fe I 438.354" and "rejected" in x["reason"] for x in r.excluded_lines)
    for e, w in cf_hand_w().items():
        assert r.element(e).mass_fraction == pytest.approx(w, rel=1e-6)


def cf_hand_w():
    return {"Fe": 0.70, "Cr": 0.18, "Ni": 0.12}


def test_too_few_lines_rule_and_settings():
    lt = mn_table()
    lt = lt[~lt["line_id"].isin(["Mn I 280.108", "Mn I 403.076", "Mn I 403.307", "Mn II 257.610",
                                 "Mn I 404.136"])]
    m = lt["line_id"] == "Mn I 279.482"
    lt.loc[m, "u_intensity"] = lt.loc[m, "intensity"] / 8.0  # one line, SNR 8 < 10
    r = run(lt)
    assert not r.element("Mn").determined and "SNR" in r.element("Mn").reasons[0]
    assert "kept in the closure" in r.element("Mn").reasons[0]
    for e in ("Fe", "Cr", "Ni"):  # Mn's share stays in the closure: the others are not inflated
        assert r.element(e).mass_fraction == pytest.approx(W_MN[e], rel=1e-6)
    assert run(lt, single_line_min_snr=5.0).element("Mn").mass_fraction == pytest.approx(0.0005, rel=1e-6)
    with pytest.raises(MethodError, match="min_lines_per_element"):
        CFSettings.from_section({"min_lines_per_element": 0})


# ------------------------------------------------------------------ failed measurements
def test_collapsed_or_failed_fits_give_no_number():
    lt = mn_table()
    lt["fwhm_nm"] = 0.06
    # a profile fit collapsed to 0.006 nm (instrument 0.05 nm), and Mn's lines: one collapsed with
    # u = 1000 × I, the rest not found — Mn must get no number at all
    lt.loc[lt["line_id"] == "Cr I 520.844", "fwhm_nm"] = 0.006
    mn = lt["element"] == "Mn"
    lt.loc[mn, "fwhm_nm"] = 0.006
    lt.loc[mn, "u_intensity"] = 1000.0 * lt.loc[mn, "intensity"]
    lt.loc[mn & (lt["line_id"] != "Mn I 279.482"), "flags"] = "not_found"
    r = run(lt)
    why = {x["line_id"]: x["reason"] for x in r.excluded_lines}
    assert "collapsed" in why["Cr I 520.844"]
    assert "Cr I 520.844" not in r.element("Cr").lines
    assert not r.element("Mn").determined and "no_usable_lines" in r.element("Mn").flags
    tab = r.results_table().set_index("element")
    assert math.isnan(tab.loc["Mn", "mass_fraction"]) and math.isnan(tab.loc["Mn", "U"])
    for e, w in without_mn(W_MN).items():
        assert r.element(e).mass_fraction == pytest.approx(w, rel=1e-6)
    # a line without a finite u is not a measurement either
    lt2 = cf_hand.line_table(cf_hand_w(), T0, NE0)
    lt2.loc[lt2["line_id"] == "Ni I 341.476", "u_intensity"] = np.nan
    r2 = run(lt2)
    assert "no intensity uncertainty" in {x["line_id"]: x["reason"] for x in r2.excluded_lines}["Ni I 341.476"]


def test_u_includes_the_line_measurement_uncertainty():
    # only the intensities vary (A_ki, partition functions off): u scales with the lines' u
    kw = dict(mc_draws=400, seed=4, mc_include_aki=False, mc_partition_u_rel=0.0)
    u1 = run(cf_hand.line_table(cf_hand_w(), T0, NE0, rel_u=0.01), **kw).element("Cr").u
    u2 = run(cf_hand.line_table(cf_hand_w(), T0, NE0, rel_u=0.02), **kw).element("Cr").u
    assert u1 > 0 and u2 / u1 == pytest.approx(2.0, rel=0.15)


def test_partition_function_draws_widen_u():
    # hand estimate: at 10 500 K Cr is mostly Cr II, so ln n_Cr moves with ln U(Cr II): a 5 %
    # relative u of the partition functions gives a few per cent on w(Cr)
    kw = dict(mc_draws=400, seed=4, mc_include_aki=False)
    lt = cf_hand.line_table(cf_hand_w(), T0, NE0, rel_u=0.001)
    u0 = run(lt, mc_partition_u_rel=0.0, **kw).element("Cr").u / 0.18
    u5 = run(lt, mc_partition_u_rel=0.05, **kw).element("Cr").u / 0.18
    assert u0 < 0.005 and 0.02 < u5 < 0.1


# ------------------------------------------------------------------ physical solutions
def _h_alpha_row(ne, T, w_instr=0.05):
    """H I 656.28 nm row whose FWHM is the Voigt of the Gigosos et al. (2003) Stark width at ne
    with instrument ⊕ Doppler (H, 1.008 u), by the Olivero & Longbothum (1977) formula."""
    w_d = 656.279 * math.sqrt(8 * sc.k * T * math.log(2) / (1.008 * sc.atomic_mass * sc.c**2))
    w_s = 1.098 * (ne / 1e17) ** (1 / 1.47135)
    w_g = math.hypot(w_instr, w_d)
    wv = 0.5346 * w_s + math.sqrt(0.2166 * w_s**2 + w_g**2)
    return {"sample_id": "S1", "role": "unknown", "line_id": "H I 656.279", "element": "H", "ion": 1,
            "wavelength_nm": 656.279, "intensity": 1.0, "u_intensity": 0.01, "fwhm_nm": wv, "flags": "",
            "aki": 4.4e7, "gk": 18.0, "ek_ev": 12.09, "ei_ev": 10.2, "aki_grade": "AA",
            "stark_w_nm": np.nan, "stark_ne_ref_cm3": np.nan, "stark_t_ref_k": np.nan}


def test_inconsistent_electron_density_routes_refuse_certification():
    # H-alpha says 10× the density the Saha balance fits: the solution is not certified
    lt = cf_hand.line_table(cf_hand_w(), T0, NE0, extra_rows=[_h_alpha_row(10 * NE0, T0)])
    r = run(lt, ne_method="saha")
    assert not r.plasma_consistent and "plasma_inconsistent" in r.flags
    failed = [c["check"] for c in r.plasma_checks if c["checked"] and not c["passed"]]
    assert failed == ["ne_routes"]
    assert r.ne_agreement["compared"] and not r.ne_agreement["consistent"]
    assert r.ne_agreement["max_ratio"] == pytest.approx(10.0, rel=0.02)
    assert all(not e.determined and "ne_routes" in e.reasons[-1] for e in r.elements)
    assert r.results_table()["mass_fraction"].isna().all()
    # the same with H-alpha at the true density: consistent, results certified
    ok = run(cf_hand.line_table(cf_hand_w(), T0, NE0, extra_rows=[_h_alpha_row(NE0, T0)]), ne_method="saha")
    assert ok.plasma_consistent and ok.ne_agreement["consistent"]
    assert ok.element("Fe").mass_fraction == pytest.approx(0.70, rel=1e-6)


def test_species_temperature_and_slab_length_checks():
    rows = [{"species": "Fe I", "temperature_k": 13000.0, "u_temperature_k": 100.0, "n_lines": 5,
             "e_k_range_ev": [3.2, 4.8]}]
    assert not species_t_check(10000.0, 100.0, rows, 0.15)["passed"]  # 30 % and 21 σ apart
    assert species_t_check(10000.0, 100.0, [dict(rows[0], temperature_k=10500.0)], 0.15)["passed"]
    s = CFSettings.from_section({"self_absorption": "columnar"})
    checks, failed = plasma_checks(T=10000.0, u_T=100.0, ne=5e16, u_ln_ne=0.1, ne_used="saha", ne_estimates=[],
                                   lte={}, species=rows, sa_info={"plasma_length_mm": 40.0, "fitted": True},
                                   settings=s)
    assert failed == ["species_temperatures", "slab_length"]
    checks, failed = plasma_checks(T=10000.0, u_T=100.0, ne=5e16, u_ln_ne=0.1, ne_used="saha", ne_estimates=[],
                                   lte={}, species=rows, sa_info={}, settings=CFSettings())
    # without a slab model the disagreement is reported, not refused
    assert failed == [] and not next(c for c in checks if c["check"] == "species_temperatures")["passed"]
    thin = {"temperature_k": 9500.0, "u_temperature_k": 150.0, "n_lines": 6, "lines": []}
    _, failed = plasma_checks(T=10000.0, u_T=100.0, ne=5e16, u_ln_ne=0.1, ne_used="saha", ne_estimates=[],
                              lte={}, species=[], sa_info={"plasma_length_mm": 0.5, "fitted": True}, settings=s,
                              thin=thin)  # the nearly thin lines alone say 5 % (3.3 u) cooler
    assert failed == ["thin_lines_temperature"]
    _, failed = plasma_checks(T=12000.0, u_T=100.0, ne=3e19, u_ln_ne=0.1, ne_used="saha", ne_estimates=[],
                              lte={}, species=[], sa_info={"plasma_length_mm": 0.5, "fitted": True}, settings=s)
    assert failed == ["ne_plausible"]
    _, failed = plasma_checks(T=12000.0, u_T=100.0, ne=5e16, u_ln_ne=0.1, ne_used="saha", ne_estimates=[],
                              lte={}, species=[], sa_info={"plasma_length_mm": 0.5, "fitted": True}, settings=s,
                              fit={"birge_ratio": 9.0, "p_value": 1e-30})  # the model misses the lines
    assert failed == ["fit_quality"]


# ------------------------------------------------------------------ nₑ routes
def test_no_ion_lines_message_names_what_is_missing_and_fixed_value_is_used():
    lt = cf_hand.line_table(cf_hand_w(), T0, NE0)
    lt = lt[lt["ion"] == 1]
    with pytest.raises(PhysicsError) as exc:
        run(lt)
    msg = exc.value.one_line()
    for part in ("no usable H I 656.28 nm width", "no line with Stark parameters",
                 "no element with both neutral and ion lines (Cr I, Fe I, Ni I)", "ne_fixed_cm3"):
        assert part in msg
    r = run(lt, ne_fixed_cm3=NE0)  # ne_method stays "auto": the method's value is the last route
    assert r.ne_method == "fixed" and any("no element with both" in w for w in r.warnings)
    assert r.temperature_k == pytest.approx(T0, rel=1e-7)
    for e, w in cf_hand_w().items():
        assert r.element(e).mass_fraction == pytest.approx(w, rel=1e-6)


# ------------------------------------------------------------------ intensity basis, element lists
def test_photon_basis_is_converted_and_unknown_refused():
    lt = cf_hand.line_table(cf_hand_w(), T0, NE0)
    ph = lt.copy()  # photon radiance: I_ph = I_E · λ/(hc), any common scale
    ph["intensity"] = lt["intensity"] * lt["wavelength_nm"] * 1e-9 / (sc.h * sc.c)
    ph["u_intensity"] = 0.01 * ph["intensity"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        kw = dict(atomic=cf_hand.atomic(), settings={"mc_draws": 0}, instrument={"instrument_fwhm_nm": 0.05})
        good = analyse_cf(ph, intensity_basis="photon", **kw)
        wrong = analyse_cf(ph, intensity_basis="energy", **kw)
        assert good.temperature_k == pytest.approx(T0, rel=1e-7) and good.intensity_basis == "photon"
        assert abs(wrong.temperature_k / T0 - 1) > 0.005
        with pytest.raises(InputError, match="unknown basis"):
            analyse_cf(ph, intensity_basis="unknown", **kw)
        over = analyse_cf(ph, intensity_basis="unknown", atomic=cf_hand.atomic(),
                          settings={"mc_draws": 0, "response_basis": "photon"},
                          instrument={"instrument_fwhm_nm": 0.05})
        assert over.temperature_k == pytest.approx(T0, rel=1e-7)


def test_run_format_records_the_response_basis(tmp_path):
    from compquant.errors import RunFormatError
    from compquant.run import Run, write_run

    wl = np.linspace(300.0, 310.0, 50)
    samples = [{"sample_id": "A", "role": "unknown", "standard_ref": "", "description": ""}]
    write_run(tmp_path / "a.h5", wl, np.ones((2, 50)), samples, np.zeros(2, int), response=np.ones(50),
              response_basis="photon")
    write_run(tmp_path / "b.h5", wl, np.ones((2, 50)), samples, np.zeros(2, int), response=np.ones(50))
    with Run.open(tmp_path / "a.h5") as a, Run.open(tmp_path / "b.h5") as b:
        assert a.response_basis == "photon" and b.response_basis is None
    with pytest.raises(RunFormatError, match="response_basis"):
        write_run(tmp_path / "c.h5", wl, np.ones((2, 50)), samples, np.zeros(2, int), response=np.ones(50),
                  response_basis="watts")
    assert not (tmp_path / "c.h5").exists()


def test_per_sample_element_lists():
    s = CFSettings.from_section({"elements": ["Fe", "Cr", "Ni"],
                                 "elements_by_sample": {"MG-*": ["Fe", "Cr"], "CU-7": ["Ni"]}})
    assert s.elements_for("MG-12") == ["Fe", "Cr"] and s.elements_for("CU-7") == ["Ni"]
    assert s.elements_for("FE-1") == ["Fe", "Cr", "Ni"]
    lt = cf_hand.line_table(cf_hand_w(), T0, NE0, sample_id="MG-12")
    r = run(lt, elements=["Fe", "Cr", "Ni"], elements_by_sample={"MG-*": ["Fe", "Cr"]})
    assert set(r.mass_fractions()) == {"Fe", "Cr"}
    assert r.element("Fe").mass_fraction == pytest.approx(0.70 / 0.88, rel=1e-6)
    with pytest.raises(MethodError, match="elements_by_sample"):
        CFSettings.from_section({"elements_by_sample": ["Fe"]})


def test_result_json_round_trip_keeps_the_new_state():
    from compquant.cflibs import CFResult

    lt = mn_table()
    lt = _hide(lt, [x for x in lt["line_id"] if x.startswith("Mn")])
    r = run(lt)
    back = CFResult.from_json(r.to_json())
    assert back.not_determined() == r.not_determined() and back.plasma_consistent == r.plasma_consistent
    assert isinstance(pd.DataFrame(back.upper_limits), pd.DataFrame)


def test_run_intensity_basis_from_method_and_run():
    from types import SimpleNamespace as NS

    from compquant.cflibs import run_intensity_basis

    def method(response=True, file=None):
        return NS(preprocess=NS(response=response, response_file=file))

    def run(resp=True, basis=None):
        return NS(response=lambda: np.ones(3) if resp else None, response_basis=basis)

    assert run_intensity_basis(method(), run(basis="photon")) == "photon"
    assert run_intensity_basis(method(), run(basis=None)) == "unknown"  # refused by analyse_cf
    assert run_intensity_basis(method(file="resp.csv"), run(basis="energy")) == "unknown"
    assert run_intensity_basis(method(response=False), run(basis=None)) is None
    assert run_intensity_basis(method(), run(resp=False)) is None
