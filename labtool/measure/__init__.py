"""Startup measurement: IEEE Std 181 state levels, crossings, startup metrics, step-model fit, verdicts.

The package is also the public function ``labtool.measure`` (docs/api.md): ``labtool.measure(...)``
calls :func:`labtool._api.files.measure`. The import system binds this package to the name
``labtool.measure`` whenever one of its modules is imported, so the public function cannot be a plain
attribute; instead the package is made callable (a module class with ``__call__``, as the Python data
model allows for customising module behaviour).
"""

import sys
import types

from labtool.measure.engine import (CAPTURE_KINDS, RESULT_FIELDS, StartupResult, measure_arrays, measure_capture,
                                    measure_capture_rows, measure_outputs, measure_rows)
from labtool.measure.limits import Limits
from labtool.measure.verdict import DIP_VERDICTS, POWER_DOWN, VERDICTS

__all__ = ["CAPTURE_KINDS", "DIP_VERDICTS", "Limits", "POWER_DOWN", "RESULT_FIELDS", "StartupResult", "VERDICTS",
           "measure_arrays", "measure_capture", "measure_capture_rows", "measure_outputs", "measure_rows"]


class _CallablePackage(types.ModuleType):
    def __call__(self, *args, **kwargs):
        from labtool._api.files import measure

        return measure(*args, **kwargs)


sys.modules[__name__].__class__ = _CallablePackage
