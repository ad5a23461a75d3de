"""Window integration of emission lines with a local linear background.

For a line window ``[a, b]`` the intensity is the integral of the spectrum
minus a straight background fitted by least squares to the pixels of two side
windows ``[a - g - s, a - g]`` and ``[b + g, b + g + s]``::

    I = int_a^b ( y(l) - (alpha + beta (l - l0)) ) dl        [counts * nm]

where ``y(l)`` is the piecewise-linear interpolant through the pixel values
(so window edges need not fall on pixel centres) and ``(alpha, beta)`` the
least-squares line through the side pixels.  Both terms are linear in the
pixel values, so every line reduces to one weight vector ``w``.  Each vector is
non-zero only on the line's own pixels (window, bracketing pixels and side
windows), so it is stored sparse, per line (pixel indices and weights): measuring
``L`` lines costs ``O(L x pixels per line)`` per spectrum, linear in the number of
lines, where a dense ``(n_pixels, L)`` matrix would cost ``O(n_pixels x L)``.  The
dense matrix ``W`` (``I = Y @ W``) is still available, built on demand.

When only one side window lies inside the spectrum the background is the
constant mean of that side; without side pixels there is no background
subtraction (the preceding baseline removal must then carry it).

The noise of a spectrum near the line is the standard deviation of the side
pixels about their fitted line, ``sigma^2 = RSS / (m - 2)``; for white pixel
noise the intensity's standard uncertainty is ``sigma * ||w||_2`` (propagation
of independent errors, JCGM 100:2008 eq. 10).
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


def _local_interpolant_weights(x: np.ndarray, a: float, b: float) -> np.ndarray:
    """:func:`interpolant_integral_weights` on the pixels ``x`` only (the segments between them)."""
    w = np.zeros_like(x)
    if b <= a or x.size < 2:
        return w
    x0, x1 = x[:-1], x[1:]
    u = np.clip(a, x0, x1)
    v = np.clip(b, x0, x1)
    h = x1 - x0
    left = ((x1 - u) ** 2 - (x1 - v) ** 2) / (2 * h)
    right = ((v - x0) ** 2 - (u - x0) ** 2) / (2 * h)
    w[:-1] += left
    w[1:] += right
    return w


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
    side: list[np.ndarray]  # side pixel indices
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


def build_window_weights(wavelength, geometries: list[WindowLine]) -> WindowWeights:
    """Weight vectors for window integration minus local linear background (module docstring).

    Each line's weights are computed on its own pixels only (window, bracketing pixels,
    side windows): the cost is linear in the number of lines.
    """
    wl = np.asarray(wavelength, dtype=np.float64)
    n = wl.size
    pixels, weights, supports, sides, kinds = [], [], [], [], []
    for g in geometries:
        lo, hi = _bracket(wl, g.a, g.b)
        li = _side_pixels(wl, g.left)
        ri = _side_pixels(wl, g.right)
        idx = np.concatenate([li, ri])
        # support: pixels inside the window and those bracketing its edges, and the side pixels
        s_lo = max(0, int(np.searchsorted(wl, g.a)) - 1)
        s_hi = min(n, int(np.searchsorted(wl, g.b, side="right")) + 1)
        sup = np.union1d(np.arange(s_lo, s_hi), idx).astype(np.intp)  # sorted, unique; holds [lo, hi)
        w = np.zeros(sup.size)
        pos = np.searchsorted(sup, np.arange(lo, hi))
        w[pos] = _local_interpolant_weights(wl[lo:hi], g.a, g.b)
        side_pos = np.searchsorted(sup, idx)
        if li.size and ri.size and idx.size >= 2:
            x = wl[idx] - g.centre_nm
            A = np.column_stack([np.ones(idx.size), x])
            P = np.linalg.pinv(A)  # (2, m): (alpha, beta) = P @ y_side
            # int_a^b alpha + beta (l - c) dl
            ua, ub = g.a - g.centre_nm, g.b - g.centre_nm
            g_row = np.array([ub - ua, 0.5 * (ub**2 - ua**2)])
            w[side_pos] -= g_row @ P
            kind = "linear"
        elif idx.size >= 1:
            w[side_pos] -= (g.b - g.a) / idx.size
            kind = "constant"
        else:
            kind = "none"
        nz = w != 0
        pixels.append(sup[nz])
        weights.append(w[nz])
        supports.append(sup)
        sides.append(idx.astype(np.intp))
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
