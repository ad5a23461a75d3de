"""Fuzzing the other inputs (issue 9): standards files, lab profiles, specifications and saved
calibrations. Generated, mostly malformed files are loaded (and a calibration applied to a small
run, a specification assessed against results); only a :class:`compquant.errors.CompquantError`
with a one-line message is acceptable.

Budget per kind: ``COMPQUANT_FUZZ_CONFIG_EXAMPLES`` (default 150; `.ci/run` sets it).
"""

from __future__ import annotations

import copy
import json
import os
import random

import pytest
from bad_inputs.base import LAB_TOML, METHOD_TOML, SPEC_TOML, STANDARDS_CSV, base_arrays
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_fuzz_methods import _scalar, _value, to_toml, tomllib

from compquant.errors import CompquantError
from compquant.run import Run, write_run

N = int(os.environ.get("COMPQUANT_FUZZ_CONFIG_EXAMPLES", "150"))
FUZZ = settings(
    max_examples=N,
    deadline=None,
    database=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow, HealthCheck.data_too_large],
)


def _ok_or_clean_error(fn):
    try:
        fn()
    except CompquantError as exc:
        msg = exc.one_line()
        assert msg and "\n" not in msg


@pytest.fixture(scope="module")
def env(tmp_path_factory):
    from compquant.calibrate import calibrate, load_standards, parse_calibration_section
    from compquant.lines import measure_run
    from compquant.method import load_method

    d = tmp_path_factory.mktemp("fuzz-configs")
    wl, spectra, samples, idx, dark = base_arrays(n_pixels=300, shots=3)
    run = write_run(d / "run.h5", wl, spectra, samples, idx, dark=dark, saturation=65535, created="x")
    (d / "method.toml").write_text(METHOD_TOML, encoding="utf-8")
    (d / "standards.csv").write_text(STANDARDS_CSV, encoding="utf-8")
    method = load_method(d / "method.toml")
    stds = load_standards(d / "standards.csv")
    with Run.open(run) as r:
        lm = measure_run(r, method)
        samples_t = r.samples.copy()
    cfg = parse_calibration_section(method.sections["calibration"], source=method.where)
    cal = calibrate(
        lm.table,
        stds,
        cfg,
        shot_table=lm.shots,
        samples=samples_t,
        method_id=method.id,
        method_version=method.version,
        run_sha256="0" * 64,
    )
    return {"dir": d, "lm": lm, "samples": samples_t, "standards": stds, "cal": cal.to_dict()}


# ------------------------------------------------------------------ standards CSV

_cell = st.one_of(
    st.sampled_from(
        [
            "",
            "Zn",
            "Cu",
            "zn",
            "Xx",
            "%",
            "mg/kg",
            "g/g",
            "ppm",
            "ppb",
            "2",
            "0",
            "-1",
            "5.00",
            "1e400",
            "nan",
            "inf",
            "ZS-05",
            "ZS-20",
            '"',
            ",",
            "\n",
        ]
    ),
    _scalar.map(str),
)


@pytest.mark.fuzz
@FUZZ
@given(
    edits=st.lists(st.tuples(st.integers(0, 12), st.integers(0, 9), _cell), min_size=1, max_size=5),
    header=st.booleans(),
)
def test_fuzz_standards_files(env, edits, header):
    from compquant.calibrate import load_standards

    rows = [line.split(",") for line in STANDARDS_CSV.strip().splitlines()]
    for r, c, v in edits:
        if r >= len(rows):
            rows.append(list(rows[-1]))
            r = len(rows) - 1
        if r == 0 and not header:
            continue
        row = rows[r]
        if c >= len(row):
            row.append(v)
        else:
            row[c] = v
    p = env["dir"] / "fuzz-standards.csv"
    p.write_text("\n".join(",".join(r) for r in rows) + "\n", encoding="utf-8")
    _ok_or_clean_error(lambda: load_standards(p))


# ------------------------------------------------------------------ lab profiles and specifications


def _mutate_doc(draw, base: dict, max_ops: int = 3) -> dict:
    doc = copy.deepcopy(base)
    for _ in range(draw(st.integers(1, max_ops))):
        # walk to a random table
        table, path = doc, []
        while True:
            subs = [k for k, v in table.items() if isinstance(v, dict)]
            if not subs or draw(st.booleans()):
                break
            k = draw(st.sampled_from(sorted(subs)))
            path.append(k)
            table = table[k]
        op = draw(st.sampled_from(["set", "set", "delete", "add"]))
        if op == "set" and table:
            table[draw(st.sampled_from(sorted(table)))] = draw(_value)
        elif op == "delete" and table:
            del table[draw(st.sampled_from(sorted(table)))]
        else:
            table[draw(st.sampled_from(["min", "max", "unit", "remainder", "name", "grade", "x", "Zn", "Pb"]))] = draw(
                _value
            )
    return doc


LAB = tomllib.loads(LAB_TOML)
SPEC = tomllib.loads(SPEC_TOML + '\n[limits.Cu]\nmin = 55.0\nunit = "%"\n[limits.Pb]\nremainder = true\n')


@pytest.mark.fuzz
@FUZZ
@given(data=st.data())
def test_fuzz_lab_profiles(env, data):
    from compquant.report import load_lab_profile

    p = env["dir"] / "fuzz-lab.toml"
    p.write_text(to_toml(_mutate_doc(data.draw, LAB)), encoding="utf-8")
    _ok_or_clean_error(lambda: load_lab_profile(p))


@pytest.mark.fuzz
@FUZZ
@given(data=st.data())
def test_fuzz_specifications(env, data):
    from compquant.report import ResultRow, assess_conformity, load_specification

    p = env["dir"] / "fuzz-spec.toml"
    p.write_text(to_toml(_mutate_doc(data.draw, SPEC)), encoding="utf-8")

    def go():
        spec = load_specification(p)
        rows = [
            ResultRow(
                "Zn", 0.28, U=0.004, u=0.002, k=2.0, lod=1e-4, loq=3e-4, line_id="Zn I 330.259", basis="calibration"
            ),
            ResultRow(
                "Cu",
                0.72,
                U=0.004,
                u=0.002,
                k=2.0,
                flags=["by_difference"],
                line_id="by difference",
                basis="calibration",
            ),
        ]
        assess_conformity(spec, rows)

    _ok_or_clean_error(go)


# ------------------------------------------------------------------ saved calibrations


def _paths(obj, prefix=()):
    yield prefix
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(obj, list):
        for i, v in enumerate(obj[:3]):
            yield from _paths(v, prefix + (i,))


@pytest.mark.fuzz
@FUZZ
@given(
    ops=st.lists(st.tuples(st.integers(0, 10**6), st.sampled_from(["set", "delete"]), _value), min_size=1, max_size=3)
)
def test_fuzz_calibration_files(env, ops):
    from compquant.calibrate import Calibration
    from compquant.calibrate.apply import quantify

    doc = copy.deepcopy(env["cal"])
    for pick, op, val in ops:
        paths = [p for p in _paths(doc) if p]
        path = paths[pick % len(paths)]
        parent = doc
        for k in path[:-1]:
            parent = parent[k]
        if op == "delete" and isinstance(parent, dict):
            del parent[path[-1]]
        else:
            parent[path[-1]] = val
    p = env["dir"] / "fuzz-cal.json"
    p.write_text(json.dumps(doc), encoding="utf-8")

    def go():
        cal = Calibration.load(p)
        quantify(env["lm"], cal, standards=env["standards"], run_sha256="0" * 64, samples=env["samples"])

    _ok_or_clean_error(go)


def test_calibration_fuzz_base_is_valid(env):
    """Guard on the fuzzer: the unmutated calibration loads and quantifies."""
    from compquant.calibrate import Calibration
    from compquant.calibrate.apply import quantify

    p = env["dir"] / "base-cal.json"
    p.write_text(json.dumps(env["cal"]), encoding="utf-8")
    q = quantify(
        env["lm"], Calibration.load(p), standards=env["standards"], run_sha256="0" * 64, samples=env["samples"]
    )
    assert len(q.results) > 0
    random.seed(0)


@pytest.mark.parametrize(
    "mutate",
    [
        # found by the calibration fuzzer on unseeded runs (issue 17, item 1): KeyError 'models'
        lambda d: d.__setitem__("pls", {"half_width_nm": 0.3}),
        # and TypeError from a list-valued z-score target
        lambda d: d["settings"].__setitem__("sigma_pt_rel", [0.05]),
        lambda d: d["settings"].__setitem__("sigma_pt_rel", -1.0),
        lambda d: d["settings"].pop("analytes"),
    ],
    ids=["pls-without-models", "sigma-pt-list", "sigma-pt-negative", "settings-without-analytes"],
)
def test_damaged_calibration_is_refused_on_load(env, mutate):
    from compquant.calibrate import Calibration
    from compquant.errors import CalibrationError

    doc = copy.deepcopy(env["cal"])
    mutate(doc)
    p = env["dir"] / "damaged-cal.json"
    p.write_text(json.dumps(doc), encoding="utf-8")
    with pytest.raises(CalibrationError, match="incomplete or damaged"):
        Calibration.load(p)
