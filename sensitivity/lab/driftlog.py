"""Daily drift logs: reading the log file and mapping its columns to model inputs."""

from __future__ import annotations

import csv
import datetime as _dt
import difflib
import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from trapbudget.sensitivity.errors import DataError, ScenarioError
from trapbudget.sensitivity.lab.datafiles import (
    convert,
    parse_cell,
    parse_header,
    read_table_lines,
)
from trapbudget.sensitivity.scenario.units import did_you_mean, suggest_unit, ureg
from trapbudget.sensitivity.textfiles import read_toml

__all__ = [
    "COLUMN_KEYS",
    "MAPPING_KEYS",
    "MAX_CHANNELS",
    "UNMONITORED_HINT",
    "ChannelMap",
    "LogTable",
    "MappingTable",
    "check_mapping",
    "load_mapping",
    "read_log",
]

MAX_CHANNELS = 16

UNMONITORED_HINT = (
    "something the log does not monitor: beam alignment or polarization, the dispenser or "
    "vapor source, the repumper, a detection change"
)


@dataclass(frozen=True)
class LogTable:
    """A monitoring log as read: timestamps and raw numeric columns.

    Attributes
    ----------
    timestamps : ndarray of datetime64[s]
    columns : dict of str to ndarray
        Numbers as written (not converted).
    written_units : dict of str to str
    path : Path or None
    label : str
    skipped_rows : int
        Rows with a missing value (filled in by :func:`diagnose` once it
        knows which columns are used; here always 0).
    """

    timestamps: np.ndarray
    columns: dict[str, np.ndarray]
    written_units: dict[str, str]
    path: Path | None = None
    label: str = "log"

    @property
    def where(self) -> str:
        return str(self.path) if self.path is not None else self.label


def _parse_time(text: str, where: str) -> np.datetime64:
    text = text.strip()
    if text[-1:] in ("Z", "z"):  # UTC designator; Python 3.10's fromisoformat lacks it
        text = text[:-1] + "+00:00"
    try:
        stamp = _dt.datetime.fromisoformat(text)
    except ValueError:
        raise DataError(
            f"timestamp {text!r} is not ISO 8601; write e.g. '2026-11-23T08:00:00'", path=where
        ) from None
    if stamp.tzinfo is not None:
        stamp = stamp.astimezone(_dt.timezone.utc).replace(tzinfo=None)
    return np.datetime64(stamp, "s")


def read_log(path: str | os.PathLike[str]) -> LogTable:
    """Read a monitoring log (format in the module docstring).

    Raises
    ------
    DataError
        Missing file or timestamp column, bad header cell, non-numeric cell,
        timestamps out of order.
    """
    file, lines, metadata, start = read_table_lines(path)
    where = str(file)
    lines = [line for line in lines[start:] if line.strip()]
    reader = csv.reader(lines)
    names, units = parse_header(next(reader), where=where, example="coil_current [A]")
    if "timestamp" not in names:
        raise DataError("no 'timestamp' column; add ISO 8601 timestamps", path=where)
    stamps: list[np.datetime64] = []
    rows: list[list[float]] = []
    t_index = names.index("timestamp")
    for row_number, row in enumerate(reader, start=2 + start):
        if len(row) != len(names):
            raise DataError(
                f"row {row_number} has {len(row)} cells, the header has {len(names)}; fix the row",
                path=where,
            )
        stamps.append(_parse_time(row[t_index], f"{where}: row {row_number}"))
        values = []
        for j, cell in enumerate(row):
            if j == t_index:
                continue
            values.append(parse_cell(cell, f"{where}: row {row_number}", column=names[j]))
        rows.append(values)
    if not rows:
        raise DataError("no data rows; add log entries below the header", path=where)
    timestamps = np.array(stamps, dtype="datetime64[s]")
    back = np.flatnonzero(np.diff(timestamps) < np.timedelta64(0, "s"))
    if back.size:
        i = int(back[0]) + 1
        raise DataError(
            f"timestamps go back in time at data row {i + 1} ({timestamps[i]} after "
            f"{timestamps[i - 1]}); sort the log by time",
            path=where,
        )
    table = np.array(rows, dtype=float)
    value_names = [n for n in names if n != "timestamp"]
    return LogTable(
        timestamps=timestamps,
        columns={n: table[:, j] for j, n in enumerate(value_names)},
        written_units={n: units[n] for n in value_names},
        path=file,
        label=metadata.get("label", file.stem),
    )


@dataclass(frozen=True)
class ChannelMap:
    """How one log column becomes one model input: ``input = offset + scale * column``."""

    column: str
    input: str
    scale: str | None = None
    offset: str | None = None


#: Keys of a ``[diagnosis]`` table and of each of its ``columns.<name>`` tables.
MAPPING_KEYS = ("output", "measured", "columns")
COLUMN_KEYS = ("input", "scale", "offset")


class MappingTable(dict):
    """A ``[diagnosis]`` mapping, remembering the file it came from (for error messages)."""

    source: str = "mapping"


def check_mapping(table: Mapping[str, Any], *, source: str) -> MappingTable:
    """The mapping with every key and type checked; errors name ``source`` and the key."""

    def fail(message: str, key: str) -> DataError:
        return DataError(message, path=source, key=key)

    for key in table:
        if key not in MAPPING_KEYS:
            raise fail(f"unknown key {key!r}{did_you_mean(key, MAPPING_KEYS)}", f"diagnosis.{key}")
    for key in ("output", "measured"):
        if key in table and not isinstance(table[key], str):
            raise fail(f'must be a string, e.g. {key} = "atom_number"', f"diagnosis.{key}")
    columns = table.get("columns", {}) or {}
    if not isinstance(columns, Mapping):
        raise fail("must be a table of [diagnosis.columns.<column>]", "diagnosis.columns")
    for column, spec in columns.items():
        key = f"diagnosis.columns.{column}"
        if isinstance(spec, str):
            continue
        if not isinstance(spec, Mapping):
            raise fail('must be a table such as { input = "beam_power" }', key)
        for name, value in spec.items():
            if name not in COLUMN_KEYS:
                raise fail(
                    f"unknown key {name!r}{did_you_mean(name, COLUMN_KEYS)}", f"{key}.{name}"
                )
            if not isinstance(value, str):
                raise fail('must be a string, e.g. scale = "3 mW/V"', f"{key}.{name}")
        for name in ("scale", "offset"):
            text = spec.get(name)
            if text is not None and not (name == "offset" and text == "nominal"):
                _quantity(text, source, key=f"{key}.{name}")
    out = MappingTable(table)
    out.source = source
    return out


def load_mapping(path: str | os.PathLike[str]) -> dict[str, Any]:
    """Read a column mapping from a TOML file: its ``[diagnosis]`` table (or the whole file)."""
    data = read_toml(path, error=DataError, what="mapping file")
    table = data.get("diagnosis", data)
    if not isinstance(table, dict):
        raise DataError("[diagnosis] must be a table", path=Path(path))
    return check_mapping(table, source=str(path))


def _mapping_from(scenario: Any, mapping: Any) -> dict[str, Any]:
    if isinstance(mapping, str | os.PathLike):
        return load_mapping(mapping)
    scenario_file = str(getattr(scenario, "source", None) or "scenario")
    if mapping is not None:
        return check_mapping(dict(mapping), source="mapping")
    table = getattr(scenario, "diagnosis", None)
    if table:
        return check_mapping(dict(table), source=scenario_file)
    return check_mapping({}, source=scenario_file)


def _channel_maps(
    log: LogTable, model: Any, table: Mapping[str, Any], measured: str, where: str
) -> tuple[list[ChannelMap], list[str]]:
    maps: list[ChannelMap] = []
    raw = table.get("columns", {}) or {}
    for column, spec in raw.items():
        if column not in log.columns:
            close = difflib.get_close_matches(column, list(log.columns), n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise DataError(
                f"the log {log.where} has no column {column!r}{hint}",
                path=getattr(table, "source", log.where),
                key=f"diagnosis.columns.{column}",
            )
        if isinstance(spec, str):
            spec = {"input": spec}
        name = spec.get("input")
        if name not in model.inputs:
            close = difflib.get_close_matches(str(name), list(model.inputs), n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise ScenarioError(
                f"input {name!r} is not a model input{hint}",
                path=getattr(table, "source", where),
                key=f"diagnosis.columns.{column}.input",
            )
        maps.append(ChannelMap(column, name, spec.get("scale"), spec.get("offset")))
    mapped = {m.column for m in maps}
    for column in log.columns:
        if column not in mapped and column in model.inputs:
            maps.append(ChannelMap(column, column))
    used = [m.input for m in maps]
    for name in set(used):
        if used.count(name) > 1:
            columns = [m.column for m in maps if m.input == name]
            raise DataError(
                f"columns {columns} all map to input {name!r}; map one and drop the others",
                path=log.where,
            )
    skip = {measured, f"{measured}_uncertainty"}
    ignored = [c for c in log.columns if c not in {m.column for m in maps} and c not in skip]
    return maps, ignored


def _quantity(text: str, where: str, *, key: str | None = None) -> Any:
    reg = ureg
    try:
        number, unit = text.strip().split(" ", 1) if " " in text.strip() else (text, "")
        return reg.Quantity(float(number), reg.parse_units(unit) if unit else "dimensionless")
    except Exception:
        hint = suggest_unit(text.split(" ", 1)[-1], None) if " " in text else ""
        hint = hint or "; write e.g. '2.5 mW/V'"
        raise DataError(
            f"{text!r} is not a quantity{hint}",
            path=where,
            key=key,
        ) from None


def _input_values(
    log: LogTable, cmap: ChannelMap, model: Any, nominal: Mapping[str, float]
) -> np.ndarray:
    spec = model.inputs[cmap.input]
    where = f"{log.where}: {cmap.column}"
    written = log.written_units[cmap.column]
    if cmap.scale is None and cmap.offset is None:
        return convert(log.columns[cmap.column], written, target=spec.unit, where=where)
    reg = ureg
    try:
        column = reg.Quantity(log.columns[cmap.column], written or "dimensionless")
    except Exception:
        raise DataError(f"{written!r} is not a unit; fix the header", path=where) from None
    scale = _quantity(cmap.scale, where) if cmap.scale is not None else reg.Quantity(1.0)
    target = reg.Quantity(1.0, spec.unit or "dimensionless")
    if cmap.offset == "nominal":
        offset = reg.Quantity(float(nominal.get(cmap.input, spec.default)), target.units)
    elif cmap.offset is not None:
        offset = _quantity(cmap.offset, where)
    else:
        offset = reg.Quantity(0.0, target.units)
    try:
        total = offset + scale * column
        return np.asarray(total.to(target.units).magnitude, dtype=float)
    except Exception:
        raise DataError(
            f"offset + scale * column does not give {cmap.input!r} in {spec.unit or '1'!r}; "
            "check the units of scale and offset",
            path=where,
        ) from None
