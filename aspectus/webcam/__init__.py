"""Clip -> gaze samples: decoding, face and iris landmarks, head pose, eye anchors, limbus fits, gaze.

:func:`process_clip` runs the whole webcam side for one clip and writes its
outputs; :func:`extract_samples` only measures; :func:`load_samples` reads a
clip's cached samples back.
"""
from aspectus._lazy import attach as _attach

__getattr__, __dir__, __all__ = _attach(__name__, {
    "process_clip": "aspectus.webcam.pipeline",
    "reanalyse": "aspectus.webcam.pipeline",
    "extract_samples": "aspectus.webcam.pipeline",
    "load_samples": "aspectus.webcam.pipeline",
    "ProcessParams": "aspectus.webcam.pipeline",
    "ClipResult": "aspectus.webcam.pipeline",
    "clip_output_dir": "aspectus.webcam.pipeline",
    "CacheError": "aspectus.webcam.pipeline",
    "GazeParams": "aspectus.webcam.gaze",
    "VIDEO_EXTENSIONS": "aspectus.webcam.video",
    "is_video_file": "aspectus.webcam.video",
    "probe": "aspectus.webcam.video",
    "iter_frames": "aspectus.webcam.video",
})
