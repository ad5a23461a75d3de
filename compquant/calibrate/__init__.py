"""Calibration from certified standards: curves, inverse prediction, LOD/LOQ, drift, checks, PLS.

Public API::

    load_standards(path) -> DataFrame
    parse_calibration_section(method.sections["calibration"]) -> CalibrationConfig
    calibrate(line_table, standards, config, shot_table=..., samples=...) -> Calibration
    Calibration.save(path) / Calibration.load(path, method_id=..., method_sha256=...)
    fit_curve(x, y, model=..., weights=...) -> CurveFit

    quantify(measurement, calibration, ...) -> QuantifyResult   (compquant.calibrate.apply)

``quantify`` is the apply half: it turns a run's line table into results with a Calibration.
"""

from compquant.calibrate.apply import RESULT_COLUMNS, QuantifyResult, quantify
from compquant.calibrate.build import calibrate
from compquant.calibrate.checks import en_number, z_score, zeta_score
from compquant.calibrate.config import CalibrationConfig, parse_calibration_section
from compquant.calibrate.fit import CurveFit, fit_curve
from compquant.calibrate.limits import iso11843_2, lod_loq
from compquant.calibrate.model import SCHEMA_VERSION, Calibration, Curve
from compquant.calibrate.standards import load_standards

__all__ = [
    "load_standards",
    "parse_calibration_section",
    "CalibrationConfig",
    "calibrate",
    "Calibration",
    "Curve",
    "CurveFit",
    "fit_curve",
    "iso11843_2",
    "lod_loq",
    "en_number",
    "zeta_score",
    "z_score",
    "SCHEMA_VERSION",
    "RESULT_COLUMNS",
    "QuantifyResult",
    "quantify",
]
