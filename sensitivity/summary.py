"""Summaries of Monte Carlo samples: moments and JCGM 101 coverage intervals."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np
import xarray as xr
from numpy.typing import ArrayLike

from trapbudget.sensitivity.errors import ScenarioError

__all__ = ["coverage_interval", "numerical_tolerance", "summarize"]


def coverage_interval(
    values: ArrayLike, *, confidence_level: float = 0.95, shortest: bool = False
) -> tuple[float, float]:
    """Coverage interval from Monte Carlo values (JCGM 101:2008, 7.7).

    Parameters
    ----------
    values : array
        Output values (NaNs are ignored).
    confidence_level : float
        Coverage probability p.
    shortest : bool
        Shortest interval instead of the probabilistically symmetric one.

    Returns
    -------
    (low, high) : tuple of float
    """
    if not 0 < confidence_level < 1:
        raise ValueError(f"confidence_level must lie in (0, 1), got {confidence_level}")
    y = np.sort(np.asarray(values, dtype=float).ravel())
    return _interval_of_sorted(y[np.isfinite(y)], confidence_level, shortest)


def _interval_of_sorted(y: np.ndarray, confidence_level: float, shortest: bool):
    """:func:`coverage_interval` of finite values already sorted."""
    m = y.size
    if m == 0:
        return math.nan, math.nan
    pm = confidence_level * m
    q = int(pm) if float(pm).is_integer() else math.floor(pm + 0.5)
    q = min(max(q, 0), m - 1)
    if shortest:
        widths = y[q:] - y[: m - q]
        r = int(np.argmin(widths))
        return float(y[r]), float(y[r + q])
    half = (m - q) / 2
    r = int(half) if float(half).is_integer() else math.floor((m - q + 1) / 2)
    r = min(max(r, 1), m - q)
    return float(y[r - 1]), float(y[r + q - 1])


def _output_names(samples: xr.Dataset, outputs: Sequence[str] | None) -> list[str]:
    if outputs is not None:
        missing = [o for o in outputs if o not in samples]
        if missing:
            raise ScenarioError(
                f"no output {missing[0]!r} in the samples; outputs are "
                f"{', '.join(_output_names(samples, None))}",
                key="outputs.names",
            )
        return list(outputs)
    return [name for name, var in samples.data_vars.items() if var.attrs.get("role") == "output"]  # type: ignore[misc]


def summarize(
    samples: xr.Dataset,
    *,
    outputs: Sequence[str] | None = None,
    confidence_level: float = 0.95,
    nominal: Mapping[str, float] | None = None,
) -> xr.Dataset:
    """Statistics and coverage intervals of the output samples.

    Parameters
    ----------
    samples : xarray.Dataset
        From :func:`propagate`.
    outputs : sequence of str, optional
        Default every variable with ``role="output"``.
    confidence_level : float
        Coverage probability p of the intervals.
    nominal : mapping output -> float, optional
        Output at the nominal inputs; default ``samples.attrs["nominal_outputs"]``.

    Returns
    -------
    xarray.Dataset
        Dim ``output``: ``mean``, ``std`` (ddof = 1), ``median``,
        ``interval_low``/``interval_high`` (probabilistically symmetric),
        ``shortest_low``/``shortest_high``, ``nominal``, ``relative_std``
        (std / |mean|), ``n_finite``; coordinate ``units`` along ``output`` and
        attrs ``units_<output>``, ``confidence_level``, ``n_samples``.
    """
    names = _output_names(samples, outputs)
    if nominal is None:
        nominal = samples.attrs.get("nominal_outputs") or {}
    columns: dict[str, list[float]] = {
        key: []
        for key in (
            "mean",
            "std",
            "median",
            "interval_low",
            "interval_high",
            "shortest_low",
            "shortest_high",
            "nominal",
            "relative_std",
            "n_finite",
        )
    }
    units = []
    streamed = samples.attrs.get("moments") or {}
    for name in names:
        # one sorted float64 copy serves the median and both intervals; float32 samples of
        # a summary-only run are sorted before they are widened (the same values in the
        # same order, since the widening is exact and monotone, at half the memory traffic)
        y = np.sort(np.asarray(samples[name].values)).astype(float, copy=False)
        y = y[: int(np.searchsorted(y, np.inf, side="left"))]  # +inf, then NaN, sort last
        y = y[int(np.searchsorted(y, -np.inf, side="right")) :]
        if name in streamed:  # summary-only run: moments accumulated in float64
            _, mean, std = streamed[name]
        else:
            mean = float(np.mean(y)) if y.size else math.nan
            std = float(np.std(y, ddof=1)) if y.size > 1 else math.nan
        if not 0 < confidence_level < 1:
            raise ValueError(f"confidence_level must lie in (0, 1), got {confidence_level}")
        low, high = _interval_of_sorted(y, confidence_level, False)
        slow, shigh = _interval_of_sorted(y, confidence_level, True)
        columns["mean"].append(mean)
        columns["std"].append(std)
        median = 0.5 * (y[(y.size - 1) // 2] + y[y.size // 2]) if y.size else math.nan
        columns["median"].append(float(median))
        columns["interval_low"].append(low)
        columns["interval_high"].append(high)
        columns["shortest_low"].append(slow)
        columns["shortest_high"].append(shigh)
        columns["nominal"].append(float(nominal.get(name, math.nan)))
        columns["relative_std"].append(std / abs(mean) if mean else math.nan)
        columns["n_finite"].append(y.size)
        units.append(samples[name].attrs.get("units", ""))
    long_names = {
        "mean": "mean",
        "std": "standard deviation (standard uncertainty)",
        "median": "median",
        "interval_low": "low end of the probabilistically symmetric coverage interval",
        "interval_high": "high end of the probabilistically symmetric coverage interval",
        "shortest_low": "low end of the shortest coverage interval",
        "shortest_high": "high end of the shortest coverage interval",
        "nominal": "output at the nominal inputs",
        "relative_std": "standard deviation / |mean|",
        "n_finite": "number of finite samples",
    }
    data_vars = {
        key: xr.DataArray(
            np.asarray(values, dtype=int if key == "n_finite" else float),
            dims="output",
            attrs={"long_name": long_names[key]},
        )
        for key, values in columns.items()
    }
    ds = xr.Dataset(
        data_vars,
        coords={"output": names, "units": ("output", units)},
        attrs={
            "confidence_level": float(confidence_level),
            "n_samples": int(samples.sizes.get("sample", 0)),
            **{f"units_{n}": u for n, u in zip(names, units, strict=True)},
        },
    )
    for key in ("method", "seed", "model"):
        if key in samples.attrs:
            ds.attrs[key] = samples.attrs[key]
    _batch_uncertainty(ds, samples, names, confidence_level)
    return ds


def _batch_uncertainty(ds, samples, names, confidence_level: float) -> None:
    """Standard uncertainties of the mean and interval ends from independent batches.

    Samples from :func:`~trapbudget.sensitivity.propagation.propagate_adaptive` come in
    h >= 2 batches, each an independent draw (an independent scramble on Sobol'): the
    standard deviation of the h batch values over sqrt(h) is the standard uncertainty of
    their average (JCGM 101:2008, 7.9.4), the honest error of each reported end, with
    ``h - 1`` degrees of freedom (``attrs["batch_degrees_of_freedom"]``).
    """
    batch = int(samples.attrs.get("batch_size", 0) or 0)
    n = int(samples.sizes.get("sample", 0))
    if batch < 2 or n < 2 * batch or n % batch:
        return
    h = n // batch
    table: dict[str, list[float]] = {"mean": [], "interval_low": [], "interval_high": []}
    for name in names:
        y = np.asarray(samples[name].values, dtype=float).reshape(h, batch)
        finite = [r[np.isfinite(r)] for r in y]
        if any(r.size < 2 for r in finite):  # undefined in (almost) a whole batch
            for key in table:
                table[key].append(math.nan)
            continue
        per = [(float(np.mean(r)), *coverage_interval(r, confidence_level=confidence_level))
               for r in finite]  # fmt: skip
        per_arr = np.asarray(per)
        spread = per_arr.std(axis=0, ddof=1) / math.sqrt(h)
        for key, value in zip(table, spread, strict=True):
            table[key].append(float(value))
    for key, values in table.items():
        ds[f"{key}_uncertainty"] = xr.DataArray(
            np.asarray(values),
            dims="output",
            attrs={"long_name": f"standard uncertainty of {key} from {h} independent batches"},
        )
    ds.attrs["batch_degrees_of_freedom"] = h - 1


def numerical_tolerance(value: float, *, significant_digits: int = 2) -> float:
    """Numerical tolerance ``delta = 0.5 * 10^l`` of a value written ``c * 10^l``.

    ``c`` is an integer with ``significant_digits`` digits (JCGM 101:2008, 7.9.2).
    """
    value = abs(float(value))
    if value == 0 or not math.isfinite(value):
        return math.nan
    exponent = math.floor(math.log10(value)) - (int(significant_digits) - 1)
    # rounding may carry into one more digit (e.g. 0.0996 with 2 digits -> 0.10)
    if round(value / 10.0**exponent) >= 10 ** int(significant_digits):
        exponent += 1
    return 0.5 * 10.0**exponent
