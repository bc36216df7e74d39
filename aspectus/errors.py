"""Errors a user can act on.

Every error raised for bad input is a :class:`AspectusInputError` (or a
subclass) that names the file, and where it applies the frame or row, states
what was expected and what to do. The CLI prints ``str(err)`` as one line and
never a traceback for these.
"""
from __future__ import annotations

from pathlib import Path


class AspectusError(Exception):
    """Base class of all errors aspectus raises on purpose."""


class AspectusInputError(AspectusError, ValueError):
    """Bad input: a file, a table, a parameter.

    Parameters
    ----------
    problem : str
        What is wrong, in plain words.
    path : path-like, optional
        The file concerned.
    where : str, optional
        Position inside the file, e.g. ``"frame 120"`` or ``"row 7"``.
    hint : str, optional
        What the user can do about it.
    """

    def __init__(self, problem: str, path=None, where: str | None = None, hint: str | None = None):
        self.problem = problem
        self.path = Path(path) if path is not None else None
        self.where = where
        self.hint = hint
        super().__init__(self._compose())

    def _compose(self) -> str:
        head = ""
        if self.path is not None:
            head = f"{self.path}"
            if self.where:
                head += f" ({self.where})"
            head += ": "
        elif self.where:
            head = f"{self.where}: "
        msg = head + self.problem
        if self.hint:
            msg += f" - {self.hint}"
        return msg


class VideoError(AspectusInputError):
    """A clip cannot be opened or decoded."""


class NoFaceError(AspectusInputError):
    """No face was found in (enough of) a clip."""


class ReferenceFormatError(AspectusInputError):
    """A reference tracker file does not match what it claims to be."""


class AspectusWarning(UserWarning):
    """Base class of the warnings aspectus gives: a result is computed but needs care (NaN, few data)."""


class Cancelled(AspectusError):
    """Raised inside long work when the user's cancel flag is set."""


class ParameterError(AspectusInputError):
    """A parameter is out of its allowed range."""
