"""One base for every settings record: built from a mapping, checked, turned back into one.

Each command's settings are a frozen dataclass deriving from :class:`Settings`. The base
gives them the same :meth:`Settings.from_mapping` (unknown keys refused with the list of
known ones, optional type checks, per-class normalisation of text forms such as
``"0.5:3"``) and :meth:`Settings.to_dict`. Values themselves are checked by each class's
``__post_init__``, so a record built in Python and one read from a survey file obey the same
rules.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from typing import Any, ClassVar

import numpy as np

from ecoscan.errors import InputError

__all__ = ["Settings", "whole_number"]


def _type_name(t: type | tuple[type, ...]) -> str:
    if isinstance(t, tuple):
        return " or ".join(x.__name__ for x in t)
    return t.__name__


def whole_number(value: Any) -> bool:
    """True for an int (or numpy integer) that is not a bool.

    Examples
    --------
    >>> whole_number(3), whole_number(3.0), whole_number(True)
    (True, False, False)
    """
    return isinstance(value, (int, np.integer)) and not isinstance(value, bool)


class Settings:
    """Base of the settings dataclasses (dispersion, scales, detection, change, compare).

    Subclasses are frozen dataclasses and may set:

    ``SECTION``
        The name used in messages ("unknown dispersion setting(s) ...").
    ``TYPES``
        Key -> accepted type(s), checked by :meth:`from_mapping` (bools are never numbers);
        keys missing here are left to the class's own checks.
    ``OPTIONAL``
        Keys whose value may be None in a mapping.

    and override :meth:`_normalise` to turn text forms into values.

    Examples
    --------
    >>> from dataclasses import dataclass
    >>> @dataclass(frozen=True)
    ... class Demo(Settings):
    ...     SECTION = "demo"
    ...     TYPES = {"steps": int}
    ...     steps: int = 10
    >>> Demo.from_mapping({"steps": 3})
    Demo(steps=3)
    >>> Demo.from_mapping({"step": 3})
    Traceback (most recent call last):
    ...
    ecoscan.errors.InputError: unknown demo setting(s) 'step'; known: steps
    """

    SECTION: ClassVar[str] = "settings"
    TYPES: ClassVar[dict[str, type | tuple[type, ...]]] = {}
    OPTIONAL: ClassVar[tuple[str, ...]] = ()

    @classmethod
    def field_names(cls) -> list[str]:
        """The setting names, in declaration order."""
        return [f.name for f in dataclasses.fields(cls)]  # type: ignore[arg-type]

    @classmethod
    def _normalise(cls, d: dict[str, Any]) -> dict[str, Any]:
        """Turn text forms into values (override); called after the unknown-key check."""
        return d

    @classmethod
    def from_mapping(cls, d: Mapping[str, Any]):
        """Settings from a mapping (e.g. a TOML table); unknown keys are refused.

        Parameters
        ----------
        d : mapping
            Keys among :meth:`field_names` (and any extra forms :meth:`_normalise` accepts);
            missing keys take their defaults.

        Returns
        -------
        Settings
            An instance of the class it is called on.

        Raises
        ------
        InputError
            Unknown key, wrong type or impossible value.
        """
        kw = dict(d)
        known = cls.field_names()
        kw = cls._normalise(kw)
        unknown = [k for k in kw if k not in known]
        if unknown:
            raise InputError(
                f"unknown {cls.SECTION} setting(s) {', '.join(map(repr, unknown))}; "
                f"known: {', '.join(known)}"
            )
        tuples = {
            f.name
            for f in dataclasses.fields(cls)  # type: ignore[arg-type]
            if "tuple" in str(f.type)
        }
        kw = {k: tuple(v) if k in tuples and isinstance(v, list) else v for k, v in kw.items()}
        for k, v in kw.items():
            t = cls.TYPES.get(k)
            if t is None or (v is None and k in cls.OPTIONAL):
                continue
            number = t in (int, float) or (isinstance(t, tuple) and (int in t or float in t))
            if (isinstance(v, bool) and number) or not isinstance(v, t):
                raise InputError(f"{cls.SECTION} setting {k!r} must be {_type_name(t)} (got {v!r})")
        try:
            return cls(**kw)
        except TypeError as exc:
            raise InputError(f"{cls.SECTION} settings: {exc}") from None

    def to_dict(self) -> dict[str, Any]:
        """The settings as plain JSON-ready values (tuples become lists).

        Round-trips through :meth:`from_mapping`, which turns lists back into tuples for
        tuple-typed settings.
        """
        out: dict[str, Any] = {}
        for f in dataclasses.fields(self):  # type: ignore[arg-type]
            v = getattr(self, f.name)
            out[f.name] = list(v) if isinstance(v, tuple) else v
        return out
