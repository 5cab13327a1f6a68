"""Nightly batch: discovery, the study registry (SQLite), parallel and Dask runs,
the morning worklist and de-identified research export.

``run_batch(BatchOptions(inbox, out, ...))`` runs one batch; ``open_registry(out)`` reads
what every batch recorded; ``export_deidentified(out, to, key)`` writes a research copy.
"""

from hsat.batch._discover import FoundRecording, discover, file_sha256
from hsat.batch._export import export_deidentified, load_key, pseudonym
from hsat.batch._names import is_safe_name, safe_name_part, study_folder_name
from hsat.batch._registry import (
    LIST_STATUSES,
    REGISTRY_FILE,
    Registry,
    ResultRow,
    RunRow,
    open_registry,
)
from hsat.batch._runner import BatchOptions, BatchReport, config_hash, make_config, run_batch
from hsat.batch._schema import SCHEMA_VERSION, migrate
from hsat.batch._study import RUN_MARKER, BatchConfig, StudyOutcome, StudyTask, process_study
from hsat.batch._worklist import WorklistItem, worklist_csv, worklist_html

__all__ = [
    "LIST_STATUSES", "REGISTRY_FILE", "RUN_MARKER", "SCHEMA_VERSION", "BatchConfig",
    "BatchOptions", "BatchReport", "FoundRecording", "Registry", "ResultRow", "RunRow",
    "StudyOutcome", "StudyTask", "WorklistItem", "config_hash", "discover",
    "export_deidentified", "file_sha256", "is_safe_name", "load_key", "make_config",
    "migrate", "open_registry", "process_study", "pseudonym", "run_batch", "safe_name_part",
    "study_folder_name", "worklist_csv", "worklist_html",
]
