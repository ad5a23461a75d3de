"""Monte Carlo draws of the line means from few shots (compquant.cflibs.montecarlo.draw_line_means):
a multivariate Student t with n − 1 degrees of freedom, so that U = 2u covers the true mean.

Outside sources: JCGM 101:2008 §6.4.9 (the mean of n indications of unknown σ has the PDF
t_{n−1}(x̄, s²/n), variance (n−1)/(n−3)·s²/n for n > 3); GUM (JCGM 100:2008) G.3 (a normal
interval ±2 s/√n covers P(|t_{n−1}| ≤ 2): 86.1 % for n = 4); Student t quantiles from
scipy.stats.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from compquant.cflibs.montecarlo import MIN_T_DOF, draw_line_means

TRUTH = np.array([100.0, 40.0, 5.0])
# per-shot: a common plasma factor (3 %) on every line plus independent pixel noise
SD_COMMON, SD_PIXEL = 0.03, np.array([1.0, 0.8, 0.5])


def _shots(rng, n):
    common = 1.0 + SD_COMMON * rng.standard_normal((n, 1))
    return TRUTH * common + SD_PIXEL * rng.standard_normal((n, TRUTH.size))


def _coverage(n, trials=500, draws=300, seed=0):
    """Fraction of (trial, line) whose Monte Carlo U = 2·sd covers the true mean, and whose
    2.5–97.5 % interval does."""
    rng = np.random.default_rng(seed)
    hit_u = hit_q = 0
    for t in range(trials):
        x = _shots(rng, n)
        mean = x.mean(axis=0)
        u = x.std(axis=0, ddof=1) / np.sqrt(n)  # the line table's u_intensity
        D = x / mean - 1.0  # compquant.cflibs.inputs._shot_deviations
        eps = rng.standard_normal((draws, TRUTH.size))
        I_d, nu = draw_line_means(rng, np.random.default_rng([t, 1]), eps, mean, u, D)
        assert nu == max(n - 1, MIN_T_DOF)
        sd = I_d.std(axis=0, ddof=1)
        hit_u += int(np.sum(np.abs(mean - TRUTH) <= 2.0 * sd))
        lo, hi = np.percentile(I_d, [2.5, 97.5], axis=0)
        hit_q += int(np.sum((lo <= TRUTH) & (TRUTH <= hi)))
    tot = trials * TRUTH.size
    return hit_u / tot, hit_q / tot


def test_few_shots_cover_the_true_mean():
    # 4 shots: normal draws with the sample covariance covered 86 % (GUM G.3: P(|t_3| ≤ 2),
    # scipy.stats); the t_3 draws give U = 2·sqrt(3)·s/√n ≥ t_0.975(3)·s/√n = 3.18 s/√n: ≥ 95 %
    assert 2 * stats.t.cdf(2.0, 3) - 1 == pytest.approx(0.861, abs=1e-3)
    cov_u, cov_q = _coverage(4)
    assert cov_u >= 0.94  # 1500 cases: binomial sd 0.6 %; the old draws gave 0.86
    assert cov_q >= 0.93  # the JCGM 101 interval itself: 95 % nominal


def test_many_shots_unchanged():
    # 30 shots: t_29 is close to normal (variance ×29/27), coverage about 95 % as before
    cov_u, _ = _coverage(30, trials=300)
    assert 0.93 <= cov_u <= 0.98


def test_marginal_variance_is_jcgm101():
    # JCGM 101 §6.4.9.4: V = (n−1)/(n−3)·s²/n; the shared χ² keeps the shots' correlation
    rng = np.random.default_rng(3)
    x = _shots(rng, 6)
    mean, u = x.mean(axis=0), x.std(axis=0, ddof=1) / np.sqrt(6)
    D = x / mean - 1.0
    eps = rng.standard_normal((200_000, 3))
    I_d, nu = draw_line_means(rng, np.random.default_rng(4), eps, mean, u, D)
    assert nu == 5
    assert I_d.var(axis=0) == pytest.approx(u**2 * 5 / 3, rel=0.03)
    c = np.corrcoef(I_d.T)
    assert c == pytest.approx(np.corrcoef(x.T), abs=0.02)  # the shots' correlation (pure shot part)


def test_without_shots_the_draws_are_normal():
    rng = np.random.default_rng(5)
    eps = rng.standard_normal((100_000, 3))
    I_d, nu = draw_line_means(rng, rng, eps, TRUTH, 0.01 * TRUTH, None)
    assert nu is None
    assert stats.kurtosis(I_d[:, 0]) == pytest.approx(0.0, abs=0.1)  # normal: excess kurtosis 0


def test_three_shots_draw_with_three_dof_and_warn():
    # t_2 has no variance (JCGM 101 §6.4.9.4 needs n > 3 for V): three shots are drawn with ν = 3,
    # and the analysis says that u and U then understate
    import math
    import warnings
    from types import SimpleNamespace

    import cf_hand

    from compquant import analyse_cf

    rng = np.random.default_rng(8)
    x = _shots(rng, 3)
    _, nu = draw_line_means(rng, rng, rng.standard_normal((10, 3)), x.mean(0), x.std(0, ddof=1) / math.sqrt(3),
                            x / x.mean(0) - 1.0)
    assert nu == 3
    w = {"Fe": 0.70, "Cr": 0.18, "Ni": 0.12}
    tabs = [cf_hand.line_table(w, T, 8e16) for T in (9900.0, 10000.0, 10150.0)]
    M = np.array([t["intensity"].to_numpy() for t in tabs])
    lt = tabs[0].copy()
    lt["intensity"] = M.mean(axis=0)
    lt["u_intensity"] = M.std(axis=0, ddof=1) / math.sqrt(3)
    meas = SimpleNamespace(sample_ids=["S1"], shot_sample=np.zeros(3, int), shot_accepted=np.ones(3, bool),
                           line_ids=list(lt["line_id"]), shot_intensity=M)
    with warnings.catch_warnings(record=True) as rec:
        warnings.simplefilter("always")
        r = analyse_cf(lt, atomic=cf_hand.atomic(), measurement=meas,
                       settings={"mc_draws": 50, "ne_method": "fixed", "ne_fixed_cm3": 8e16})
    assert any("only 3 shots" in str(m.message) for m in rec)
    assert any("only 3 shots" in m for m in r.warnings)
