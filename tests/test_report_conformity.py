"""Decision rules for statements of conformity, checked against ILAC G8:09/2019 cases."""

from __future__ import annotations

import pytest
from scipy.stats import norm

from compquant.report.certificate import ResultRow
from compquant.report.config import ElementLimit, Specification
from compquant.report.conformity import (
    CONDITIONAL_FAIL,
    CONDITIONAL_PASS,
    FAIL,
    NOT_DECIDED,
    PASS,
    assess_conformity,
    decide,
    worst,
)

# Upper tolerance limit TL = 10, U = 1 (k = 2): the four zones of the non-binary guard-band
# statement, from memory of ILAC G8:09/2019, 4.2.3 and its figure of pass / conditional pass /
# conditional fail / fail.
ILAC_UPPER = [
    (8.5, PASS),
    (9.0, PASS),
    (9.5, CONDITIONAL_PASS),
    (10.0, CONDITIONAL_PASS),
    (10.5, CONDITIONAL_FAIL),
    (11.0, CONDITIONAL_FAIL),
    (11.5, FAIL),
]


@pytest.mark.parametrize("x,expected", ILAC_UPPER)
def test_guard_band_non_binary_upper_limit(x, expected):
    assert decide(x, 1.0, upper=10.0, rule="guard-band").outcome == expected


@pytest.mark.parametrize("x,expected", [(20.0 - x, e) for x, e in ILAC_UPPER])
def test_guard_band_non_binary_lower_limit_is_the_mirror(x, expected):
    # lower limit 10, mirror image about 10: 11.5 pass ... 8.5 fail (from memory of ILAC G8:09/2019)
    assert decide(x, 1.0, lower=10.0, rule="guard-band").outcome == expected


def test_simple_acceptance_ignores_uncertainty():
    # ILAC G8:09/2019 4.2.1 (from memory): w = 0, the measured value alone decides
    assert decide(9.99, 5.0, upper=10.0, rule="simple-acceptance").outcome == PASS
    assert decide(10.01, 0.001, upper=10.0, rule="simple-acceptance").outcome == FAIL
    assert decide(10.0, None, upper=10.0, rule="simple-acceptance").outcome == PASS


def test_binary_guard_band_acceptance_limit_is_tl_minus_u():
    # ILAC G8:09/2019 4.2.2 (from memory): AL = TL - w with w = U
    assert decide(8.9, 1.0, upper=10.0, rule="guard-band-binary").outcome == PASS
    assert decide(9.0, 1.0, upper=10.0, rule="guard-band-binary").outcome == PASS
    assert decide(9.5, 1.0, upper=10.0, rule="guard-band-binary").outcome == FAIL
    assert decide(11.5, 1.0, lower=10.0, rule="guard-band-binary").outcome == PASS
    assert decide(10.5, 1.0, lower=10.0, rule="guard-band-binary").outcome == FAIL


def test_guard_band_specific_risk_against_normal_distribution():
    # With U = 2u and a measured value at AL = TL - U, the probability that the true value lies
    # above TL is 1 - Phi(2) = 2.3 %, below the ~2.5 % ILAC G8 quotes for w = U (from memory of
    # ILAC G8:09/2019 4.2.2); scipy.stats.norm is the reference.  At the limit itself (simple
    # acceptance) it is 50 %.
    u, TL = 0.5, 10.0
    U = 2 * u
    x_al = TL - U
    assert decide(x_al, U, upper=TL, rule="guard-band-binary").outcome == PASS
    pfa = norm.sf(TL, loc=x_al, scale=u)
    assert pfa == pytest.approx(0.02275, abs=1e-4)
    assert pfa < 0.025
    assert norm.sf(TL, loc=TL, scale=u) == pytest.approx(0.5)
    # just above AL the binary rule refuses
    assert decide(x_al + 1e-9, U, upper=TL, rule="guard-band-binary").outcome == FAIL


def test_two_sided_limits_state_the_worse_outcome():
    assert decide(5.0, 0.5, lower=4.0, upper=6.0, rule="guard-band").outcome == PASS
    assert decide(5.8, 0.5, lower=4.0, upper=6.0, rule="guard-band").outcome == CONDITIONAL_PASS
    assert decide(3.7, 0.5, lower=4.0, upper=6.0, rule="guard-band").outcome == CONDITIONAL_FAIL
    # an uncertainty wider than the whole tolerance: never a pass (common practice)
    assert decide(5.0, 2.0, lower=4.0, upper=6.0, rule="guard-band").outcome == CONDITIONAL_PASS
    assert decide(5.0, 2.0, lower=4.0, upper=6.0, rule="guard-band-binary").outcome == FAIL


def test_below_lod_rules():
    # common practice: "< LOD" passes a maximum the LOD is below, fails a minimum the LOD is below
    assert decide(None, None, upper=0.3, below_lod=True, lod=0.01, rule="guard-band").outcome == PASS
    assert decide(None, None, upper=0.3, below_lod=True, lod=0.5, rule="guard-band").outcome == NOT_DECIDED
    assert decide(None, None, lower=0.3, below_lod=True, lod=0.01, rule="guard-band").outcome == FAIL
    assert decide(None, None, lower=0.3, below_lod=True, lod=0.5, rule="guard-band").outcome == NOT_DECIDED
    assert decide(None, None, upper=0.3, below_lod=True, lod=None).outcome == NOT_DECIDED


def test_missing_u_cannot_use_a_guard_band():
    assert decide(5.0, None, upper=10.0, rule="guard-band").outcome == NOT_DECIDED
    assert decide(float("nan"), 1.0, upper=10.0).outcome == NOT_DECIDED


def test_worst_aggregation():
    assert worst([PASS, CONDITIONAL_PASS]) == CONDITIONAL_PASS
    assert worst([PASS, FAIL, CONDITIONAL_FAIL]) == FAIL
    assert worst([PASS, NOT_DECIDED]) == NOT_DECIDED  # an undecided element could still fail
    assert worst([CONDITIONAL_FAIL, NOT_DECIDED]) == CONDITIONAL_FAIL
    assert worst([]) == NOT_DECIDED


def test_bad_rule_is_a_bug():
    with pytest.raises(ValueError):
        decide(1.0, 0.1, upper=2.0, rule="nearest")
    with pytest.raises(ValueError):
        decide(1.0, 0.1)


def _spec(rule="guard-band"):
    return Specification(
        "demo",
        "G1",
        rule,
        [
            ElementLimit("Cu", 0.57, 0.595, "%"),
            ElementLimit("Pb", 0.016, 0.025, "%"),
            ElementLimit("Ni", None, 0.003, "%"),
            ElementLimit("Zn", None, None, "%", remainder=True),
        ],
    )


def test_assess_conformity_overall_and_per_element():
    res = [
        ResultRow("Cu", 0.5824, U=0.0041),
        ResultRow("Pb", 0.0246, U=0.0008),
        ResultRow("Ni", None, U=None, below_lod=True, lod=0.00003),
        ResultRow("Zn", 0.39, U=0.006),
    ]
    cs = assess_conformity(_spec(), res)
    outs = {e.element: e.outcome for e in cs.elements}
    assert outs == {"Cu": PASS, "Pb": CONDITIONAL_PASS, "Ni": PASS, "Zn": "remainder"}
    assert cs.outcome == CONDITIONAL_PASS
    assert cs.statement.startswith("Conditional pass")
    cs2 = assess_conformity(_spec("simple-acceptance"), res)
    assert cs2.outcome == PASS
    # Pb well above the maximum
    res[1] = ResultRow("Pb", 0.030, U=0.001)
    cs3 = assess_conformity(_spec(), res)
    assert cs3.outcome == FAIL and "Pb" in cs3.statement


def test_missing_element_blocks_an_overall_pass():
    res = [ResultRow("Cu", 0.58, U=0.004), ResultRow("Pb", 0.020, U=0.0008)]
    cs = assess_conformity(_spec(), res)
    assert {e.element: e.outcome for e in cs.elements}["Ni"] == NOT_DECIDED
    assert cs.outcome == NOT_DECIDED
    assert cs.statement.startswith("No statement of conformity")
