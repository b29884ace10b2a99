"""Statistics over the measurement table: lot statistics, comparison with predictions, calibration of
the startup model, and triage of returned parts. Pure functions over DataFrames and numpy arrays."""
