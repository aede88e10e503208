"""Notes and warnings as small records: a code, a severity and the text for the user.

Code that decides something from a note (is it a warning? is it the run-wide caution?)
reads its ``code`` or ``severity``, never its wording, so the wording can change freely.

A :class:`Note` is also a ``str`` (its text): everything that prints, joins or stores notes
as text keeps working unchanged, and notes that are still plain strings mix with records in
one list (their code is ``""``, their severity ``"info"``).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

__all__ = [
    "CAUTION",
    "FIELD_CHECK",
    "INFO",
    "SEVERITIES",
    "WARNING",
    "Note",
    "code_of",
    "is_warning",
    "severity_of",
]

#: Severities, least to most pressing for the user's decisions.
INFO, WARNING, CAUTION = "info", "warning", "caution"
SEVERITIES = (INFO, WARNING, CAUTION)

#: The caution that automated counts need field checks: said once per run, not per raster.
FIELD_CHECK = "field-check"


class Note(str):
    """A note for the user: its text (the ``str`` value), a ``code`` and a ``severity``.

    Parameters
    ----------
    text : str
        The sentence shown to the user.
    code : str
        A short stable name (``"weak-separation"``, ``"field-check"``...) that code tests
        instead of the wording; ``""`` for notes nothing decides on.
    severity : {'info', 'warning', 'caution'}
        ``warning``: it limits a result; ``caution``: it bears on decisions made from the
        results (field checks, local rules); ``info``: a choice or conversion made.

    Examples
    --------
    >>> n = Note("detection of crowns under 3 pixels is unreliable", "small-crowns", "warning")
    >>> n.code, n.severity, is_warning(n), str(n)[:9]
    ('small-crowns', 'warning', True, 'detection')
    >>> is_warning("a plain string note")
    False
    >>> Note.from_value(n.to_dict()) == n and Note.from_value(n.to_dict()).code
    'small-crowns'
    """

    code: str
    severity: str

    def __new__(cls, text: str, code: str = "", severity: str = INFO) -> Note:
        if severity not in SEVERITIES:
            raise ValueError(f"severity {severity!r} is not one of {', '.join(SEVERITIES)}")
        self = super().__new__(cls, text)
        self.code = str(code)
        self.severity = severity
        return self

    @property
    def text(self) -> str:
        """The sentence, as a plain ``str``."""
        return str.__str__(self)

    def __reduce__(self):  # pickles (process pools, Dask) keep the code and severity
        return (Note, (self.text, self.code, self.severity))

    def __repr__(self) -> str:
        return f"Note({self.text!r}, code={self.code!r}, severity={self.severity!r})"

    def to_dict(self) -> dict[str, str]:
        """``{"code", "severity", "text"}``, for JSON."""
        return {"code": self.code, "severity": self.severity, "text": self.text}

    @classmethod
    def from_value(cls, value: Any) -> Note:
        """A note from a record (:meth:`to_dict`), a Note or a plain string."""
        if isinstance(value, Note):
            return value
        if isinstance(value, Mapping):
            sev = value.get("severity", INFO)
            return cls(
                str(value.get("text", "")),
                str(value.get("code", "")),
                sev if sev in SEVERITIES else INFO,
            )
        return cls(str(value))

    @classmethod
    def many(cls, values: Iterable[Any]) -> list[Note]:
        """:meth:`from_value` of each."""
        return [cls.from_value(v) for v in values]


def code_of(note: Any) -> str:
    """The code of a note (``""`` for a plain string).

    Examples
    --------
    >>> code_of(Note("x", FIELD_CHECK, CAUTION)), code_of("x")
    ('field-check', '')
    """
    return getattr(note, "code", "")


def severity_of(note: Any) -> str:
    """The severity of a note (``"info"`` for a plain string).

    Examples
    --------
    >>> severity_of(Note("x", "", WARNING)), severity_of("x")
    ('warning', 'info')
    """
    return getattr(note, "severity", INFO)


def is_warning(note: Any) -> bool:
    """True for a note of severity ``warning``.

    Examples
    --------
    >>> is_warning(Note("weak separation", "weak-separation", WARNING))
    True
    """
    return severity_of(note) == WARNING
