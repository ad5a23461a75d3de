"""The calibration-free speed-ups (issue 22 item 6) must not change any number: the cached
partition-function evaluator is compared bit for bit with compquant.atomic.partition_function
(the reference: the level sum / Barklem & Collet 2016 tables as the atomic module computes them)."""

import numpy as np
import pytest

import compquant.atomic as atomic
from compquant.cflibs.atomicdata import PackageAtomicData
from compquant.errors import AtomicDataError


@pytest.mark.parametrize("species", ["Cu I", "Cu II", "Cu III", "Zn I", "Fe II", "Sn I", "Pb II", "H II", "Al I"])
def test_partition_function_evaluator_is_bit_identical(species):
    data = PackageAtomicData()
    for T in (np.array([6123.4567]), np.array([5000.0, 9000.0, 14321.0]), np.linspace(3000, 20000, 37)):
        got = data.partition_function(species, T)
        ref = np.asarray(atomic.partition_function(species, T), dtype=float)
        assert got.shape == ref.shape
        assert got.tobytes() == ref.tobytes()


def test_partition_function_evaluator_keeps_errors():
    data = PackageAtomicData()
    with pytest.raises(AtomicDataError):
        data.partition_function("Cu I", np.array([-5.0]))
    with pytest.raises(AtomicDataError):
        data.partition_function("Cu I", np.array([np.nan]))


def test_partition_functions_of_a_group_are_bit_identical():
    """Every shipped species (level sums, Barklem & Collet 2016 tables, bare nuclei), evaluated
    together at a new temperature, gives the reference numbers of
    compquant.atomic.partition_function bit for bit, whichever species is asked first."""
    species = atomic.species_with_partition_function() + ["H II", "He III"]
    rng = np.random.default_rng(22)
    temps = [np.array([t]) for t in rng.uniform(1500.0, 24000.0, 12)] + [np.array([7000.0, 11234.5678]),
                                                                          np.array(8765.4321)]
    data = PackageAtomicData()
    for sp in species:  # asked for at one temperature: the group of the next miss
        data.partition_function(sp, np.array([5000.0]))
    for i, T in enumerate(temps):
        first = species[(7 * i) % len(species)]
        order = [first] + [s for s in species if s != first]
        for n, sp in enumerate(order):
            assert n == 0 or (sp, T.shape, T.tobytes()) in data._u_memo  # filled by the first miss
            got = data.partition_function(sp, T)
            ref = np.asarray(atomic.partition_function(sp, T), dtype=float)
            assert got.shape == ref.shape, sp
            assert got.tobytes() == ref.tobytes(), (sp, T)
    # a miss fills the memo for the whole group: one new temperature, then only hits
    T = np.array([9876.54321])
    data.partition_function(species[0], T)
    assert all((sp, T.shape, T.tobytes()) in data._u_memo for sp in species)


def test_partition_function_group_keeps_errors_and_copies():
    data = PackageAtomicData()
    data.partition_function("Cu I", np.array([6000.0]))
    data.partition_function("Zn II", np.array([6000.0]))
    with pytest.raises(AtomicDataError):
        data.partition_function("Zn II", np.array([0.0]))
    got = data.partition_function("Cu I", np.array([6000.0]))
    got[:] = -1.0  # the caller's copy, not the memo
    again = data.partition_function("Cu I", np.array([6000.0]))
    assert again.tobytes() == np.asarray(atomic.partition_function("Cu I", np.array([6000.0]))).tobytes()


def test_partition_function_group_is_the_species_asked_since_the_last_new_temperature():
    data = PackageAtomicData()
    for sp in ("Cu I", "Cu II", "Zn I"):  # 6000 K: one new temperature, each species a miss
        data.partition_function(sp, np.array([6000.0]))
    data.partition_function("Cu I", np.array([7000.0]))  # new T: Cu I, Cu II, Zn I at 7000 K
    assert {k[0] for k in data._u_memo if k[2] == np.array([7000.0]).tobytes()} == {"Cu I", "Cu II", "Zn I"}
    data.partition_function("Sn I", np.array([7000.0]))  # not in that group: evaluated alone
    data.partition_function("Zn I", np.array([7000.0]))
    data.partition_function("Sn I", np.array([8000.0]))  # new T: the species asked since 7000 K
    assert {k[0] for k in data._u_memo if k[2] == np.array([8000.0]).tobytes()} == {"Cu I", "Sn I", "Zn I"}
    T = np.array([8000.0])
    for sp in ("Cu I", "Sn I", "Zn I"):
        assert data.partition_function(sp, T).tobytes() == np.asarray(atomic.partition_function(sp, T)).tobytes()


def test_partition_functions_columns_are_partition_function():
    data = PackageAtomicData()
    names = ("Cu I", "Fe II", "Sn I", "H II", "Zn III")
    for T in (np.array([6543.21]), np.array([5000.0, 12000.0]), np.linspace(3000, 20000, 11)):
        got = data.partition_functions(names, T)
        assert got.shape == T.shape + (len(names),)
        for k, sp in enumerate(names):
            ref = np.asarray(atomic.partition_function(sp, T), dtype=float)  # the reference
            assert got[..., k].tobytes() == ref.tobytes()


def _model_like(atomic_data):
    from types import SimpleNamespace

    from compquant.cflibs.solver import Model

    m = SimpleNamespace(atomic=atomic_data, ln_u_shift=None, LN_U_MEMO=0, _lu_memo={})
    m.ln_u = lambda sp, T: Model.ln_u(m, sp, T)
    return m


class _OneAtATime:
    """Atomic data offering only the per-species call (the path before the batched one)."""

    def __init__(self):
        self._d = PackageAtomicData()

    def partition_function(self, species, T):
        return self._d.partition_function(species, T)


def test_solver_ln_u_stages_batched_equals_per_species():
    from compquant.cflibs.solver import Model

    stages = [("Cu I", "Cu II", "Cu III", True), ("Zn I", "Zn II", "Zn III", False), ("Sn I", "Sn II", "Sn III", True)]
    for T in (np.array([7321.5]), np.array([6000.0, 9000.0, 15000.0])):
        batched = Model._ln_u_stages(_model_like(PackageAtomicData()), stages, T)
        loop = Model._ln_u_stages(_model_like(_OneAtATime()), stages, T)
        for a, b in zip(batched, loop):
            assert a.tobytes() == b.tobytes()
        ref = np.log(np.asarray(atomic.partition_function("Cu III", T), dtype=float))  # the reference
        assert batched[2][:, 0].tobytes() == ref.tobytes()
        assert not batched[2][:, 1].any()  # Zn III does not enter
    for data in (PackageAtomicData(), _OneAtATime()):  # the same error either way
        with pytest.raises(AtomicDataError):
            Model._ln_u_stages(_model_like(data), stages, np.array([-5.0]))


def test_sa_factor_on_the_half_grid_is_the_whole_grid_sum():
    """sa_factor and dln_sa_dln_tau0 evaluate τ on x ≥ 0 and mirror it: the same numbers, bit for
    bit, as the whole-grid formula SA = 1 − φ₀ Σ g(τ_k) Δx_k / τ₀ (docs/calibration-free.md §4),
    which is checked against Ladenburg & Reiche 1913 in tests/test_cflibs.py."""
    from compquant.cflibs import selfabs

    rng = np.random.default_rng(6)
    t0 = 10.0 ** rng.uniform(-6, 2, 40)
    wg = rng.uniform(1e-3, 2e-2, 40)
    wl = np.where(rng.random(40) < 0.2, 0.0, rng.uniform(1e-4, 2e-2, 40))
    phi, dx, phi0 = selfabs._profile_on_grid(np.maximum(wg, 1e-12), wl)
    tau = t0[:, None] * phi / phi0[:, None]
    num = np.sum((tau + np.expm1(-tau)) * dx, axis=1)
    ref = np.clip(1.0 - num / (t0 / phi0), 0.0, 1.0)
    assert selfabs.sa_factor(t0, wg, wl).tobytes() == ref.tobytes()
    ratio = phi / phi0[:, None]
    tau = t0[:, None] * ratio  # the derivative's association, as before the half grid
    num = np.sum((tau + np.expm1(-tau)) * dx, axis=1)
    dnum = np.sum(-np.expm1(-tau) * ratio * dx, axis=1)
    sa = 1.0 - num / (t0 / phi0)
    inside = (sa > 0) & (sa < 1)
    d_ref = np.where(inside, -phi0 * (dnum - num / t0) / np.where(inside, sa, 1.0), 0.0)
    assert selfabs.dln_sa_dln_tau0(t0, wg, wl).tobytes() == d_ref.tobytes()
