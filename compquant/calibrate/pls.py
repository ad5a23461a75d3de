"""Multivariate calibration: PLS regression on preprocessed spectral windows, with applicability limits.

X block: the preprocessed mean spectrum of each sample, restricted to windows
of +- ``half_width_nm`` around the method's lines, each row divided by its sum
(``normalise = "total"``) and the columns mean-centred.  y: the
certified mass fraction of one analyte.  PLS1 by scikit-learn
(``PLSRegression``, NIPALS; Wold, Sjostrom & Eriksson 2001, Chemom. Intell. Lab.
Syst. 58, 109).  The number of components ``A`` minimises the root mean square
error of cross-validation (leave-one-out by default)::

    RMSECV = sqrt( sum_i (y_i - yhat_(-i))^2 / n )

Applicability of the model to a new spectrum (outside the calibration space
means the prediction is an extrapolation and is flagged ``outside_model_space``):

* Hotelling T^2 of the scores, ``T^2 = sum_a t_a^2 / s_a^2``, against the limit for a
  new observation ``A (n-1)(n+1) / (n (n-A)) F_{1-alpha}(A, n-A)`` (Tracy, Young &
  Mason 1992, J. Quality Technol. 24, 88 -- from memory, verify);
* Q (squared prediction error) ``Q = ||x - t P'||^2`` of the autoscaled spectrum,
  against the Jackson & Mudholkar (1979, Technometrics 21, 341) limit::

      Q_a = theta1 [ c_a sqrt(2 theta2 h0^2)/theta1 + 1 + theta2 h0 (h0-1)/theta1^2 ]^(1/h0)
      theta_i = sum_j lambda_j^i (eigenvalues of the residual covariance),
      h0 = 1 - 2 theta1 theta3 / (3 theta2^2),  c_a = z_{1-alpha}

With a ratio calibration the PLS target is, like the univariate curves, the
mass-fraction ratio to the matrix element (and the spectra are divided by the
internal-standard line's window signal); mass fractions then follow with the
sample's matrix fraction from the univariate closure.

The standard uncertainty of a PLS prediction is taken as RMSECV (common
practice; it contains the model error at the calibration's own samples and not
the sample's repeatability).  LOD of a PLS result: ``3 RMSECV`` -- an
approximation stated in the output, since multivariate limits have no single
agreed definition.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
from scipy import stats

from compquant.errors import CalibrationError


def window_mask(wavelength, centres_nm, half_width_nm) -> np.ndarray:
    wl = np.asarray(wavelength, float)
    m = np.zeros(wl.shape, bool)
    for c in centres_nm:
        m |= np.abs(wl - c) <= half_width_nm
    return m


def t2_limit(A: int, n: int, alpha: float = 0.05) -> float:
    """Hotelling T^2 limit for a new observation (see module docstring)."""
    if n <= A:
        return math.inf
    return A * (n - 1) * (n + 1) / (n * (n - A)) * float(stats.f.ppf(1 - alpha, A, n - A))


def q_limit(eigenvalues, alpha: float = 0.05) -> float:
    """Jackson-Mudholkar limit of Q from the residual eigenvalues."""
    lam = np.asarray(eigenvalues, float)
    lam = lam[lam > 0]
    if lam.size == 0:
        return 0.0
    t1, t2, t3 = (float(np.sum(lam**i)) for i in (1, 2, 3))
    h0 = 1 - 2 * t1 * t3 / (3 * t2**2)
    if h0 <= 0:  # degenerate spectrum of eigenvalues: fall back to h0 small positive
        h0 = 1e-3
    ca = float(stats.norm.ppf(1 - alpha))
    inner = ca * math.sqrt(2 * t2 * h0**2) / t1 + 1 + t2 * h0 * (h0 - 1) / t1**2
    return t1 * max(inner, 0.0) ** (1 / h0)


def _fit(Xs, y, A):
    from sklearn.cross_decomposition import PLSRegression

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return PLSRegression(n_components=A, scale=False).fit(Xs, y)


def fit_pls(X, y, *, max_components: int = 5, cv_folds: int = 0, alpha: float = 0.05, where: str = "PLS") -> dict:
    """Fit a PLS1 model (components by cross-validation) and its applicability limits.

    ``X``: (n_samples, n_features) spectra, ``y``: (n_samples,) mass fractions.
    Returns a JSON-ready dict (``predict_pls`` applies it).
    """
    X = np.asarray(X, float)
    y = np.asarray(y, float)
    n = len(y)
    if n < 4:
        raise CalibrationError(
            f"PLS needs at least 4 standards (got {n})",
            where=where,
            fix="add standards or drop the [calibration.pls] section",
        )
    if not (np.all(np.isfinite(X)) and np.all(np.isfinite(y))):
        raise CalibrationError("non-finite spectra or contents", where=where, fix="check the standards' spectra")
    if np.ptp(y) <= 0:
        raise CalibrationError(
            "all standards have the same content", where=where, fix="use standards that span the range"
        )
    # spectra are mean-centred, not autoscaled: autoscaling would give baseline pixels
    # that hold only noise the same weight as line pixels (common practice in spectroscopy)
    mean = X.mean(axis=0)
    sd = np.ones(X.shape[1])
    Xs = X - mean
    folds = n if cv_folds in (0, None) or cv_folds > n else cv_folds
    idx = np.arange(n)
    groups = idx % folds
    amax = max(1, min(max_components, n - 2))
    rmsecv = []
    for A in range(1, amax + 1):
        pred = np.empty(n)
        for f in range(folds):
            tr, te = groups != f, groups == f
            m = X[tr].mean(axis=0)
            A_eff = min(A, int(tr.sum()) - 1)
            mdl = _fit(X[tr] - m, y[tr], A_eff)
            pred[te] = mdl.predict(X[te] - m).ravel()
        rmsecv.append(float(np.sqrt(np.mean((pred - y) ** 2))))
    A = int(np.argmin(rmsecv)) + 1
    mdl = _fit(Xs, y, A)
    T = mdl.transform(Xs)
    P = mdl.x_loadings_
    E = Xs - T @ P.T
    sv = np.linalg.svd(E, compute_uv=False)
    lam = sv**2 / (n - 1)
    score_var = T.var(axis=0, ddof=1)
    coef = np.asarray(mdl.coef_, float).reshape(-1)  # on the autoscaled X
    intercept = float(np.ravel(mdl.intercept_)[0]) if hasattr(mdl, "intercept_") else float(y.mean())
    fitted = Xs @ coef + intercept
    return {
        "n_components": A,
        "rmsecv": rmsecv[A - 1],
        "rmsecv_by_components": rmsecv,
        "cv": "leave-one-out" if folds == n else f"{folds}-fold",
        "x_mean": mean.tolist(),
        "x_scale": sd.tolist(),
        "coef": coef.tolist(),
        "intercept": intercept,
        "x_rotations": mdl.x_rotations_.tolist(),
        "x_loadings": P.tolist(),
        "score_var": score_var.tolist(),
        "t2_limit": t2_limit(A, n, alpha),
        "q_limit": q_limit(lam, alpha),
        "alpha": alpha,
        "n": n,
        "rmsec": float(np.sqrt(np.mean((fitted - y) ** 2))),
        "y_range": [float(y.min()), float(y.max())],
    }


def predict_pls(model: dict, X) -> dict:
    """Predictions, T^2 and Q for rows of ``X`` (same features as the fit)."""
    X = np.atleast_2d(np.asarray(X, float))
    Xs = (X - np.asarray(model["x_mean"])) / np.asarray(model["x_scale"])
    yhat = Xs @ np.asarray(model["coef"]) + model["intercept"]
    T = Xs @ np.asarray(model["x_rotations"])
    t2 = np.sum(T**2 / np.asarray(model["score_var"]), axis=1)
    E = Xs - T @ np.asarray(model["x_loadings"]).T
    q = np.sum(E**2, axis=1)
    inside = (t2 <= model["t2_limit"]) & (q <= model["q_limit"])
    return {"y": yhat, "t2": t2, "q": q, "inside": inside}


def spectra_matrix(mean_spectra: dict, sample_ids, mask, normalise: str = "total",
                   is_mask=None) -> np.ndarray:
    """Rows of window pixels of the samples' mean spectra, normalised.

    ``normalise``: ``"internal_standard"`` divides each row by the summed signal in
    the internal-standard line's window (``is_mask``), ``"total"`` by the row's sum
    over the windows, ``"none"`` leaves it; either removes the sample-to-sample
    ablation yield (common practice).
    """
    full = [np.asarray(mean_spectra[s], float) for s in sample_ids]
    X = np.vstack([f[mask] for f in full])
    if normalise in ("total", "internal_standard"):
        if normalise == "total":
            tot = X.sum(axis=1, keepdims=True)
        else:
            tot = np.vstack([f[is_mask].sum(keepdims=True) for f in full])
        bad = ~(np.isfinite(tot[:, 0]) & (tot[:, 0] > 0))
        if np.any(bad):
            raise CalibrationError("a spectrum has no positive signal to normalise the PLS block by",
                                   where=f"sample {sample_ids[int(np.flatnonzero(bad)[0])]}",
                                   fix='check the sample, or set normalise = "none"')
        X = X / tot
    return X


def fit_pls_block(cfg, measurement, samples, standards) -> dict:
    """Fit the ``[calibration.pls]`` models from a LineMeasurement of the calibration run.

    Each analyte's X block holds the windows of ``[calibration.pls] lines`` when given,
    else of every method line of that analyte's element.
    """
    from compquant.calibrate.build import certified_table, content, standard_map

    pc = cfg.pls
    lt = measurement.table
    wl = np.asarray(measurement.wavelength, float)
    first = lt.drop_duplicates("line_id")
    centre = {str(r.line_id): float(r.wavelength_nm) for r in first.itertuples()}
    element = {str(r.line_id): str(r.element) for r in first.itertuples()}
    is_mask = None
    ratio = bool(cfg.basis == "ratio" and cfg.matrix_element)
    if pc.normalise == "internal_standard":
        if cfg.internal_standard not in centre:
            raise CalibrationError(f"internal-standard line {cfg.internal_standard} not measured",
                                   where="[calibration.pls]", fix="add it to the method's [[lines]]")
        is_mask = window_mask(wl, [centre[cfg.internal_standard]], pc.half_width_nm)
    smap = standard_map(lt, samples)
    certs = certified_table(standards)
    stds = [s for s, (role, ref) in smap.items() if role == "standard" and s in measurement.mean_spectra]
    models = {}
    for el in pc.analytes:
        where = f"[calibration.pls] {el}"
        line_ids = list(pc.lines) if pc.lines else sorted(k for k, e in element.items() if e == el)
        missing = [k for k in line_ids if k not in centre]
        if missing or not line_ids:
            raise CalibrationError(f"no measured line for the PLS block ({', '.join(missing) or el})",
                                   where=where, fix="add the lines to the method's [[lines]]")
        mask = window_mask(wl, [centre[k] for k in line_ids], pc.half_width_nm)
        if mask.sum() < 2:
            raise CalibrationError("PLS windows hold fewer than 2 pixels", where=where,
                                   fix="widen half_width_nm")
        use = [s for s in stds if el in certs.get(smap[s][1], {})]
        X = spectra_matrix(measurement.mean_spectra, use, mask, pc.normalise, is_mask)
        if ratio:  # mass-fraction ratio to the matrix, as the univariate ratio curves
            y = np.array([content(certs[smap[s][1]], el, "ratio", cfg.matrix_element)[0] for s in use])
        else:
            y = np.array([certs[smap[s][1]][el][0] for s in use])
        m = fit_pls(X, y, max_components=pc.max_components, cv_folds=pc.cv_folds, alpha=pc.alpha,
                    where=where)
        m["standards"] = use
        m["lines"] = line_ids
        m["wavelength_mask_nm"] = [float(v) for v in wl[mask]]
        models[el] = m
    return {"half_width_nm": pc.half_width_nm, "normalise": pc.normalise,
            "target": "ratio" if ratio else "mass_fraction",
            "is_mask_nm": None if is_mask is None else [float(v) for v in wl[is_mask]],
            "models": models}


__all__ = ["fit_pls", "predict_pls", "t2_limit", "q_limit", "window_mask", "fit_pls_block"]
