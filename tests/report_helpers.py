"""A hand-built certificate for the report tests (invented demo numbers, fictional lab)."""

from __future__ import annotations

import numpy as np

from compquant.report import (
    CalibrationInfo,
    Certificate,
    CheckResult,
    ClientInfo,
    CurveInfo,
    DriftInfo,
    FigureItem,
    FileRef,
    LabInfo,
    MethodInfo,
    Provenance,
    QCInfo,
    ResultRow,
    SampleInfo,
    Signatory,
    StandardValue,
    certificate_number,
)
from compquant.report.figures import calibration_png, spectrum_png

RUN_SHA = "3f" * 32


def demo_figures():
    wl = np.linspace(320.0, 410.0, 900)
    y = (
        50
        + 900 * np.exp(-0.5 * ((wl - 324.754) / 0.05) ** 2)
        + 400 * np.exp(-0.5 * ((wl - 405.781) / 0.05) ** 2)
    )
    spec = spectrum_png(wl, y, [("Cu I 324.754", 324.754), ("Pb I 405.781", 405.781)], title="mean spectrum")
    x = np.array([1.0, 2.0, 3.0]) / 100
    cal = calibration_png(
        x * 100,
        [0.10, 0.21, 0.29],
        fit_x=[0.5, 3.5],
        fit_y=[0.05, 0.35],
        sample_x=2.05,
        sample_y=0.205,
        xlabel="Pb certified mass fraction (%)",
        ylabel="Pb I 405.781 / Cu I 324.754",
    )
    return [
        FigureItem("Mean spectrum with the lines used.", "Dashed lines: analytical lines.", "spectrum", spec),
        FigureItem("Calibration curve for Pb with the sample marked.", "", "calibration", cal),
    ]


def make_certificate(sample_id="B-1042", check_passed=True, figures=False, **kw) -> Certificate:
    number = certificate_number("HMTL", RUN_SHA, sample_id, "2026-12-01")
    results = [
        ResultRow("Cu", 0.58237, U=0.00412, u=0.00206, lod=0.0002, loq=0.0007, line_id="Cu I 510.554"),
        ResultRow("Pb", 0.02049, U=0.00081, u=0.000405, lod=0.00004, loq=0.00013, line_id="Pb I 405.781"),
        ResultRow("Sn", 0.001234, U=0.00021, lod=0.00002, loq=0.00007, line_id="Sn I 317.505"),
        ResultRow("Fe", 0.000412, U=0.000061, lod=0.000015, loq=0.00005, line_id="Fe I 371.994"),
        ResultRow("Ni", None, U=None, lod=0.00003, loq=0.0001, below_lod=True, line_id="Ni I 352.454"),
        ResultRow(
            "Zn",
            0.39221,
            U=0.0061,
            lod=0.0003,
            loq=0.001,
            line_id="Zn I 334.502",
            above_range=True,
            flags=["overlapped"],
        ),
    ]
    checks = [
        CheckResult("CHK-1", "CRM-B2", "Cu", 0.6012, 0.0045, 0.6000, 0.0020, z=0.49, En=0.24, passed=True),
        CheckResult(
            "CHK-1",
            "CRM-B2",
            "Pb",
            0.0182 if check_passed else 0.0245,
            0.0008,
            0.0190,
            0.0004,
            z=-1.8 if check_passed else 5.5,
            En=-0.89 if check_passed else 6.15,
            passed=check_passed,
        ),
    ]
    cal = CalibrationInfo(
        "CAL-2026-12-01-A",
        "2026-12-01T09:12:00Z",
        "internal standard Cu; weighted linear curves",
        curves=[
            CurveInfo(
                "Pb",
                "Pb I 405.781",
                "linear, weighted 1/u²",
                "Cu I 324.754",
                0.001,
                0.03,
                4,
                0.9981,
                "replicate blank (12 shots)",
            )
        ],
        standards=[
            StandardValue("CRM-B1", "Pb", 0.0101, 0.0003, 2, "fictional demo CRM"),
            StandardValue("CRM-B2", "Pb", 0.0190, 0.0004, 2, "fictional demo CRM"),
        ],
        file_name="cal.json",
        file_sha256="ab" * 32,
    )
    args = dict(
        number=number,
        issue_date="2026-12-01",
        lab=LabInfo(
            "Harbourside Materials Testing Laboratory",
            ["22 Ropewalk Lane", "Port Ellery PE4 2XQ"],
            "Demonstration profile: not accredited.",
            "Spectrometry room S2",
        ),
        signatory=Signatory("Dr Morwenna Calloway (fictional)", "Technical Manager"),
        client=ClientInfo("Eastwick Foundry Cooperative (fictional)", ["Smelter Row 3"], "PO 2026-0417"),
        method=MethodInfo(
            "LIBS, Nd:YAG 1064 nm",
            "CU-ALLOY-LIBS",
            "1.2",
            "copper alloys, 6 elements",
            "method.toml",
            "cd" * 32,
        ),
        sample=SampleInfo(
            sample_id,
            "leaded brass bar offcut",
            "milled surface",
            "2026-11-27",
            "2026-12-01T10:00:00Z",
            200,
            "run.h5",
        ),
        results=results,
        provenance=Provenance(
            "compquant",
            "0.1.0",
            "2026-12-01T21:00:00Z",
            RUN_SHA,
            [FileRef("run", "run.h5", RUN_SHA), FileRef("method", "method.toml", "cd" * 32)],
            {"k": 2, "cf": False},
        ),
        calibration=cal,
        qc=QCInfo(
            DriftInfo(True, "two-point setup samples", ["SET-HI", "SET-LO"], {"Cu I 324.754": 1.0213}),
            checks,
            "replicate blank measurements (12 shots)",
        ),
        detected_not_quantified=["Al", "Mn"],
        figures=demo_figures() if figures else [],
    )
    args.update(kw)
    return Certificate(**args)
