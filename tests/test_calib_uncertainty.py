"""Uncertainty of calibrated results against outside references: the paired-shot ratio (GUM H.2)
and the matrix part of a weighted curve's budget (Birge-ratio dispersion, seeded coverage)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from compquant.calibrate.apply import coverage_factor
from compquant.calibrate.build import curve_from_records
from compquant.calibrate.config import AnalyteConfig
from compquant.calibrate.response import sample_responses

# JCGM 100:2008 (GUM), annex H.2, table H.2: five simultaneous observations of V (volts) and
# I (milliamperes); the impedance Z = V/I is a ratio of means of paired observations
V_H2 = np.array([5.007, 4.994, 5.005, 4.990, 4.999])
I_H2 = np.array([19.663, 19.639, 19.640, 19.685, 19.678]) * 1e-3


def _tables(a, s):
    n = len(a)
    lt = pd.DataFrame(
        [dict(sample_id="S", line_id=lid, intensity=v.mean(), u_intensity=v.std(ddof=1) / np.sqrt(n),
              n_shots=n, flags="") for lid, v in (("A", a), ("B", s))]
    )
    st = pd.DataFrame([dict(sample_id="S", shot=k, line_id=lid, intensity=x, accepted=True)
                       for lid, v in (("A", a), ("B", s)) for k, x in enumerate(v)])
    return lt, st


def test_ratio_of_paired_shots_matches_gum_h2():
    # GUM H.2, table H.3 (from memory of the GUM): Z = 254.260 ohm, u(Z) = 0.236 ohm with the
    # correlation r(V, I) = -0.36 taken into account (GUM 5.2.2, eq. 16; 5.2.3, eq. 17)
    assert np.corrcoef(V_H2, I_H2)[0, 1] == pytest.approx(-0.36, abs=0.005)
    lt, st = _tables(V_H2, I_H2)
    r = sample_responses(lt, "A", "B", st).loc["S"]
    assert r["y"] == pytest.approx(254.260, abs=5e-4)
    assert r["u_y"] == pytest.approx(0.236, abs=5e-4)
    # without the shots the lines are taken as independent: eq. (10) of the GUM, no eq. (16) term
    ri = sample_responses(lt, "A", "B", None).loc["S"]
    u_ind = ri["y"] * np.hypot(lt["u_intensity"][0] / lt["intensity"][0], lt["u_intensity"][1] / lt["intensity"][1])
    assert ri["u_y"] == pytest.approx(u_ind, rel=1e-12)
    assert abs(ri["u_y"] - 0.236) > 0.02  # the covariance term matters here


def test_ratio_covariance_term_closed_form():
    # GUM 5.2.2 eq. (16) for f = a/s with u(a, s) = s_as / n (GUM 5.2.3 eq. 17): strongly
    # correlated shots (common ablation fluctuation) give u(R) far below the independent value
    rng = np.random.default_rng(5)
    common = rng.lognormal(0, 0.2, 200)
    a = 1000 * common * (1 + rng.normal(0, 0.01, 200))
    s = 4000 * common * (1 + rng.normal(0, 0.01, 200))
    lt, st = _tables(a, s)
    r = sample_responses(lt, "A", "B", st).loc["S"]
    n, ma, ms = len(a), a.mean(), s.mean()
    R = ma / ms
    c = np.cov(a, s, ddof=1)
    u2 = R**2 * (c[0, 0] / (n * ma**2) + c[1, 1] / (n * ms**2) - 2 * c[0, 1] / (n * ma * ms))
    assert r["y"] == pytest.approx(R, rel=1e-12)
    assert r["u_y"] == pytest.approx(np.sqrt(u2), rel=1e-9)
    assert r["u_y"] < 0.2 * sample_responses(lt, "A", "B", None).loc["S"]["u_y"]


def _weighted_prop(rng, shots_factor, n_std=8, s_matrix=0.02, u_cert=0.001, u_rep=0.01, x0=0.13):
    """A weighted straight line with proportional repeatability and a 2 % relative matrix
    scatter; the unknown is measured with ``shots_factor^2`` times the standards' shots."""
    xt = np.linspace(0.02, 0.3, n_std)
    b0, b1 = 0.05, 10.0
    f = (b0 + b1 * xt) / 1.6
    ux, uy = u_cert * f, u_rep * f
    xc = xt + rng.normal(0, ux)
    y = b0 + b1 * xt + rng.normal(0, s_matrix * f) + rng.normal(0, uy)
    recs = [dict(standard_id=f"S{i}", sample_id=f"S{i}", x=xc[i], u_x=ux[i], y=y[i], u_y=uy[i], n_shots=100,
                 w=xc[i]) for i in range(n_std)]
    c = curve_from_records(AnalyteConfig(element="Zn", line="Zn I 481.053", model="weighted",
                                         basis="intensity"), recs)
    f0 = (b0 + b1 * x0) / 1.6
    u0 = u_rep * f0 / shots_factor
    y0 = b0 + b1 * x0 + rng.normal(0, s_matrix * f0) + rng.normal(0, u0)
    p = c.predict_content(y0, u0, 100 * shots_factor**2)
    return p["x"] - x0, p["u"], p["dof"]


def test_matrix_part_does_not_shrink_with_the_unknowns_shots():
    # an unknown measured with 9x the standards' shots has a third of their repeatability, but the
    # same matrix scatter about the curve: k = t95(nu_eff) must still cover the truth in >= 95 % of
    # 1000 seeded calibrations (nominal coverage, GUM 6.2.2 / G.3); before the fix the matrix part
    # was scaled by the unknown's own u0^2 and the coverage was 77 %
    rng = np.random.default_rng(12)
    res = np.array([_weighted_prop(rng, 3.0) for _ in range(1000)])
    d, u, dof = res.T
    k = np.array([coverage_factor("student", v) for v in dof])
    cov = float(np.mean(np.abs(d) <= k * u))
    print(f"coverage weighted, unknown with 9x shots, k = t95(nu_eff): {cov:.3f}")
    assert cov >= 0.95


def test_matrix_part_closed_form_relative_scatter():
    # Birge-ratio dispersion (R. T. Birge, Phys. Rev. 40 (1932) 207): with stated u_i = rho y_i and
    # sigma_m^2 the excess scatter in weighted units, a relative matrix scatter tau^2 y^2 gives
    # sigma_m^2 = tau^2 mean(y_i^2/u_i^2), so its part of u^2(x0) is tau^2 y0^2 / b^2 whatever the
    # unknown's u0 (when u0 < rho y0); for u0 >= rho y0 it is the statsmodels WLS observation
    # variance sigma_m^2 u0^2 (checked against statsmodels in test_calib_fit.py)
    x = np.array([0.02, 0.05, 0.08, 0.12, 0.16, 0.2, 0.25, 0.3])
    eps = np.array([0.03, -0.02, 0.01, -0.03, 0.02, -0.01, 0.025, -0.02])
    y = 10 * x * (1 + eps) + 0.05
    rho = 0.002
    recs = [dict(standard_id=f"S{i}", sample_id=f"S{i}", x=x[i], u_x=0.0, y=y[i], u_y=rho * y[i], n_shots=50)
            for i in range(len(x))]
    c = curve_from_records(AnalyteConfig(element="Zn", line="Zn I 481.053", model="weighted",
                                         basis="intensity"), recs)
    y0 = 1.4
    tau2 = c.sigma_m2 / np.mean((y / (rho * y)) ** 2)  # = sigma_m2 rho^2
    small = c.predict_content(y0, 0.2 * rho * y0, 50)
    smaller = c.predict_content(y0, 0.02 * rho * y0, 50)
    assert small["budget"]["matrix"] * small["dydx"] ** 2 == pytest.approx(tau2 * y0**2, rel=1e-9)
    assert smaller["budget"]["matrix"] == pytest.approx(small["budget"]["matrix"], rel=1e-9)
    large = c.predict_content(y0, 3 * rho * y0, 50)
    assert large["budget"]["matrix"] * large["dydx"] ** 2 == pytest.approx(c.sigma_m2 * (3 * rho * y0) ** 2,
                                                                           rel=1e-9)


def test_profile_fit_part_of_a_line_u_reaches_the_paired_ratio():
    # A profile-fitted analyte line (mode = "fit") has u^2 = sd^2/n + u_shape^2 (the fit's
    # centre/width part does not average over shots; compquant/lines/measure.py).  The ratio
    # R = f(P, a, s) = P * (1 + da/A) * (1 - ds/S) of the paired-shot mean ratio P and the two
    # lines' shape errors da, ds (zero mean, u = u_shape) is propagated with the law of
    # propagation of uncertainty for independent inputs, JCGM 100:2008 (GUM) 5.1.2 eq. (10):
    # u^2(R) = u^2(P) + (R u_shape,a / A)^2 + (R u_shape,s / S)^2, with u^2(P) the paired part
    # from GUM 5.2.2 eq. (16) and 5.2.3 eq. (17) computed here from the shot covariance.
    rng = np.random.default_rng(18)
    n = 60
    common = rng.lognormal(0, 0.15, n)
    a = 300 * common * (1 + rng.normal(0, 0.03, n))  # Pb I 405.781 (fitted)
    s = 5000 * common * (1 + rng.normal(0, 0.01, n))  # Cu I 427.511 (window, internal standard)
    ma, ms = a.mean(), s.mean()
    sd_a, sd_s = a.std(ddof=1), s.std(ddof=1)
    u_shape_a = 12.0  # intensity units: 4 % of the line, larger than sd_a / sqrt(n) (about 6)
    assert u_shape_a > sd_a / np.sqrt(n)
    lt = pd.DataFrame([
        dict(sample_id="S", line_id="A", intensity=ma, u_intensity=np.sqrt(sd_a**2 / n + u_shape_a**2),
             sd_shots=sd_a, n_shots=n, flags=""),
        dict(sample_id="S", line_id="B", intensity=ms, u_intensity=sd_s / np.sqrt(n), sd_shots=sd_s,
             n_shots=n, flags=""),
    ])
    st = pd.DataFrame([dict(sample_id="S", shot=k, line_id=lid, intensity=x, accepted=True)
                       for lid, v in (("A", a), ("B", s)) for k, x in enumerate(v)])
    r = sample_responses(lt, "A", "B", st).loc["S"]
    R = ma / ms
    c = np.cov(a, s, ddof=1)
    u2_paired = R**2 * (c[0, 0] / (n * ma**2) + c[1, 1] / (n * ms**2) - 2 * c[0, 1] / (n * ma * ms))
    expected = np.sqrt(u2_paired + (R * u_shape_a / ma) ** 2)  # the window line adds no shape term
    assert r["y"] == pytest.approx(R, rel=1e-12)
    assert r["u_y"] == pytest.approx(expected, rel=1e-9)
    assert r["u_y"] > 1.5 * np.sqrt(u2_paired)  # the shape part is not dropped (it dominates here)
    # the same shape term on the internal-standard side enters with its own sensitivity A/S^2
    u_shape_s = 20.0
    lt2 = lt.copy()
    lt2.loc[1, "u_intensity"] = np.sqrt(sd_s**2 / n + u_shape_s**2)
    r2 = sample_responses(lt2, "A", "B", st).loc["S"]
    expected2 = np.sqrt(u2_paired + (u_shape_a / ms) ** 2 + (ma * u_shape_s / ms**2) ** 2)
    assert r2["u_y"] == pytest.approx(expected2, rel=1e-9)
    # window lines only (u = sd / sqrt(n)): nothing is added, the paired value stands
    lt3 = lt.copy()
    lt3.loc[0, "u_intensity"] = sd_a / np.sqrt(n)
    assert sample_responses(lt3, "A", "B", st).loc["S"]["u_y"] == pytest.approx(np.sqrt(u2_paired), rel=1e-9)
