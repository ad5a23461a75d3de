"""`compquant convert`: text/CSV spectra to a run."""

from __future__ import annotations

import numpy as np
from click.testing import CliRunner
from conftest import file_hash

from compquant.cli import main
from compquant.run import Run


def _write_spec(path, wl, y, header=True):
    with open(path, "w") as fh:
        if header:
            fh.write("# exported spectrum\nwavelength_nm,counts\n")
        for a, b in zip(wl, y):
            fh.write(f"{a:.4f},{b:.1f}\n")


def _samples(path, extra=""):
    path.write_text("sample_id,role,standard_ref,description\n"
                    "CRM-1,standard,CRM-1,first standard\n"
                    "LOT-9,unknown,,scrap lot 9\n" + extra)


def test_folder_of_two_column_files(tmp_path):
    wl = np.linspace(300, 310, 30)
    spec = tmp_path / "spec"
    spec.mkdir()
    for sid, n in (("CRM-1", 3), ("LOT-9", 2)):
        for k in range(n):
            _write_spec(spec / f"{sid}_{k + 1}.csv", wl, 100 + 10 * k + np.arange(30))
    dark = tmp_path / "dark.txt"
    _write_spec(dark, wl, np.full(30, 90.0), header=False)
    smp = tmp_path / "samples.csv"
    _samples(smp)
    hashes = {p: file_hash(p) for p in [smp, dark, *spec.iterdir()]}
    out = tmp_path / "run.h5"
    r = CliRunner().invoke(main, ["convert", "--spectra", str(spec), "--samples", str(smp), "--dark", str(dark),
                                  "--acquisition", "gate_delay_us=1.5", "-o", str(out)])
    assert r.exit_code == 0, r.output
    assert "read 5 spectrum file(s): 5 shots x 30 pixels" in r.output
    assert "CRM-1: 3 shot(s)" in r.output
    with Run.open(out) as run:
        assert list(run.samples.n_shots) == [3, 2]
        np.testing.assert_allclose(run.sample_spectra("CRM-1")[1], 110 + np.arange(30))
        assert run.dark().shape == (1, 30)
        assert run.acquisition["gate_delay_us"] == 1.5
    assert all(file_hash(p) == h for p, h in hashes.items())


def test_wide_table(tmp_path):
    wl = np.linspace(300, 310, 20)
    tab = tmp_path / "wide.csv"
    cols = ["wavelength", "CRM-1:1", "CRM-1:2", "LOT-9"]
    rows = [",".join(cols)] + [f"{w},{1 + i},{2 + i},{3 + i}" for i, w in enumerate(wl)]
    tab.write_text("\n".join(rows) + "\n")
    smp = tmp_path / "samples.csv"
    _samples(smp)
    out = tmp_path / "run.h5"
    r = CliRunner().invoke(main, ["convert", "--spectra", str(tab), "--samples", str(smp), "-o", str(out)])
    assert r.exit_code == 0, r.output
    with Run.open(out) as run:
        assert list(run.samples.n_shots) == [2, 1]
        np.testing.assert_allclose(run.sample_spectra("LOT-9")[0], 3 + np.arange(20))


def test_convert_errors(tmp_path):
    wl = np.linspace(300, 310, 20)
    spec = tmp_path / "spec"
    spec.mkdir()
    _write_spec(spec / "CRM-1_1.txt", wl, np.arange(20))
    _write_spec(spec / "LOT-9_1.txt", wl[:-1], np.arange(19))
    smp = tmp_path / "samples.csv"
    _samples(smp)
    r = CliRunner().invoke(main, ["convert", "--spectra", str(spec), "--samples", str(smp), "-o",
                                  str(tmp_path / "o.h5")])
    assert r.exit_code == 2 and "wavelength axis differs" in r.output and "LOT-9_1.txt" in r.output
    assert not (tmp_path / "o.h5").exists()
    _samples(smp, "GHOST,unknown,,missing\n")
    (spec / "LOT-9_1.txt").unlink()
    _write_spec(spec / "LOT-9_1.txt", wl, np.arange(20))
    r = CliRunner().invoke(main, ["convert", "--spectra", str(spec), "--samples", str(smp), "-o",
                                  str(tmp_path / "o.h5")])
    assert r.exit_code == 2 and "no spectra found for sample(s) 'GHOST'" in r.output
    smp.write_text("sample_id,role\nA,standard\n")
    r = CliRunner().invoke(main, ["convert", "--spectra", str(spec), "--samples", str(smp), "-o",
                                  str(tmp_path / "o.h5")])
    assert r.exit_code == 2 and "no certified-standard reference" in r.output
