"""The known-target check: a short sequence of dots at known places and times, shown on the study's screen,
and the gaze quality measured on it (alignment, per-person offset and gain, accuracy, precision, data loss,
fixations on the dots, smooth-pursuit gain). See :mod:`aspectus.targets.schedule` (the schedule and its file),
:mod:`aspectus.targets.page` (the offline page and the video), :mod:`aspectus.targets.analysis` (the figures),
:mod:`aspectus.targets.check` (a clip's check and its sidecar) and :mod:`aspectus.targets.study` (the study
table and the exclusion rule)."""
