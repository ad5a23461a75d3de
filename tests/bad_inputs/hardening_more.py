"""Issue 17 corpus, continued: saved calibrations, maps, text on figures and certificates,
injection into CSVs and the terminal, output faults, --scheduler and messages.

Called by :func:`bad_inputs.hardening.build_hardening`; see there for the case format.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
from pathlib import Path
from types import SimpleNamespace

import h5py
import numpy as np

from bad_inputs.base import LAB_TOML, METHOD_TOML, base_arrays
from bad_inputs.hardening import (
    CF_TABLE,
    ISSUED,
    HCase,
    _copy,
    _crash_in,
    _failing_disk,
    _rename_lot1,
    cells_escaped,
    no_nonfinite,
    terminal_clean,
)
from compquant.run import write_run

#: ids an attacker would give a sample (OWASP CSV injection; Unicode TR #9 bidi controls; ANSI escapes)
HOSTILE_IDS = {
    "formula": '=HYPERLINK("http://example.invalid","x")',
    "space_formula": " =1+1",
    "fullwidth_formula": "\uff1dSUM(A1:A9)",
    "plus_formula": "+cmd|' /C calc'!A0",
    "at_formula": "@SUM(1+1)",
    "newline": "LOT\nerror: forged",
    "bidi_override": "LOT-\u202e1-TOL",
    "ansi_escape": "LOT-\x1b[31mRED\x1b[0m",
    "zero_width": "LOT\u200b-1",
    "tab_cr": "\tLOT\r1",
}

#: malformed --scheduler values (issue 17, item 9)
BAD_SCHEDULERS = ["", "tcp://", "tcp://:8786", "tcp://host", "tcp://host:0", "tcp://host:99999", "udp://h:1",
                  "tcp://h:1/path", "h:port", "1.2.3.4.5:8", "tcp://user@h:1", "a b:1"]


@contextlib.contextmanager
def _no_mkstemp(err: int):
    """Creating the temporary output file fails (a read-only folder; root ignores chmod, so simulated)."""
    import compquant.fileio as fio

    real = fio.tempfile.mkstemp

    def boom(*a, **k):
        raise OSError(err, os.strerror(err))

    fio.tempfile.mkstemp = boom
    try:
        yield
    finally:
        fio.tempfile.mkstemp = real


def _raster_run(path: Path, stray: float | None = None, nan_positions: bool = False) -> Path:
    """The base run with LOT-1 rastered on a 3 x 2 grid, step 0.05 mm (other samples unplaced)."""
    wl, spectra, samples, idx, dark = base_arrays()
    x = np.full(idx.size, np.nan)
    y = np.full(idx.size, np.nan)
    rows = np.flatnonzero(idx == 6)
    x[rows] = [0.0, 0.05, 0.10, 0.0, 0.05, 0.10]
    y[rows] = [0.0, 0.0, 0.0, 0.05, 0.05, 0.05]
    if stray is not None:
        x[rows[2]] = stray
    if nan_positions:
        x[rows] = np.nan
    write_run(path, wl, spectra, samples, idx, dark=dark, saturation=65535, exposure_s=0.05, dark_exposure_s=0.05,
              x_mm=x, y_mm=y, created="2026-12-01T00:00:00Z")
    return path


def _edit_cal(doc: dict, fn) -> dict:
    doc = json.loads(json.dumps(doc))
    if "Zn" in doc.get("curves", {}):  # (listing the case names only: no calibration to edit)
        fn(doc)
    return doc


def build_more(cases, folder, new_dir, command, run_case, good, M, MCF, S, L, SP, CAL, shared):
    """Add the cases of items 4-10 and of the inputs that are not files to ``cases``."""

    def add(name, argv, outputs, expect, bad=None, inputs=(), check=None, setup=None, env=None, multi=False, d=None,
            stdin=None):
        cases.append(HCase(name, [str(a) for a in argv], list(inputs) + shared, outputs, expect, bad, dict(env or {}),
                           setup, check, multi, d or folder, stdin))

    c = SimpleNamespace(add=add, new_dir=new_dir, command=command, run_case=run_case, good=good, folder=folder, M=M,
                        MCF=MCF, S=S, L=L, SP=SP, CAL=CAL, map_run=_raster_run(folder / "raster.h5"))
    sections = (_calibration_cases, _map_cases, _text_cases, _certificate_text_cases, _injection_cases,
                _output_cases, _scheduler_cases, _option_cases, _message_cases, _not_a_file_cases, _stdin_cases,
                _stdin_config_cases)
    for section in sections:
        section(c)


def _calibration_cases(c) -> None:
    """Item 4: saved calibrations."""
    cal_doc = json.loads(c.CAL.read_text(encoding="utf-8")) if c.CAL.stat().st_size > 2 else {"curves": {}}
    add, new_dir, good, M, map_run = c.add, c.new_dir, c.good, c.M, c.map_run
    def slope_negative(doc):
        doc["curves"]["Zn"]["beta"][1] = -abs(doc["curves"]["Zn"]["beta"][1])

    def slope_zero(doc):
        doc["curves"]["Zn"]["beta"][1] = 0.0

    def beta_nan(doc):
        doc["curves"]["Zn"]["beta"][0] = float("nan")

    def cov_negative(doc):
        doc["curves"]["Zn"]["cov"][1][1] = -1e-4

    def scale_negative(doc):
        doc["curves"]["Zn"]["scale"] = -1.0

    def cov_inf(doc):
        doc["curves"]["Zn"]["cov_fit"][0][0] = float("inf")

    def element_xx(doc):
        c = doc["curves"].pop("Zn")
        c["element"] = "Xx"
        doc["curves"]["Xx"] = c

    def element_mismatch(doc):
        doc["curves"]["Zn"]["element"] = "Cu"

    def range_reversed(doc):
        doc["curves"]["Zn"]["range_x"] = doc["curves"]["Zn"]["range_x"][::-1]

    for label, fn, expect in (
        ("slope_negative", slope_negative, ["does not rise"]),
        ("slope_zero", slope_zero, ["does not rise"]),
        ("beta_nan", beta_nan, ["NaN or infinite"]),
        ("cov_negative", cov_negative, ["variance is negative"]),
        ("scale_negative", scale_negative, ["variance is negative"]),
        ("cov_inf", cov_inf, ["NaN or infinite"]),
        ("element_xx", element_xx, ["'Xx' is not a chemical element"]),
        ("element_mismatch", element_mismatch, ["differs from its key"]),
        ("range_reversed", range_reversed, ["reversed"]),
    ):
        d = new_dir(f"calibration_{label}")
        cal = d / "calibration.json"
        cal.write_text(json.dumps(_edit_cal(cal_doc, fn), indent=1), encoding="utf-8")
        o = d / "out"
        add(f"calibration_{label}@quantify", ["quantify", good, "--calibration", cal, "--method", M, "-o",
                                              o / "q" / "r.csv", "--quiet"], [o / "q"], expect, str(cal), [cal], d=d)
        add(f"calibration_{label}@analyse", ["analyse", good, "--method", M, "--calibration", cal, "-o", o / "a",
                                             "--quiet", "--no-figures", "--issued-at", ISSUED], [o / "a"], expect,
            str(cal), [cal], d=d)
        add(f"calibration_{label}@map", ["map", map_run, "--method", M, "--calibration", cal, "-o", o / "m",
                                         "--quiet"], [o / "m"], expect, str(cal), [cal, map_run], d=d)


def _map_cases(c) -> None:
    """Item 5: maps."""
    add, new_dir, good, folder, M, map_run = c.add, c.new_dir, c.good, c.folder, c.M, c.map_run
    def grid_is_005(case, result):
        prov = json.loads((case.outputs[0] / "maps-provenance.json").read_text(encoding="utf-8"))
        g = prov["grids"]["LOT-1"]
        # the stray shot (x = 1e9 mm) must not set the step: 0.05 mm, 3 x 2 nodes (the raster as built)
        assert abs(g["dx_mm"] - 0.05) < 1e-9 and (g["nx"], g["ny"]) == (3, 2), g
        assert "stray stage positions" in result.stderr and "x = 1e+09" in result.stderr
        assert any("stray" in n for n in prov["notes"])
        no_nonfinite(case, result)

    d = new_dir("map_stray_position")
    stray = _raster_run(d / "run.h5", stray=1e9)
    add("map_stray_position@map", ["map", stray, "--method", M, "-o", d / "out", "--quiet"], [d / "out"], None,
        inputs=[stray], check=grid_is_005, d=d)
    d = new_dir("map_stray_negative")
    stray2 = _raster_run(d / "run.h5", stray=-3e7)
    add("map_stray_negative@map", ["map", stray2, "--method", M, "-o", d / "out", "--quiet"], [d / "out"], None,
        inputs=[stray2], check=lambda c, r: (no_nonfinite(c, r), None)[1] if "stray" in r.stderr else 1 / 0, d=d)

    def good_map(case, result):
        prov = json.loads((case.outputs[0] / "maps-provenance.json").read_text(encoding="utf-8"))
        assert abs(prov["grids"]["LOT-1"]["dx_mm"] - 0.05) < 1e-9
        no_nonfinite(case, result)

    add("map_clean_raster@map", ["map", map_run, "--method", M, "-o", folder / "map_clean" / "out", "--quiet"],
        [folder / "map_clean" / "out"], None, inputs=[map_run], check=good_map)
    for label, value, expect in (
        ("inf", "inf", ["step_mm"]),
        ("nan", "nan", ["step_mm"]),
        ("negative", "-0.05", ["step_mm"]),
        ("pair_inf", "[0.05, inf]", ["step_mm"]),
        ("text", '"fine"', ["step_mm"]),
        ("zero", "0", ["step_mm"]),
    ):
        d = new_dir(f"map_step_{label}")
        m = d / "method.toml"
        m.write_text(METHOD_TOML + f"\n[map]\nstep_mm = {value}\n", encoding="utf-8")
        add(f"map_step_{label}@map", ["map", map_run, "--method", m, "-o", d / "out", "--quiet"], [d / "out"], expect,
            str(m), [m, map_run], d=d)
    d = new_dir("map_no_positions")
    nopos = _raster_run(d / "run.h5", nan_positions=True)
    add("map_sample_without_positions@map", ["map", nopos, "--method", M, "--sample", "LOT-1", "-o", d / "out",
                                             "--quiet"], [d / "out"], ["finite"], str(nopos), [nopos], d=d)
    add("map_run_without_positions@map", ["map", good, "--method", M, "-o", folder / "map_nopos" / "out", "--quiet"],
        [folder / "map_nopos" / "out"], ["no shot positions"], str(good))


def _text_cases(c) -> None:
    """Item 6: text from files on figures (mathtext)."""
    add, new_dir, good, M, S, L = c.add, c.new_dir, c.good, c.M, c.S, c.L
    math_id = r"$\foo$ LOT"
    d = new_dir("text_mathtext_id")
    mrun = _copy(good, d / "run.h5", _rename_lot1(math_id))

    def png_written(case, result):
        pngs = [p for o in case.outputs for p in (o.rglob("*.png") if o.is_dir() else [o]) if p.suffix == ".png"]
        assert pngs and all(p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" for p in pngs), pngs

    def pdf_and_png(case, result):
        out = case.outputs[0]
        # every certificate JSON has its PDF, the id is kept exactly, the figures were drawn
        certs = [p for p in out.glob("*.json") if p.name not in ("calibration.json", "summary.json", "manifest.json")]
        assert certs and all(p.with_suffix(".pdf").is_file() for p in certs)
        assert any(json.loads(p.read_text(encoding="utf-8"))["sample"]["sample_id"] == math_id for p in certs)
        assert list(out.rglob("*.png"))

    add("text_mathtext_id@plot", ["plot", mrun, "--sample", math_id, "--method", M, "-o", d / "plot" / "p.png"],
        [d / "plot"], None, inputs=[mrun], check=png_written, d=d)
    add("text_mathtext_id@identify", ["identify", mrun, "--sample", math_id, "-o", d / "id" / "id.csv", "--plot",
                                      d / "id" / "id.png", "--quiet"], [d / "id"], None, inputs=[mrun],
        check=png_written, d=d)
    add("text_mathtext_id@analyse", ["analyse", mrun, "--method", M, "--standards", S, "--lab", L, "-o", d / "an",
                                     "--quiet", "--issued-at", ISSUED], [d / "an"], None, inputs=[mrun],
        check=pdf_and_png, d=d)
    d2 = new_dir("text_mathtext_standard")
    mstd = _copy(good, d2 / "run.h5", _rename_std(r"$\alpha_{x}^{$"))
    add("text_mathtext_standard@calibrate", ["calibrate", mstd, "--method", M, "--standards", S, "-o",
                                             d2 / "cal" / "cal.json", "--plots", d2 / "cal", "--quiet"],
        [d2 / "cal"], None, inputs=[mstd], check=png_written, d=d2)
    d3 = new_dir("text_mathtext_map")
    mraster = d3 / "run.h5"
    _raster_run(mraster)
    with h5py.File(mraster, "a") as f:
        _rename_lot1(math_id)(f)
    add("text_mathtext_id@map", ["map", mraster, "--method", M, "-o", d3 / "out", "--quiet"], [d3 / "out"], None,
        inputs=[mraster], check=png_written, d=d3)


def _certificate_text_cases(c) -> None:
    """Item 6: text on certificates (lengths, line breaks, fonts) and the date of measurement."""
    add, new_dir, run_case, good, M, S = c.add, c.new_dir, c.run_case, c.good, c.M, c.S
    long_w = "Longname " * 40
    for label, lab_text, expect in (
        ("lab_name_long", LAB_TOML.replace('name = "Test Bench Laboratory (fictional)"', f'name = "{long_w}"'),
         ["too long", "[lab].name"]),
        ("lab_name_10MB", LAB_TOML.replace('name = "Test Bench Laboratory (fictional)"',
                                           f'name = "{"x" * 10_000_000}"'), ["too long"]),
        ("lab_address_long", LAB_TOML.replace('"Testville (fictional)"', f'"{"Road " * 60}"'), ["address[1]"]),
        ("lab_address_many_lines", LAB_TOML.replace('address = ["1 Nowhere Road", "Testville (fictional)"]',
                                                    "address = [" + ", ".join(['"l"'] * 40) + "]"), ["40 lines"]),
        ("lab_title_long", LAB_TOML.replace('title = "Analyst"', f'title = "{"Chief " * 400}"'), ["[signatory].title"]),
        ("lab_prefix_newline", LAB_TOML.replace('certificate_prefix = "TBL"', 'certificate_prefix = "TBL\\n"'),
         ["certificate_prefix"]),
        ("lab_prefix_trailing_space", LAB_TOML.replace('certificate_prefix = "TBL"', 'certificate_prefix = "TBL "'),
         ["certificate_prefix"]),
        ("lab_name_newline", LAB_TOML.replace('name = "Test Bench Laboratory (fictional)"',
                                              'name = "Lab\\nerror: forged"'), ["line break"]),
    ):
        d = new_dir(f"text_{label}")
        lab = d / "lab.toml"
        lab.write_text(lab_text, encoding="utf-8")
        add(f"text_{label}@analyse", ["analyse", good, "--method", M, "--standards", S, "--lab", lab, "-o", d / "out",
                                      "--quiet", "--no-figures", "--issued-at", ISSUED], [d / "out"], expect, str(lab),
            [lab], d=d)
    d = new_dir("text_client_long")
    add("text_client_long@analyse", ["analyse", good, "--method", M, "--standards", S, "--client", "C" * 5000, "-o",
                                     d / "out", "--quiet", "--no-figures", "--issued-at", ISSUED], [d / "out"],
        ["too long"], "--client", d=d)

    def long_description(f):
        v = [s.decode() if isinstance(s, bytes) else s for s in f["samples/description"][()]]
        v[6] = "very long description " * 500_000  # 11 MB
        del f["samples/description"]
        f["samples"].create_dataset("description", data=np.array(v, dtype=object), dtype=h5py.string_dtype())

    run_case("text_description_11MB", ["too long", "description of sample 'LOT-1'"], mutate=long_description,
             cmds=("analyse",))
    for label, sid in (("cjk", "\u6837\u54c1-1"), ("fullwidth_cjk", "\u30ed\u30c3\u30c8\uff11"),
                       ("hangul", "\uc2dc\ub8cc-1")):
        run_case(f"text_id_{label}", ["font cannot show", "U+"], mutate=_rename_lot1(sid), cmds=("analyse",))
        d = new_dir(f"text_id_{label}_lines")
        r = _copy(good, d / "run.h5", _rename_lot1(sid))
        add(f"text_id_{label}@lines", ["lines", r, "--method", M, "-o", d / "o" / "lines.csv", "--quiet"], [d / "o"],
            None, inputs=[r], check=cells_escaped(), d=d)
    d = new_dir("text_created_free_text")
    r = _copy(good, d / "run.h5", lambda f: f.attrs.__setitem__("created", "last Tuesday, roughly"))

    def no_free_date(case, result):
        for p in case.outputs[0].glob("*.json"):
            assert "last Tuesday" not in p.read_text(encoding="utf-8"), p

    add("text_created_free_text@analyse", ["analyse", r, "--method", M, "--standards", S, "-o", d / "out", "--quiet",
                                           "--no-figures", "--issued-at", ISSUED], [d / "out"], None, inputs=[r],
        check=no_free_date, d=d)

    d = new_dir("run_ids_fixed_length_bytes")

    def as_bytes(f):
        ids = [s.decode() if isinstance(s, bytes) else s for s in f["samples/sample_id"][()]]
        del f["samples/sample_id"]
        f["samples"].create_dataset("sample_id", data=np.array([i.encode() for i in ids]))  # HDF5 fixed-length

    r = _copy(good, d / "run.h5", as_bytes)

    def plain_ids(case, result):
        text = (case.outputs[0] / "lines.csv").read_text(encoding="utf-8")
        assert "LOT-1" in text and "b'" not in text and "[b" not in text
        assert "b'" not in result.output

    add("run_ids_fixed_length_bytes@lines", ["lines", r, "--method", M, "-o", d / "o" / "lines.csv"], [d / "o"], None,
        inputs=[r], check=plain_ids, d=d)
    add("run_ids_fixed_length_bytes@inspect", ["inspect", r], [], None, inputs=[r],
        check=lambda c, res: None if "LOT-1" in res.output and "b'" not in res.output else 1 / 0, d=d)

    d = new_dir("run_attrs_nan_inf")

    def nan_attrs(f):
        f["instrument"].attrs["resolving_power"] = np.nan
        f["acquisition"].attrs["gate_delay_us"] = np.inf

    r = _copy(good, d / "run.h5", nan_attrs)

    def strict_json_stdout(case, result):
        json.loads(result.stdout, parse_constant=lambda c: 1 / 0)  # no bare NaN / Infinity (item 4)

    add("run_attrs_nan_inf@inspect_json", ["inspect", r, "--json"], [], None, inputs=[r], check=strict_json_stdout,
        d=d)
    add("run_attrs_nan_inf@lines", ["lines", r, "--method", M, "-o", d / "l" / "lines.csv", "--quiet"], [d / "l"],
        None, inputs=[r], check=no_nonfinite, d=d)
    add("run_attrs_nan_inf@analyse", ["analyse", r, "--method", M, "--standards", S, "-o", d / "a", "--quiet",
                                      "--no-figures", "--issued-at", ISSUED], [d / "a"], None, inputs=[r],
        check=no_nonfinite, d=d)


def _injection_cases(c) -> None:
    """Item 7: injection into CSVs and the terminal."""
    add, new_dir, good, M, S, CAL = c.add, c.new_dir, c.good, c.M, c.S, c.CAL
    for label, sid in HOSTILE_IDS.items():
        d = new_dir(f"inject_{label}")
        r = _copy(good, d / "run.h5", _rename_lot1(sid))
        chk = cells_escaped("\x1b", "\u202e")
        add(f"inject_{label}@lines", ["lines", r, "--method", M, "-o", d / "l" / "lines.csv"], [d / "l"], None,
            inputs=[r], check=lambda c, res, k=chk: (k(c, res), terminal_clean(c, res)), d=d)
        add(f"inject_{label}@quantify", ["quantify", r, "--calibration", CAL, "--method", M, "-o",
                                         d / "q" / "results.csv"], [d / "q"], None, inputs=[r],
            check=lambda c, res, k=chk: (k(c, res), terminal_clean(c, res)), d=d)
        if label not in ("formula", "space_formula", "fullwidth_formula", "newline", "bidi_override", "ansi_escape"):
            continue  # (the certificate path is the same for every id; six of them keep the suite fast)
        # a full-width sign the PDF font cannot draw is refused before any work (item 6)
        unshowable = label == "fullwidth_formula"
        add(f"inject_{label}@analyse", ["analyse", r, "--method", M, "--standards", S, "-o", d / "a", "--no-figures",
                                        "--quiet", "--issued-at", ISSUED], [d / "a"],
            ["font cannot show"] if unshowable else None, str(r) if unshowable else None, inputs=[r],
            check=None if unshowable else (lambda c, res, k=chk: (k(c, res), terminal_clean(c, res))), d=d)
        if label in ("formula", "newline", "bidi_override"):
            add(f"inject_{label}@identify", ["identify", r, "-o", d / "i" / "id.csv"], [d / "i"], None, inputs=[r],
                check=lambda c, res, k=chk: (k(c, res), terminal_clean(c, res)), d=d)
            add(f"inject_{label}@inspect", ["inspect", r], [], None, inputs=[r], check=terminal_clean, d=d)
    for label, fname in (("formula_name", "=cmd()|x.h5"), ("newline_name", "a\nerror: forged.h5"),
                         ("bidi_name", "run\u202eh5.txt.h5"), ("escape_name", "run\x1b[2J.h5")):
        d = new_dir(f"inject_{label}")
        r = d / fname
        _copy(good, r)

        def combined_ok(case, result):
            cells_escaped("\x1b", "\u202e")(case, result)
            terminal_clean(case, result)
            assert not any(line.startswith("error: forged") for line in result.output.splitlines())

        add(f"inject_{label}@multi", ["lines", good, r, "--method", M, "-o", d / "o"], [d / "o"], None, inputs=[r],
            check=combined_ok, d=d)
        add(f"inject_{label}@missing", ["inspect", str(r) + ".missing"], [], ["not found"], None, d=d)


def _output_cases(c) -> None:
    """Item 8: output faults."""
    add, new_dir, command, good, folder, M = c.add, c.new_dir, c.command, c.good, c.folder, c.M
    S, CAL, map_run = c.S, c.CAL, c.map_run
    # (cf is left out: the base run gives no calibration-free result, so cf never reaches its outputs;
    # it writes through the same write_csv / atomic_write as the others)
    for cmd in ("lines", "identify", "calibrate", "quantify", "analyse", "map", "plot"):
        for label, err, frag in (("disk_full", errno.ENOSPC, "disk is full"), ("file_too_big", errno.EFBIG,
                                                                                 "file-size limit")):
            d = new_dir(f"output_{label}_{cmd}")
            run = map_run if cmd == "map" else good
            argv, outs = command(cmd, run, d)
            add(f"output_{label}@{cmd}", argv, outs, [frag], None, [run],
                setup=lambda e=err: _failing_disk(e), d=d)
        d = new_dir(f"output_read_only_{cmd}")
        run = map_run if cmd == "map" else good
        argv, outs = command(cmd, run, d)
        add(f"output_read_only@{cmd}", argv, outs, ["no permission"], None, [run],
            setup=lambda: _no_mkstemp(errno.EACCES), d=d)
    blocker = folder / "a-file"
    blocker.write_text("not a folder\n", encoding="utf-8")
    for cmd, argv in (
        ("lines", ["lines", good, "--method", M, "-o", blocker / "lines.csv", "--quiet"]),
        ("quantify", ["quantify", good, "--calibration", CAL, "--method", M, "-o", blocker / "r.csv", "--quiet"]),
        ("analyse", ["analyse", good, "--method", M, "--standards", S, "-o", blocker / "out", "--quiet",
                     "--no-figures", "--issued-at", ISSUED]),
        ("calibrate", ["calibrate", good, "--method", M, "--standards", S, "-o", blocker / "c.json", "--quiet"]),
        ("map", ["map", map_run, "--method", M, "-o", blocker / "maps", "--quiet"]),
        ("multi", ["lines", good, map_run, "--method", M, "-o", blocker / "multi", "--quiet"]),
    ):
        add(f"output_below_a_file@{cmd}", argv, [], ["a-file"], None, [blocker, map_run])
    add("output_folder_is_a_file@analyse", ["analyse", good, "--method", M, "--standards", S, "-o", blocker,
                                            "--quiet"], [], ["is a file"], "--outdir", [blocker])
    add("output_run_is_a_folder@inspect", ["inspect", folder], [], ["is a directory"], "inspect")
    add("output_missing_option@lines", ["lines", good, "-o", folder / "x.csv"], [], ["--method"], "lines")

    d = new_dir("output_run_named_runs_csv")
    named = d / "runs.csv.h5"
    _copy(good, named)

    def combined_names(case, result):
        out = case.outputs[0]
        assert (out / "runs.csv").is_file() and (out / "lines-all.csv").is_file()
        assert (out / "runs.csv-run" / "lines.csv").is_file()

    add("output_run_named_runs_csv@multi", ["lines", good, named, "--method", M, "-o", d / "o", "--quiet"], [d / "o"],
        None, inputs=[named], check=combined_names, d=d)
    named2 = d / "lines-all.csv.h5"
    _copy(good, named2)
    add("output_run_named_lines_all@multi", ["lines", good, named2, "--method", M, "-o", d / "o2", "--quiet"],
        [d / "o2"], None, inputs=[named2], check=lambda c, r: (c.outputs[0] / "lines-all.csv").is_file() or 1 / 0, d=d)
    d = new_dir("output_crash_in_one_run")
    crash = d / "crash.h5"
    _copy(good, crash)

    def after_crash(case, result):
        pass

    add("output_crash_in_one_run@multi", ["lines", good, crash, "--method", M, "-o", d / "o", "--quiet"], [d / "o"],
        ["a bug in compquant", "runs-failures.txt", "1 of 2 runs failed"], str(crash), [crash],
        setup=lambda: _crash_in("crash.h5"), multi=True, d=d)


def _scheduler_cases(c) -> None:
    """Item 9: --scheduler."""
    add, new_dir, command, good, map_run = c.add, c.new_dir, c.command, c.good, c.map_run
    for k, addr in enumerate(BAD_SCHEDULERS):
        for cmd in ("lines", "analyse", "map"):
            d = new_dir(f"scheduler_{k}_{cmd}")
            run = map_run if cmd == "map" else good
            argv, outs = command(cmd, run, d)
            add(f"scheduler_{k}@{cmd}", argv + ["--scheduler", addr], outs, ["scheduler address", "HOST:PORT"],
                "--scheduler", [run], d=d)


def _option_cases(c) -> None:
    """Item 9, other options: chunk sizes, draws, ranges and temperatures out of their domain."""
    add, good, M, MCF, map_run, folder = c.add, c.good, c.M, c.MCF, c.map_run, c.folder
    for value in ("0", "-5"):
        o = folder / f"options{value}"
        add(f"option_chunk_shots_{value}@lines", ["lines", good, "--method", M, "-o", o / "l" / "l.csv",
                                                  "--chunk-shots", value, "--quiet"], [o / "l"], ["chunk"], "chunk")
        add(f"option_chunk_shots_{value}@map", ["map", map_run, "--method", M, "-o", o / "m", "--chunk-shots", value,
                                                "--quiet"], [o / "m"], ["chunk"], "chunk")
        add(f"option_chunk_shots_{value}@inspect", ["inspect", good, "--chunk-shots", value], [], ["chunk"], "chunk")
        add(f"option_chunk_shots_{value}@analyse", ["analyse", good, "--method", M, "--cf", "-o", o / "a",
                                                    "--chunk-shots", value], [o / "a"], ["chunk-shots"],
            "--chunk-shots")
    o = folder / "options"
    add("option_draws_negative@cf", ["cf", good, "--method", MCF, "-o", o / "c" / "cf.csv", "--draws", "-1"],
        [o / "c"], ["--draws"], "--draws")
    add("option_range_reversed@plot", ["plot", good, "--sample", "LOT-1", "-o", o / "p" / "p.png", "--range", "335",
                                       "325"], [o / "p"], ["--range"], "--range")
    add("option_range_nan@plot", ["plot", good, "--sample", "LOT-1", "-o", o / "p" / "p.png", "--range", "nan",
                                  "330"], [o / "p"], ["--range"], "--range")
    add("option_temperature_negative@identify", ["identify", good, "-o", o / "i" / "i.csv", "--temperature", "-100"],
        [o / "i"], ["--temperature"], "--temperature")
    add("option_temperature_nan@identify", ["identify", good, "-o", o / "i" / "i.csv", "--temperature", "nan"],
        [o / "i"], ["--temperature"], "--temperature")
    add("option_workers_zero@lines", ["lines", good, "--method", M, "-o", o / "w" / "l.csv", "--workers", "0"],
        [o / "w"], ["--workers"], "--workers")
    add("option_workers_and_scheduler@lines", ["lines", good, "--method", M, "-o", o / "w" / "l.csv", "--workers", "1",
                                               "--scheduler", "tcp://127.0.0.1:8786"], [o / "w"], ["both"], None)
    add("option_sample_unknown@plot", ["plot", good, "--sample", "NO-SUCH", "-o", o / "p" / "p.png"], [o / "p"],
        ["no sample 'NO-SUCH'"], str(good))


def _message_cases(c) -> None:
    """Item 10: messages."""
    add, new_dir, good = c.add, c.new_dir, c.good
    d = new_dir("messages_cf_quiet")
    one_line_each = d / "method.toml"
    text = METHOD_TOML.replace('[[lines]]\nid = "Cu I 324.754"\n', "").replace('[[lines]]\nid = "Zn I 334.502"\n', "")
    one_line_each.write_text(text + CF_TABLE, encoding="utf-8")
    add("messages_cf_quiet@cf", ["cf", good, "--method", one_line_each, "-o", d / "o" / "cf.csv", "--quiet"],
        [d / "o"], ["no sample gave a calibration-free result", "CHK-20: "], str(good), [one_line_each], d=d)


def _not_a_file_cases(c) -> None:
    """Inputs that are not regular files."""
    add, new_dir, good, folder, M, S = c.add, c.new_dir, c.good, c.folder, c.M, c.S
    map_run = c.map_run
    fifo = folder / "pipe"
    os.mkfifo(fifo)
    for what, argv, frag in (
        ("method@lines", ["lines", good, "--method", fifo, "-o", folder / "fm" / "l.csv"], "method"),
        ("method@analyse", ["analyse", good, "--method", "/dev/zero", "--standards", S, "-o", folder / "fm2"],
         "device"),
        ("standards@calibrate", ["calibrate", good, "--method", M, "--standards", fifo, "-o", folder / "fs" / "c.json"],
         "FIFO"),
        ("standards@analyse", ["analyse", good, "--method", M, "--standards", "/dev/zero", "-o", folder / "fs2"],
         "device"),
        ("calibration@quantify", ["quantify", good, "--calibration", fifo, "--method", M, "-o",
                                  folder / "fc" / "r.csv"], "FIFO"),
        ("calibration@map", ["map", map_run, "--method", M, "--calibration", "/dev/zero", "-o", folder / "fc2"],
         "device"),
        ("lab@analyse", ["analyse", good, "--method", M, "--standards", S, "--lab", fifo, "-o", folder / "fl"],
         "FIFO"),
        ("spec@analyse", ["analyse", good, "--method", M, "--standards", S, "--spec", "/dev/zero", "-o",
                          folder / "fp"], "device"),
    ):
        bad = "/dev/zero" if "/dev/zero" in argv else str(fifo)
        outs = [Path(a) for a in argv if str(a).startswith(str(folder / "f"))]
        add(f"not_a_file_{what}", argv, [o if o.suffix == "" else o.parent for o in outs], [frag], bad)
    for label, target in (("fifo", fifo), ("dev_zero", "/dev/zero")):
        d = new_dir(f"not_a_file_response_{label}")
        m = d / "method.toml"
        m.write_text(METHOD_TOML.replace("[preprocess.baseline]", f'[preprocess.response]\nfile = "{target}"\n\n'
                                         "[preprocess.baseline]"), encoding="utf-8")
        for cmd in ("lines", "analyse", "cf"):
            argv = ["lines", good, "--method", m, "-o", d / cmd / "l.csv"] if cmd == "lines" else (
                ["analyse", good, "--method", m, "--standards", S, "-o", d / cmd, "--quiet"] if cmd == "analyse" else
                ["cf", good, "--method", m, "-o", d / cmd / "cf.csv", "--quiet"])
            add(f"not_a_file_response_{label}@{cmd}", argv, [d / cmd], ["not a regular file"], str(target), [m], d=d)


def _rename_std(new_id):
    def fn(f):
        ids = [s.decode() if isinstance(s, bytes) else s for s in f["samples/sample_id"][()]]
        ids[0] = new_id
        del f["samples/sample_id"]
        f["samples"].create_dataset("sample_id", data=np.array(ids, dtype=object), dtype=h5py.string_dtype())

    return fn


def _stdin_cases(c) -> None:
    """Issue 20, item 3: '-' reads the certified standards from standard input; what is piped in is
    checked like a file, and standard input itself can be empty, endless or binary."""
    import hashlib

    from compquant.fileio import MAX_TABLE_BYTES

    add, good, M, S, CAL, folder = c.add, c.good, c.M, c.S, c.CAL, c.folder
    o = folder / "stdin"
    header = b"standard_id,matrix,element,mass_fraction,expanded_uncertainty,k,unit,source\n"
    for label, data, expect in (
        ("empty", b"", ["standard input is empty"]),
        ("too_large", header + b"#" * MAX_TABLE_BYTES, ["larger than"]),
        ("not_utf8", header.replace(b"source", b"\xff\xfe"), ["not UTF-8"]),
        ("hdf5_bytes", good.read_bytes()[:4096], ["not UTF-8"]),
        ("bad_element", header + b"ZS-05,copper alloy,Zq,5,0.05,2,%,x\n", ["unknown element 'Zq'", "line 2"]),
        ("header_only", header, ["no certified values"]),
        ("escape_in_element", header + b"ZS-05,cu,Z\x1b[31mn,5,0.1,2,%,x\n", ["unknown element", "\\x1b[31m"]),
    ):
        for cmd, argv in (
            ("calibrate", ["calibrate", good, "--method", M, "--standards", "-", "-o", o / f"c-{label}" / "c.json"]),
            ("analyse", ["analyse", good, "--method", M, "--standards", "-", "-o", o / f"a-{label}", "--quiet",
                         "--no-figures", "--issued-at", ISSUED]),
        ):
            out = Path(argv[argv.index("-o") + 1])
            add(f"stdin_{label}@{cmd}", argv, [out if out.suffix == "" else out.parent], expect, "<stdin>",
                stdin=data)
    sha = hashlib.sha256(S.read_bytes()).hexdigest()

    def named_stdin(case, result):
        cert = json.loads(next(case.outputs[0].glob("LOT-*.json")).read_text(encoding="utf-8"))
        files = {f["role"]: f for f in cert["provenance"]["files"]}
        assert files["standards"]["name"] == "<stdin>" and files["standards"]["sha256"] == sha, files

    add("stdin_standards_work@analyse", ["analyse", good, "--method", M, "--standards", "-", "-o", o / "a-ok",
                                         "--quiet", "--no-figures", "--issued-at", ISSUED], [o / "a-ok"], None,
        stdin=S.read_bytes(), check=named_stdin)

    def csv_on_stdout(case, result):
        assert result.stdout.startswith("sample_id,element,mass_fraction"), result.stdout[:200]
        assert not (Path(case.folder) / "-").exists()

    add("stdin_standards_stdout_results@quantify", ["quantify", good, "--calibration", CAL, "--method", M,
                                                     "--standards", "-", "-o", "-"], [], None, stdin=S.read_bytes(),
        check=csv_on_stdout)


def _stdin_config_cases(c) -> None:
    """Issue 20, item 3 (continued): '-' for the lab profile, the specification, the saved calibration
    and convert's samples table: what is piped in is checked like the file, named ``<stdin>``."""
    import hashlib

    from compquant.fileio import MAX_TABLE_BYTES

    add, good, M, S, L, SP, CAL, folder = c.add, c.good, c.M, c.S, c.L, c.SP, c.CAL, c.folder
    o = folder / "stdin-config"
    lab, spec = L.read_text(encoding="utf-8"), SP.read_text(encoding="utf-8")
    cal_doc = json.loads(CAL.read_text(encoding="utf-8"))
    other_method = dict(cal_doc, method_id="ANOTHER-METHOD") if cal_doc else {}
    hdf5 = good.read_bytes()[:4096]

    def analyse(opt, label):
        out = o / f"a-{opt.strip('-')}-{label}"
        argv = ["analyse", good, "--method", M, "-o", out, "--quiet", "--no-figures", "--issued-at", ISSUED]
        for name, path in (("--calibration", CAL), ("--lab", L), ("--spec", SP)):
            argv += [name, "-" if name == opt else path]
        return argv, [out]

    table = (
        ("--lab", (
            ("empty", b"", ["standard input is empty"]),
            ("bad_toml", b"[lab\nname = 1\n", ["not valid TOML"]),
            ("unknown_table", (lab + "\n[extra]\nx = 1\n").encode(), ["unknown key(s) 'extra'"]),
            ("not_utf8", b"\xff\xfe[lab]\n", ["lab profile is not UTF-8"]),
            ("hdf5_bytes", hdf5, ["not UTF-8"]),
            ("bad_prefix", lab.replace('"TBL"', '"T-B"').encode(), ["certificate_prefix"]),
            ("escape_in_prefix", lab.replace('"TBL"', '"T\\u001b[31mB"').encode(), ["certificate_prefix", "\\x1b"]),
        )),
        ("--spec", (
            ("empty", b"", ["standard input is empty"]),
            ("too_large", b"#" * (MAX_TABLE_BYTES + 1), ["larger than 16 MiB"]),
            ("unknown_element", spec.replace("limits.Zn", "limits.Zq").encode(), ["'Zq' is not an element"]),
            ("bad_rule", spec.replace("simple-acceptance", "coin-toss").encode(), ["unknown decision_rule"]),
        )),
        ("--calibration", (
            ("empty", b"", ["standard input is empty"]),
            ("not_json", b"{not json", ["not valid JSON"]),
            ("not_a_calibration", b"{}", ["not a compquant calibration"]),
            ("hdf5_bytes", hdf5, ["not valid JSON"]),
            ("other_method", json.dumps(other_method).encode(),
             ["made with method 'ANOTHER-METHOD'" if cal_doc else "not a compquant calibration"]),
        )),
    )
    for opt, cases in table:
        for label, data, expect in cases:
            argv, outs = analyse(opt, label)
            add(f"stdin_{opt.strip('-')}_{label}@analyse", argv, outs, expect, "<stdin>", stdin=data)
    q = o / "q-not-json"
    add("stdin_calibration_not_json@quantify", ["quantify", good, "--calibration", "-", "--method", M, "-o",
                                                q / "r.csv"], [q], ["not valid JSON"], "<stdin>", stdin=b"{not json")
    # one '-' per command: the second is refused before anything is read for it
    for name, argv in (
        ("standards_and_lab@analyse", ["analyse", good, "--method", M, "--standards", "-", "--lab", "-",
                                       "-o", o / "two-a", "--quiet"]),
        ("calibration_and_spec@analyse", ["analyse", good, "--method", M, "--calibration", "-", "--spec", "-",
                                          "-o", o / "two-b", "--quiet"]),
        ("calibration_and_standards@quantify", ["quantify", good, "--calibration", "-", "--standards", "-",
                                                "-o", o / "two-q" / "r.csv"]),
    ):
        out = Path(argv[argv.index("-o") + 1])
        add(f"stdin_second_dash_{name}", argv, [out if out.suffix == "" else out.parent],
            ["only one input can be read from standard input"], stdin=S.read_bytes())
    # convert --samples -: the samples table piped in, checked like the file
    wide = o / "wide.csv"
    wide.parent.mkdir(parents=True, exist_ok=True)
    wide.write_text("wavelength,LOT-1\n" + "".join(f"{300 + 0.1 * i:.1f},{100 + i}\n" for i in range(20)),
                    encoding="utf-8")
    head = b"sample_id,role,standard_ref,description\n"
    for label, data, expect in (
        ("empty", b"", ["standard input is empty"]),
        ("bad_role", head + b"LOT-1,mystery,,lot 1\n", ["mystery"]),
        ("no_sample_id", b"id,role\nLOT-1,unknown\n", ["needs columns 'sample_id' and 'role'"]),
        ("hdf5_bytes", hdf5, ["cannot read the samples table"]),
    ):
        out = o / f"conv-{label}"
        add(f"stdin_samples_{label}@convert", ["convert", "--spectra", wide, "--samples", "-", "-o", out / "r.h5"],
            [out], expect, "<stdin>", inputs=[wide], stdin=data)

    # and what must work: the certificate names <stdin> with the bytes' SHA-256; quantify records both
    def named(role, path):
        sha = hashlib.sha256(path.read_bytes()).hexdigest()

        def check(case, result):
            cert = json.loads(next(case.outputs[0].glob("LOT-*.json")).read_text(encoding="utf-8"))
            files = {f["role"]: f for f in cert["provenance"]["files"]}
            assert files[role] == {"role": role, "name": "<stdin>", "sha256": sha}, files

        return check

    for opt, role, path in (("--lab", "lab profile", L), ("--spec", "specification", SP),
                            ("--calibration", "calibration", CAL)):
        argv, outs = analyse(opt, "ok")
        add(f"stdin_{opt.strip('-')}_works@analyse", argv, outs, None, stdin=path.read_bytes(), check=named(role, path))

    def cal_recorded(case, result):
        prov = json.loads((o / "q-ok" / "r-provenance.json").read_text(encoding="utf-8"))
        assert prov["calibration_path"] == "<stdin>"
        assert prov["calibration_file"] == {"name": "<stdin>", "sha256": hashlib.sha256(CAL.read_bytes()).hexdigest()}

    add("stdin_calibration_works@quantify", ["quantify", good, "--calibration", "-", "--method", M, "-o",
                                             o / "q-ok" / "r.csv", "--quiet"], [o / "q-ok"], None,
        stdin=CAL.read_bytes(), check=cal_recorded)
