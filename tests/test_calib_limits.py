"""LOD/LOQ, ISO 11843-2 limits and check-sample scores against their published formulas."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from compquant.calibrate.checks import check_verdict, en_number, z_score, zeta_score
from compquant.calibrate.limits import blank_sd, iso11843_2, lod_loq, noncentral_delta


def test_lod_loq_worked_example():
    # common practice (IUPAC 3s/b, 10s/b; Long & Winefordner 1983): ten blank readings,
    # sensitivity 2.5e4 counts per unit mass fraction
    blank = np.array([102.0, 98.0, 101.0, 97.0, 103.0, 99.0, 100.0, 104.0, 96.0, 100.0])
    s = np.std(blank, ddof=1)  # 2.582 counts
    assert s == pytest.approx(2.5820, abs=1e-4)
    lod, loq = lod_loq(s, 2.5e4)
    assert lod == pytest.approx(3 * 2.5820 / 2.5e4, rel=1e-4)  # 3.10e-4 = 310 mg/kg
    assert loq == pytest.approx(10 * 2.5820 / 2.5e4, rel=1e-4)
    assert loq / lod == pytest.approx(10 / 3)


def test_blank_sd_sources():
    s, src, n = blank_sd(blank_means=[1.0, 1.2, 0.8, 1.1])
    assert s == pytest.approx(np.std([1.0, 1.2, 0.8, 1.1], ddof=1)) and "replicate" in src
    shots = np.arange(100.0)
    s2, src2, n2 = blank_sd(blank_shots=shots)
    assert s2 == pytest.approx(np.std(shots, ddof=1) / 10) and n2 == 100 and "shots" in src2
    assert blank_sd() is None


def test_iso11843_delta_limits():
    # known-sigma limit: x_d = 2 x_c when alpha = beta (Currie 1968, Anal. Chem. 40, 586):
    # delta -> z_0.95 + z_0.95 = 3.290
    assert noncentral_delta(10**5) == pytest.approx(2 * stats.norm.ppf(0.95), rel=1e-3)
    # the approximation delta ~ 2 t_0.95(nu) (from memory of ISO 11843-2, verify) holds within 6 %
    for nu in (5, 10, 30):
        assert noncentral_delta(nu) == pytest.approx(2 * stats.t.ppf(0.95, nu), rel=0.06)


def test_iso11843_critical_value_formula():
    x = np.repeat([0.0, 0.01, 0.02, 0.04], 2)
    y = np.array([0.11, 0.09, 1.12, 1.08, 2.05, 2.13, 4.02, 4.09])
    r = iso11843_2(x, y)
    b, a = np.polyfit(x, y, 1)
    s = math.sqrt(np.sum((y - a - b * x) ** 2) / 6)
    root = math.sqrt(1 + 1 / 8 + x.mean() ** 2 / np.sum((x - x.mean()) ** 2))
    assert r["x_c"] == pytest.approx(stats.t.ppf(0.95, 6) * s / b * root, rel=1e-10)
    assert r["x_d"] > r["x_c"]
    assert r["y_c"] == pytest.approx(a + b * r["x_c"], rel=1e-10)


def test_en_number_iso13528():
    # ISO 13528 E_n = (x - X)/sqrt(U_x^2 + U_X^2): 0.5/sqrt(0.4^2 + 0.3^2) = 1.0
    assert en_number(10.5, 0.4, 10.0, 0.3) == pytest.approx(1.0)
    assert check_verdict(en_number(10.5, 0.4, 10.0, 0.3))
    assert en_number(10.6, 0.4, 10.0, 0.3) == pytest.approx(1.2)
    assert not check_verdict(en_number(10.6, 0.4, 10.0, 0.3))
    assert zeta_score(10.5, 0.2, 10.0, 0.15) == pytest.approx(2.0)
    assert z_score(10.5, 10.0, 0.25) == pytest.approx(2.0)
    assert not check_verdict(0.5, z=3.2)
