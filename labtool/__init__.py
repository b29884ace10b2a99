"""labtool: startup characterisation of self-biased references on the bench.

The names in ``__all__`` are the Python API (docs/api.md): read and measure captures, keep them in a
campaign, lot statistics, comparison with predictions, triage, the model's prediction and the report's
figures. Everything else is internal and may change. The names are loaded on first use (PEP 562), so
``import labtool`` stays light: numpy, pandas and matplotlib are imported only when a function needs them.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING

__version__ = "0.1.0"

# public name -> module that defines it
_HOMES = {
    "read": "labtool._api.files", "read_all": "labtool._api.files",
    "measure": "labtool.measure",  # the measurement package, callable as labtool._api.files.measure
    "Campaign": "labtool._api.campaigns", "open_campaign": "labtool._api.campaigns",
    "lot": "labtool._api.results", "compare": "labtool._api.results", "triage": "labtool._api.results",
    "predict": "labtool._api.results", "LotResult": "labtool._api.results",
    "CompareResult": "labtool._api.results", "Prediction": "labtool._api.results",
    "plot_delays": "labtool._api.figures", "plot_overlay": "labtool._api.figures",
    "plot_wafer_map": "labtool._api.figures", "plot_triage": "labtool._api.figures",
    "Capture": "labtool.capture", "Limits": "labtool.measure.limits", "StartupResult": "labtool.measure.engine",
    "TriageReport": "labtool.stats.triage.result", "LabtoolError": "labtool.errors",
}

__all__ = ["__version__", *_HOMES]


def __getattr__(name: str):
    home = _HOMES.get(name)
    if home is None:
        raise AttributeError(f"module 'labtool' has no attribute {name!r}")
    module = importlib.import_module(home)
    value = module if home == f"{__name__}.{name}" else getattr(module, name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted({*globals(), *_HOMES})


if TYPE_CHECKING:  # what type checkers and editors see; never run
    from labtool._api.campaigns import Campaign, open_campaign
    from labtool._api.figures import plot_delays, plot_overlay, plot_triage, plot_wafer_map
    from labtool._api.files import measure, read, read_all
    from labtool._api.results import CompareResult, LotResult, Prediction, compare, lot, predict, triage
    from labtool.capture import Capture
    from labtool.errors import LabtoolError
    from labtool.measure.engine import StartupResult
    from labtool.measure.limits import Limits
    from labtool.stats.triage.result import TriageReport
