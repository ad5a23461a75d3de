"""Fuzzing method files (issue 9): generated, mostly malformed method files never cause an
unhandled exception anywhere they are read.

Each generated method is written as TOML text, loaded with :func:`compquant.method.load_method`,
checked against a small run, its owned sections parsed by their modules ([calibration], [cf],
[identify], [map]), the run measured with it and, when its [calibration] is usable, calibrated and
quantified. The only acceptable failure is a :class:`compquant.errors.CompquantError` with a
one-line message. A second test flips, inserts and deletes bytes of a valid method file.

Budgets: ``COMPQUANT_FUZZ_METHOD_EXAMPLES`` (structured methods, default 400 here) and
``COMPQUANT_FUZZ_METHOD_BYTES_EXAMPLES`` (byte mutations, default 200); `.ci/run` sets them.
"""

from __future__ import annotations

import copy
import json
import math
import os
import sys
from pathlib import Path

import pytest
from bad_inputs.base import METHOD_TOML, STANDARDS_CSV, base_arrays
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from compquant.errors import CompquantError
from compquant.method import LINE_KEYS as METHOD_LINE_KEYS
from compquant.run import Run, write_run

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

N_METHODS = int(os.environ.get("COMPQUANT_FUZZ_METHOD_EXAMPLES", "400"))
N_BYTES = int(os.environ.get("COMPQUANT_FUZZ_METHOD_BYTES_EXAMPLES", "200"))

BASE = tomllib.loads(
    METHOD_TOML
    + """
[preprocess.dark]
statistic = "median"
[preprocess.qc]
k = 5.0
min_fraction = 0.1
[measure]
mode = "window"
snr_min = 10.0
[cf]
fit = "boltzmann"
ne_method = "fixed"
ne_fixed_cm3 = 1.0e17
mc_draws = 5
[identify]
k_sigma = 5.0
[map]
lines = ["Zn I 330.259"]
step_mm = 0.1
"""
)

# ---------------------------------------------------------------- a small TOML writer (inline form)


def toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        # a TOML basic string: JSON escapes for quotes, backslash and controls; DEL must be escaped too
        return json.dumps(v, ensure_ascii=False).replace("\x7f", "\\u007f")
    if isinstance(v, list):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{toml_value(str(k))} = {toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


def to_toml(doc: dict) -> str:
    return "".join(f"{toml_value(str(k))} = {toml_value(v)}\n" for k, v in doc.items())


def test_toml_writer_round_trips():
    assert tomllib.loads(to_toml(BASE)) == BASE


# ---------------------------------------------------------------- strategies

_text = st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=12)
LINE_IDS = [
    "Cu I 324.754",
    "Cu I 327.396",
    "Zn I 330.259",
    "Zn I 334.502",
    "Cu I 521.820",
    "Zn I 481.053",
    "Na I 330.237",
    "Ag I 328.068",
    "Qq I 330.000",
    "Cu IX 324.754",
    "Cu I",
    "",
    "324.754",
]
_scalar = st.one_of(
    st.booleans(),
    st.integers(-5, 5),
    st.integers(-(2**62), 2**62),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0.0, 1e-300, 1e300, -1.0, 0.5, 0.99, 1.0, 2.0, 1e6, 1e-6]),
    _text,
    st.sampled_from(
        LINE_IDS
        + [
            "none",
            "snip",
            "asls",
            "arpls",
            "median",
            "mean",
            "total",
            "fit",
            "window",
            "voigt",
            "gaussian",
            "lines",
            "xcorr",
            "internal_standard",
            "total_area",
            "ratio",
            "absolute",
            "linear",
            "weighted",
            "quadratic",
            "Cu",
            "Zn",
            "Xx",
            "boltzmann",
            "saha-boltzmann",
            "fixed",
            "auto",
            "stark",
            "h_alpha",
            "k2",
        ]
    ),
)
_value = st.recursive(
    _scalar,
    lambda inner: st.one_of(st.lists(inner, max_size=4), st.dictionaries(_text, inner, max_size=3)),
    max_leaves=6,
)

# the keys each table knows (docs/method-file.md and the owning modules) plus a few unknown ones
KEYS = {
    ("method",): ["id", "version", "technique", "description"],
    ("preprocess", "dark"): ["enabled", "statistic", "scale_exposure"],
    ("preprocess", "response"): ["enabled", "file"],
    ("preprocess", "saturation"): ["enabled", "level", "margin"],
    ("preprocess", "qc"): [
        "enabled",
        "quantity",
        "k",
        "min_fraction",
        "min_signal",
        "pulse_energy_normalise",
        "min_pulse_fraction",
    ],
    ("preprocess", "baseline"): [
        "method",
        "max_half_window",
        "decreasing",
        "lls",
        "lam",
        "p",
        "diff_order",
        "max_iter",
        "tol",
    ],
    ("preprocess", "normalise"): ["how", "line"],
    ("preprocess", "shift"): ["method", "lines", "reference_file", "max_shift_nm", "search_nm", "flag_nm"],
    ("measure",): [
        "mode",
        "window_nm",
        "side_nm",
        "gap_nm",
        "profile",
        "shared_width",
        "fwhm_nm",
        "max_offset_nm",
        "snr_detect",
        "snr_min",
        "chunk_shots",
    ],
    ("calibration",): [
        "basis",
        "matrix_element",
        "internal_standard",
        "model",
        "outliers",
        "coverage",
        "drift",
        "through_origin",
        "analytes",
        "pls",
        "outlier_alpha",
    ],
    ("cf",): [
        "elements",
        "fit",
        "ne_method",
        "ne_fixed_cm3",
        "mc_draws",
        "t_start_k",
        "t_min_k",
        "t_max_k",
        "self_absorption",
        "plasma_length_mm",
        "resolving_power",
        "fixed",
        "missing",
        "seed",
        "lte_f",
    ],
    ("identify",): [
        "k_sigma",
        "wavelength_uncertainty_nm",
        "temperature_k",
        "interference_fraction",
        "n_alternatives",
        "elements",
    ],
    ("map",): ["lines", "step_mm", "samples"],
    (): ["method", "preprocess", "lines", "measure", "calibration", "cf", "identify", "map"],
}
# plausible values per key (most mutations should get past the first check)
PLAUSIBLE = {
    "enabled": [True, False],
    "statistic": ["mean", "median"],
    "scale_exposure": [True, False],
    "level": [60000.0, 1000.0, 1.0],
    "margin": [0.0, 0.02, 0.5],
    "quantity": ["total", "Cu I 327.396", "Zn I 330.259"],
    "k": [1.0, 3.0, 5.0, 100.0],
    "min_fraction": [0.0, 0.1, 0.9],
    "min_signal": [0.0, 1e3, 1e9],
    "pulse_energy_normalise": [True, False],
    "min_pulse_fraction": [0.0, 0.5],
    "method": ["none", "snip", "asls", "arpls", "lines", "xcorr"],
    "max_half_window": [1, 5, 20, 1000],
    "lam": [1.0, 1e5, 1e12],
    "p": [0.001, 0.01, 0.5],
    "diff_order": [1, 2, 3],
    "max_iter": [1, 5, 50],
    "tol": [1e-6, 1e-3, 0.5],
    "how": ["none", "total_area", "background", "internal_standard"],
    "line": ["Cu I 327.396", "Zn I 330.259", "Cu I 324.754"],
    "lines": [["Cu I 324.754"], [327.396], ["Cu I 327.396", 330.259]],
    "max_shift_nm": [0.01, 0.2, 5.0],
    "search_nm": [0.01, 0.1, 3.0],
    "flag_nm": [0.001, 0.05],
    "mode": ["window", "fit"],
    "window_nm": [0.01, 0.1, 0.3, 5.0, 30.0],
    "side_nm": [0.0, 0.05, 0.2, 10.0],
    "gap_nm": [0.0, 0.02, 1.0],
    "profile": ["voigt", "lorentzian", "gaussian"],
    "shared_width": [True, False],
    "fwhm_nm": [0.001, 0.05, 0.2, 3.0],
    "max_offset_nm": [0.001, 0.05, 1.0],
    "snr_detect": [0.0, 3.0, 1e6],
    "snr_min": [0.0, 10.0, 1e6],
    "chunk_shots": [1, 2, 7, 4096],
    "basis": ["ratio", "absolute", "mass_fraction"],
    "matrix_element": ["Cu", "Zn", "Fe"],
    "internal_standard": ["Cu I 327.396", "Cu I 324.754", "Zn I 334.502"],
    "model": ["linear", "weighted", "quadratic", "weighted_quadratic"],
    "outliers": ["flag", "reject", "keep"],
    "coverage": ["k2", "student"],
    "drift": ["optional", "required", "none"],
    "through_origin": [True, False],
    "fit": ["boltzmann", "saha-boltzmann"],
    "ne_method": ["fixed", "auto", "saha", "stark", "h_alpha"],
    "ne_fixed_cm3": [1e15, 1e17, 1e30],
    "mc_draws": [0, 1, 5],
    "t_start_k": [3000.0, 10000.0, 1e6],
    "t_min_k": [1.0, 3000.0],
    "t_max_k": [5000.0, 50000.0, 1e9],
    "self_absorption": ["none", "detect"],
    "elements": [["Cu", "Zn"], ["Zn"], []],
    "k_sigma": [0.1, 5.0, 100.0],
    "step_mm": [0.1, [0.1, 0.2]],
}
LINE_KEYS = sorted(METHOD_LINE_KEYS)  # the keys the loader accepts in a [[lines]] entry


@st.composite
def line_entry(draw):
    e = {}
    if draw(st.integers(0, 9)) > 0:
        e["id"] = draw(st.one_of(st.sampled_from(LINE_IDS), _scalar))
    for k in draw(st.lists(st.sampled_from(LINE_KEYS + ["colour"]), max_size=3)):
        e[k] = draw(st.one_of(_scalar, st.sampled_from([0.05, 0.2, 1.0, 330.259, 1, 2])))
    return e


@st.composite
def methods(draw):
    doc = copy.deepcopy(BASE)
    for _ in range(draw(st.integers(0, 4))):
        op = draw(st.sampled_from(["set"] * 6 + ["delete", "unknown", "lines", "analytes", "retype"]))
        path = draw(st.sampled_from(sorted(KEYS)))
        if path == () and draw(st.integers(0, 4)) > 0:
            path = ("measure",)
        table = doc
        for p in path:
            if not isinstance(table.get(p), dict):
                table[p] = {}
            table = table[p]
        if op == "set":
            key = draw(st.sampled_from(KEYS[path]))
            good = PLAUSIBLE.get(key)
            table[key] = draw(st.sampled_from(good)) if good and draw(st.integers(0, 2)) > 0 else draw(_value)
        elif op == "delete" and table:
            table.pop(draw(st.sampled_from(sorted(table))), None)
        elif op == "unknown":
            table[draw(_text)] = draw(_value)
        elif op == "lines":
            doc["lines"] = draw(st.lists(line_entry(), max_size=6))
        elif op == "analytes":
            cal = doc.setdefault("calibration", {})
            if isinstance(cal, dict):
                cal["analytes"] = draw(
                    st.lists(
                        st.dictionaries(
                            st.sampled_from(
                                [
                                    "element",
                                    "line",
                                    "model",
                                    "internal_standard",
                                    "exclude",
                                    "interferences",
                                    "through_origin",
                                    "x",
                                ]
                            ),
                            st.one_of(_scalar, st.sampled_from(["Zn", "Cu", "Zn I 330.259", "Zn I 334.502"])),
                            max_size=4,
                        ),
                        max_size=3,
                    )
                )
        elif op == "retype" and path:
            # a table replaced by a value of another type
            parent = doc
            for p in path[:-1]:
                parent = parent[p]
            parent[path[-1]] = draw(_scalar)
    return doc


# ---------------------------------------------------------------- the run the methods are applied to


@pytest.fixture(scope="module")
def env(tmp_path_factory):
    d = tmp_path_factory.mktemp("fuzz-methods")
    wl, spectra, samples, idx, dark = base_arrays(n_pixels=300, shots=3)
    run = write_run(
        d / "run.h5",
        wl,
        spectra,
        samples,
        idx,
        dark=dark,
        saturation=65535,
        exposure_s=0.05,
        dark_exposure_s=0.05,
        created="2026-12-01T00:00:00Z",
    )
    (d / "standards.csv").write_text(STANDARDS_CSV, encoding="utf-8")
    from compquant.calibrate import load_standards

    return {"dir": d, "run": run, "standards": load_standards(d / "standards.csv")}


def exercise_method(path: Path, env: dict) -> list[str]:
    """Everything the tool does with a method file, on the small run; returns the steps reached."""
    from compquant.calibrate import calibrate, parse_calibration_section
    from compquant.calibrate.apply import quantify
    from compquant.cflibs import analyse_cf
    from compquant.cflibs.settings import CFSettings
    from compquant.identify.settings import settings_from_method
    from compquant.lines import measure_run
    from compquant.maps.build import parse_map_section
    from compquant.method import load_method

    method = load_method(path)
    reached = ["loaded"]
    errors = []
    for step in (
        lambda: settings_from_method(method),
        lambda: parse_map_section(method.sections.get("map"), method.where),
    ):
        try:
            step()
        except CompquantError as exc:
            errors.append(exc)
    cfg = cfs = None
    try:
        cfg = parse_calibration_section(method.sections.get("calibration"), source=method.where)
    except CompquantError:
        pass
    try:
        cfs = CFSettings.from_section(method.sections.get("cf"), where=f"{method.where}: [cf]")
    except CompquantError:
        pass
    with Run.open(env["run"]) as run:
        method.measure.chunk_shots = min(method.measure.chunk_shots, 64)  # small chunks: more code paths
        lm = measure_run(run, method)
        samples = run.samples.copy()
    reached.append("measured")
    if cfg is not None:
        cal = calibrate(
            lm.table,
            env["standards"],
            cfg,
            shot_table=lm.shots,
            samples=samples,
            method_id=method.id,
            method_version=method.version,
            run_sha256="0" * 64,
        )
        quantify(lm, cal, standards=env["standards"], run_sha256="0" * 64, samples=samples)
        reached.append("quantified")
    if cfs is not None:
        cfs.mc_draws = min(cfs.mc_draws, 5)
        try:
            analyse_cf(lm.table, sample_id="LOT-1", settings=cfs)
            reached.append("cf")
        except CompquantError:
            reached.append("cf refused")
    return reached


def _check(path: Path, env: dict) -> None:
    try:
        exercise_method(path, env)
    except CompquantError as exc:
        msg = exc.one_line()
        assert msg and "\n" not in msg


@pytest.mark.fuzz
@settings(
    max_examples=N_METHODS,
    deadline=None,
    database=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow, HealthCheck.data_too_large],
)
@given(doc=methods())
def test_fuzz_method_files_no_unhandled_exception(env, doc):
    path = env["dir"] / "fuzz-method.toml"
    path.write_text(to_toml(doc), encoding="utf-8")
    _check(path, env)


@pytest.mark.fuzz
@settings(
    max_examples=N_BYTES,
    deadline=None,
    database=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(
    edits=st.lists(
        st.tuples(st.floats(0, 1), st.sampled_from(["flip", "insert", "delete"]), st.binary(min_size=1, max_size=3)),
        min_size=1,
        max_size=4,
    )
)
def test_fuzz_method_bytes_no_unhandled_exception(env, edits):
    data = bytearray(METHOD_TOML.encode("utf-8"))
    for pos, op, b in edits:
        i = min(int(pos * len(data)), max(len(data) - 1, 0))
        if op == "flip" and data:
            data[i] ^= b[0] or 1
        elif op == "insert":
            data[i:i] = b
        elif data:
            del data[i : i + len(b)]
    path = env["dir"] / "fuzz-bytes.toml"
    path.write_bytes(bytes(data))
    _check(path, env)


def test_fuzz_generator_reaches_the_whole_flow(env):
    """Guard on the fuzzer itself: the unmutated base method goes through every step (load,
    sections, measurement, calibration, quantification, calibration-free attempted), so the fuzz
    cases exercise the flow beyond the first check."""
    path = env["dir"] / "base.toml"
    path.write_text(to_toml(BASE), encoding="utf-8")
    reached = exercise_method(path, env)
    assert reached[:3] == ["loaded", "measured", "quantified"] and reached[3].startswith("cf")
