"""Modules that can be called: ``ecoscan.scales(xy, plot)`` while ``ecoscan/scales.py`` exists.

Four functions of the public API share their names with modules (``scales``, ``compare``,
``change``, ``detect``). Python binds a sub-module to its package's attribute when it is first
imported, which would hide the function of the same name. Until those modules move into
``ecoscan/analysis/`` (issue 14), each of them calls :func:`callable_module` on itself: the
module stays a normal module (``from ecoscan.scales import ScalesSettings`` works) and calling
it runs the API function of the same name in :mod:`ecoscan.api`, with that function's
signature and the module's docstring followed by the function's.
"""

from __future__ import annotations

import inspect
import sys
import types
from typing import Any

__all__ = ["callable_module"]


def _api_function(name: str):
    from ecoscan import api

    return getattr(api, name)


class _CallableModule(types.ModuleType):
    """A module whose call runs ``ecoscan.api.<its short name>``."""

    def __call__(self, *args: Any, **kwargs: Any) -> Any:
        return _api_function(self.__name__.rsplit(".", 1)[1])(*args, **kwargs)

    @property
    def __signature__(self) -> inspect.Signature:
        return inspect.signature(_api_function(self.__name__.rsplit(".", 1)[1]))


def callable_module(name: str) -> None:
    """Make the module ``name`` callable as ``ecoscan.api.<short name>``.

    Parameters
    ----------
    name : str
        A module's ``__name__``, e.g. ``"ecoscan.scales"``.

    Examples
    --------
    >>> import ecoscan
    >>> import ecoscan.change as change_module   # the module...
    >>> callable(change_module), change_module.CHANGE_COLUMNS[0]   # ...also the function
    (True, 'plot_id')
    """
    sys.modules[name].__class__ = _CallableModule
