"""Many clips: batch runs (resumable, local processes or a Dask cluster), clip discovery, the app's study file."""
from aspectus._lazy import attach as _attach

__getattr__, __dir__, __all__ = _attach(__name__, {
    "run_batch": "aspectus.studies.batch",
    "export_bids": "aspectus.studies.bids_export",
    "plan_batch": "aspectus.studies.batch",
    "BatchResult": "aspectus.studies.batch",
    "clip_is_done": "aspectus.studies.done",
    "discover_clips": "aspectus.studies.clips",
    "load_jobs": "aspectus.studies.clips",
    "read_manifest": "aspectus.studies.clips",
    "ClipJob": "aspectus.studies.clips",
    "LocalEngine": "aspectus.studies.engines",
    "DaskEngine": "aspectus.studies.engines",
    "Study": "aspectus.studies.project",
    "new_study": "aspectus.studies.project",
    "load_study": "aspectus.studies.project",
})
