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
    "JoinedNotes",
    "Note",
    "code_of",
    "codes_in",
    "is_warning",
    "notes_in",
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


class JoinedNotes(str):
    """Notes joined into one table cell: the text is the notes' texts joined by ``"; "``,
    and :attr:`notes` keeps the records.

    Tables (CSV, JSON, the report) show the cell as the text it always was; code that decides
    something from a cell reads its codes (:func:`codes_in`).

    Parameters
    ----------
    notes : iterable of Note or str
        The notes, in the order they are said.

    Examples
    --------
    >>> cell = JoinedNotes([Note("few plants", "few-plants", WARNING), "a plain remark"])
    >>> str(cell), cell.codes
    ('few plants; a plain remark', ('few-plants', ''))
    >>> JoinedNotes([]) == ""
    True
    """

    notes: tuple[Note, ...]

    def __new__(cls, notes: Iterable[Any] = ()) -> JoinedNotes:
        records = tuple(Note.from_value(n) for n in notes)
        self = super().__new__(cls, "; ".join(n.text for n in records))
        self.notes = records
        return self

    @property
    def codes(self) -> tuple[str, ...]:
        """The notes' codes, in order."""
        return tuple(n.code for n in self.notes)

    def __reduce__(self):  # pickles (process pools, Dask) keep the records
        return (JoinedNotes, (self.notes,))

    def __repr__(self) -> str:
        return f"JoinedNotes({list(self.notes)!r})"


def notes_in(value: Any) -> list[Note]:
    """The notes in a table cell or list: a :class:`JoinedNotes` cell's records, a list's
    notes, or the parts of a plain ``"; "``-joined text (without codes).

    Examples
    --------
    >>> [n.code for n in notes_in(JoinedNotes([Note("x", "few-plants", WARNING)]))]
    ['few-plants']
    >>> notes_in("first; second")
    [Note('first', code='', severity='info'), Note('second', code='', severity='info')]
    >>> notes_in(None), notes_in("")
    ([], [])
    """
    if isinstance(value, JoinedNotes):
        return list(value.notes)
    if value is None:
        return []
    if isinstance(value, str):
        return [Note(t) for t in value.split("; ") if t]
    return Note.many(value)


def codes_in(value: Any) -> set[str]:
    """The codes of the notes in a table cell or list (see :func:`notes_in`).

    Examples
    --------
    >>> sorted(codes_in([Note("x", "a"), Note("y", "b"), "plain"]))
    ['', 'a', 'b']
    """
    return {n.code for n in notes_in(value)}


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
