"""Files → Captures: sniffing, CSV / XLSX readers, channel roles, conditions, batch ingest."""

from labtool.ingest.batch import IngestReport, find_files, ingest_paths
from labtool.ingest.conditions import Manifest, conditions_from_name, load_manifest
from labtool.ingest.options import IngestOptions
from labtool.ingest.readers import read_path

__all__ = ["IngestOptions", "IngestReport", "Manifest", "conditions_from_name", "find_files", "ingest_paths",
           "load_manifest", "read_path"]
