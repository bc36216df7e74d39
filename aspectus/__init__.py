"""aspectus: eye-movement features from recorded webcam clips, computed offline.

The library is Qt-free and its subpackages follow the data flow:

* :mod:`aspectus.webcam` - clip -> gaze samples (decoding, face and iris
  landmarks, head pose, head-compensated gaze);
* :mod:`aspectus.events` - samples -> events -> features (clean-up,
  fixation detectors, features per clip, window and task segment);
* :mod:`aspectus.reference` - lab tracker files -> the same samples table;
* :mod:`aspectus.validation` - webcam against reference: alignment,
  agreement statistics, event agreement, reports;
* :mod:`aspectus.studies` - many clips: batch runs, engines, the app's study
  file;
* :mod:`aspectus.privacy` - face blurring and purging per-frame data;
* :mod:`aspectus.synth` - the test-clip renderer and simulated lab
  recordings (measures nothing);
* :mod:`aspectus.cli` - the ``aspectus`` command.

Shared by all: :mod:`aspectus.schema` (the one table schema, coordinate frame
and units), :mod:`aspectus.errors`, :mod:`aspectus.progress` (progress and
cancellation). The most used functions are importable from here.
"""
__version__ = "0.1.0"
from aspectus._lazy import attach as _attach

__getattr__, __dir__, _names = _attach(__name__, {
    "process_clip": "aspectus.webcam.pipeline",
    "reanalyse": "aspectus.webcam.pipeline",
    "load_samples": "aspectus.webcam.pipeline",
    "ProcessParams": "aspectus.webcam.pipeline",
    "run_analysis": "aspectus.events.analysis",
    "AnalysisParams": "aspectus.events.analysis",
    "analyse_table": "aspectus.events.analysis",
    "validate_pair": "aspectus.validation.pair",
    "ValidateParams": "aspectus.validation.pair",
    "validate_study": "aspectus.validation.study",
    "run_batch": "aspectus.studies.batch",
    "export_bids": "aspectus.studies.bids_export",
    "read_reference": "aspectus.reference",
    "TableMapping": "aspectus.reference.table",
    "render_clip": "aspectus.synth.render",
    "synth_trajectory": "aspectus.synth.trajectory",
})
__all__ = ["__version__", *_names]
