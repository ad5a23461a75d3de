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

from compquant.calibrate.config import ANALYTE_TABLE, CALIBRATION_TABLE, PLS_TABLE
from compquant.cflibs.settings import CF_TABLE
from compquant.errors import CompquantError
from compquant.identify.settings import IDENTIFY_TABLE
from compquant.maps.build import MAP_TABLE
from compquant.method import LINE_KEYS as METHOD_LINE_KEYS
from compquant.method import TABLES as METHOD_TABLES
from compquant.method import TOP_LEVEL
from compquant.record.charts import CHART_TABLE
from compquant.run import Run, write_run
from compquant.settings import REQUIRED

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


# ---------------------------------------------------------------- strategies (keys and values from the tables)

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
# every text choice any table declares (valid values of one key are plausible junk for another)
CHOICES = sorted({c for t in (*METHOD_TABLES, CF_TABLE, IDENTIFY_TABLE, CALIBRATION_TABLE, ANALYTE_TABLE, PLS_TABLE)
                  for x in t.settings for c in (x.choices or ()) if isinstance(c, str)})
_scalar = st.one_of(
    st.booleans(),
    st.integers(-5, 5),
    st.integers(-(2**62), 2**62),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0.0, 1e-300, 1e300, -1.0, 0.5, 0.99, 1.0, 2.0, 1e6, 1e-6]),
    _text,
    st.sampled_from(LINE_IDS + CHOICES + ["absolute", "Cu", "Zn", "Xx"]),
)
_value = st.recursive(
    _scalar,
    lambda inner: st.one_of(st.lists(inner, max_size=4), st.dictionaries(_text, inner, max_size=3)),
    max_leaves=6,
)

# the keys of each table and plausible values come from the tables the packages declare
# (compquant.settings): a key added to a table is fuzzed without editing this file
SCHEMAS = {tuple(t.name.split(".")): t for t in (*METHOD_TABLES, CF_TABLE, IDENTIFY_TABLE, CALIBRATION_TABLE,
                                                 PLS_TABLE, MAP_TABLE, CHART_TABLE) if not t.array}
KEYS = {path: list(t.keys) for path, t in SCHEMAS.items()}
KEYS[()] = sorted(TOP_LEVEL)


def plausible(setting) -> list:
    """Values a setting accepts (its choices, bounds, default and a value inside its range)."""
    if setting.choices:
        return list(setting.choices)
    if setting.type == "bool":
        return [True, False]
    if setting.type in ("int", "float"):
        lo = setting.min if setting.min is not None else (setting.max - 10 if setting.max is not None else -1.0)
        hi = setting.max if setting.max is not None else lo + 100.0
        vals = [lo + 1e-3 * (hi - lo), 0.5 * (lo + hi), hi if not setting.max_open else lo + 0.999 * (hi - lo)]
        if not setting.min_open:
            vals.append(lo)
        if isinstance(setting.default, (int, float)) and not isinstance(setting.default, bool):
            vals.append(setting.default)
        return [round(v) if setting.type == "int" else float(v) for v in vals]
    if setting.default is None or setting.default is REQUIRED:
        return []
    return [list(setting.default) if isinstance(setting.default, tuple) else setting.default]


# values that name things of the small run (its lines and elements), which no table can know
RUN_VALUES = {
    "quantity": ["total", "Cu I 327.396", "Zn I 330.259"],
    "line": ["Cu I 327.396", "Zn I 330.259", "Cu I 324.754"],
    "lines": [["Cu I 324.754"], [327.396], ["Cu I 327.396", 330.259]],
    "internal_standard": ["Cu I 327.396", "Cu I 324.754", "Zn I 334.502"],
    "matrix_element": ["Cu", "Zn", "Fe"],
    "elements": [["Cu", "Zn"], ["Zn"], []],
    "step_mm": [0.1, [0.1, 0.2]],
}
PLAUSIBLE = {
    path: {s.key: RUN_VALUES.get(s.key) or plausible(s) for s in t.settings} for path, t in SCHEMAS.items()
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
            good = PLAUSIBLE.get(path, {}).get(key)
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
                            st.sampled_from([*ANALYTE_TABLE.keys, "x"]),
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
    from compquant.record.charts import parse_chart_section

    method = load_method(path)
    reached = ["loaded"]
    errors = []
    for step in (
        lambda: settings_from_method(method),
        lambda: parse_map_section(method.sections.get("map"), method.where),
        lambda: parse_chart_section(method.sections.get("control_chart"), method.where),
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
