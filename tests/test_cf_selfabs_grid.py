"""The length continuation of the columnar self-absorption fit stops once the χ² minimum over the
plasma length is bracketed (issue 22 item 6: fewer fits, the same answer).

Outside references: none needed beyond the code before the change — the whole 11-point grid
(``SelfAbsFit.GRID_STOP_AFTER_RISES = None``) is the reference, and on a χ²(L) profile with one
minimum the refinement starts from the same grid point, so every number must be the same bit for
bit (common practice for a pure reordering of work); the stopping rule itself is checked on
made-up profiles.
"""

from __future__ import annotations

import json
import warnings

import cf_hand
import numpy as np
import pytest
from test_cflibs import _self_absorbed_table

from compquant.cflibs import analyse_cf
from compquant.cflibs.selfabs_fit import SelfAbsFit


def _run(monkeypatch, stop, settings):
    monkeypatch.setattr(SelfAbsFit, "GRID_STOP_AFTER_RISES", stop)
    calls = []
    real = SelfAbsFit._lsq

    def counted(self, *a, **k):
        calls.append(1)
        return real(self, *a, **k)

    monkeypatch.setattr(SelfAbsFit, "_lsq", counted)
    lt, _, w_instr = _self_absorbed_table()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        doc = analyse_cf(line_table=lt, atomic=cf_hand.atomic(),
                         settings={"mc_draws": 50, "seed": 3, "instrument_fwhm_nm": w_instr,
                                   "self_absorption": "columnar", **settings}).to_dict()
    return doc, len(calls)


@pytest.mark.parametrize("settings", [{"ne_method": "stark"}, {"ne_method": "saha"}])
def test_stopped_continuation_is_the_whole_grid_bit_for_bit(monkeypatch, settings):
    whole, n_whole = _run(monkeypatch, None, settings)
    stopped, n_stopped = _run(monkeypatch, 2, settings)
    assert json.dumps(stopped, sort_keys=True) == json.dumps(whole, sort_keys=True)
    assert n_stopped < n_whole  # grid fits skipped (least_squares calls)


class _Profile(SelfAbsFit):
    """A fit whose grid point at length L has the made-up χ² ``chi2(L)``."""

    where = "test"

    def __init__(self, chi2):
        self.chi2 = chi2
        self.lengths = []

    def _residual_fn(self, X, groups, ne_est, fit_length, length_cm):
        return None, None, None, length_cm

    def _lsq(self, resid, theta0, bounds, coarse, jac="2-point", tol=None):
        if not coarse:  # the refinement with L free: keep the start
            return None
        self.lengths.append(bounds)
        return float(self.chi2(bounds)), np.array([bounds])


def _values(v):
    """χ² per grid index i (L = 10^(−5 + i/2) cm)."""
    return lambda L: v[int(round(2.0 * np.log10(L) + 10.0))]


def test_stopping_rule_on_made_up_profiles():
    grid = np.geomspace(1e-5, 1.0, 11)
    # one minimum at the 6th grid point: stops after the 7th and 8th rose
    one = _Profile(lambda L: (np.log10(L) + 2.5) ** 2)
    chi2, _, L = one._fit_free_length(None, None, None, np.zeros(1), coarse=False)
    assert one.lengths == list(grid[:8])
    assert L == pytest.approx(grid[5], rel=1e-12) and chi2 == pytest.approx(0.0)
    # falling all the way to 1 cm: the whole grid
    falling = _Profile(lambda L: -np.log10(L))
    _, _, L = falling._fit_free_length(None, None, None, np.zeros(1), coarse=False)
    assert falling.lengths == list(grid) and L == pytest.approx(grid[-1], rel=1e-12)
    # one rise only, then a deeper minimum: still found
    dip = _Profile(_values([9, 8, 7, 1, 2, 0.5, 3, 4, 5, 6, 7]))
    _, _, L = dip._fit_free_length(None, None, None, np.zeros(1), coarse=False)
    assert L == pytest.approx(grid[5], rel=1e-12) and dip.lengths == list(grid[:8])
    # a deeper minimum behind two rises is no longer looked for (documented)
    far = _Profile(_values([9, 8, 7, 1, 2, 3, 0.5, 4, 5, 6, 7]))
    _, _, L = far._fit_free_length(None, None, None, np.zeros(1), coarse=False)
    assert L == pytest.approx(grid[3], rel=1e-12) and far.lengths == list(grid[:6])
    # the whole grid when switched off: the deeper minimum found
    far_all = _Profile(_values([9, 8, 7, 1, 2, 3, 0.5, 4, 5, 6, 7]))
    far_all.GRID_STOP_AFTER_RISES = None
    _, _, L = far_all._fit_free_length(None, None, None, np.zeros(1), coarse=False)
    assert L == pytest.approx(grid[6], rel=1e-12) and far_all.lengths == list(grid)


@pytest.mark.parametrize("settings", [{"ne_method": "stark"}, {"ne_method": "saha"}])
def test_looser_grid_points_leave_the_refined_solution_where_it_was(monkeypatch, settings):
    """The grid points fitted to xtol = ftol = 10⁻⁴ (now) or 10⁻⁶ (before): the refinement with
    L free (xtol 10⁻¹⁰, ftol 10⁻¹²) ends at the same optimum within its own tolerance (here T,
    nₑ, L and every mass fraction and u within 10⁻⁸), with the same flags."""
    out = {}
    for tol in (1e-6, 1e-4):
        monkeypatch.setattr(SelfAbsFit, "GRID_TOL", tol)
        out[tol], _ = _run(monkeypatch, 2, settings)
    a, b = out[1e-6], out[1e-4]
    assert b["flags"] == a["flags"]
    for key in ("temperature_k", "electron_density_cm3"):
        assert b[key] == pytest.approx(a[key], rel=1e-8)
    assert b["self_absorption"]["plasma_length_mm"] == pytest.approx(a["self_absorption"]["plasma_length_mm"], rel=1e-8)
    checked = 0
    ea = {e["element"]: e for e in a["elements"]}
    for e in b["elements"]:
        for key in ("mass_fraction", "uncertified_mass_fraction", "u"):
            if isinstance(ea[e["element"]].get(key), float):
                assert e[key] == pytest.approx(ea[e["element"]][key], rel=1e-8), (e["element"], key)
                checked += 1
    assert checked
