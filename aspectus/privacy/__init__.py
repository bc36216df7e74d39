"""Privacy: faces blurred in every picture aspectus shows or writes, and purging per-frame data."""
from aspectus._lazy import attach as _attach

__getattr__, __dir__, __all__ = _attach(__name__, {
    "blur_faces": "aspectus.privacy.blur",
    "find_face_boxes": "aspectus.privacy.blur",
    "save_preview_image": "aspectus.privacy.blur",
    "plan_purge": "aspectus.privacy.blur",
    "purge": "aspectus.privacy.blur",
})
