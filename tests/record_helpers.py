"""Invented analyses for the record's tests and benchmark: no spectra, just what analyse stores.

``fake_analysis`` builds the keyword arguments of :func:`compquant.record.store.store_analysis`
for a run of ``n_samples`` unknowns x ``n_elements`` results plus one check sample, writing each
certificate's JSON (canonical, as analyse writes it) and a small stand-in PDF file.
"""

from __future__ import annotations

import hashlib
import os
import sys
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))

from report_helpers import make_certificate

from compquant.report import CheckResult, DriftInfo, QCInfo, ResultRow, certificate_number
from compquant.report.jsonform import write_certificate_json

#: 20 element symbols (IUPAC) for invented results
ELEMENTS = "Cu Zn Pb Sn Fe Ni Al Mn Si Mg Cr Ti Co Bi Sb As Ag Cd P S".split()

PG_ENV = "COMPQUANT_TEST_PG_URL"


@dataclass
class FakeMethod:
    id: str = "TEST-REC"
    version: str = "1"
    sha256: str = "ab" * 32
    where: str = "method.toml"
    sections: dict = field(default_factory=dict)


def fake_analysis(outdir, run_name: str, *, n_samples: int = 3, n_elements: int = 6, check_value: float = 0.0190,
                  drift: float = 1.0, measured_at: str = "2026-11-16T08:30:00Z", review=None,
                  chart_section: dict | None = None, write_files: bool = True) -> dict:
    """Keyword arguments for ``store_analysis`` of one invented run (see the module docstring)."""
    from compquant.record.states import Review

    review = review or Review("draft")
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    run_sha = hashlib.sha256(run_name.encode()).hexdigest()
    issue = measured_at[:10]
    unknowns = [f"{run_name}-S{i:03d}" for i in range(n_samples)]
    samples = pd.DataFrame({
        "sample_id": ["CHK-1", "SET-HI", *unknowns],
        "role": ["check", "setup", *["unknown"] * n_samples],
        "standard_ref": ["CRM-B2", "", *[""] * n_samples],
        "description": ["check", "setup", *["invented lot"] * n_samples],
        "n_shots": [20] * (n_samples + 2),
    })
    check = CheckResult("CHK-1", "CRM-B2", "Pb", check_value, 0.0008, 0.0190, 0.0004, z=None, En=0.0, passed=True)
    qc = QCInfo(DriftInfo(True, "setup samples", ["SET-HI"], {"Pb I 405.781": drift}), [check], "blank")
    certs, outputs = [], []

    @dataclass
    class Out:
        pdf: str
        json: str

    for i, sid in enumerate(unknowns):
        rows = [ResultRow(el, 0.001 * (1 + (i + j) % 7), U=0.0001, u=0.00005, lod=1e-5, loq=3e-5,
                          line_id=f"{el} I 300.000") for j, el in enumerate(ELEMENTS[:n_elements])]
        cert = make_certificate(sid, results=rows, qc=qc, number=certificate_number("HMTL", run_sha, sid, issue),
                                provenance=make_certificate().provenance)
        cert.provenance.run_sha256 = run_sha
        certs.append(cert)
        jp, pp = outdir / f"{sid}.json", outdir / f"{sid}.pdf"
        if write_files:
            write_certificate_json(cert, jp, review=review)
            pp.write_bytes(b"%PDF-1.4 stand-in for " + sid.encode() + b"\n")
        outputs.append(Out(str(pp), str(jp)))
    return dict(run_file=outdir / f"{run_name}.h5", run_sha256=run_sha, instrument={"name": "bench (invented)"},
                samples=samples, measured={s: measured_at for s in samples["sample_id"]},
                method=FakeMethod(sections={"control_chart": chart_section} if chart_section else {}),
                basis="calibration", issued_at=measured_at, certificates=certs, outputs=outputs, review=review,
                calibration=None, drift=qc.drift, checks=[check], outdir=outdir)


def pg_url() -> str | None:
    return os.environ.get(PG_ENV) or None


def real_analyses(d, db) -> dict:
    """A simulated Cu-Zn run (tests/test_analyse.py's scenario, invented) analysed twice into the
    record ``db``: with the run's standards (one line fitted, the others integrated in windows) and
    calibration-free; returns ``{"cal": AnalysisOutput, "cf": AnalysisOutput, "dir": Path}``."""
    from test_analyse import DEMO, METHOD, SCENARIO, STANDARDS

    from compquant.analyse import analyse
    from compquant.simulate import load_scenario, simulate_run

    d = Path(d)
    (d / "stds.csv").write_text(STANDARDS)
    (d / "scenario.toml").write_text(SCENARIO.replace("self_absorption = true", "self_absorption = false"))
    method = METHOD.replace('model = "linear"\n', 'model = "linear"\nsigma_pt_rel = 0.05\n', 1)
    method = method.replace('id = "Zn I 472.215"\n', 'id = "Zn I 472.215"\nmode = "fit"\n', 1)
    (d / "method.toml").write_text(method)
    simulate_run(load_scenario(d / "scenario.toml"), d / "run1.h5", seed=11)
    kw = dict(lab=DEMO / "lab.toml", db=db)
    cal = analyse(d / "run1.h5", d / "method.toml", standards=d / "stds.csv", outdir=d / "out-cal",
                  issued_at="2026-12-01T21:00:00Z", **kw)
    cf = analyse(d / "run1.h5", d / "method.toml", cf=True, outdir=d / "out-cf", issued_at="2026-12-01T21:05:00Z",
                 **kw)
    return {"cal": cal, "cf": cf, "dir": d}
