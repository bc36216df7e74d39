"""The known-target check: a short sequence of dots at known places and times, shown on the study's screen,
and the gaze quality measured on it (alignment, per-person offset and gain, accuracy, precision, data loss,
fixations on the dots, smooth-pursuit gain). See :mod:`aspectus.targets.schedule` (the schedule and its file),
:mod:`aspectus.targets.page` (the offline page and the video), :mod:`aspectus.targets.analysis` (the figures),
:mod:`aspectus.targets.check` (a clip's check and its sidecar) and :mod:`aspectus.targets.study` (the study
table and the exclusion rule)."""
from aspectus._lazy import attach as _attach

__getattr__, __dir__, __all__ = _attach(__name__, {
    "Screen": "aspectus.targets.schedule",
    "Schedule": "aspectus.targets.schedule",
    "make_schedule": "aspectus.targets.schedule",
    "read_schedule": "aspectus.targets.schedule",
    "write_page": "aspectus.targets.page",
    "write_video": "aspectus.targets.page",
    "CheckParams": "aspectus.targets.analysis",
    "check_samples": "aspectus.targets.analysis",
    "find_start": "aspectus.targets.analysis",
    "run_check": "aspectus.targets.check",
    "read_check": "aspectus.targets.check",
    "map_samples": "aspectus.targets.check",
    "ExclusionRule": "aspectus.targets.study",
    "collect_checks": "aspectus.targets.study",
    "check_row": "aspectus.targets.study",
    "write_quality_report": "aspectus.targets.study",
})
