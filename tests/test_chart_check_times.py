"""The control-chart CSV gives each check-sample point the check sample's own time of measurement.

Common practice (ISO 7870-2:2023, a chart of individual values is plotted against the time of
each measurement; from memory): the point's time is when the check sample was measured (the run's
start plus its first shot, the certificate's "Date of measurement"), not the start of the run.
Invented analyses (tests/record_helpers.py).
"""

from __future__ import annotations

import csv

from record_helpers import fake_analysis

from compquant.record import open_record
from compquant.record.chartfiles import write_charts
from compquant.record.store import store_analysis

RUNS = {  # run -> (start of the run, the check sample's own time, invented)
    "RUN-1": ("2026-11-16T08:30:00Z", "2026-11-16T09:02:10Z"),
    "RUN-2": ("2026-11-23T08:30:00Z", "2026-11-23T08:41:05Z"),
}


def test_chart_csv_measured_at_is_the_check_sample_s(tmp_path):
    with open_record(str(tmp_path / "record.sqlite")) as rec:
        for run, (start, chk) in RUNS.items():
            kw = fake_analysis(tmp_path / run, run, n_samples=1, measured_at=start)
            kw["measured"] = {**kw["measured"], "CHK-1": chk}  # the check measured after the run's start
            store_analysis(rec, **kw)
        out = write_charts(rec, tmp_path / "charts", drift=False)
    assert len(out) == 1 and out[0]["points"] == 2
    with open(out[0]["csv"], newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["measured_at"] for r in rows] == [chk for _, chk in RUNS.values()]  # was the runs' starts


def test_chart_falls_back_to_the_run_time_without_a_sample_time(tmp_path):
    # a check sample stored without its own time (e.g. a run that states none): the run's time
    with open_record(str(tmp_path / "record.sqlite")) as rec:
        kw = fake_analysis(tmp_path / "r", "RUN-3", n_samples=1, measured_at="2026-11-30T10:00:00Z")
        kw["measured"] = {**kw["measured"], "CHK-1": ""}
        store_analysis(rec, **kw)
        out = write_charts(rec, tmp_path / "charts", drift=False)
    with open(out[0]["csv"], newline="") as fh:
        assert [r["measured_at"] for r in csv.DictReader(fh)] == ["2026-11-30T10:00:00Z"]


def test_a_check_not_counted_is_no_point_of_its_chart(tmp_path):
    """A check element certified below its LOQ in the check sample is *not counted* on the
    certificate (docs/certificate.md "Scope of a check"; common practice: below the LOQ a value
    is only indicative), so it is no point of the control chart either: before, its points were
    charted and a broken chart test could warn about or block a release."""
    import dataclasses

    with open_record(str(tmp_path / "record.sqlite")) as rec:
        for run, (start, _) in RUNS.items():
            kw = fake_analysis(tmp_path / run, run, n_samples=1, measured_at=start)
            if run == "RUN-2":  # certified 0.019 below an LOQ of 0.03: not counted
                kw["checks"] = [dataclasses.replace(c, loq=0.03) for c in kw["checks"]]
            store_analysis(rec, **kw)
        out = write_charts(rec, tmp_path / "charts", drift=False)
    assert len(out) == 1 and out[0]["points"] == 1  # RUN-1's counted check only
