"""The survey file: a TOML description of a whole survey.

Example::

    [survey]
    name = "Spring and autumn flights"
    plots = "plots.gpkg"          # paths are relative to this file
    output = "results"

    [statistics]                  # dispersion settings (see ecoscan.analysis.dispersion.compute)
    simulations = 999
    seed = 7

    [[raster]]
    path = "spring_rgb.tif"
    site = "North slope"
    date = "2026-04-20"
    [raster.detect]               # detector settings (see ecoscan.detect)
    method = "imagery"
    diameter_m = [0.6, 2.5]

Every problem in the file (unknown keys, wrong types, missing files) is collected and
reported at once, each with the line it comes from, before any work starts.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import difflib
import re
import tomllib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ecoscan.errors import InputError
from ecoscan.vocabulary import RENAMED_SURVEY_KEYS

__all__ = ["RasterEntry", "SurveyConfig", "load_survey", "locate_keys"]

_SECTIONS = {
    "survey": {"name", "plots", "output", "plot_id_field", "plots_layer", "workers"},
    "statistics": None,  # keys of ecoscan.analysis.dispersion.compute.DispersionSettings
    "scales": None,  # "enabled" plus keys of ecoscan.analysis.scales.compute.ScalesSettings
    "change": {"enabled", "tolerance_m", "estimate_shift"},
    "compare": {"enabled", "by", "permutations"},
    "raster": {"path", "name", "site", "date", "detect"},
}


def _settings_keys(module: str, cls: str) -> set[str] | None:
    """Field names of a settings dataclass, or None when that part of ecoscan is absent."""
    try:
        mod = __import__(module, fromlist=[cls])
        klass = getattr(mod, cls)
    except (ImportError, AttributeError):
        return None
    return {f.name for f in dataclasses.fields(klass)}


@dataclass(frozen=True)
class RasterEntry:
    """One raster of the survey.

    Attributes
    ----------
    path : pathlib.Path
        The raster file (absolute).
    name : str
        Unique short label (default: the file name without extension).
    site : str
        Site name.
    date : str
        Survey date, ISO 8601 (YYYY-MM-DD), or '' when not given; ISO text sorts in
        time order.
    detect : dict
        Detector settings for :class:`ecoscan.detect.DetectionSettings`.
    line : int
        Line of the ``[[raster]]`` header in the survey file.
    """

    path: Path
    name: str
    site: str
    date: str
    detect: dict
    line: int


@dataclass(frozen=True)
class SurveyConfig:
    """A parsed and checked survey file."""

    path: Path
    name: str
    plots: Path
    output: Path
    rasters: tuple[RasterEntry, ...]
    plot_id_field: str | None = None
    plots_layer: str | None = None
    workers: int = 1
    statistics: dict = field(default_factory=dict)
    scales: dict = field(default_factory=dict)
    change: dict = field(default_factory=dict)
    compare: dict = field(default_factory=dict)

    @property
    def scales_enabled(self) -> bool:
        """Whether the multi-scale analysis is switched on."""
        return bool(self.scales.get("enabled", False))


_HEADER = re.compile(r"^\s*(\[\[?)\s*([^\]]+?)\s*\]\]?\s*(#.*)?$")
_KEY = re.compile(r"^\s*([A-Za-z0-9_\-\.\"' ]+?)\s*=")


def locate_keys(text: str) -> dict[tuple, int]:
    """Map each table and key of a TOML text to its line number (1-based).

    Keys of array tables carry their index: ``("raster", 0, "detect", "method")``. Tables
    themselves map under their own path. Only plain and dotted keys are tracked, which is
    what survey files use.
    """
    where: dict[tuple, int] = {}
    counts: dict[str, int] = {}
    current: tuple = ()
    for no, line in enumerate(text.splitlines(), start=1):
        m = _HEADER.match(line)
        if m and not _KEY.match(line):
            parts = [p.strip().strip("\"'") for p in m.group(2).split(".")]
            if m.group(1) == "[[":
                name = ".".join(parts)
                counts[name] = counts.get(name, 0) + 1
                current = (*parts, counts[name] - 1)
            elif parts[0] in counts:
                current = (parts[0], counts[parts[0]] - 1, *parts[1:])
            else:
                current = tuple(parts)
            where.setdefault(current, no)
            continue
        k = _KEY.match(line)
        if k:
            key = tuple(p.strip().strip("\"'") for p in k.group(1).split("."))
            where.setdefault((*current, *key), no)
    return where


class _Problems:
    def __init__(self, source: Path, lines: dict[tuple, int]):
        self.source = source
        self.lines = lines
        self.items: list[tuple[int, str]] = []
        self.paths: list[tuple] = []

    def has(self, where: tuple) -> bool:
        """Whether a problem was already found in ``where`` or below it."""
        return any(p[: len(where)] == where for p in self.paths)

    def add(self, path: tuple, message: str) -> None:
        self.paths.append(path)
        line = self.lines.get(path)
        while line is None and path:
            path = path[:-1]
            line = self.lines.get(path)
        self.items.append((line or 0, message))

    def raise_if_any(self) -> None:
        if not self.items:
            return
        self.items.sort(key=lambda t: t[0])
        body = "\n".join(f"  line {ln}: {msg}" if ln else f"  {msg}" for ln, msg in self.items)
        n = len(self.items)
        raise InputError(
            f"{self.source.name} has {n} problem{'s' if n > 1 else ''}; fix "
            f"{'them' if n > 1 else 'it'} and run again:\n{body}"
        )


def _unknown(
    problems: _Problems, where: tuple, table: Mapping, allowed: Iterable[str], section: str
) -> None:
    allowed = set(allowed)
    for key in table:
        if key in RENAMED_SURVEY_KEYS and RENAMED_SURVEY_KEYS[key] in allowed:
            new = RENAMED_SURVEY_KEYS[key]
            problems.add((*where, key), f"'{key}' in [{section}] was renamed '{new}'; use '{new}'")
        elif key not in allowed:
            near = difflib.get_close_matches(key, sorted(allowed), n=1)
            hint = f" (did you mean '{near[0]}'?)" if near else ""
            problems.add((*where, key), f"unknown key '{key}' in [{section}]{hint}")


_ISO_DATE = re.compile(r"\d{4}-\d{2}-\d{2}")


def _as_date(problems: _Problems, where: tuple, value: Any) -> str:
    """A survey date as ISO 8601 text (YYYY-MM-DD), so that dates sort in time order.

    Forms such as 03/10/2026 are refused: day-first and month-first readings differ, and
    text sorted as text would put 03/10 (October) before 20/04 (April).
    """
    if value is None or value == "":
        return ""
    if isinstance(value, _dt.datetime):
        return value.date().isoformat()
    if isinstance(value, _dt.date):
        return value.isoformat()
    text = str(value).strip()
    if _ISO_DATE.fullmatch(text):
        try:
            return _dt.date.fromisoformat(text).isoformat()
        except ValueError:
            problems.add(where, f"date '{text}' is not a calendar date; check day and month")
            return ""
    problems.add(
        where,
        f"date '{text}' is ambiguous or not a date; write it as YYYY-MM-DD (ISO 8601), "
        "e.g. 2026-04-20, so that surveys sort in time order",
    )
    return ""


def _as_str(problems: _Problems, where: tuple, value: Any, what: str) -> str | None:
    if value is None:
        return None
    if isinstance(value, (str, int, float)) and not isinstance(value, bool):
        return str(value)
    if hasattr(value, "isoformat"):  # TOML dates
        return value.isoformat()
    problems.add(where, f"{what} should be text, not {type(value).__name__}")
    return None


def _check_values(problems: _Problems, statistics: dict, scales: dict, rasters) -> None:
    """Build every settings object once so that bad values are reported with their line."""
    dispersion = "ecoscan.analysis.dispersion.compute"
    checks = [(("statistics",), dispersion, "DispersionSettings", statistics)]
    checks.append(
        (
            ("scales",),
            "ecoscan.analysis.scales.compute",
            "ScalesSettings",
            {k: v for k, v in scales.items() if k != "enabled"},
        )
    )
    for i, r in enumerate(rasters):
        checks.append((("raster", i, "detect"), "ecoscan.detect", "DetectionSettings", r.detect))
    for where, module, cls, values in checks:
        if problems.has(where):  # its keys were already reported in the file's words
            continue
        try:
            klass = getattr(__import__(module, fromlist=[cls]), cls)
        except (ImportError, AttributeError):
            continue
        try:
            klass.from_mapping(values)
        except (InputError, TypeError, ValueError, IndexError) as exc:
            problems.add(where, f"[{'.'.join(str(w) for w in where if isinstance(w, str))}] {exc}")


def _values(problems: _Problems, where: tuple, section: str, table: Mapping) -> None:
    """Type and range of every key of one table, each reported at the key's own line."""
    from ecoscan.survey.schema import check_table

    for key, msg in check_table(section, table):
        problems.add((*where, key), msg)


def _same_file_names(problems: _Problems, rasters: list[RasterEntry], entries: list) -> None:
    """Refuse two sites (or raster names) that would write the same file or folder."""
    from ecoscan.survey.model import slug

    for attr, what in (("site", "sites"), ("name", "raster names")):
        seen: dict[str, str] = {}
        for i, r in enumerate(rasters):
            label = getattr(r, attr)
            key = slug(label).lower()
            if key in seen and seen[key] != label:
                problems.add(
                    ("raster", i, attr),
                    f"{what} '{seen[key]}' and '{label}' would share the file name "
                    f"'{slug(label)}'; rename one so they differ in letters or digits",
                )
            seen.setdefault(key, label)


def load_survey(path: str | Path) -> SurveyConfig:
    """Read and check a survey file.

    Parameters
    ----------
    path : path-like
        The TOML survey file. Relative paths inside it are relative to its folder.

    Returns
    -------
    SurveyConfig

    Raises
    ------
    InputError
        With every problem found, each on its own line with its line number.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (d / "s.toml").write_text('[survey]\\nplots = "p.gpkg"\\n')
    >>> load_survey(d / "s.toml")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    ecoscan.errors.InputError: ...
    """
    src = Path(path)
    text, data = _read_toml(src)
    lines = locate_keys(text)
    problems = _Problems(src, lines)
    files = _Files(problems, src.resolve().parent)
    for key in data:
        if key not in _SECTIONS:
            near = difflib.get_close_matches(key, sorted(_SECTIONS), n=1)
            hint = f" (did you mean [{near[0]}]?)" if near else ""
            problems.add((key,), f"unknown section [{key}]{hint}")
    survey = data.get("survey", {})
    if not isinstance(survey, dict):
        problems.add(("survey",), "[survey] must be a table")
        survey = {}
    _unknown(problems, ("survey",), survey, _SECTIONS["survey"], "survey")
    plots = None
    if "plots" not in survey:
        problems.add(("survey",), "[survey] needs 'plots = \"FILE\"' (the plot polygons)")
    else:
        plots = files.path(("survey", "plots"), survey["plots"], "plots")
    output = files.path(("survey", "output"), survey.get("output", "results"), "output", False)
    workers = survey.get("workers", 1)
    if not isinstance(workers, int) or isinstance(workers, bool) or workers < 1:
        problems.add(("survey", "workers"), "workers must be a whole number of at least 1")
        workers = 1
    statistics, scales, change, compare = _job_sections(problems, files, data, survey)
    rasters = _raster_entries(problems, files, data, lines)
    # the settings classes check what the key checks cannot (choices, combinations)
    _check_values(problems, statistics, scales, rasters)
    problems.raise_if_any()
    return SurveyConfig(
        path=src.resolve(),
        name=str(survey.get("name", src.stem)),
        plots=plots,  # type: ignore[arg-type]
        output=output,  # type: ignore[arg-type]
        rasters=tuple(rasters),
        plot_id_field=survey.get("plot_id_field"),
        plots_layer=survey.get("plots_layer"),
        workers=workers,
        statistics=statistics,
        scales=scales,
        change=change,
        compare=compare,
    )


def _read_toml(src: Path) -> tuple[str, dict]:
    """The survey file's text and its parsed tables, or one line saying why not."""
    if not src.is_file():
        raise InputError(f"survey file {str(src)!r} does not exist; check the path")
    try:
        text = src.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(
            f"{src.name} is not UTF-8 text (byte {exc.start}); save it as UTF-8 and run again"
        ) from None
    except OSError as exc:
        raise InputError(
            f"cannot read survey file {src}: {exc.strerror or exc}; check its permissions"
        ) from None
    try:
        return text, tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{src.name} is not valid TOML: {exc}") from None


class _Files:
    """Paths in the survey file, relative to its folder, with missing files noted."""

    def __init__(self, problems: _Problems, base: Path) -> None:
        self.problems = problems
        self.base = base

    def path(self, where: tuple, value: Any, what: str, must_exist: bool = True) -> Path | None:
        s = _as_str(self.problems, where, value, what)
        if s is None:
            return None
        p = (self.base / s).resolve()
        if must_exist and not p.exists():
            self.problems.add(where, f"{what} file '{s}' does not exist (looked in {p.parent})")
        return p


def _section(
    problems: _Problems, data: dict, name: str, extra: set[str], module: str | None, cls
) -> dict:
    """One job's table, its keys checked against its settings class."""
    table = data.get(name, {})
    if not isinstance(table, dict):
        problems.add((name,), f"[{name}] must be a table")
        return {}
    allowed = set(extra)
    if module:
        keys = _settings_keys(module, cls)
        if keys is None:
            return dict(table)
        allowed |= keys
    _unknown(problems, (name,), table, allowed, name)
    return dict(table)


def _job_sections(
    problems: _Problems, files: _Files, data: dict, survey: dict
) -> tuple[dict, dict, dict, dict]:
    """The [statistics], [scales], [change] and [compare] tables, checked."""
    statistics = _section(
        problems,
        data,
        "statistics",
        set(),
        "ecoscan.analysis.dispersion.compute",
        "DispersionSettings",
    )
    scales = _section(
        problems,
        data,
        "scales",
        {"enabled"},
        "ecoscan.analysis.scales.compute",
        "ScalesSettings",
    )
    cov = scales.get("covariates")
    if isinstance(cov, dict) and all(isinstance(v, str) for v in cov.values()):
        # covariate rasters are relative to the survey file, like every other path
        resolved = {}
        for cname, value in cov.items():
            cp = files.path(("scales", "covariates", cname), value, f"covariate {cname}")
            resolved[cname] = str(cp) if cp is not None else value
        scales = {**scales, "covariates": resolved}
    change = _section(problems, data, "change", _SECTIONS["change"], None, None)
    compare = _section(problems, data, "compare", _SECTIONS["compare"], None, None)
    _values(problems, ("survey",), "survey", survey)
    for name, table in (
        ("statistics", statistics),
        ("scales", scales),
        ("change", change),
        ("compare", compare),
    ):
        _values(problems, (name,), name, table)
    if compare.get("by", "auto") not in ("auto", "site", "date", "plot"):
        problems.add(("compare", "by"), "by must be 'auto', 'site', 'date' or 'plot'")
    return statistics, scales, change, compare


def _raster_entries(
    problems: _Problems, files: _Files, data: dict, lines: dict
) -> list[RasterEntry]:
    """The [[raster]] tables, each checked, with their detector settings."""
    det_keys = _settings_keys("ecoscan.detect", "DetectionSettings")
    if det_keys is not None:
        det_keys |= {"diameter"}  # accepted as "MIN:MAX" or [MIN, MAX]
    rasters: list[RasterEntry] = []
    entries = data.get("raster", [])
    if not isinstance(entries, list) or not entries:
        problems.add(("raster",), "the survey needs at least one [[raster]] table")
        entries = []
    names: set[str] = set()
    for i, entry in enumerate(entries):
        where = ("raster", i)
        _unknown(problems, where, entry, _SECTIONS["raster"], "raster")
        if "path" not in entry:
            problems.add(where, "[[raster]] needs 'path = \"FILE\"'")
            continue
        p = files.path((*where, "path"), entry["path"], "raster")
        name = _as_str(problems, (*where, "name"), entry.get("name"), "name") or (
            Path(str(entry["path"])).stem
        )
        if name in names:
            problems.add((*where, "name"), f"two rasters are named '{name}'; give each a name")
        names.add(name)
        site = _as_str(problems, (*where, "site"), entry.get("site", "site"), "site") or "site"
        date = _as_date(problems, (*where, "date"), entry.get("date"))
        det = _raster_detect(problems, files, where, entry, det_keys)
        if p is not None:
            rasters.append(RasterEntry(p, name, site, date, dict(det), lines.get(where, 0)))
    _same_file_names(problems, rasters, entries)
    return rasters


def _raster_detect(
    problems: _Problems, files: _Files, where: tuple, entry: dict, det_keys: set[str] | None
) -> dict:
    """A raster's [raster.detect] table, checked; a calibrated detector file parsed."""
    det = entry.get("detect", {})
    if not isinstance(det, dict):
        problems.add((*where, "detect"), "detect must be a table of detector settings")
        det = {}
    if det_keys is not None:
        _unknown(problems, (*where, "detect"), det, det_keys, "raster.detect")
    _values(problems, (*where, "detect"), "raster.detect", det)
    if isinstance(det.get("detector"), str):  # ecoscan calibrate's file, beside the survey
        d = files.path((*where, "detect", "detector"), det["detector"], "detector")
        det = {**det, "detector": str(d) if d is not None else det["detector"]}
        if d is not None and d.exists():
            from ecoscan.detect.detector_file import read_detector

            try:  # refused before any work: parse, keys, model file and its hash
                read_detector(d, load_model=False)
            except InputError as exc:
                problems.add((*where, "detect", "detector"), str(exc))
    return det
