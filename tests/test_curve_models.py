"""The curve-model registry (compquant.calibrate.curve_models): every registered model name is fitted
by calibrate.fit as its (form, weighting) says, checked against statsmodels OLS / WLS (outside
reference library)."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from compquant.calibrate.curve_models import FORMS, MODELS, MODELS_BY_NAME, TERMS, WEIGHTINGS
from compquant.calibrate.fit import fit_curve

# invented calibration data: 7 standards, slight curvature, responses with unequal uncertainties
X = np.array([0.001, 0.003, 0.006, 0.010, 0.015, 0.022, 0.030])
U = np.array([0.02, 0.03, 0.05, 0.06, 0.09, 0.12, 0.15])
Y = 0.05 + 40.0 * X - 150.0 * X**2 + np.array([0.01, -0.02, 0.03, -0.01, 0.02, -0.03, 0.01])


@pytest.mark.parametrize("name", MODELS)
def test_every_registered_model_is_its_form_and_weighting(name):
    form, weighting = MODELS_BY_NAME[name]
    cols = [np.ones_like(X)] + [X ** (2 if t == "x2" else 1) for t in FORMS[form].terms]
    design = np.column_stack(cols)
    needs = WEIGHTINGS[weighting].needs_weights
    w = 1.0 / U**2
    ref = (sm.WLS(Y, design, weights=w) if needs else sm.OLS(Y, design)).fit()
    got = fit_curve(X, Y, model=name, weights=w if needs else None)
    assert got.terms == ["1", *FORMS[form].terms]
    # statsmodels WLS/OLS params and covariance: same least squares, agreement to round-off
    assert np.allclose(got.beta, ref.params, rtol=1e-9, atol=1e-12)
    assert np.allclose(got.cov, ref.cov_params(), rtol=1e-7, atol=1e-15)


def test_weighted_models_refuse_missing_weights_and_terms_cover_the_forms():
    from compquant.errors import CalibrationError

    for name, (_, weighting) in MODELS_BY_NAME.items():
        if WEIGHTINGS[weighting].needs_weights:
            with pytest.raises(CalibrationError, match="weighted model needs response uncertainties"):
                fit_curve(X, Y, model=name)
    assert set(TERMS) == {"1"} | {t for f in FORMS.values() for t in f.terms}
