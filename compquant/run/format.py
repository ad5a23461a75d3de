"""Constants of the compquant run format (see docs/run-format.md)."""

from __future__ import annotations

FORMAT_NAME = "compquant-run"
FORMAT_VERSION = 1

ROLES = ("standard", "blank", "check", "unknown", "setup")

#: default limit for any single array the reader allocates (bytes); override per call
#: or with the environment variable COMPQUANT_MEMORY_LIMIT (bytes, or with K/M/G suffix)
DEFAULT_MEMORY_LIMIT = 2 * 1024**3

#: largest magnitude accepted for a stored (float) count: no detector reading or accumulated sum
#: comes near it (2^32 counts x 1e6 accumulations is 4e15), and squares and sums of values below
#: it stay far from the float64 overflow at 1.8e308; a run scaled by 1e196 is refused on reading
MAX_ABS_COUNTS = 1e18

#: default number of shots per streamed chunk
DEFAULT_CHUNK_SHOTS = 4096

#: per-shot columns: name -> (dtype, unit)
SHOT_COLUMNS = {
    "sample_index": ("int32", ""),
    "shot": ("int32", ""),
    "pulse_energy_mj": ("float64", "mJ"),
    "time_s": ("float64", "s"),
    "x_mm": ("float64", "mm"),
    "y_mm": ("float64", "mm"),
}
REQUIRED_SHOT_COLUMNS = ("sample_index",)

SAMPLE_COLUMNS = ("sample_id", "role", "standard_ref", "description")

#: acquisition attributes documented in docs/run-format.md (others are kept too)
ACQUISITION_KEYS = {
    "technique": "LIBS or spark-OES",
    "gate_delay_us": "detector gate delay after the laser pulse, microseconds",
    "gate_width_us": "detector gate width, microseconds",
    "laser_wavelength_nm": "laser wavelength, nm",
    "pulse_energy_mj": "nominal pulse energy, mJ",
    "spot_size_um": "focal spot diameter, micrometres",
    "repetition_rate_hz": "pulse repetition rate, Hz",
    "atmosphere": "ambient gas and pressure, e.g. 'argon 1 atm' or 'air'",
    "spark_source": "spark/arc source settings (spark OES), free text",
    "accumulations": "pulses accumulated per stored shot",
}
