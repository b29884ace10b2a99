"""The campaign store: a directory with a SQLite catalog and the waveforms as Parquet files."""

from labtool.store.campaign import AddResult, Campaign, load_capture_record

__all__ = ["AddResult", "Campaign", "load_capture_record"]
