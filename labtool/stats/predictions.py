"""Predicted startup behaviour: from the model's Monte Carlo, or from a table the design team exported.

A predictions table has one row per Monte Carlo sample or per corner: condition columns (any of
``ramp_s``, ``temperature_c``, ``vdd_v``, ``lot``, ``wafer`` and tag columns used for grouping) and the
predicted ``delay_s`` (seconds, blank when stuck) and ``stuck`` (true/false). The layout is documented
in docs/predictions-format.md.
"""

from __future__ import annotations

from pathlib import Path
import numpy as np
import pandas as pd

from labtool.errors import InputError, ModelError
from labtool.execute import Scheduler

NUMERIC_CONDITIONS = ("ramp_s", "temperature_c", "vdd_v")
TEXT_CONDITIONS = ("lot", "wafer")
_TRUE = {"true", "1", "yes", "y", "t", "1.0"}
_FALSE = {"false", "0", "no", "n", "f", "0.0"}


def load_predictions(path: str | Path) -> pd.DataFrame:
    """Read and check a predictions table (CSV or XLSX, first sheet). Errors name the file, the line
    (header = line 1) and the column."""
    path = Path(path)
    try:
        if path.suffix.lower() in (".xlsx", ".xlsm"):
            raw = pd.read_excel(path, sheet_name=0, dtype=str, engine="openpyxl")
        else:
            raw = pd.read_csv(path, dtype=str, skipinitialspace=True, comment=None)
    except FileNotFoundError:
        raise InputError(str(path), "no such file") from None
    except (ValueError, OSError, pd.errors.ParserError) as exc:
        raise InputError(str(path), f"cannot read a predictions table ({str(exc).splitlines()[0]})") from None
    raw.columns = [str(c).strip() for c in raw.columns]
    for col in ("delay_s", "stuck"):
        if col not in raw.columns:
            raise InputError(str(path), f"no column {col!r} (columns: {', '.join(raw.columns)})", line=1)
    out = pd.DataFrame(index=raw.index)
    for col in raw.columns:
        text = raw[col].fillna("").str.strip()
        if col == "stuck":
            low = text.str.lower()
            bad = ~low.isin(_TRUE | _FALSE)
            _fail_first(path, bad, col, "stuck must be true or false", text)
            out[col] = low.isin(_TRUE)
        elif col == "delay_s" or col in NUMERIC_CONDITIONS:
            num = pd.to_numeric(text.str.replace(",", ".", regex=False).where(text != "", None), errors="coerce")
            _fail_first(path, num.isna() & (text != ""), col, "not a number (SI units: seconds, °C, volts)", text)
            out[col] = num.astype(np.float64)
        else:
            out[col] = raw[col].where(text != "", None)
    missing = ~out["stuck"] & ~np.isfinite(out["delay_s"].to_numpy())
    _fail_first(path, missing, "delay_s", "a row that is not stuck needs a delay", raw["delay_s"].fillna(""))
    if out.empty:
        raise InputError(str(path), "the table has no rows", line=2)
    return out


def _fail_first(path: Path, bad: pd.Series, col: str, what: str, text: pd.Series) -> None:
    if bad.any():
        i = int(np.flatnonzero(bad.to_numpy())[0])
        raise InputError(str(path), f"{what} (got {text.iloc[i]!r})", line=i + 2, field=col)


def model_conditions(measurements: pd.DataFrame) -> list[tuple[float, float]]:
    """The distinct (ramp_s, temperature_c) set-ups of the measured captures."""
    cols = [c for c in ("ramp_s", "temperature_c") if c in measurements.columns]
    if len(cols) < 2:
        raise ModelError("the model needs ramp_s and temperature_c for every capture; the measurement table "
                         f"lacks {', '.join(set(('ramp_s', 'temperature_c')) - set(cols))}")
    cells = measurements[cols].dropna().drop_duplicates().sort_values(cols)
    if cells.empty:
        raise ModelError("no capture has both ramp_s and temperature_c; the model cannot be run at them")
    return [(float(r), float(t)) for r, t in cells.itertuples(index=False)]


def predictions_from_model(design, measurements: pd.DataFrame, n: int = 200, seed: int = 1,
                           scheduler: Scheduler | None = None, limits=None) -> pd.DataFrame:
    """Model predictions at the measured set-ups (the model's Monte Carlo samples: the predictions-table
    columns ramp_s, temperature_c, delay_s, stuck, plus the model's own, e.g. the sampled parameters and
    ``sample``, the simulated part). One seed for every set-up: the same simulated parts everywhere
    (common random numbers). ``limits``: the limits the lot was measured with (the simulated parts are
    measured and given verdicts by the same rules); defaults only when none are known."""
    from labtool.model import monte_carlo

    return monte_carlo(design, conditions=model_conditions(measurements), n=n, seed=seed, limits=limits,
                       scheduler=scheduler).samples
