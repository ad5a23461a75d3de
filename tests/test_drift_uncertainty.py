"""Uncertainty of the two-point (and one-point) drift standardisation, and what enters it.

The first-order propagation of compquant.calibrate.drift.correct (GUM, JCGM 100:2008, 5.1.2) is
checked against two derivations that do not use its sensitivity formulas: central finite
differences of the correction written out from its definition, and a Monte Carlo propagation of
distributions (JCGM 101:2008, 7: draw the inputs, evaluate the model, take the standard deviation
of the output).  Invented numbers only.
"""

from __future__ import annotations

import numpy as np
import pytest
from calib_synth import LINES, config_dict, make_tables

from compquant.calibrate import calibrate, parse_calibration_section
from compquant.calibrate.apply import quantify
from compquant.calibrate.drift import correct, reference_response, response_key, two_point
from compquant.calibrate.response import sample_responses


def _two_point_model(I, M_H, M_L, R_H, R_L):
    """Two-point standardisation from its definition (common practice of spark-OES methods)."""
    alpha = (R_H - R_L) / (M_H - M_L)
    return R_L + alpha * (I - M_L)


def _one_point_model(I, Ms, Rs):
    return I * sum(Rs) / sum(Ms)


def _fd_uncertainty(f, x, u, h=1e-6):
    """sqrt(sum (df/dx_i u_i)^2) with central finite differences (GUM 5.1.2 with numerical c_i)."""
    x = np.asarray(x, float)
    var = 0.0
    for i in range(x.size):
        step = h * max(abs(x[i]), 1.0)
        xp, xm = x.copy(), x.copy()
        xp[i] += step
        xm[i] -= step
        ci = (f(*xp) - f(*xm)) / (2 * step)
        var += (ci * u[i]) ** 2
    return float(np.sqrt(var))


CASES = [  # I, u(I), (R_H, M_H, u_M_H, u_R_H), (R_L, M_L, u_M_L, u_R_L)
    (40.0, 0.3, (100.0, 80.0, 0.9, 0.7), (10.0, 9.0, 0.25, 0.2)),
    (95.0, 1.1, (100.0, 80.0, 0.9, 0.7), (10.0, 9.0, 0.25, 0.2)),  # above the high setup point
    (4.0, 0.1, (2.9, 3.1, 0.03, 0.025), (0.024, 0.026, 0.0012, 0.0011)),  # below the low one
]


@pytest.mark.parametrize("I, uI, hi, lo", CASES)
def test_two_point_uncertainty_equals_finite_differences(I, uI, hi, lo):
    c = two_point([(hi[0], hi[1], hi[2], "H", hi[3]), (lo[0], lo[1], lo[2], "L", lo[3])])
    assert c["kind"] == "two-point"
    y, u = correct(I, uI, c)
    x = [I, hi[1], lo[1], hi[0], lo[0]]
    ux = [uI, hi[2], lo[2], hi[3], lo[3]]
    assert float(y) == pytest.approx(_two_point_model(*x), rel=1e-12)
    # GUM 5.1.2 with sensitivity coefficients from central differences (JCGM 100:2008, 5.1.3 note)
    assert float(u) == pytest.approx(_fd_uncertainty(_two_point_model, x, ux), rel=1e-6)


def test_two_point_uncertainty_equals_monte_carlo():
    """JCGM 101:2008 (Monte Carlo propagation of distributions), 10^6 draws, Gaussian inputs.

    With input u of about 1 % the model is nearly linear, so the Monte Carlo standard deviation
    equals the first-order u within the Monte Carlo's own relative standard error
    (about 1/sqrt(2 N) = 0.07 %) plus a second-order term well under 1 %.
    """
    I, uI, hi, lo = CASES[0]
    c = two_point([(hi[0], hi[1], hi[2], "H", hi[3]), (lo[0], lo[1], lo[2], "L", lo[3])])
    _, u = correct(I, uI, c)
    rng = np.random.default_rng(20261202)
    n = 1_000_000
    draws = [rng.normal(m, s, n) for m, s in
             zip([I, hi[1], lo[1], hi[0], lo[0]], [uI, hi[2], lo[2], hi[3], lo[3]])]
    y = _two_point_model(*draws)
    assert np.std(y, ddof=1) == pytest.approx(float(u), rel=0.01)


def test_one_point_uncertainty_equals_finite_differences_and_monte_carlo():
    # a matrix line high in both setup samples: one-point factor sum R / sum M
    pts = [(100.0, 90.0, 1.0, "H", 0.8), (80.0, 70.0, 0.9, "L", 0.7)]
    c = two_point(pts)
    assert c["kind"] == "one-point"
    I, uI = 60.0, 0.5
    y, u = correct(I, uI, c)

    def f(I, M1, M2, R1, R2):
        return _one_point_model(I, [M1, M2], [R1, R2])

    x = [I, 90.0, 70.0, 100.0, 80.0]
    ux = [uI, 1.0, 0.9, 0.8, 0.7]
    assert float(y) == pytest.approx(f(*x), rel=1e-12)
    assert float(u) == pytest.approx(_fd_uncertainty(f, x, ux), rel=1e-6)
    rng = np.random.default_rng(7)  # JCGM 101:2008 Monte Carlo, as above
    draws = [rng.normal(m, s, 1_000_000) for m, s in zip(x, ux)]
    assert np.std(f(*draws), ddof=1) == pytest.approx(float(u), rel=0.01)


def test_reference_uncertainty_is_not_ignored():
    """u(R) enters: the same correction with exact references has a smaller u (GUM 5.1.2)."""
    hi, lo = CASES[0][2], CASES[0][3]
    c = two_point([(hi[0], hi[1], hi[2], "H", hi[3]), (lo[0], lo[1], lo[2], "L", lo[3])])
    c0 = two_point([(hi[0], hi[1], hi[2], "H", 0.0), (lo[0], lo[1], lo[2], "L", 0.0)])
    assert correct(40.0, 0.3, c)[1] > correct(40.0, 0.3, c0)[1]


def test_setup_points_carry_repeatability_only_and_stored_reference_u():
    """A setup disc compared with itself: u(M) is today's repeatability of its response, u(R) the one
    stored on the calibration day; the curve's excess scatter sigma_m is not added (it is the same
    material on both days and cancels in R/M; docs/calibration.md sec. 9)."""
    lt, st, sm, std, _ = make_tables(2)
    cal = calibrate(lt, std, parse_calibration_section(config_dict()), shot_table=st, samples=sm,
                    run_sha256="run-a", method_id="m1", method_sha256="h1")
    drift = {LINES["Zn"]: (0.8, 0.5), LINES["Cu"]: (0.9, 0.0)}
    lt2, st2, sm2, _, _ = make_tables(7, drift=drift)
    q = quantify((lt2, st2, sm2), cal, run_sha256="run-b")
    c = cal.curves["Zn"]
    key = response_key(c.line_id, c.internal_standard)
    coef = q.drift["coefficients"][key]
    assert c.sigma_m2 > 0  # the curve has excess scatter, which must not reach the setup points
    now = sample_responses(lt2, c.line_id, c.internal_standard, st2)
    ref = sample_responses(lt, c.line_id, c.internal_standard, st)
    for tag in ("H", "L"):
        sid = coef["high" if tag == "H" else "low"]
        assert coef[f"u_M_{tag}"] == pytest.approx(float(now.loc[sid, "u_y"]), rel=1e-12)
        assert coef[f"u_R_{tag}"] == pytest.approx(float(ref.loc[sid, "u_y"]), rel=1e-12)
        assert coef[f"R_{tag}"] == pytest.approx(float(ref.loc[sid, "y"]), rel=1e-12)
        # stored at calibration time with the paired-shot u; the two lines share the shot-to-shot
        # ablation factor, so treating them as independent would overstate u(R) (GUM 5.2.2)
        assert cal.setup_reference[sid][key] == pytest.approx([ref.loc[sid, "y"], ref.loc[sid, "u_y"]])
        stored = reference_response(cal.setup_reference, sid, c.line_id, c.internal_standard)
        old = {s: {k: v for k, v in d.items() if " / " not in k} for s, d in cal.setup_reference.items()}
        legacy = reference_response(old, sid, c.line_id, c.internal_standard)
        assert legacy[0] == pytest.approx(stored[0], rel=1e-9)
        assert legacy[1] > stored[1]


def test_drift_terms_do_not_scale_the_matrix_part():
    """The matrix part of a prediction is sigma_m^2 / w_0 with w_0 the unknown's *repeatability*
    weight, as the standards' weights are (the multiplicative between-standards model, Birge
    1932): after a drift standardisation u_y also holds the setup terms, which must not widen it.
    Checked on the curve itself: the matrix part with the corrected response equals the one the
    repeatability alone (alpha u_y) gives, and the setup terms appear in the repeatability entry."""
    lt, st, sm, std, _ = make_tables(2)
    cfg = parse_calibration_section(config_dict(models={"Zn": "weighted"}))
    cal = calibrate(lt, std, cfg, shot_table=st, samples=sm, run_sha256="run-a", method_id="m1", method_sha256="h1")
    c = cal.curves["Zn"]
    assert c.weighted and c.sigma_m2 > 0
    hi, lo = CASES[0][2], CASES[0][3]
    coef = two_point([(hi[0], hi[1], hi[2], "H", hi[3]), (lo[0], lo[1], lo[2], "L", lo[3])])
    y_raw, u_raw = 0.8 * float(c.response(0.3)[0]), 0.004
    y, u = correct(y_raw, u_raw, coef)
    u_rep = abs(coef["alpha"]) * u_raw
    assert float(u) > 1.5 * u_rep  # the setup terms are not negligible here
    p = c.predict_content(float(y), float(u), 40, u_weight=u_rep)
    p_rep = c.predict_content(float(y), u_rep, 40)
    assert p["budget"]["matrix"] == pytest.approx(p_rep["budget"]["matrix"], rel=1e-12)
    assert p["budget"]["repeatability"] == pytest.approx(float(u) ** 2 / p["dydx"] ** 2, rel=1e-12)
    old = c.predict_content(float(y), float(u), 40)  # former behaviour: w_0 from the whole u
    assert old["budget"]["matrix"] > 10 * p["budget"]["matrix"]
