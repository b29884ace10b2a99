"""Startup measurement: IEEE Std 181 state levels, crossings, startup metrics, step-model fit, verdicts."""

from labtool.measure.engine import RESULT_FIELDS, StartupResult, measure_arrays, measure_capture, measure_outputs
from labtool.measure.limits import Limits
from labtool.measure.verdict import VERDICTS

__all__ = ["Limits", "RESULT_FIELDS", "StartupResult", "VERDICTS", "measure_arrays", "measure_capture",
           "measure_outputs"]
