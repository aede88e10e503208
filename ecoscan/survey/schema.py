"""Type and range of every value in a survey file, checked before any work starts.

Each key is checked as the user wrote it (``diameter``, ``[change] tolerance_m``), so a
message names the key and section of the file, never an internal field name. The checks are
plausibility bounds: they refuse values that cannot be meant (a negative tolerance, a
simulation count beyond :data:`ecoscan.safety.MAX_SIMULATIONS`), not values that are merely
unusual.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from typing import Any

from ecoscan.safety import MAX_SIMULATIONS

__all__ = ["check_table"]

Check = Callable[[Any], str | None]


def _number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _whole(low: int, high: int | None = None) -> Check:
    def check(v: Any) -> str | None:
        if not isinstance(v, int) or isinstance(v, bool):
            return f"should be a whole number, not {_shown(v)}"
        if v < low or (high is not None and v > high):
            top = f" and at most {high}" if high is not None else ""
            return f"should be at least {low}{top} (got {v})"
        return None

    return check


def _positive(v: Any) -> str | None:
    if not _number(v):
        return f"should be a number of metres, not {_shown(v)}"
    if v <= 0:
        return f"should be more than 0 (got {v})"
    return None


def _not_negative(v: Any) -> str | None:
    if not _number(v):
        return f"should be a number, not {_shown(v)}"
    if v < 0:
        return f"should be 0 or more (got {v})"
    return None


def _number_any(v: Any) -> str | None:
    return None if _number(v) else f"should be a number, not {_shown(v)}"


def _alpha(v: Any) -> str | None:
    if not _number(v):
        return f"should be a number between 0 and 1, not {_shown(v)}"
    if not 0 < v < 1:
        return f"should be between 0 and 1, e.g. 0.05 (got {v})"
    return None


def _text(v: Any) -> str | None:
    return None if isinstance(v, str) else f"should be text in quotes, not {_shown(v)}"


def _flag(v: Any) -> str | None:
    return None if isinstance(v, bool) else f"should be true or false, not {_shown(v)}"


def _text_or_list(v: Any) -> str | None:
    if isinstance(v, str):
        return None
    if isinstance(v, list) and all(isinstance(x, (str, int)) for x in v):
        return None
    return f'should be text such as "a,b" or a list, not {_shown(v)}'


def _raster_table(v: Any) -> str | None:
    if isinstance(v, dict) and v and all(isinstance(x, str) for x in v.values()):
        return None
    return (
        "should be a table of covariate names and raster files, e.g. "
        f'{{ elevation = "dem.tif" }}, not {_shown(v)}'
    )


def _diameter(v: Any) -> str | None:
    if isinstance(v, str):
        parts = [p.strip() for p in v.split(":")]
        try:
            vals = [float(p) for p in parts if p]
        except ValueError:
            vals = []
        if 1 <= len(vals) <= 2 and all(math.isfinite(x) and x > 0 for x in vals):
            return None if vals[0] <= vals[-1] else "the smallest diameter comes first"
        return f'should be a range of metres such as "0.5:3", not "{v}"'
    if isinstance(v, list) and len(v) == 2 and all(_number(x) for x in v):
        if min(v) <= 0:
            return "diameters should be more than 0 metres"
        return None if v[0] <= v[1] else "the smallest diameter comes first, e.g. [0.5, 3]"
    return f'should be a range of metres such as [0.5, 3] or "0.5:3", not {_shown(v)}'


def _shown(v: Any) -> str:
    if isinstance(v, str):
        return f'"{v}"' if len(v) < 40 else "text"
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (list, tuple)):
        return "a list"
    if isinstance(v, dict):
        return "a table"
    if isinstance(v, (int, float)):
        return str(v)
    return type(v).__name__


_SIMULATIONS = _whole(0, MAX_SIMULATIONS)

#: Checks per section; keys not listed here are left to the settings classes.
RULES: dict[str, dict[str, Check]] = {
    "survey": {
        "name": _text,
        "plot_id_field": _text,
        "plots_layer": _text,
    },
    "statistics": {
        "simulations": _SIMULATIONS,
        "seed": _whole(0),
        "alpha": _alpha,
        "direction": _text,
        "guard_m": _positive,
        "quadrat_m": _positive,
        "min_points": _whole(1),
    },
    "scales": {
        "enabled": _flag,
        "simulations": _SIMULATIONS,
        "seed": _whole(0),
        "alpha": _alpha,
        "max_distance_m": _positive,
        "steps": _whole(2, 10_000),
        "functions": _text_or_list,
        "global_test": _text,
        "test_function": _text,
        "min_points": _whole(1),
        "kind_field": _text,
        "kinds": _text_or_list,
        "covariates": _raster_table,
        "kernel_intensity": _flag,
        "mark": _text,
        "habitat_simulations": _SIMULATIONS,
    },
    "change": {"enabled": _flag, "tolerance_m": _positive, "estimate_shift": _flag},
    "compare": {"enabled": _flag, "by": _text, "permutations": _SIMULATIONS},
    "raster.detect": {
        "method": _text,
        "bands": _text_or_list,
        "index": _text,
        "diameter": _diameter,
        "diameter_min_m": _positive,
        "diameter_max_m": _positive,
        "threshold": _number_any,
        "min_contrast": _not_negative,
        "scales_per_octave": _whole(1, 20),
        "min_height_m": _not_negative,
        "crown_rule": _text,
        "smooth_m": _not_negative,
        "crowns": _flag,
        "classes": _text_or_list,
        "min_area_m2": _not_negative,
        "split_touching": _flag,
        "tile_size_px": _whole(64, 16_384),
        "pixel_size_m": _positive,
    },
}


def check_table(section: str, table: Mapping[str, Any]) -> list[tuple[str, str]]:
    """Check the values of one table of a survey file.

    Parameters
    ----------
    section : str
        ``survey``, ``statistics``, ``scales``, ``change``, ``compare`` or ``raster.detect``.
    table : mapping
        The table as read from TOML.

    Returns
    -------
    list of (key, message)
        One entry per bad value, the message starting with the key as written.

    Examples
    --------
    >>> check_table("change", {"tolerance_m": "abc"})
    [('tolerance_m', '[change] tolerance_m should be a number of metres, not "abc"')]
    >>> check_table("raster.detect", {"diameter": 5})[0][1][:30]
    '[raster.detect] diameter shoul'
    """
    rules = RULES.get(section, {})
    out = []
    for key, value in table.items():
        rule = rules.get(key)
        if rule is None:
            continue
        msg = rule(value)
        if msg:
            out.append((key, f"[{section}] {key} {msg}"))
    return out
