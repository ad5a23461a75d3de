"""Calibration curve models: a form (the terms of the curve) and a weighting, chosen separately.

A method file names a model as ``model = "<name>"`` in ``[calibration]`` or per analyte; the
names are the combinations registered in :data:`MODELS_BY_NAME` (``"linear"``, ``"weighted"``,
``"quadratic"``, ``"weighted_quadratic"``), each a (form, weighting) pair:

* forms (:data:`FORMS`): ``straight`` ``y = b0 + b1 x`` and ``quadratic``
  ``y = b0 + b1 x + b2 x²`` (ISO 8466-1:1990 and ISO 8466-2:2001), ``b0`` dropped with
  ``through_origin``;
* weightings (:data:`WEIGHTINGS`): ``ols`` (ordinary least squares, all weights 1) and ``wls``
  (weighted least squares with ``w_i = 1/u_i²`` of the standards' responses; ISO 11095:1996
  sec. 6 / Draper & Smith, *Applied Regression Analysis*, 3rd ed., ch. 9).

:func:`compquant.calibrate.fit.fit_curve` fits them; ``compquant.calibrate.fit`` takes
``MODELS``, ``WEIGHTED_MODELS`` and ``QUADRATIC_MODELS`` from here.

Contract a new entry must meet
------------------------------
* A new **combination** of a registered form and weighting (e.g. a weighted straight line
  through the origin is already ``through_origin``; a ``weighted_cubic`` is not): add the
  model name to :data:`MODELS_BY_NAME` with a test in ``tests/test_calib_fit.py`` that checks
  the fit against statsmodels WLS/OLS.  Nothing else changes: the method file accepts the name,
  ``docs/method-reference.md`` lists it after ``python scripts/make_method_reference.py``.
* A new **weighting**: add a :class:`Weighting` to :data:`WEIGHTINGS` (``needs_weights``: the
  fit is given weights ``1/u²`` of the standards' responses, computed in
  ``calibrate/build.py``); weights of another kind (``1/x²`` ...) also need their computation
  there.
* A new **form**: add a :class:`Form` whose ``terms`` are design-matrix column names known to
  :func:`compquant.calibrate.fit.design_matrix` (``"x"``, ``"x2"``; the intercept ``"1"`` is
  added by the fit unless ``through_origin``) and the model name(s), with a test against
  statsmodels.  A term other than ``x``/``x2`` also needs its column, derivative and inverse in
  ``calibrate/fit.py`` (``design_matrix``, ``slope_at``, ``invert``); the saved calibration's
  term check (``calibrate/model.py``) reads :data:`TERMS` from here.
* Names are stable: a saved calibration stores the model name, so a name is never reused for
  another (form, weighting).
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Form:
    """The shape of a curve: the content terms after the optional intercept ``"1"``."""

    name: str
    terms: tuple[str, ...]
    doc: str


@dataclass(frozen=True)
class Weighting:
    """How the standards are weighted: ``needs_weights`` = the fit needs 1/u² of the responses."""

    name: str
    needs_weights: bool
    doc: str


FORMS: dict[str, Form] = {
    "straight": Form("straight", ("x",), "y = b0 + b1 x (ISO 8466-1)"),
    "quadratic": Form("quadratic", ("x", "x2"), "y = b0 + b1 x + b2 x² (ISO 8466-2)"),
}

WEIGHTINGS: dict[str, Weighting] = {
    "ols": Weighting("ols", False, "ordinary least squares (all weights 1)"),
    "wls": Weighting("wls", True, "weighted least squares, w = 1/u² of the standards' responses"),
}

#: model name (as written in the method file and the saved calibration) -> (form, weighting)
MODELS_BY_NAME: dict[str, tuple[str, str]] = {
    "linear": ("straight", "ols"),
    "weighted": ("straight", "wls"),
    "quadratic": ("quadratic", "ols"),
    "weighted_quadratic": ("quadratic", "wls"),
}

MODELS = tuple(MODELS_BY_NAME)
WEIGHTED_MODELS = tuple(n for n, (_, w) in MODELS_BY_NAME.items() if WEIGHTINGS[w].needs_weights)
QUADRATIC_MODELS = tuple(n for n, (f, _) in MODELS_BY_NAME.items() if "x2" in FORMS[f].terms)
#: every term a saved calibration may hold besides interference terms (``add:<El>``, ``mul:<El>``)
TERMS = ("1", *sorted({t for f in FORMS.values() for t in f.terms}))


def model_doc(name: str) -> str:
    """One line for the reference: ``linear``: straight line, ordinary least squares ..."""
    form, weighting = MODELS_BY_NAME[name]
    return f"`{name}`: {FORMS[form].doc}, {WEIGHTINGS[weighting].doc}"


__all__ = ["FORMS", "MODELS", "MODELS_BY_NAME", "QUADRATIC_MODELS", "TERMS", "WEIGHTED_MODELS", "WEIGHTINGS",
           "Form", "Weighting", "model_doc"]
