"""The bad-input corpus (issue 9): malformed runs, methods, standards, calibrations, lab profiles
and specifications, generated at test time from the valid base set in :mod:`tests.bad_inputs.base`.

:func:`build_corpus(folder, cal_json)` writes every case into its own sub-folder and returns a list
of :class:`Case`: the CLI arguments to run, the input files (hashed before and after), the output
paths that must stay absent or empty, and the fragments the one-line error must contain (the name
of the bad file and words naming the problem). Nothing here is committed as a binary.
"""

from __future__ import annotations

import json
import shutil
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import h5py
import numpy as np

from bad_inputs.base import LAB_TOML, METHOD_TOML, SPEC_TOML, STANDARDS_CSV, base_arrays, write_base_run
from compquant.run import write_run


@dataclass
class Case:
    name: str
    kind: str  # run | method | standards | calibration | lab | spec
    argv: list[str]
    inputs: list[Path]
    outputs: list[Path]  # output files or folders that must not exist (or be empty folders) afterwards
    expect: list[str]  # fragments of the error line (case-insensitive)
    bad_file: Path  # the file the message must name
    folder: Path = field(default=Path("."))


# ----------------------------------------------------------------------------------- helpers


def _copy_run(base: Path, dest: Path, mutate: Callable[[h5py.File], None] | None = None) -> Path:
    shutil.copy(base, dest)
    if mutate is not None:
        with h5py.File(dest, "a") as f:
            mutate(f)
    return dest


def _replace(ds_name: str, data, **attrs):
    def fn(f):
        old = dict(f[ds_name].attrs) if ds_name in f else {}
        if ds_name in f:
            del f[ds_name]
        d = f.create_dataset(ds_name, data=data)
        for k, v in {**old, **attrs}.items():
            d.attrs[k] = v

    return fn


def _spectra_float(fn_values):
    """Rewrite 'spectra' as float64 after applying ``fn_values(array) -> array``."""

    def fn(f):
        data = np.asarray(f["spectra"][()], dtype=np.float64)
        attrs = dict(f["spectra"].attrs)
        del f["spectra"]
        d = f.create_dataset("spectra", data=fn_values(data))
        for k, v in attrs.items():
            d.attrs[k] = v

    return fn


def _with_nan(a):
    # a detector drop-out: every pixel of every shot of the last sample (rows 42-47) is NaN.
    # (A few NaN pixels are masked and the lines touching them flagged, issue 16; a sample with
    # no valid pixel at all is an error that names the sample, the shots and the pixel range.)
    a = a.copy()
    a[-6:, :] = np.nan
    return a


def _with_inf(a):
    # infinite values over every pixel of the last sample
    a = a.copy()
    a[-6:, :] = np.inf
    return a


def _text_replace(text: str, old: str, new: str) -> str:
    assert old in text, old
    return text.replace(old, new, 1)


# ----------------------------------------------------------------------------------- the corpus


def build_corpus(folder: Path, cal_json: Path | None) -> list[Case]:
    """Write every case under ``folder``; ``cal_json`` is a valid calibration of the base set
    (None: a placeholder, enough to list the cases)."""
    folder.mkdir(parents=True, exist_ok=True)
    base_run = write_base_run(folder / "base-run.h5")
    cases: list[Case] = []

    def setup(name: str) -> Path:
        d = folder / name
        d.mkdir()
        return d

    def files(
        d: Path,
        run: Path | None = None,
        method: str | None = None,
        standards: str | None = None,
        lab: str | None = None,
        spec: str | None = None,
    ) -> dict[str, Path]:
        out = {"run": run or _copy_run(base_run, d / "run.h5")}
        for key, text, default, name in (
            ("method", method, METHOD_TOML, "method.toml"),
            ("standards", standards, STANDARDS_CSV, "standards.csv"),
            ("lab", lab, LAB_TOML, "lab.toml"),
            ("spec", spec, SPEC_TOML, "spec.toml"),
        ):
            p = d / name
            p.write_text(default if text is None else text, encoding="utf-8")
            out[key] = p
        return out

    def analyse_case(
        name,
        kind,
        expect,
        bad_key,
        run_mutate=None,
        run_builder=None,
        method=None,
        standards=None,
        lab=None,
        spec=None,
        mode="standards",
        cal=None,
    ):
        d = setup(name)
        run = None
        if run_builder is not None:
            run = run_builder(d / "run.h5")
        elif run_mutate is not None:
            run = _copy_run(base_run, d / "run.h5", run_mutate)
        fs = files(d, run, method, standards, lab, spec)
        out = d / "out"
        argv = [
            "analyse",
            str(fs["run"]),
            "--method",
            str(fs["method"]),
            "--lab",
            str(fs["lab"]),
            "--spec",
            str(fs["spec"]),
            "-o",
            str(out),
            "--quiet",
            "--issued-at",
            "2026-12-01T21:00:00Z",
        ]
        inputs = [fs["run"], fs["method"], fs["lab"], fs["spec"]]
        if mode == "standards":
            argv += ["--standards", str(fs["standards"])]
            inputs.append(fs["standards"])
        elif mode == "calibration":
            argv += ["--calibration", str(cal)]
            inputs.append(cal)
        else:
            argv += ["--cf"]
        bad = cal if bad_key == "calibration" else fs[bad_key]
        cases.append(Case(name, kind, argv, inputs, [out], expect, bad, d))

    def lines_case(name, expect, run_mutate=None, run_builder=None, method=None):
        d = setup(name)
        run = run_builder(d / "run.h5") if run_builder else _copy_run(base_run, d / "run.h5", run_mutate)
        fs = files(d, run, method)
        out = d / "out" / "lines.csv"
        argv = ["lines", str(fs["run"]), "--method", str(fs["method"]), "-o", str(out), "--quiet"]
        bad = fs["method"] if method is not None else fs["run"]
        cases.append(
            Case(
                name,
                "run" if method is None else "method",
                argv,
                [fs["run"], fs["method"]],
                [out.parent],
                expect,
                bad,
                d,
            )
        )

    def inspect_case(name, expect, run_mutate=None, run_builder=None):
        d = setup(name)
        run = run_builder(d / "run.h5") if run_builder else _copy_run(base_run, d / "run.h5", run_mutate)
        cases.append(Case(name, "run", ["inspect", str(run)], [run], [], expect, run, d))

    # ------------------------------------------------------------------ run files
    def truncated(p):
        data = base_run.read_bytes()
        p.write_bytes(data[: len(data) // 2])
        return p

    def not_hdf5(p):
        p.write_text("wavelength,intensity\n300,1\n301,2\n", encoding="utf-8")
        return p

    def empty_file(p):
        p.write_bytes(b"")
        return p

    def absurd_shape(p):
        shutil.copy(base_run, p)
        with h5py.File(p, "a") as f:
            n_pix = f["wavelength"].shape[0]
            del f["spectra"], f["shots"]
            n = 2_000_000_000
            f.create_dataset("spectra", shape=(n, n_pix), dtype="uint16", chunks=(1024, n_pix))
            g = f.create_group("shots")
            g.create_dataset("sample_index", shape=(n,), dtype="int32", fillvalue=0, chunks=(1 << 20,))
        return p

    def saturated(p):
        wl, spectra, samples, idx, dark = base_arrays()
        write_run(p, wl, np.full_like(spectra, 65535), samples, idx, dark=dark, saturation=65535, created="x")
        return p

    def all_zero(p):
        wl, spectra, samples, idx, dark = base_arrays()
        write_run(p, wl, np.zeros_like(spectra), samples, idx, dark=np.zeros_like(dark), saturation=65535, created="x")
        return p

    def negative(p):
        wl, spectra, samples, idx, dark = base_arrays()
        write_run(p, wl, -spectra.astype(np.float64), samples, idx, saturation=65535, created="x")
        return p

    def no_dark(p):
        wl, spectra, samples, idx, dark = base_arrays()
        write_run(p, wl, spectra, samples, idx, saturation=65535, created="x")
        return p

    def dup_ids(f):
        ids = [s.decode() if isinstance(s, bytes) else s for s in f["samples/sample_id"][()]]
        ids[7] = ids[6]
        del f["samples/sample_id"]
        f["samples"].create_dataset("sample_id", data=np.array(ids, dtype=object), dtype=h5py.string_dtype())

    def unknown_role(f):
        roles = [s.decode() if isinstance(s, bytes) else s for s in f["samples/role"][()]]
        roles[6] = "customer"
        del f["samples/role"]
        f["samples"].create_dataset("role", data=np.array(roles, dtype=object), dtype=h5py.string_dtype())

    def no_unknowns(f):
        roles = [s.decode() if isinstance(s, bytes) else s for s in f["samples/role"][()]]
        roles = ["setup" if r == "unknown" else r for r in roles]
        del f["samples/role"]
        f["samples"].create_dataset("role", data=np.array(roles, dtype=object), dtype=h5py.string_dtype())

    def wl_nonmono(f):
        wl = f["wavelength"][()].copy()
        wl[200], wl[201] = wl[201], wl[200]
        _replace("wavelength", wl)(f)

    def wl_dup(f):
        wl = f["wavelength"][()].copy()
        wl[301] = wl[300]
        _replace("wavelength", wl)(f)

    def wl_nan(f):
        wl = f["wavelength"][()].copy()
        wl[10] = np.nan
        _replace("wavelength", wl)(f)

    def pix_mismatch(f):
        _replace("wavelength", f["wavelength"][()][:-3])(f)

    def dark_mismatch(f):
        _replace("dark", f["dark"][()][:, :-5])(f)

    def index_float(f):
        _replace("shots/sample_index", f["shots/sample_index"][()].astype(np.float64))(f)

    def index_out_of_range(f):
        idx = f["shots/sample_index"][()].copy()
        idx[-1] = 42
        _replace("shots/sample_index", idx)(f)

    def index_short(f):
        _replace("shots/sample_index", f["shots/sample_index"][()][:-2])(f)

    def spectra_text(f):
        n, p = f["spectra"].shape
        del f["spectra"]
        f.create_dataset("spectra", data=np.full((n, p), b"12", dtype="S2"))

    def spectra_3d(f):
        data = f["spectra"][()]
        del f["spectra"]
        f.create_dataset("spectra", data=data[:, :, None])

    def newer_format(f):
        f.attrs["format_version"] = 99

    def wrong_format(f):
        f.attrs["format"] = "some-other-format"

    def no_spectra(f):
        del f["spectra"]

    def response_len(f):
        f.create_dataset("response", data=np.ones(17))

    def medium_bad(f):
        f["wavelength"].attrs["medium"] = "glass"

    lines_case("run_truncated_hdf5", ["truncated or corrupt"], run_builder=truncated)
    lines_case("run_not_hdf5", ["not an hdf5 file"], run_builder=not_hdf5)
    inspect_case("run_empty_file", ["not an hdf5 file"], run_builder=empty_file)
    inspect_case("run_absurd_declared_shape", ["memory limit"], run_builder=absurd_shape)
    lines_case("run_nan_in_spectra", ["LOT-2", "masked pixels", "shot 0: pixels 0-"],
               run_mutate=_spectra_float(_with_nan))
    lines_case("run_inf_in_spectra", ["masked pixels", "pixels 0-"], run_mutate=_spectra_float(_with_inf))
    analyse_case("run_negative_spectra", "run", ["no valid response", "not_found"], "run", run_builder=negative)
    analyse_case("run_all_zero_spectra", "run", ["no valid response", "not_found"], "run", run_builder=all_zero)
    analyse_case("run_saturated_everything", "run", ["line saturated"], "run", run_builder=saturated)
    analyse_case(
        "run_missing_dark",
        "run",
        ["no dark frames", "requires dark subtraction"],
        "run",
        run_builder=no_dark,
        method=METHOD_TOML.replace(
            "[preprocess.baseline]", "[preprocess.dark]\nenabled = true\n\n[preprocess.baseline]"
        ),
    )
    lines_case("run_wavelength_not_monotonic", ["not strictly increasing", "decreasing"], run_mutate=wl_nonmono)
    lines_case("run_wavelength_duplicated", ["duplicated"], run_mutate=wl_dup)
    inspect_case("run_wavelength_nan", ["nan or infinite"], run_mutate=wl_nan)
    lines_case("run_pixels_mismatch", ["pixels per row"], run_mutate=pix_mismatch)
    lines_case("run_dark_shape_mismatch", ["dark"], run_mutate=dark_mismatch)
    inspect_case("run_response_shape_mismatch", ["response"], run_mutate=response_len)
    lines_case("run_sample_index_float", ["not integer"], run_mutate=index_float)
    lines_case("run_sample_index_out_of_range", ["sample index 42"], run_mutate=index_out_of_range)
    inspect_case("run_sample_index_short", ["entries"], run_mutate=index_short)
    inspect_case("run_spectra_text_dtype", ["non-numeric dtype"], run_mutate=spectra_text)
    inspect_case("run_spectra_3d", ["2-d"], run_mutate=spectra_3d)
    inspect_case("run_newer_format_version", ["newer"], run_mutate=newer_format)
    inspect_case("run_wrong_format_name", ["not 'compquant-run'"], run_mutate=wrong_format)
    lines_case("run_spectra_missing", ["'spectra' is missing"], run_mutate=no_spectra)
    inspect_case("run_bad_medium", ["medium"], run_mutate=medium_bad)
    analyse_case("run_duplicated_sample_ids", "run", ["duplicate sample id"], "run", run_mutate=dup_ids)
    analyse_case("run_unknown_role", "run", ["unknown role"], "run", run_mutate=unknown_role)
    analyse_case("run_no_unknown_samples", "run", ["no sample with role 'unknown'"], "run", run_mutate=no_unknowns)

    # ------------------------------------------------------------------ method files
    m = METHOD_TOML
    lines_case(
        "method_invalid_toml",
        ["not valid toml"],
        run_mutate=None,
        method=m.replace('id = "HARDEN-TEST"', 'id = "HARDEN-TEST'),
    )
    lines_case("method_unknown_top_level", ["unknown top-level", "extras"], method=m + "\n[extras]\nx = 1\n")
    lines_case("method_unknown_measure_key", ["unknown key", "windw_nm"], method=m + "\n[measure]\nwindw_nm = 0.2\n")
    lines_case(
        "method_unknown_element",
        ["not in the line list", "Qq I 330.000"],
        method=m + '\n[[lines]]\nid = "Qq I 330.000"\n',
    )
    lines_case(
        "method_line_outside_range",
        ["outside the run's wavelength range", "Cu I 521.820"],
        method=m + '\n[[lines]]\nid = "Cu I 521.820"\n',
    )
    lines_case("method_bad_type", ["expected a number", "window_nm"], method=m + '\n[measure]\nwindow_nm = "wide"\n')
    lines_case("method_negative_window", ["out of range", "window_nm"], method=m + "\n[measure]\nwindow_nm = -0.2\n")
    lines_case("method_no_lines", ["lists no lines"], method=m.split("[[lines]]")[0])
    lines_case("method_duplicate_line", ["listed twice"], method=m + '\n[[lines]]\nid = "Zn I 334.502"\n')
    analyse_case(
        "method_bad_calibration_model",
        "method",
        ["model"],
        "method",
        method=_text_replace(m, 'model = "linear"', 'model = "cubic-spline"'),
    )
    analyse_case(
        "method_calibration_unknown_element",
        "method",
        ["Xy"],
        "method",
        method=_text_replace(m, 'element = "Zn"', 'element = "Xy"'),
    )
    analyse_case(
        "method_cf_unknown_key",
        "method",
        ["unknown", "temprature"],
        "method",
        mode="cf",
        method=m + "\n[cf]\ntemprature = 9000\n",
    )

    # ------------------------------------------------------------------ standards files
    s = STANDARDS_CSV
    analyse_case(
        "standards_negative_value",
        "standards",
        ["negative"],
        "standards",
        standards=_text_replace(s, "ZS-15,copper alloy,Zn,15.00", "ZS-15,copper alloy,Zn,-15.00"),
    )
    analyse_case(
        "standards_unknown_element",
        "standards",
        ["unknown element", "Zz"],
        "standards",
        standards=_text_replace(s, "ZS-25,copper alloy,Zn,", "ZS-25,copper alloy,Zz,"),
    )
    analyse_case(
        "standards_duplicated_entry",
        "standards",
        ["duplicated"],
        "standards",
        standards=s + "ZS-05,copper alloy,Zn,5.10,0.05,2,%,invented for tests\n",
    )
    analyse_case(
        "standards_missing_value",
        "standards",
        ["missing value", "mass_fraction"],
        "standards",
        standards=_text_replace(s, "ZS-35,copper alloy,Zn,35.00", "ZS-35,copper alloy,Zn,"),
    )
    analyse_case(
        "standards_bad_unit",
        "standards",
        ["bad unit"],
        "standards",
        standards=_text_replace(s, "Zn,5.00,0.05,2,%", "Zn,5.00,0.05,2,ppb"),
    )
    analyse_case(
        "standards_above_one",
        "standards",
        ["above 1"],
        "standards",
        standards=_text_replace(s, "Zn,5.00,0.05,2,%", "Zn,5.00,0.05,2,g/g"),
    )
    analyse_case(
        "standards_no_header", "standards", ["column"], "standards", standards="\n".join(s.splitlines()[1:]) + "\n"
    )

    # ------------------------------------------------------------------ calibration JSON
    cal_text = cal_json.read_text(encoding="utf-8") if cal_json is not None else '{"schema": "compquant.calibration"}'
    cal_doc = json.loads(cal_text)

    def cal_case(name, expect, doc=None, text=None, method=None, cmd="analyse"):
        d = setup(name)
        p = d / "calibration.json"
        if text is None:
            text = cal_text if doc is None else json.dumps(doc, indent=1)
        p.write_text(text, encoding="utf-8")
        if cmd == "analyse":
            # the calibration was made with the base method: give the same method text
            fs = files(d, None, method)
            out = d / "out"
            argv = [
                "analyse",
                str(fs["run"]),
                "--method",
                str(fs["method"]),
                "--calibration",
                str(p),
                "-o",
                str(out),
                "--quiet",
                "--issued-at",
                "2026-12-01T21:00:00Z",
            ]
            cases.append(Case(name, "calibration", argv, [fs["run"], fs["method"], p], [out], expect, p, d))
        else:
            fs = files(d, None, method)
            out = d / "out" / "results.csv"
            argv = [
                "quantify",
                str(fs["run"]),
                "--calibration",
                str(p),
                "--method",
                str(fs["method"]),
                "-o",
                str(out),
                "--quiet",
            ]
            cases.append(Case(name, "calibration", argv, [fs["run"], fs["method"], p], [out.parent], expect, p, d))

    cal_case("calibration_newer_schema", ["newer"], doc={**cal_doc, "schema_version": 99})
    cal_case(
        "calibration_other_method",
        ["made with method", "HARDEN-TEST"],
        method=_text_replace(METHOD_TOML, 'id = "HARDEN-TEST"', 'id = "OTHER-METHOD"'),
    )
    cal_case(
        "calibration_method_file_changed",
        ["method file differs"],
        cmd="quantify",
        method=METHOD_TOML + "\n# edited after calibrating\n",
    )
    cal_case("calibration_corrupt_json", ["not valid json"], text=cal_text[:500])
    cal_case(
        "calibration_missing_keys", ["incomplete or damaged"], doc={k: v for k, v in cal_doc.items() if k != "curves"}
    )
    cal_case("calibration_not_a_calibration", ["not a compquant calibration"], doc={"hello": "world"}, cmd="quantify")

    # ------------------------------------------------------------------ lab profiles and specifications
    analyse_case(
        "lab_missing_name",
        "lab",
        ["name"],
        "lab",
        lab=LAB_TOML.replace('name = "Test Bench Laboratory (fictional)"\n', ""),
    )
    analyse_case(
        "lab_bad_prefix",
        "lab",
        ["certificate_prefix"],
        "lab",
        lab=_text_replace(LAB_TOML, 'certificate_prefix = "TBL"', 'certificate_prefix = "../../etc"'),
    )
    analyse_case("lab_missing_signatory", "lab", ["signatory"], "lab", lab=LAB_TOML.split("[signatory]")[0])
    analyse_case(
        "spec_min_above_max", "spec", ["min"], "spec", spec=_text_replace(SPEC_TOML, "min = 5.0", "min = 50.0")
    )
    analyse_case(
        "spec_unknown_element", "spec", ["Zq"], "spec", spec=SPEC_TOML + '\n[limits.Zq]\nmax = 1.0\nunit = "%"\n'
    )
    analyse_case(
        "spec_bad_limit_type", "spec", ["max"], "spec", spec=_text_replace(SPEC_TOML, "max = 40.0", 'max = "forty"')
    )
    analyse_case(
        "spec_missing_specification", "spec", ["specification"], "spec", spec=SPEC_TOML.split("[limits.Zn]")[1]
    )
    analyse_case(
        "spec_bad_decision_rule",
        "spec",
        ["decision_rule"],
        "spec",
        spec=_text_replace(SPEC_TOML, '"simple-acceptance"', '"coin-toss"'),
    )

    # ------------------------------------------------------------------ the lab's record (issue 14)
    analyse_case("lab_review_not_bool", "lab", ["required", "true or false"], "lab",
                 lab=LAB_TOML + '\n[review]\nrequired = "yes"\n')
    analyse_case("method_control_chart_bad_limits", "method", ["limits", "unknown value"], "method",
                 method=METHOD_TOML + '\n[control_chart]\nlimits = "median"\n')

    def record_case(name, expect, make):
        analyse_case(name, "record", expect, "run")
        c = cases[-1]
        db = make(c.folder / "record.sqlite")
        c.argv += ["--db", str(db)]
        c.inputs.append(db)
        c.bad_file = db

    def not_sqlite(p):
        p.write_text("lot, result\nA-1, 12.5\n" * 20, encoding="utf-8")
        return p

    def foreign_sqlite(p):
        import sqlite3

        with sqlite3.connect(p) as con:
            con.execute("CREATE TABLE stock (item TEXT, count INTEGER)")
        return p

    record_case("record_not_sqlite", ["not a compquant record", "not an sqlite database"], not_sqlite)
    record_case("record_foreign_sqlite", ["not a compquant record"], foreign_sqlite)
    return cases


def case_names() -> list[str]:
    """Names of the cases (builds the corpus in a throw-away folder)."""
    import tempfile

    with tempfile.TemporaryDirectory(prefix="cq-corpus-") as d:
        return [c.name for c in build_corpus(Path(d) / "c", None)]


__all__ = ["Case", "build_corpus", "case_names"]
