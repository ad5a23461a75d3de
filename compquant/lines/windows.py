"""Window integration of emission lines with a local linear background.

For a line window ``[a, b]`` the intensity is the integral of the spectrum
minus a straight background fitted by least squares to two side windows
``S = [a - g - s, a - g] U [b + g, b + g + s]``::

    I = int_a^b ( y(l) - (alpha + beta (l - c)) ) dl        [counts * nm]

where ``y(l)`` is the piecewise-linear interpolant through the pixel values
(so window edges need not fall on pixel centres) and ``c`` the line centre.
The background line is the continuous least-squares fit of the same
interpolant over the side intervals (not a fit through whole side pixels)::

    minimise  int_S ( y(l) - alpha - beta (l - c) )^2 dl
    =>  M theta = r,   theta = (alpha, beta),
        M = int_S [[1, x], [x, x^2]] dx,   r = ( int_S y dl, int_S (l - c) y dl ),   x = l - c

(the normal equations of least squares with the integral as inner product:
continuous least-squares approximation, e.g. Burden & Faires, *Numerical
Analysis*, 9th ed., sec. 8.2; Press et al., *Numerical Recipes*, 3rd ed.,
sec. 15.4).  ``M`` has a closed form in the interval ends; both moments in
``r`` are linear in the pixel values, with weights from the interpolant
(zeroth moment: the trapezoid-type segment integral below; first moment: the
same segments integrated against ``l - c``, exact by two-point
Gauss-Legendre quadrature because the integrand is quadratic, Abramowitz &
Stegun 1964, 25.4.29).  So the background, and hence ``I``, is continuous in
the window and side-window edges: a wavelength shift that moves a side edge
across a pixel moves the result smoothly, as it does for the line window.
Because all terms are linear in the pixel values, every line reduces to one
weight vector ``w``.  Each vector is non-zero only on the line's own pixels
(window, side windows and the pixels bracketing their edges), so it is stored
sparse, per line (pixel indices and weights): measuring ``L`` lines costs
``O(L x pixels per line)`` per spectrum, linear in the number of lines, where
a dense ``(n_pixels, L)`` matrix would cost ``O(n_pixels x L)``.  The dense
matrix ``W`` (``I = Y @ W``) is still available, built on demand.

When only one side window lies inside the spectrum the background is the
constant mean of the interpolant over that side, ``B = int_side y dl / s``
(the same least squares with ``alpha`` alone); without a side window inside
the spectrum there is no background subtraction (the preceding baseline
removal must then carry it).

The noise of a spectrum near the line is the standard deviation of the side
pixels (pixel centres inside the side windows) about their least-squares
line, ``sigma^2 = RSS / (m - 2)``; for white pixel noise the intensity's
standard uncertainty is ``sigma * ||w||_2`` (propagation of independent
errors, JCGM 100:2008 eq. 10).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def interpolant_integral_weights(wavelength, a: float, b: float) -> np.ndarray:
    """Weights ``u`` with ``u @ y = int_a^b y(l) dl`` for the piecewise-linear interpolant of y.

    On segment ``[x_i, x_{i+1}]`` (width h) overlapping ``[u, v]`` the interpolant
    integrates to ``y_i [(x_{i+1}-u)^2 - (x_{i+1}-v)^2]/(2h) + y_{i+1} [(v-x_i)^2 - (u-x_i)^2]/(2h)``.
    """
    x = np.asarray(wavelength, dtype=np.float64)
    w = np.zeros_like(x)
    if b <= a:
        return w
    lo, hi = _bracket(x, a, b)
    w[lo:hi] = _local_interpolant_weights(x[lo:hi], a, b)
    return w


def _bracket(x: np.ndarray, a: float, b: float) -> tuple[int, int]:
    """Pixel range ``[lo, hi)`` holding every pixel whose interpolant weight on ``[a, b]`` can be non-zero."""
    lo = max(0, int(np.searchsorted(x, a, side="right")) - 1)
    hi = min(x.size, int(np.searchsorted(x, b, side="left")) + 1)
    return lo, max(hi, lo)


def _segments(x: np.ndarray, a: float, b: float):
    """The segments ``[x_i, x_{i+1}]`` of the pixels ``x``, their overlap ``[u, v]`` with ``[a, b]``
    (empty where ``u = v``) and widths ``h``: ``(x0, x1, u, v, h)``."""
    x0, x1 = x[:-1], x[1:]
    return x0, x1, np.clip(a, x0, x1), np.clip(b, x0, x1), x1 - x0


def _local_interpolant_weights(x: np.ndarray, a: float, b: float) -> np.ndarray:
    """:func:`interpolant_integral_weights` on the pixels ``x`` only (the segments between them)."""
    w = np.zeros_like(x)
    if b <= a or x.size < 2:
        return w
    x0, x1, u, v, h = _segments(x, a, b)
    left = ((x1 - u) ** 2 - (x1 - v) ** 2) / (2 * h)
    right = ((v - x0) ** 2 - (u - x0) ** 2) / (2 * h)
    w[:-1] += left
    w[1:] += right
    return w


_GL2 = 0.5 / np.sqrt(3.0)  # two-point Gauss-Legendre nodes on [0, 1]: 1/2 -+ 1/(2 sqrt 3), weights 1/2 each


def _local_first_moment_weights(x: np.ndarray, a: float, b: float, c: float) -> np.ndarray:
    """Weights ``v`` with ``v @ y = int_a^b (l - c) y(l) dl`` for the interpolant on the pixels ``x``.

    On segment ``[x_i, x_{i+1}]`` (width h) overlapping ``[u, v]`` the interpolant is
    ``y_i (x_{i+1} - l)/h + y_{i+1} (l - x_i)/h``; each term times ``(l - c)`` is a quadratic
    in ``l``, integrated exactly by the two-point Gauss-Legendre rule on ``[u, v]``
    (Abramowitz & Stegun 1964, 25.4.29: exact for polynomials of degree <= 3).
    """
    w = np.zeros_like(x)
    if b <= a or x.size < 2:
        return w
    x0, x1, u, v, h = _segments(x, a, b)
    mid, width = 0.5 * (u + v), v - u
    left = np.zeros_like(h)
    right = np.zeros_like(h)
    for t in (mid - _GL2 * width, mid + _GL2 * width):
        left += 0.5 * width * (t - c) * (x1 - t) / h
        right += 0.5 * width * (t - c) * (t - x0) / h
    w[:-1] += left
    w[1:] += right
    return w


def _side_interval(wl: np.ndarray, rng: tuple[float, float] | None) -> tuple[float, float] | None:
    """The side window as an integration interval, or None if it is empty or leaves the spectrum."""
    if rng is None:
        return None
    lo, hi = rng
    if not hi > lo or lo < wl[0] - 1e-12 or hi > wl[-1] + 1e-12:
        return None  # side window leaves the spectrum: unusable
    lo, hi = max(float(lo), float(wl[0])), min(float(hi), float(wl[-1]))
    return (lo, hi) if hi > lo else None


def _side_intervals(wl: np.ndarray, g) -> tuple[list, list]:
    """The side windows of geometry ``g`` inside the spectrum as intervals ``[(p, q), ...]`` and
    the pixel range ``[p0, p1)`` bracketing each (:func:`_bracket`)."""
    intervals = [iv for iv in (_side_interval(wl, g.left), _side_interval(wl, g.right)) if iv is not None]
    return intervals, [_bracket(wl, p, q) for p, q in intervals]


@dataclass
class WindowLine:
    """Integration geometry of one line (all wavelengths in nm)."""

    centre_nm: float
    a: float
    b: float
    left: tuple[float, float] | None
    right: tuple[float, float] | None


def window_geometry(centre_nm: float, window_nm: float, side_nm: float, gap_nm: float) -> WindowLine:
    half = 0.5 * window_nm
    a, b = centre_nm - half, centre_nm + half
    left = (a - gap_nm - side_nm, a - gap_nm) if side_nm > 0 else None
    right = (b + gap_nm, b + gap_nm + side_nm) if side_nm > 0 else None
    return WindowLine(centre_nm, a, b, left, right)


def _side_pixels(wl: np.ndarray, rng: tuple[float, float] | None) -> np.ndarray:
    """Pixels whose centres lie in a side window inside the spectrum (for the noise estimate only)."""
    if rng is None:
        return np.zeros(0, dtype=np.intp)
    lo, hi = rng
    if lo < wl[0] - 1e-12 or hi > wl[-1] + 1e-12:
        return np.zeros(0, dtype=np.intp)  # side window leaves the spectrum: unusable
    return np.nonzero((wl >= lo) & (wl <= hi))[0]


@dataclass
class WindowWeights:
    """Per-line sparse weights and noise operators for a set of window-integrated lines.

    Line ``j`` is ``I_j = sum_k weights[j][k] * y[pixels[j][k]]``; ``pixels[j]`` are the
    pixels where its weight vector is non-zero (sorted), so storage and work are
    linear in the number of lines.
    """

    pixels: list[np.ndarray]  # per line: pixel indices with non-zero weight
    weights: list[np.ndarray]  # per line: the weights on those pixels
    support: list[np.ndarray]  # pixel indices each line touches (line + side windows)
    side: list[np.ndarray]  # side pixel indices (centres inside the side windows): noise estimate
    background: list[str]  # "linear", "constant" or "none"
    geometry: list[WindowLine]
    n_pixels: int = 0

    @property
    def n_lines(self) -> int:
        return len(self.pixels)

    @property
    def W(self) -> np.ndarray:
        """The dense ``(n_pixels, n_lines)`` matrix with ``I = Y @ W`` (built on each call)."""
        W = np.zeros((self.n_pixels, self.n_lines))
        for j, (idx, w) in enumerate(zip(self.pixels, self.weights)):
            W[idx, j] = w
        return W

    def integrate(self, spectra) -> np.ndarray:
        """Intensities of all lines: ``(n_shots, n_lines)`` (or ``(n_lines,)`` for one spectrum)."""
        Y = np.asarray(spectra, dtype=np.float64)
        out = np.empty(Y.shape[:-1] + (self.n_lines,))
        for j, (idx, w) in enumerate(zip(self.pixels, self.weights)):
            out[..., j] = Y[..., idx] @ w
        return out

    def noise_sigma(self, spectrum: np.ndarray) -> np.ndarray:
        """Per-line pixel noise of ONE spectrum from its side-pixel scatter (NaN if < 3 pixels)."""
        y = np.asarray(spectrum, dtype=np.float64)
        out = np.full(self.n_lines, np.nan)
        for j, (idx, kind) in enumerate(zip(self.side, self.background)):
            m = idx.size
            if kind == "linear" and m >= 3:
                x = self._wl[idx]
                A = np.column_stack([np.ones(m), x - x.mean()])
                coef, *_ = np.linalg.lstsq(A, y[idx], rcond=None)
                r = y[idx] - A @ coef
                out[j] = np.sqrt(r @ r / (m - 2))
            elif kind == "constant" and m >= 2:
                out[j] = np.std(y[idx], ddof=1)
        return out

    def u_noise(self, spectrum: np.ndarray) -> np.ndarray:
        """Standard uncertainty of each line's intensity from pixel noise: ``sigma * ||w||``."""
        norms = np.array([np.linalg.norm(w) for w in self.weights])
        return self.noise_sigma(spectrum) * norms


def _side_normal_equations(wl, intervals, brackets, c: float, sup: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``M`` (2 x 2) and ``R`` (2 x len(sup)) of the continuous least-squares background, ``M theta = R @ y[sup]``.

    ``M = sum over side intervals [p, q] of int_p^q [[1, x], [x, x^2]] dx`` with ``x = l - c``
    (closed form: ``q - p``, ``(x_q^2 - x_p^2)/2``, ``(x_q^3 - x_p^3)/3``); ``R``'s rows are the
    interpolant's zeroth and first moments ``int y dl`` and ``int (l - c) y dl`` over the intervals.
    """
    R = np.zeros((2, sup.size))
    M = np.zeros((2, 2))
    for (p, q), (p0, p1) in zip(intervals, brackets):
        pos = np.searchsorted(sup, np.arange(p0, p1))
        R[0, pos] += _local_interpolant_weights(wl[p0:p1], p, q)
        R[1, pos] += _local_first_moment_weights(wl[p0:p1], p, q, c)
        xp, xq = p - c, q - c
        m1 = 0.5 * (xq - xp) * (xq + xp)
        M += np.array([[xq - xp, m1], [m1, (xq - xp) * (xq * xq + xq * xp + xp * xp) / 3.0]])
    return M, R


def side_background(wavelength, spectrum, g: WindowLine) -> tuple[str, float, float]:
    """The background line that window integration removes for geometry ``g`` on one spectrum.

    Returns ``(kind, alpha, beta)`` with the background ``alpha + beta (l - g.centre_nm)``
    [counts]: the continuous least-squares line over both side intervals (``"linear"``), the
    interpolant's mean over the one side interval inside the spectrum (``"constant"``, beta = 0),
    or ``("none", nan, nan)`` (module docstring).
    """
    wl = np.asarray(wavelength, dtype=np.float64)
    y = np.asarray(spectrum, dtype=np.float64)
    c = float(g.centre_nm)
    intervals, brackets = _side_intervals(wl, g)
    if not intervals:
        return "none", float("nan"), float("nan")
    sup = np.unique(np.concatenate([np.arange(p0, p1) for p0, p1 in brackets])).astype(np.intp)
    M, R = _side_normal_equations(wl, intervals, brackets, c, sup)
    r = R @ y[sup]
    if len(intervals) == 1:
        return "constant", float(r[0] / M[0, 0]), 0.0
    alpha, beta = np.linalg.solve(M, r)
    return "linear", float(alpha), float(beta)


def build_window_weights(wavelength, geometries: list[WindowLine]) -> WindowWeights:
    """Weight vectors for window integration minus local linear background (module docstring).

    With ``x = l - c`` (``c`` the line centre) and the side intervals ``S`` inside the spectrum,
    the background ``alpha + beta x`` solves ``M theta = r`` with ``M = int_S [[1, x], [x, x^2]] dx``
    (closed form) and ``r = R @ y`` (zeroth and first interpolant moments over ``S``); the line's
    weights are ``w = u_[a,b] - g M^-1 R`` with ``g = (b - a, ((b-c)^2 - (a-c)^2)/2)`` the window
    integral of ``(1, x)`` (continuous least squares, Burden & Faires sec. 8.2).  With one side
    interval of width ``s`` the background is its interpolant mean: ``w = u_[a,b] - (b - a)/s * u_S``.
    Each line's weights are computed on its own pixels only (window, side windows and their bracketing
    pixels): the cost is linear in the number of lines.
    """
    wl = np.asarray(wavelength, dtype=np.float64)
    n = wl.size
    pixels, weights, supports, sides, kinds = [], [], [], [], []
    for g in geometries:
        c = float(g.centre_nm)
        lo, hi = _bracket(wl, g.a, g.b)
        intervals, brackets = _side_intervals(wl, g)
        idx = np.concatenate([_side_pixels(wl, g.left), _side_pixels(wl, g.right)]).astype(np.intp)
        # support: pixels inside the window and those bracketing its edges, the side intervals' pixels
        # with their bracketing pixels (every pixel the weights can touch)
        s_lo = max(0, int(np.searchsorted(wl, g.a)) - 1)
        s_hi = min(n, int(np.searchsorted(wl, g.b, side="right")) + 1)
        parts = [np.arange(s_lo, s_hi), np.arange(lo, hi), idx] + [np.arange(p0, p1) for p0, p1 in brackets]
        sup = np.unique(np.concatenate(parts)).astype(np.intp)  # sorted, unique
        w = np.zeros(sup.size)
        w[np.searchsorted(sup, np.arange(lo, hi))] = _local_interpolant_weights(wl[lo:hi], g.a, g.b)
        if len(intervals) == 2:
            M, R = _side_normal_equations(wl, intervals, brackets, c, sup)
            ua, ub = g.a - c, g.b - c
            g_row = np.array([ub - ua, 0.5 * (ub - ua) * (ub + ua)])
            w -= np.linalg.solve(M.T, g_row) @ R  # g M^-1 R
            kind = "linear"
        elif len(intervals) == 1:
            (p, q), (p0, p1) = intervals[0], brackets[0]
            pos = np.searchsorted(sup, np.arange(p0, p1))
            w[pos] -= (g.b - g.a) / (q - p) * _local_interpolant_weights(wl[p0:p1], p, q)
            kind = "constant"
        else:
            kind = "none"
        nz = w != 0
        pixels.append(sup[nz])
        weights.append(w[nz])
        supports.append(sup)
        sides.append(idx)
        kinds.append(kind)
    out = WindowWeights(
        pixels=pixels, weights=weights, support=supports, side=sides, background=kinds, geometry=geometries, n_pixels=n
    )
    out._wl = wl  # type: ignore[attr-defined]
    return out


def integrate_windows(spectra, weights: WindowWeights) -> np.ndarray:
    """Intensities of all lines in all spectra -> (n_shots, n_lines) (per-line sparse sums)."""
    return weights.integrate(spectra)


def support_mask(n_pixels: int, supports: list[np.ndarray]) -> np.ndarray:
    """Boolean (n_pixels, n_lines) matrix: pixel touches the line's windows."""
    M = np.zeros((n_pixels, len(supports)), dtype=bool)
    for j, s in enumerate(supports):
        M[s, j] = True
    return M


def saturated_lines(sat_mask: np.ndarray | None, support: np.ndarray) -> np.ndarray | None:
    """Per shot and line: does any pixel touched by the line saturate? (n_shots, n_lines) bool."""
    if sat_mask is None or not sat_mask.any():
        return None
    return (sat_mask.astype(np.float32) @ support.astype(np.float32)) > 0


def peak_centre_fwhm(wavelength, spectrum, a: float, b: float) -> tuple[float, float]:
    """Centre (3-point parabola at the peak pixel) and FWHM (half-maximum crossings) in [a, b].

    The spectrum is used as given (background already removed); NaN when the
    peak is not inside the window or does not fall below half maximum on
    both sides within it.
    """
    wl = np.asarray(wavelength, dtype=np.float64)
    y = np.asarray(spectrum, dtype=np.float64)
    i0 = int(np.searchsorted(wl, a))
    i1 = int(np.searchsorted(wl, b, side="right"))
    if i1 - i0 < 3:
        return float("nan"), float("nan")
    j = i0 + int(np.argmax(y[i0:i1]))
    if j in (i0, i1 - 1) or y[j] <= 0:
        return float("nan"), float("nan")
    den = y[j - 1] - 2 * y[j] + y[j + 1]
    off = 0.5 * (y[j - 1] - y[j + 1]) / den if den < 0 else 0.0
    centre = wl[j] + off * (wl[j + 1] - wl[j])
    half = 0.5 * y[j]
    k = j
    while k > i0 and y[k] > half:
        k -= 1
    if y[k] > half:
        return float(centre), float("nan")
    xl = wl[k] + (half - y[k]) * (wl[k + 1] - wl[k]) / (y[k + 1] - y[k])
    k = j
    while k < i1 - 1 and y[k] > half:
        k += 1
    if y[k] > half:
        return float(centre), float("nan")
    xr = wl[k - 1] + (half - y[k - 1]) * (wl[k] - wl[k - 1]) / (y[k] - y[k - 1])
    return float(centre), float(xr - xl)
