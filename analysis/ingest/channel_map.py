"""Channel map: which raw column of which log file is which canonical signal, in which unit.

A channel map is a TOML file of ``[[source]]`` tables (format in README.md,
"Channel map"). Each source matches log files by a glob on the file name, names
the time column and its unit and origin, and maps raw columns to catalogue
signals with a pint unit string and an optional scale (for sign flips).

The whole map is checked before any row is read: structure, signal names,
units known to pint, units of the right dimension for the signal, and (with
:func:`check_headers`) the columns of each file. Every problem found is listed
in one :class:`~analysis.errors.ChannelMapError`.

Unit factors come from pint (:func:`analysis.profile.unit_registry`); there is
no hand-written factor table.
"""

from __future__ import annotations

import fnmatch
import math
import os
import re
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pint

from analysis import catalogue
from analysis.errors import ChannelMapError
from analysis.profile import RobotProfile, unit_registry

#: Allowed ``kind`` values of a source.
KINDS = ("state", "torque", "other")
#: Allowed numeric ``time_unit`` values, plus ``iso8601`` for strings with a time zone.
TIME_UNITS = ("s", "ms", "us", "ns")
ISO8601 = "iso8601"
#: Allowed ``time_origin`` values.
TIME_ORIGINS = ("epoch", "boot")
#: Unit strings accepted for dimensionless signals.
DIMENSIONLESS_UNITS = ("", "1", "percent")
#: Allowed delimiters (None: detect from the header line).
DELIMITERS = (",", ";", "\t")

_STREAM_NAME = re.compile(r"^[A-Za-z0-9_]+$")
_SOURCE_KEYS = {"name", "files", "kind", "time_column", "time_unit", "time_origin", "delimiter"}
_COLUMN_KEYS = {"signal", "unit", "scale"}
#: Smallest and largest magnitude of a column's ``scale``; beyond them it is a mistake
#: (units are converted through ``unit``, the scale only flips signs or corrects). [-]
MIN_SCALE, MAX_SCALE = 1e-6, 1e6


@dataclass(frozen=True)
class ColumnSpec:
    """One mapped raw column.

    Attributes: ``raw`` column name in the file; ``signal`` canonical name;
    ``unit`` pint unit string of the raw values; ``scale`` extra factor [-]
    (e.g. -1 for a sign flip); ``factor`` pint factor from ``unit`` to the
    signal's SI unit [SI/unit].
    """

    raw: str
    signal: str
    unit: str
    scale: float
    factor: float

    @property
    def multiplier(self) -> float:
        """Raw value to SI value: ``factor * scale``. [SI/unit]"""
        return self.factor * self.scale


@dataclass(frozen=True)
class SourceSpec:
    """One ``[[source]]`` table: a kind of log file and how to read it."""

    name: str
    files: str
    kind: str
    time_column: str
    time_unit: str
    time_origin: str
    delimiter: str | None
    columns: tuple[ColumnSpec, ...]

    def matches(self, filename: str) -> bool:
        """True if the file name (not the path) matches this source's glob."""
        return fnmatch.fnmatchcase(Path(filename).name, self.files)

    @property
    def time_factor(self) -> float:
        """Seconds per raw time unit (pint); 1e-9 for ISO 8601 (parsed to ns). [s/unit]"""
        unit = "ns" if self.time_unit == ISO8601 else self.time_unit
        return float(unit_registry().Quantity(1.0, unit).to("s").magnitude)

    def column(self, raw: str) -> ColumnSpec | None:
        """The mapping of a raw column, or None if it is unmapped (kept as extra)."""
        for c in self.columns:
            if c.raw == raw:
                return c
        return None


@dataclass(frozen=True)
class ChannelMap:
    """A checked channel map: its sources and the TOML text it came from."""

    sources: tuple[SourceSpec, ...]
    text: str = ""
    origin: str = "channel map"
    raw: dict[str, Any] = field(default_factory=dict)

    def source_for(self, filename: str) -> SourceSpec:
        """Return the one source whose glob matches ``filename``.

        Raises :class:`ChannelMapError` if none or several match.
        """
        hits = [s for s in self.sources if s.matches(filename)]
        if len(hits) == 1:
            return hits[0]
        patterns = ", ".join(f"{s.name}: {s.files!r}" for s in self.sources)
        name = Path(filename).name
        if not hits:
            raise ChannelMapError(
                f"File {name!r} matches no source of the {self.origin} (patterns: {patterns}). "
                f"Add a [[source]] whose files glob matches it, or rename the file."
            )
        raise ChannelMapError(
            f"File {name!r} matches {len(hits)} sources of the {self.origin} "
            f"({', '.join(s.name for s in hits)}). Make the files globs exclusive."
        )

    def to_dict(self) -> dict[str, Any]:
        """Plain data for meta.json: the parsed TOML tables."""
        return dict(self.raw)


def _unit_problem(
    unit: str, signal: str, si_unit: str, where: str, ureg: pint.UnitRegistry
) -> tuple[str | None, float]:
    """Check one unit string for a signal; return (problem or None, factor to SI)."""
    if si_unit == "":
        if unit not in DIMENSIONLESS_UNITS:
            return (
                f"{where}: unit {unit!r} for dimensionless {signal!r}; use one of "
                f"{', '.join(repr(u) for u in DIMENSIONLESS_UNITS)}.",
                1.0,
            )
        return None, float(ureg.Quantity(1.0, unit or "1").to("dimensionless").magnitude)
    try:
        quantity = ureg.Quantity(1.0, unit)
    except (pint.UndefinedUnitError, pint.errors.DefinitionSyntaxError, AttributeError):
        return (
            f"{where}: unit {unit!r} is unknown to the units library (pint). "
            f"Use a pint unit string such as {si_unit!r}, 'deg', 'rpm', 'mm', 'g0'.",
            1.0,
        )
    except Exception as exc:  # pint raises several parser errors for malformed strings
        return f"{where}: unit {unit!r} cannot be parsed ({exc}).", 1.0
    if not quantity.unitless and not quantity.units.is_compatible_with(ureg.Unit(si_unit)):
        return (
            f"{where}: unit {unit!r} has the wrong dimension for {signal!r}, "
            f"which expects {si_unit!r} or a unit convertible to it.",
            1.0,
        )
    # pint treats the radian as dimensionless, so 'Hz' would pass for 'rad/s' with
    # factor 1; demand that an angle signal's unit carries an angle.
    want_rad = ureg.get_root_units(si_unit)[1]._units.get("radian", 0)
    have_rad = ureg.get_root_units(unit)[1]._units.get("radian", 0)
    if want_rad != have_rad:
        return (
            f"{where}: unit {unit!r} carries no angle but {signal!r} expects {si_unit!r}; "
            f"use e.g. 'deg', 'rad', 'deg/s', 'rpm'.",
            1.0,
        )
    if float(ureg.Quantity(0.0, unit).to(si_unit).magnitude) != 0.0:
        return (
            f"{where}: unit {unit!r} has an offset; only multiplicative units are supported.",
            1.0,
        )
    return None, float(quantity.to(si_unit).magnitude)


def _lookup(signal: str, actuators: Sequence[str] | None) -> catalogue.Signal | None:
    if actuators is not None:
        return catalogue.lookup(signal, tuple(actuators))
    # No profile: accept any actuator name of the right pattern.
    actuator, _, quantity = signal.partition(".")
    return catalogue.lookup(signal, (actuator,) if quantity else ())


def channel_map_from_dict(
    data: Mapping[str, Any],
    profile: RobotProfile | None = None,
    *,
    text: str = "",
    origin: str = "channel map",
) -> ChannelMap:
    """Build and check a :class:`ChannelMap` from parsed TOML.

    Parameters
    ----------
    data : mapping
        Parsed TOML with a ``source`` array of tables.
    profile : RobotProfile, optional
        Robot profile; its actuator names decide which actuator signals are valid.
        Without it any ``<name>.<quantity>`` is accepted.
    text : str
        The TOML source text, kept for the run's metadata.
    origin : str
        Where the map came from, for messages (e.g. its path).

    Raises
    ------
    ChannelMapError
        Listing every problem found in the map.
    """
    ureg = unit_registry()
    problems: list[str] = []
    raw_sources = data.get("source")
    if not isinstance(raw_sources, list) or not raw_sources:
        raise ChannelMapError(
            f"The {origin} has no [[source]] tables. Each kind of log file needs one "
            f"(see README, 'Channel map'); `outrigger map-template FILE` writes a starter."
        )
    actuators = profile.actuator_names if profile is not None else None
    valid = catalogue.known_names(actuators or ())
    sources: list[SourceSpec] = []
    seen_names: set[str] = set()
    signal_home: dict[str, str] = {}
    origins: set[str] = set()
    for i, s in enumerate(raw_sources, start=1):
        if not isinstance(s, dict):
            problems.append(f"source #{i} must be a table.")
            continue
        name = s.get("name")
        where = f"source {name!r}" if isinstance(name, str) else f"source #{i}"
        unknown_keys = sorted(set(s) - _SOURCE_KEYS - {"columns"})
        if unknown_keys:
            problems.append(
                f"{where}: unknown key(s) {', '.join(unknown_keys)}; "
                f"valid keys: {', '.join(sorted(_SOURCE_KEYS | {'columns'}))}."
            )
        if not isinstance(name, str) or not _STREAM_NAME.match(name):
            problems.append(f"{where}: name must be letters, digits and '_', found {name!r}.")
            name = f"source{i}"
        elif name in seen_names:
            problems.append(f"{where}: name {name!r} is used twice; stream names must be unique.")
        seen_names.add(name)
        files = s.get("files")
        if not isinstance(files, str) or not files:
            problems.append(f"{where}: files must be a glob on the file name, found {files!r}.")
            files = ""
        kind = s.get("kind", "state")
        if kind not in KINDS:
            problems.append(f"{where}: kind must be one of {', '.join(KINDS)}, found {kind!r}.")
        time_column = s.get("time_column")
        if not isinstance(time_column, str) or not time_column:
            problems.append(f"{where}: time_column is missing; name the column holding time.")
            time_column = ""
        time_unit = s.get("time_unit")
        if time_unit not in (*TIME_UNITS, ISO8601):
            problems.append(
                f"{where}: time_unit must be one of {', '.join((*TIME_UNITS, ISO8601))}, "
                f"found {time_unit!r}."
            )
            time_unit = "s"
        time_origin = s.get("time_origin", "epoch" if time_unit == ISO8601 else None)
        if time_origin not in TIME_ORIGINS:
            problems.append(
                f'{where}: time_origin must be "epoch" (Unix time) or "boot", '
                f"found {time_origin!r}."
            )
            time_origin = "boot"
        elif time_unit == ISO8601 and time_origin != "epoch":
            problems.append(f'{where}: ISO 8601 times are absolute; use time_origin = "epoch".')
        origins.add(str(time_origin))
        delimiter = s.get("delimiter")
        if delimiter is not None and delimiter not in DELIMITERS:
            problems.append(
                f"{where}: delimiter must be ',', ';' or a tab, found {delimiter!r}; "
                f"or leave it out to detect it."
            )
            delimiter = None
        cols_t = s.get("columns", {})
        if not isinstance(cols_t, dict):
            problems.append(f"{where}: [source.columns] must be a table of column = {{...}}.")
            cols_t = {}
        columns: list[ColumnSpec] = []
        for raw, spec in cols_t.items():
            cwhere = f"{where}, column {raw!r}"
            if raw == time_column:
                problems.append(f"{cwhere}: is the time column; do not map it to a signal.")
                continue
            if not isinstance(spec, dict):
                problems.append(f'{cwhere}: must be {{ signal = "...", unit = "..." }}.')
                continue
            bad_keys = sorted(set(spec) - _COLUMN_KEYS)
            if bad_keys:
                problems.append(
                    f"{cwhere}: unknown key(s) {', '.join(bad_keys)}; use signal, unit, scale."
                )
            signal = spec.get("signal")
            entry = _lookup(signal, actuators) if isinstance(signal, str) else None
            if entry is None or signal == catalogue.T:
                problems.append(
                    f"{cwhere}: unknown signal {signal!r}. Valid signals: {', '.join(valid)}"
                    + ("" if actuators is not None else ", <actuator>.<quantity>")
                    + "."
                )
                continue
            signal = str(signal)
            if signal in signal_home:
                problems.append(
                    f"{cwhere}: signal {signal!r} is already mapped in {signal_home[signal]}; "
                    f"map each signal once and leave the other column unmapped (kept as extra)."
                )
                continue
            signal_home[signal] = cwhere
            unit = spec.get("unit", entry.unit)
            if not isinstance(unit, str):
                problems.append(f"{cwhere}: unit must be a string, found {unit!r}.")
                continue
            problem, factor = _unit_problem(unit, signal, entry.unit, cwhere, ureg)
            if problem:
                problems.append(problem)
                continue
            scale = spec.get("scale", 1.0)
            if (
                isinstance(scale, bool)
                or not isinstance(scale, int | float)
                or not math.isfinite(scale)
                or not MIN_SCALE <= abs(scale) <= MAX_SCALE
            ):
                problems.append(
                    f"{cwhere}: scale must be a finite number of magnitude {MIN_SCALE:g} to "
                    f"{MAX_SCALE:g} (a sign flip or a small correction; units go in 'unit'), "
                    f"found {scale!r}."
                )
                continue
            columns.append(ColumnSpec(raw, signal, unit, float(scale), factor))
        sources.append(
            SourceSpec(
                name=name,
                files=files,
                kind=str(kind),
                time_column=time_column,
                time_unit=str(time_unit),
                time_origin=str(time_origin),
                delimiter=delimiter,
                columns=tuple(columns),
            )
        )
    if len(origins) > 1:
        problems.append(
            'sources mix time_origin "epoch" and "boot"; all files of a run share one clock.'
        )
    if problems:
        raise ChannelMapError(
            f"The {origin} has {len(problems)} problem(s):\n  - " + "\n  - ".join(problems)
        )
    return ChannelMap(tuple(sources), text=text, origin=origin, raw=dict(data))


def parse_channel_map(
    text: str, profile: RobotProfile | None = None, origin: str = "channel map"
) -> ChannelMap:
    """Parse and check channel-map TOML text (see :func:`channel_map_from_dict`)."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ChannelMapError(
            f"The {origin} is not valid TOML: {exc}. Fix the line it names."
        ) from exc
    except RecursionError as exc:
        raise ChannelMapError(
            f"The {origin} is nested too deeply to read (arrays or tables inside each other "
            "hundreds of levels deep). A channel map needs three levels: [[source]], "
            "[source.columns] and each column's { signal, unit }."
        ) from exc
    return channel_map_from_dict(data, profile, text=text, origin=origin)


def load_channel_map(
    path: str | os.PathLike[str], profile: RobotProfile | None = None
) -> ChannelMap:
    """Read and check a channel-map TOML file."""
    p = Path(path)
    if not p.is_file():
        raise ChannelMapError(f"The channel map {p} does not exist. Give the path of a TOML file.")
    try:
        text = p.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise ChannelMapError(f"The channel map {p} is not UTF-8 text.") from exc
    return parse_channel_map(text, profile, origin=f"channel map {p.name}")


def check_headers(cmap: ChannelMap, headers: Mapping[str, Sequence[str]]) -> None:
    """Check every file's columns against its source before any row is read.

    Parameters
    ----------
    cmap : ChannelMap
        The checked map.
    headers : mapping of str to sequence of str
        Column names of each file, by file path.

    Raises
    ------
    ChannelMapError
        Listing files that match no or several sources, lack the time column or a
        mapped column, with the columns that were found.
    """
    problems: list[str] = []
    for path, columns in headers.items():
        name = Path(path).name
        try:
            source = cmap.source_for(name)
        except ChannelMapError as exc:
            problems.append(str(exc))
            continue
        found = ", ".join(columns)
        if source.time_column not in columns:
            problems.append(
                f"{name}: time column {source.time_column!r} of source {source.name!r} is "
                f"missing (columns found: {found}). Set time_column to one of them."
            )
        absent = [c.raw for c in source.columns if c.raw not in columns]
        if absent:
            problems.append(
                f"{name}: the map names column(s) {', '.join(repr(a) for a in absent)} "
                f"absent from the file (columns found: {found}). Fix the names in "
                f"[source.columns] of source {source.name!r}."
            )
    if problems:
        raise ChannelMapError("\n".join(problems))
