"""Webcam against a lab tracker: alignment, agreement statistics, event agreement, pair and study runs, reports."""
from aspectus._lazy import attach as _attach

__getattr__, __dir__, __all__ = _attach(__name__, {
    "validate_pair": "aspectus.validation.pair",
    "ValidateParams": "aspectus.validation.pair",
    "ValidationResult": "aspectus.validation.pair",
    "write_validation": "aspectus.validation.pair",
    "agreement_table": "aspectus.validation.pair",
    "validate_study": "aspectus.validation.study",
    "StudyResult": "aspectus.validation.study",
    "read_validation_manifest": "aspectus.validation.manifest",
    "StudyRow": "aspectus.validation.manifest",
    "pair_folders": "aspectus.validation.pairing",
    "repeated_agreement_table": "aspectus.validation.repeated",
    "study_summary": "aspectus.validation.summary",
    "feature_agreement": "aspectus.validation.agreement",
    "estimate_offset": "aspectus.validation.align",
    "label_kappa": "aspectus.validation.event_agreement",
    "match_events": "aspectus.validation.event_agreement",
})
