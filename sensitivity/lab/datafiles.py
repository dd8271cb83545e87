"""Measurement files of a lab (CSV with units in the header) read into SI arrays."""

from __future__ import annotations

import csv
import difflib
import math
import os
import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np

from trapbudget.sensitivity.errors import DataError
from trapbudget.sensitivity.scenario.units import suggest_unit, ureg
from trapbudget.sensitivity.textfiles import read_text

__all__ = [
    "KINDS",
    "KNOWN_UNITS",
    "LOADING_SIGNALS",
    "Kind",
    "MeasurementSet",
    "convert",
    "parse_cell",
    "parse_header",
    "read_measurements",
    "read_table_lines",
]

Kind = Literal["steady-state", "loading-curve", "time-of-flight"]
KINDS: tuple[str, ...] = ("steady-state", "loading-curve", "time-of-flight")

#: Signals a loading curve can be written in (model outputs proportional to N).
LOADING_SIGNALS: tuple[str, ...] = ("atom_number", "fluorescence")

#: SI units of the quantities a measurement file may carry without a model.
KNOWN_UNITS: dict[str, str] = {
    "time": "s",
    "atom_number": "",
    "fluorescence": "1/s",
    "loading_time": "s",
    "temperature": "K",
    "cloud_radius": "m",
    "capture_velocity": "m/s",
    "loading_rate": "1/s",
    "peak_density": "1/m**3",
    "scattering_rate": "1/s",
    "loss_rate": "1/s",
}

_HEADER = re.compile(r"^\s*(?P<name>[A-Za-z_][A-Za-z0-9_]*)\s*(?:\[(?P<unit>[^\]]*)\])?\s*$")


def _shown(text: str, limit: int = 24) -> str:
    """A cell as quoted in an error: at most ``limit`` characters, never a whole line."""
    text = str(text)
    return repr(text if len(text) <= limit else text[:limit] + "...")


def convert(values: Any, written: str, *, target: str | None, where: str) -> np.ndarray:
    """Convert ``values`` written in unit ``written`` to ``target`` (SI), as floats.

    Parameters
    ----------
    values : array_like
        Numbers as written.
    written : str
        Unit as written ("mW", "MHz", "degC", "" for dimensionless).
    target : str or None
        SI unit to convert to; None converts to SI base units.
    where : str
        "file: column" for the error message.

    Raises
    ------
    DataError
        Unknown unit, or a unit of the wrong dimension.
    """
    arr = np.asarray(values, dtype=float)
    text = written.strip() or "dimensionless"
    if text == "1":
        text = "dimensionless"
    try:
        units = ureg.parse_units(text)
    except Exception:
        hint = suggest_unit(written, target) or "; write an SI unit such as 'mW'"
        raise DataError(f"{written!r} is not a unit{hint}", path=where) from None
    quantity = ureg.Quantity(arr, units)
    try:
        if target is None:
            out = quantity.to_base_units()
        else:
            out = quantity.to(target or "dimensionless")
    except Exception:
        raise DataError(
            f"unit {written!r} cannot be converted to {target or 'a plain number'!r}; "
            f"write the column in a unit of the same dimension",
            path=where,
        ) from None
    return np.asarray(out.magnitude, dtype=float)


@dataclass(frozen=True)
class MeasurementSet:
    """One measurement file, read and converted to SI.

    Attributes
    ----------
    kind : str
        "steady-state", "loading-curve" or "time-of-flight".
    label : str
        From the ``# label`` line, else the file stem.
    columns : dict of str to ndarray
        Column values in SI (``units``), one entry per row kept.
    units : dict of str to str
        SI unit of each column.
    written_units : dict of str to str
        Units as written in the header.
    settings : dict of str to float
        File-level settings from ``# setting`` lines, SI.
    metadata : dict of str to str
        Every metadata line as written.
    path : Path or None
        The file read.
    skipped_rows : int
        Rows skipped because a needed value was missing.
    """

    kind: str
    label: str
    columns: dict[str, np.ndarray]
    units: dict[str, str]
    written_units: dict[str, str]
    settings: dict[str, float] = field(default_factory=dict)
    metadata: dict[str, str] = field(default_factory=dict)
    path: Path | None = None
    skipped_rows: int = 0

    @property
    def n_rows(self) -> int:
        """Number of rows kept."""
        return len(next(iter(self.columns.values()))) if self.columns else 0

    @property
    def where(self) -> str:
        """The file name for messages."""
        return str(self.path) if self.path is not None else self.label


def _unit_of(name: str, model: Any | None) -> str | None:
    if model is not None:
        if name in model.inputs:
            return model.inputs[name].unit
        if name in model.outputs:
            return model.outputs[name].unit
    if name.endswith("_uncertainty"):
        return _unit_of(name[: -len("_uncertainty")], model)
    return KNOWN_UNITS.get(name)


def _is_known(name: str, model: Any | None) -> bool:
    base = name[: -len("_uncertainty")] if name.endswith("_uncertainty") else name
    if model is None or base == "time" or base in KNOWN_UNITS:
        return True
    return base in model.inputs or base in model.outputs


def parse_cell(text: str, where: str, *, column: str | None = None) -> float:
    """One CSV cell as a float; empty, ``nan``, ``na`` and ``n/a`` are missing (NaN).

    Raises
    ------
    DataError
        A cell that is not a number (naming the column when given).
    """
    text = text.strip()
    if text == "" or text.lower() in {"nan", "na", "n/a"}:
        return math.nan
    try:
        return float(text)
    except ValueError:
        named = "" if column is None else f" (column {column!r})"
        raise DataError(
            f"{_shown(text)} is not a number{named}; write a plain decimal number", path=where
        ) from None


def read_table_lines(path: str | os.PathLike[str]) -> tuple[Path, list[str], dict[str, str], int]:
    """Read a CSV file with an optional ``# key = value`` preamble.

    Returns
    -------
    (file, lines, metadata, start)
        ``lines`` of the file, the preamble's ``key -> value`` pairs (comment
        lines without ``=`` are ignored), and the index of the header line.

    Raises
    ------
    DataError
        A missing or unreadable file, or no header line after the comments.
    """
    file = Path(path)
    where = str(file)
    text = read_text(file, error=DataError, what="data file")
    lines = text.splitlines()
    metadata: dict[str, str] = {}
    for start, line in enumerate(lines):
        stripped = line.strip()
        if not stripped:
            continue
        if not stripped.startswith("#"):
            return file, lines, metadata, start
        body = stripped.lstrip("#").strip()
        if "=" in body:
            key, value = (part.strip() for part in body.split("=", 1))
            metadata[key] = value
    raise DataError("no header line found; add 'name [unit],...' after the comments", path=where)


def read_measurements(path: str | os.PathLike[str], *, model: Any | None = None) -> MeasurementSet:
    """Read a measurement file (format in the module docstring) into SI.

    Parameters
    ----------
    path : str or os.PathLike
        The CSV file.
    model : model protocol object, optional
        Gives the names and SI units of inputs and outputs; every column must
        then be a model input, a model output, ``time`` or an uncertainty.

    Returns
    -------
    MeasurementSet

    Raises
    ------
    DataError
        Missing file, bad header, unknown unit, unknown column (with the
        closest model names), unknown kind.
    """
    file, lines, preamble, start = read_table_lines(path)
    where = str(file)
    metadata: dict[str, str] = {}
    settings_text: dict[str, str] = {}
    for key, value in preamble.items():
        if key.startswith("setting "):
            settings_text[key[len("setting ") :].strip()] = value
        else:
            metadata[key] = value
    reader = csv.reader(lines[start:])
    names, written = parse_header(next(reader), where=where, example="beam_power [mW]")
    for name in names:
        if not _is_known(name, model):
            choices = [*list(KNOWN_UNITS), "time"]
            if model is not None:
                choices += list(model.inputs) + list(model.outputs)
            close = difflib.get_close_matches(name, choices, n=3)
            hint = f"; did you mean {', '.join(map(repr, close))}?" if close else ""
            raise DataError(
                f"column {name!r} is not a model input, output or 'time'{hint}", path=where
            )
    raw: list[list[float]] = []
    for row_number, row in enumerate(reader, start=start + 2):
        if not row or all(not cell.strip() for cell in row):
            continue
        if len(row) != len(names):
            raise DataError(
                f"row {row_number} has {len(row)} cells, the header has {len(names)}; fix the row",
                path=where,
            )
        raw.append(
            [
                parse_cell(cell, f"{where}: row {row_number}", column=name)
                for cell, name in zip(row, names, strict=True)
            ]
        )
    if not raw:
        raise DataError("no data rows; add measurements below the header", path=where)
    table = np.array(raw, dtype=float)
    columns: dict[str, np.ndarray] = {}
    units: dict[str, str] = {}
    for j, name in enumerate(names):
        target = _unit_of(name, model)
        columns[name] = convert(
            table[:, j], written[name], target=target, where=f"{where}: {name}"
        )
        units[name] = (
            target
            if target is not None
            else str(ureg.Quantity(1.0, written[name] or "dimensionless").to_base_units().units)
        )
    settings: dict[str, float] = {}
    for name, value in settings_text.items():
        if model is not None and name not in model.inputs:
            close = difflib.get_close_matches(name, list(model.inputs), n=3)
            hint = f"; did you mean {', '.join(map(repr, close))}?" if close else ""
            raise DataError(f"setting {name!r} is not a model input{hint}", path=where)
        settings[name] = _parse_setting(value, _unit_of(name, model), f"{where}: setting {name}")
    kind = metadata.get("kind") or _infer_kind(names)
    if kind not in KINDS:
        raise DataError(f"kind {kind!r} is unknown; use one of {', '.join(KINDS)}", path=where)
    if kind != "steady-state" and "time" not in columns:
        raise DataError(f"kind {kind!r} needs a 'time [s]' column; add it", path=where)
    needed = _needed_columns(kind, names, where)
    keep = np.all(np.isfinite(np.column_stack([columns[n] for n in needed])), axis=1)
    skipped = int(np.count_nonzero(~keep))
    if not np.any(keep):
        raise DataError(
            f"every row misses a value of {', '.join(needed)}; fill them in", path=where
        )
    columns = {name: values[keep] for name, values in columns.items()}
    return MeasurementSet(
        kind=kind,
        label=metadata.get("label", file.stem),
        columns=columns,
        units=units,
        written_units=written,
        settings=settings,
        metadata=metadata,
        path=file,
        skipped_rows=skipped,
    )


def parse_header(
    cells: Sequence[str], *, where: str, example: str
) -> tuple[list[str], dict[str, str]]:
    """Split header cells ``name [unit]`` into names and units as written.

    Raises
    ------
    DataError
        A cell that is not ``name [unit]`` (the message shows ``example``), or
        a name that appears twice.
    """
    names: list[str] = []
    units: dict[str, str] = {}
    for cell in cells:
        match = _HEADER.match(cell)
        if match is None:
            raise DataError(
                f"header cell {_shown(cell)} is not 'name [unit]'; write e.g. {example!r}",
                path=where,
            )
        name = match["name"]
        if name in units:
            raise DataError(f"column {name!r} appears twice; keep one", path=where)
        names.append(name)
        units[name] = (match["unit"] or "").strip()
    return names, units


def _parse_setting(text: str, unit: str | None, where: str) -> float:
    match = re.match(r"^\s*([-+0-9.eE]+)\s*(.*)$", text)
    if match is None:
        raise DataError(f"{_shown(text)} is not 'number unit'; write e.g. '4 mW'", path=where)
    return float(convert(parse_cell(match[1], where), match[2], target=unit, where=where))


def _infer_kind(names: Sequence[str]) -> str:
    if "time" not in names:
        return "steady-state"
    if "cloud_radius" in names and not any(s in names for s in LOADING_SIGNALS):
        return "time-of-flight"
    return "loading-curve"


def _signal_of(kind: str, names: Sequence[str], where: str) -> str:
    if kind == "time-of-flight":
        if "cloud_radius" not in names:
            raise DataError("a time-of-flight file needs a 'cloud_radius [mm]' column", path=where)
        return "cloud_radius"
    present = [s for s in LOADING_SIGNALS if s in names]
    if len(present) != 1:
        raise DataError(
            "a loading curve needs exactly one of 'atom_number' or 'fluorescence'; "
            f"found {present or 'none'}",
            path=where,
        )
    return present[0]


def _needed_columns(kind: str, names: Sequence[str], where: str) -> list[str]:
    if kind == "steady-state":
        return [n for n in names if not n.endswith("_uncertainty")]
    signal = _signal_of(kind, names, where)
    return ["time", signal]
