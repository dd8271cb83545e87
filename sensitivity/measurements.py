"""Measurement files: reading lab data with units, and fitting loading curves and time of flight.

File format
-----------
A measurement file is a comma-separated text file (UTF-8). Lines that start
with ``#`` before the header are metadata, one ``key = value`` per line:

``# kind = loading-curve``
    What the rows are: ``steady-state`` (each row is a measured output at the
    row's settings; the default when there is no ``time`` column),
    ``loading-curve`` (a signal against time since the start of loading; the
    default with a ``time`` column and an ``atom_number`` or ``fluorescence``
    column) or ``time-of-flight`` (rms cloud radius against free-expansion
    time; the default with ``time`` and ``cloud_radius``).
``# label = detuning scan, 2026-11-23``
    Free text used in reports.
``# setting beam_power = 4 mW``
    An apparatus setting held for the whole file, named after a model input,
    with its unit.

The first line that does not start with ``#`` is the header. Every column is
written ``name [unit]``; a column without brackets, or with ``[1]`` or ``[]``,
is dimensionless. Column names are

- ``time``: time since the start of loading (loading curve) or expansion time
  (time of flight);
- a model output (``atom_number``, ``fluorescence``, ``loading_time``,
  ``temperature``, ``cloud_radius``, ...): the measured value;
- ``<output>_uncertainty``: its standard uncertainty, same dimension; when
  absent it is estimated from the scatter of repeated rows at the same
  settings (see :func:`to_observations`);
- a model input (``detuning``, ``beam_power``, ...): the setting the row was
  taken at. Settings given neither in a column nor in a ``# setting`` line take
  the scenario's nominal value.

Example (invented numbers)::

    # kind = steady-state
    # label = detuning scan
    # setting beam_power = 4 mW
    detuning [MHz],atom_number [1],atom_number_uncertainty [1]
    -8,1.1e8,0.05e8
    -12,2.3e8,0.09e8

Values are converted to SI once, here, with the project's unit registry, into
the unit of the matching model input or output (``1/s`` for ``fluorescence``).
Empty cells and ``nan`` are missing values; a row with a missing value in a
column it needs is skipped and counted (``MeasurementSet.skipped_rows``).
Input files are only read, never modified.
"""

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
import scipy.constants as const
from scipy import optimize

from trapbudget.sensitivity.errors import DataError
from trapbudget.sensitivity.units import suggest_unit, ureg

__all__ = [
    "CurveFit",
    "MeasurementSet",
    "Observations",
    "fit_loading_curve",
    "fit_time_of_flight",
    "loading_curve",
    "parse_cell",
    "parse_header",
    "read_measurements",
    "read_table_lines",
    "time_of_flight_radius",
    "to_observations",
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
            f"{text!r} is not a number{named}; write a plain decimal number", path=where
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
    try:
        text = file.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise DataError("file not found; check the path", path=where) from None
    except OSError as exc:
        raise DataError(
            f"cannot read the file ({exc.strerror}); check the path", path=where
        ) from None
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
                f"header cell {cell!r} is not 'name [unit]'; write e.g. {example!r}", path=where
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
        raise DataError(f"{text!r} is not 'number unit'; write e.g. '4 mW'", path=where)
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


# --------------------------------------------------------------------------- fits


@dataclass(frozen=True)
class CurveFit:
    """Result of a weighted least-squares curve fit.

    Attributes
    ----------
    names : tuple of str
        Parameter names.
    values : ndarray
        Best-fit parameters (SI).
    covariance : ndarray
        Covariance of the parameters. With given uncertainties it is
        ``(J^T W J)^-1`` (the uncertainties taken as absolute); without, it is
        scaled by chi2/dof (the scatter of the residuals sets the noise).
    chi2 : float
        Weighted sum of squared residuals.
    dof : int
        Number of points minus number of parameters.
    residuals : ndarray
        Data minus model, in data units.
    absolute_uncertainty : bool
        Whether point uncertainties were given.
    derived : dict of str to (float, float)
        Derived quantities (value, standard uncertainty), first-order.
    """

    names: tuple[str, ...]
    values: np.ndarray
    covariance: np.ndarray
    chi2: float
    dof: int
    residuals: np.ndarray
    absolute_uncertainty: bool
    derived: dict[str, tuple[float, float]] = field(default_factory=dict)

    def value(self, name: str) -> float:
        """Best-fit value of one parameter."""
        return float(self.values[self.names.index(name)])

    def uncertainty(self, name: str) -> float:
        """Standard uncertainty of one parameter."""
        i = self.names.index(name)
        return float(math.sqrt(max(self.covariance[i, i], 0.0)))

    @property
    def reduced_chi2(self) -> float:
        """chi2 / dof (nan when dof is 0)."""
        return self.chi2 / self.dof if self.dof > 0 else math.nan


def loading_curve(
    time: Any, steady_state: float, time_constant: float, two_body_fraction: float = 0.0
) -> np.ndarray:
    """Atom number (or a signal proportional to it) while a MOT loads from empty.

    Parameters
    ----------
    time : array_like, s
        Time since loading started.
    steady_state : float
        N_s, the value approached at long times (signal units).
    time_constant : float, s
        1/gamma, the exponential time constant.
    two_body_fraction : float
        chi = N_s / |N_-| in [0, 1); 0 for pure one-body loss.

    Returns
    -------
    ndarray
        ``N_s (1 - exp(-t/tau)) / (1 + chi exp(-t/tau))``.

    Notes
    -----
    Solution of ``dN/dt = R - N/tau_1 - b N^2`` with ``N(0) = 0``: the roots
    ``N_s > 0 > N_-`` of the right-hand side give
    ``gamma = sqrt(1/tau_1^2 + 4 b R)`` and ``chi = -N_s/N_-``; then
    ``R = gamma N_s / (1 + chi)``, ``1/tau_1 = gamma (1 - chi) / (1 + chi)`` and
    ``b = gamma chi / (N_s (1 + chi))``. With ``chi = 0`` it is
    ``N_s (1 - exp(-t/tau))`` with ``N_s = R tau``.

    References
    ----------
    Rate equation as in C. Monroe, W. Swann, H. Robinson and C. Wieman,
    Phys. Rev. Lett. 65, 1571 (1990); two-body term as in the MOT loss
    literature reviewed by J. Weiner et al., Rev. Mod. Phys. 71, 1 (1999).
    """
    decay = np.exp(-np.asarray(time, dtype=float) / time_constant)
    return steady_state * (1.0 - decay) / (1.0 + two_body_fraction * decay)


def time_of_flight_radius(time: Any, initial_radius: float, temperature: float, *, mass: float):
    """Rms radius of a thermal cloud after free expansion.

    Parameters
    ----------
    time : array_like, s
        Expansion time.
    initial_radius : float, m
        sigma_0, rms radius at release.
    temperature : float, K
    mass : float, kg

    Returns
    -------
    ndarray, m
        ``sqrt(sigma_0^2 + k_B T t^2 / m)``.

    References
    ----------
    Ballistic expansion of a Maxwell-Boltzmann cloud: e.g. H. J. Metcalf and
    P. van der Straten, "Laser Cooling and Trapping" (Springer 1999).
    """
    t = np.asarray(time, dtype=float)
    return np.sqrt(initial_radius**2 + const.k * temperature * t**2 / mass)


def _weighted_fit(
    func,
    x0: np.ndarray,
    bounds: tuple[np.ndarray, np.ndarray],
    y: np.ndarray,
    sigma: np.ndarray | None,
    *,
    names: tuple[str, ...],
    robust: bool,
    where: str,
) -> CurveFit:
    weights = 1.0 / sigma if sigma is not None else np.ones_like(y)
    if sigma is not None and not np.all(np.isfinite(weights) & (sigma > 0)):
        raise DataError(
            "uncertainties must be positive numbers; fix or drop the column", path=where
        )
    if y.size <= len(names):
        raise DataError(
            f"{y.size} points cannot fit {len(names)} parameters; take more points", path=where
        )
    scale = np.where(x0 != 0, np.abs(x0), 1.0)

    def residual(p):
        return (func(p * scale) - y) * weights

    result = optimize.least_squares(
        residual,
        x0 / scale,
        bounds=(bounds[0] / scale, bounds[1] / scale),
        loss="soft_l1" if robust else "linear",
        x_scale="jac",
        method="trf",
        xtol=1e-14,
        ftol=1e-14,
        gtol=1e-14,
    )
    values = result.x * scale
    jac = result.jac * scale[np.newaxis, :] ** -1
    chi2 = float(np.sum(((func(values) - y) * weights) ** 2))
    dof = y.size - len(names)
    try:
        cov = np.linalg.inv(jac.T @ jac)
    except np.linalg.LinAlgError:
        cov = np.linalg.pinv(jac.T @ jac)
    if sigma is None:
        cov = cov * (chi2 / dof)
    return CurveFit(
        names=names,
        values=values,
        covariance=cov,
        chi2=chi2,
        dof=dof,
        residuals=y - func(values),
        absolute_uncertainty=sigma is not None,
    )


def fit_loading_curve(
    time: Any,
    signal: Any,
    *,
    uncertainty: Any | None = None,
    two_body: bool = False,
    robust: bool = False,
    where: str = "loading curve",
) -> CurveFit:
    """Fit ``N(t) = N_s (1 - exp(-t/tau))`` (optionally with two-body loss) to a loading curve.

    Parameters
    ----------
    time : array_like, s
        Time since the start of loading (background subtracted signal, N(0) = 0).
    signal : array_like
        Atom number or fluorescence (any unit proportional to N).
    uncertainty : array_like, optional
        Standard uncertainty of each point; without it the covariance is
        scaled by the residual scatter (chi2/dof).
    two_body : bool
        Fit the two-body fraction chi as well (see :func:`loading_curve`).
    robust : bool
        Use the soft-L1 loss (outlier-tolerant) instead of plain least squares.
    where : str
        Name for error messages.

    Returns
    -------
    CurveFit
        Parameters ``steady_state``, ``time_constant`` (and
        ``two_body_fraction``); ``derived`` holds ``loading_time`` (from
        empty to 1 - 1/e of N_s), ``loading_rate`` = R,
        ``one_body_time`` = tau_1 and, with two-body, ``two_body_rate`` = b
        (signal units), each with a first-order uncertainty.

    Notes
    -----
    Weighted least squares (scipy.optimize.least_squares, trust-region
    reflective, bounded: N_s > 0, tau > 0, 0 <= chi < 1); covariance
    ``(J^T W J)^-1`` from the Jacobian at the optimum.
    """
    t = np.asarray(time, dtype=float)
    y = np.asarray(signal, dtype=float)
    sigma = None if uncertainty is None else np.asarray(uncertainty, dtype=float) * np.ones_like(y)
    if t.shape != y.shape or t.ndim != 1:
        raise DataError("time and signal must be 1-D columns of equal length", path=where)
    if np.any(t < 0):
        raise DataError("loading times must be >= 0 (time since loading started)", path=where)
    n_s0 = float(np.max(y)) if np.max(y) > 0 else 1.0
    # initial time constant: time to reach 1 - 1/e of the largest signal
    reached = t[y >= (1 - math.exp(-1)) * n_s0]
    tau0 = (
        float(reached.min()) if reached.size and reached.min() > 0 else float(np.ptp(t) / 3 or 1)
    )
    if two_body:
        names = ("steady_state", "time_constant", "two_body_fraction")
        x0 = np.array([n_s0, tau0, 0.2])
        bounds = (np.array([0.0, 0.0, 0.0]), np.array([np.inf, np.inf, 0.999999]))

        def func(p):
            return loading_curve(t, p[0], p[1], p[2])
    else:
        names = ("steady_state", "time_constant")
        x0 = np.array([n_s0, tau0])
        bounds = (np.array([0.0, 0.0]), np.array([np.inf, np.inf]))

        def func(p):
            return loading_curve(t, p[0], p[1])

    fit = _weighted_fit(func, x0, bounds, y, sigma, names=names, robust=robust, where=where)
    return _with_loading_derived(fit)


def _first_order(function, values: np.ndarray, covariance: np.ndarray) -> tuple[float, float]:
    """Value and first-order standard uncertainty of ``function(values)``."""
    value = float(function(values))
    steps = 1e-6 * np.where(values != 0, np.abs(values), 1.0)
    grad = np.empty(values.size)
    for i, step in enumerate(steps):
        up, down = values.copy(), values.copy()
        up[i] += step
        down[i] -= step
        grad[i] = (function(up) - function(down)) / (2 * step)
    return value, float(math.sqrt(max(grad @ covariance @ grad, 0.0)))


def _with_loading_derived(fit: CurveFit) -> CurveFit:
    def chi(p):
        return p[2] if p.size > 2 else 0.0

    def rise_time(p):
        # N(t)/N_s = f = 1 - 1/e at t = tau ln((1 + chi f) / (1 - f)); tau itself when chi = 0
        f = 1 - math.exp(-1)
        return p[1] * math.log((1 + chi(p) * f) / (1 - f))

    derived = {
        "loading_time": _first_order(rise_time, fit.values, fit.covariance),
        "loading_rate": _first_order(
            lambda p: p[0] / (p[1] * (1 + chi(p))), fit.values, fit.covariance
        ),
        "one_body_time": _first_order(
            lambda p: p[1] * (1 + chi(p)) / (1 - chi(p)), fit.values, fit.covariance
        ),
    }
    if len(fit.names) > 2:
        derived["two_body_rate"] = _first_order(
            lambda p: p[2] / (p[0] * (1 + p[2]) * p[1]), fit.values, fit.covariance
        )
    return CurveFit(**{**fit.__dict__, "derived": derived})


def fit_time_of_flight(
    time: Any,
    radius: Any,
    *,
    mass: float,
    uncertainty: Any | None = None,
    robust: bool = False,
    where: str = "time of flight",
) -> CurveFit:
    """Fit ``sigma^2 = sigma_0^2 + k_B T t^2 / m`` to rms radii after free expansion.

    Parameters
    ----------
    time : array_like, s
        Expansion times.
    radius : array_like, m
        Rms cloud radius at each time.
    mass : float, kg
        Atomic mass.
    uncertainty : array_like, m, optional
        Standard uncertainty of each radius; without it the covariance is
        scaled by chi2/dof.
    robust : bool
        Soft-L1 loss instead of plain least squares.
    where : str
        Name for error messages.

    Returns
    -------
    CurveFit
        Parameters ``initial_radius`` (m) and ``temperature`` (K).

    Notes
    -----
    The residuals are in the radius (not its square), weighted by 1/u;
    bounded sigma_0 >= 0, T >= 0. Starting values from the straight-line fit
    of sigma^2 against t^2.

    References
    ----------
    See :func:`time_of_flight_radius`.
    """
    t = np.asarray(time, dtype=float)
    y = np.asarray(radius, dtype=float)
    sigma = None if uncertainty is None else np.asarray(uncertainty, dtype=float) * np.ones_like(y)
    if t.shape != y.shape or t.ndim != 1:
        raise DataError("time and radius must be 1-D columns of equal length", path=where)
    if not mass > 0:
        raise DataError(f"mass {mass!r} must be positive (kg)", path=where)
    slope, intercept = np.polyfit(t**2, y**2, 1)
    x0 = np.array(
        [math.sqrt(max(intercept, (0.5 * y.min()) ** 2)), max(slope * mass / const.k, 1e-9)]
    )

    def func(p):
        return time_of_flight_radius(t, p[0], p[1], mass=mass)

    return _weighted_fit(
        func,
        x0,
        (np.array([0.0, 0.0]), np.array([np.inf, np.inf])),
        y,
        sigma,
        names=("initial_radius", "temperature"),
        robust=robust,
        where=where,
    )


# ------------------------------------------------------------------ observations


@dataclass(frozen=True)
class Observations:
    """Measured model outputs with the settings each was taken at (the calibration's data).

    Attributes
    ----------
    output : ndarray of str
        Model output each observation measures.
    value : ndarray
        Measured value (SI).
    uncertainty : ndarray
        Standard uncertainty (SI); nan where unknown (then estimated from the
        fit residuals by the calibration).
    settings : dict of str to ndarray
        Setting of each model input per observation; nan where the file did
        not set it (the scenario's nominal value is used).
    source : ndarray of str
        "label: row r" or "label: curve k" for reports.
    """

    output: np.ndarray
    value: np.ndarray
    uncertainty: np.ndarray
    settings: dict[str, np.ndarray]
    source: np.ndarray

    def __len__(self) -> int:
        return int(self.value.size)

    @staticmethod
    def concatenate(parts: Sequence[Observations]) -> Observations:
        """Join observations from several files (settings missing in one become nan)."""
        names = sorted({name for part in parts for name in part.settings})
        settings = {
            name: np.concatenate(
                [part.settings.get(name, np.full(len(part), np.nan)) for part in parts]
            )
            for name in names
        }
        return Observations(
            output=np.concatenate([p.output for p in parts]),
            value=np.concatenate([p.value for p in parts]),
            uncertainty=np.concatenate([p.uncertainty for p in parts]),
            settings=settings,
            source=np.concatenate([p.source for p in parts]),
        )


def _setting_groups(mset: MeasurementSet, setting_names: Sequence[str]) -> list[np.ndarray]:
    """Row indices of each group of rows with identical settings, in file order."""
    if not setting_names:
        return [np.arange(mset.n_rows)]
    keys = np.column_stack([mset.columns[name] for name in setting_names])
    groups: dict[tuple[float, ...], list[int]] = {}
    for i, key in enumerate(map(tuple, keys)):
        groups.setdefault(key, []).append(i)
    return [np.array(rows) for rows in groups.values()]


def to_observations(
    mset: MeasurementSet,
    *,
    model: Any,
    mass: float | None = None,
    two_body: bool = False,
    robust: bool = False,
) -> Observations:
    """Turn a measurement file into observations of model outputs.

    Parameters
    ----------
    mset : MeasurementSet
        A file read with :func:`read_measurements`.
    model : model protocol object
        Decides which columns are settings (inputs) and which are outputs.
    mass : float, kg, optional
        Atomic mass, needed for time-of-flight files.
    two_body : bool
        Fit loading curves with two-body loss.
    robust : bool
        Outlier-tolerant (soft-L1) fits of curves.

    Returns
    -------
    Observations

    Notes
    -----
    - steady-state: every output column of every row is one observation.
      Without an uncertainty column, the uncertainty is the sample standard
      deviation of the repeated rows at the same settings; rows without
      repeats get the pooled relative scatter of the groups that have
      repeats; with no repeats at all the uncertainty stays unknown (nan).
    - loading-curve: rows with identical settings form one curve, fitted by
      :func:`fit_loading_curve`; each curve gives the steady-state signal (as
      ``atom_number`` or ``fluorescence``) and ``loading_time`` (the time from
      empty to 1 - 1/e of the steady state, equal to the time constant
      without two-body loss), with their fit uncertainties.
    - time-of-flight: each group gives ``temperature``, fitted by
      :func:`fit_time_of_flight`.
    """
    setting_names = [name for name in mset.columns if name in model.inputs]
    outputs = [
        name
        for name in mset.columns
        if name in model.outputs and name != "time" and not name.endswith("_uncertainty")
    ]
    groups = _setting_groups(mset, setting_names)
    rows_out: list[tuple[str, float, float, dict[str, float], str]] = []
    if mset.kind == "steady-state":
        if not outputs:
            raise DataError(
                "no model output column (e.g. 'atom_number [1]') to calibrate against",
                path=mset.where,
            )
        for output in outputs:
            given = mset.columns.get(f"{output}_uncertainty")
            u = _scatter_uncertainty(mset.columns[output], groups) if given is None else given
            for i in range(mset.n_rows):
                settings = {name: float(mset.columns[name][i]) for name in setting_names}
                rows_out.append(
                    (
                        output,
                        float(mset.columns[output][i]),
                        float(u[i]),
                        settings,
                        f"{mset.label}: row {i + 1}",
                    )
                )
    else:
        signal = _signal_of(mset.kind, list(mset.columns), mset.where)
        given = mset.columns.get(f"{signal}_uncertainty")
        if mset.kind == "time-of-flight" and mass is None:
            raise DataError(
                "time-of-flight data need the species mass; set the scenario species",
                path=mset.where,
            )
        for k, rows in enumerate(groups, start=1):
            settings = {name: float(mset.columns[name][rows[0]]) for name in setting_names}
            where = f"{mset.where}: curve {k}"
            sigma = None if given is None else given[rows]
            if mset.kind == "loading-curve":
                fit = fit_loading_curve(
                    mset.columns["time"][rows],
                    mset.columns[signal][rows],
                    uncertainty=sigma,
                    two_body=two_body,
                    robust=robust,
                    where=where,
                )
                rows_out.append(
                    (
                        signal,
                        fit.value("steady_state"),
                        fit.uncertainty("steady_state"),
                        settings,
                        f"{mset.label}: curve {k}",
                    )
                )
                tau, u_tau = fit.derived["loading_time"]
                rows_out.append(("loading_time", tau, u_tau, settings, f"{mset.label}: curve {k}"))
            else:
                fit = fit_time_of_flight(
                    mset.columns["time"][rows],
                    mset.columns[signal][rows],
                    mass=float(mass),
                    uncertainty=sigma,
                    robust=robust,
                    where=where,
                )
                rows_out.append(
                    (
                        "temperature",
                        fit.value("temperature"),
                        fit.uncertainty("temperature"),
                        settings,
                        f"{mset.label}: curve {k}",
                    )
                )
    for output, *_ in rows_out:
        if output not in model.outputs:
            raise DataError(f"the model has no output {output!r} to compare with", path=mset.where)
    names = sorted(set(setting_names) | set(mset.settings))
    settings_arrays = {
        name: np.array(
            [row[3].get(name, mset.settings.get(name, math.nan)) for row in rows_out], dtype=float
        )
        for name in names
    }
    return Observations(
        output=np.array([row[0] for row in rows_out], dtype=object).astype(str),
        value=np.array([row[1] for row in rows_out], dtype=float),
        uncertainty=np.array([row[2] for row in rows_out], dtype=float),
        settings=settings_arrays,
        source=np.array([row[4] for row in rows_out], dtype=object).astype(str),
    )


def _scatter_uncertainty(values: np.ndarray, groups: Sequence[np.ndarray]) -> np.ndarray:
    """Per-row standard uncertainty from the scatter of repeats (see to_observations)."""
    u = np.full(values.size, np.nan)
    relative: list[float] = []
    weights: list[int] = []
    for rows in groups:
        if rows.size >= 2:
            std = float(np.std(values[rows], ddof=1))
            u[rows] = std
            mean = float(np.mean(values[rows]))
            if mean != 0:
                relative.append((std / abs(mean)) ** 2)
                weights.append(rows.size - 1)
    if relative:
        pooled = math.sqrt(float(np.average(relative, weights=weights)))
        missing = np.isnan(u)
        u[missing] = pooled * np.abs(values[missing])
    return u
