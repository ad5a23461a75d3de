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
