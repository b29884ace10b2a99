"""Startup measurement: IEEE Std 181 state levels, crossings, startup metrics, step-model fit, verdicts."""

from labtool.measure.engine import (CAPTURE_KINDS, RESULT_FIELDS, StartupResult, measure_arrays, measure_capture,
                                    measure_capture_rows, measure_outputs, measure_rows)
from labtool.measure.limits import Limits
from labtool.measure.verdict import DIP_VERDICTS, POWER_DOWN, VERDICTS

__all__ = ["CAPTURE_KINDS", "DIP_VERDICTS", "Limits", "POWER_DOWN", "RESULT_FIELDS", "StartupResult", "VERDICTS",
           "measure_arrays", "measure_capture", "measure_capture_rows", "measure_outputs", "measure_rows"]
