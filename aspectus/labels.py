"""Participant, session, task and run labels read from file and folder names: the one set of rules.

Three sources, in the order a caller usually tries them:

* :func:`pattern_labels` - named groups of a user's regular expression
  (``--labels '(?P<participant>p\\d+)_(?P<session>s\\d+)'``);
* :func:`bids_labels` - BIDS entities ``sub-``, ``ses-``, ``task-``, ``run-``
  in a relative path (the file name wins over its folders, a disagreement
  is an error);
* :func:`guess_labels` - the plain-name fallback: a ``p<digits>`` part is the
  participant and an ``s<digits>`` part the session; without one, the name
  less its session part is the participant.

:func:`labels_from_path` combines the first two as clip discovery uses them.
"""
from __future__ import annotations

import re

from aspectus.errors import AspectusInputError

__all__ = ["LABEL_KEYS", "bids_labels", "pattern_labels", "labels_from_path", "guess_labels", "safe_label"]

#: the labels aspectus knows, in the order they are shown
LABEL_KEYS = ("participant", "session", "task", "run")
_ENTITY_KEY = {"sub": "participant", "ses": "session", "task": "task", "run": "run"}
_ENTITY = re.compile(r"(?:^|[_/\\])(sub|ses|task|run)-([A-Za-z0-9]+)(?=[_./\\]|$)")
_SAFE = re.compile(r"[^A-Za-z0-9_.-]+")


def bids_labels(rel: str, *, source=None) -> dict:
    """``participant``/``session``/``task``/``run`` from BIDS entities in a relative path.

    Entities of the file name take precedence over those of its folders; a
    folder that disagrees with the name (``sub-p01/sub-p02_...``) is an
    :class:`~aspectus.errors.AspectusInputError` naming ``source``.

    Examples
    --------
    >>> bids_labels("sub-p01/ses-s02/sub-p01_ses-s02_task-reading_physio.tsv.gz")
    {'participant': 'p01', 'session': 's02', 'task': 'reading'}
    """
    rel = str(rel).replace("\\", "/")
    parts = rel.split("/")
    out: dict = {}
    for part in parts[:-1]:
        for ent, val in _ENTITY.findall(part):
            out[_ENTITY_KEY[ent]] = val
    for ent, val in _ENTITY.findall(parts[-1]):
        key = _ENTITY_KEY[ent]
        if key in out and out[key] != val:
            raise AspectusInputError(f"its folder says {ent}-{out[key]} but its name says {ent}-{val}",
                                     path=source or rel, hint="rename the file or its folder so they agree, or "
                                     "pair the files in a manifest (--manifest)")
        out[key] = val
    return out


def compile_label_pattern(pattern: str) -> re.Pattern:
    """``--labels`` as a compiled regular expression; a one-line ParameterError when it is not one."""
    from aspectus.errors import ParameterError

    try:
        return re.compile(pattern)
    except re.error as exc:
        raise ParameterError(f"--labels {pattern!r} is not a regular expression ({exc})",
                             hint=r"e.g. --labels '(?P<participant>p\d+)_(?P<session>s\d+)'") from None


def pattern_labels(text: str, pattern: str | None) -> dict:
    """Named groups of ``pattern`` found in ``text`` (``/`` separators); groups that did not match are absent."""
    if not pattern:
        return {}
    m = compile_label_pattern(pattern).search(str(text).replace("\\", "/"))
    return {k: v for k, v in (m.groupdict() if m else {}).items() if v is not None}


def labels_from_path(rel: str, *, pattern: str | None = None) -> dict:
    """Labels encoded in a clip's path relative to the searched folder.

    Parameters
    ----------
    rel : str
        Path of the clip relative to the searched folder.
    pattern : str, optional
        Regular expression with named groups (e.g.
        ``r"(?P<participant>p\\d+)_(?P<session>s\\d+)"``), searched in the
        relative path with ``/`` separators. Without it, BIDS entities give
        the labels (:func:`bids_labels`; a folder/name disagreement gives none).

    Returns
    -------
    dict
        ``participant``/``session`` and any other named groups or entities
        found; missing ones are absent.

    Examples
    --------
    >>> labels_from_path("site-north/p03_s02_story.mp4", pattern=r"(?P<participant>p\\d+)_(?P<session>s\\d+)")
    {'participant': 'p03', 'session': 's02'}
    >>> labels_from_path("sub-p07/ses-s1/clip.mp4")
    {'participant': 'p07', 'session': 's1'}
    """
    if pattern:
        return pattern_labels(rel, pattern)
    try:
        return bids_labels(rel)
    except AspectusInputError:
        return {}


def safe_label(v) -> str:
    """A label as output folder names need it: letters, digits and ``_ . -`` only."""
    return _SAFE.sub("-", str(v)).strip("-_.")


def guess_labels(name: str) -> dict:
    """participant/session guessed from a file name (without folders or suffix).

    BIDS ``sub-``/``ses-`` entities if present; else a ``p<digits>`` part is
    the participant and an ``s<digits>`` part the session; else the name
    without its session part is the participant (``anna_s1`` and ``anna_s2``
    are one participant, two sessions). Labels are cleaned with
    :func:`safe_label` (an empty result is left empty for the caller).

    Examples
    --------
    >>> guess_labels("linden_brook_p01_s01")
    {'session': 's01', 'participant': 'p01'}
    >>> guess_labels("anna_s2")
    {'session': 's2', 'participant': 'anna'}
    """
    try:
        labels = bids_labels(name)
    except AspectusInputError:
        labels = {}
    ses_match = None
    if "session" not in labels:
        ses_match = re.search(r"(?:^|[_-])(s\d+)(?=$|[_-])", name)
        if ses_match:
            labels["session"] = ses_match.group(1)
    if "participant" not in labels:
        m = re.search(r"(?:^|[_-])(p\d+)(?=$|[_-])", name)
        if m:
            labels["participant"] = m.group(1)
        else:
            rest = name if ses_match is None else name[:ses_match.start()] + name[ses_match.end():]
            labels["participant"] = rest
    return {k: safe_label(v) for k, v in labels.items()}
