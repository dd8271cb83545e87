"""Scans: one or two settings swept over a grid, the other uncertainties propagated.

At every grid point the scenario's other uncertain inputs are drawn from one
common set of random numbers (common random numbers: the curve is smooth and
differences between grid points are not Monte Carlo noise). An input correlated
with a swept one is drawn from its distribution *conditioned* on the swept
value: in the Gaussian copula, with normal scores z = Phi^-1(F(x)) and copula
correlation R, the scores of the others given the swept ones are

    z_O | z_S  ~  N(R_OS R_SS^-1 z_S,  R_OO - R_OS R_SS^-1 R_SO)

(the conditional of a multivariate normal; e.g. Anderson, An Introduction to
Multivariate Statistical Analysis, 3rd ed., theorem 2.5.1).

Per grid point the result holds the mean, median and the probabilistically
symmetric coverage interval of each output (JCGM 101:2008, 7.7): the spread a
lab would see at that setting, not a confidence band on the mean. The
``nominal_curve`` is the model with every other input at its nominal value.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any, Literal

import numpy as np
import xarray as xr
from scipy import special

from trapbudget.sensitivity.errors import ScenarioError, UsageError
from trapbudget.sensitivity.executors import Workers, running_on
from trapbudget.sensitivity.protocol import evaluate_in_chunks, validity_flags
from trapbudget.sensitivity.sampling import _EDGE, is_power_of_two, ppf, unit_design

__all__ = ["DEFAULT_POINTS", "DEFAULT_SPAN", "scan"]

#: Grid points per axis: one swept setting, two swept settings.
DEFAULT_POINTS = {1: 41, 2: 21}
#: Default half-width of the grid in standard uncertainties of the swept input.
DEFAULT_SPAN = 3.0


def _names(settings: str | Sequence[str]) -> list[str]:
    names = [settings] if isinstance(settings, str) else list(settings)
    if not 1 <= len(names) <= 2:
        raise UsageError(f"scan sweeps one or two settings, got {len(names)}")
    if len(set(names)) != len(names):
        raise UsageError(f"scan: {names[0]!r} is given twice; sweep two different settings")
    return names


def _grid(
    scenario: Any, name: str, given: tuple[float, float] | None, n_points: int, span: float
) -> np.ndarray:
    spec = scenario.model.inputs.get(name) if hasattr(scenario.model, "inputs") else None
    if spec is None:
        import difflib

        known = list(getattr(scenario.model, "inputs", {}) or {})
        close = difflib.get_close_matches(name, known, n=1)
        hint = f"; did you mean {close[0]!r}?" if close else "; 'trapbudget inputs' lists them"
        raise ScenarioError(f"the model has no input {name!r}{hint}", path=scenario.source)
    if given is not None:
        low, high = (float(v) for v in given)
    elif name in scenario.inputs:
        dist = scenario.inputs[name]
        centre = float(scenario.nominal.get(name, dist.mean()))
        u = float(dist.std())
        low, high = centre - span * u, centre + span * u
    else:
        raise ScenarioError(
            f"{name} has no tolerance in the scenario, so there is no default range to scan; "
            "give one (command line: --range LOW HIGH with units, e.g. --range '2 mm' '8 mm')",
            path=scenario.source,
            key=f"inputs.{name}",
        )
    if not (np.isfinite(low) and np.isfinite(high)) or low == high:
        raise UsageError(f"scan range of {name} must be two different finite values")
    lo, hi = float(getattr(spec, "low", -np.inf)), float(getattr(spec, "high", np.inf))
    if min(low, high) < lo or max(low, high) > hi:
        unit = getattr(spec, "unit", "")
        raise ScenarioError(
            f"scan range of {name} [{min(low, high):.4g}, {max(low, high):.4g}] {unit} "
            f"leaves the model's valid range [{lo:.4g}, {hi:.4g}] {unit}; narrow it",
            path=scenario.source,
            key=f"inputs.{name}",
        )
    return np.linspace(min(low, high), max(low, high), int(n_points))


def _conditional(correlation: np.ndarray | None, names: list[str], swept: list[str]):
    """Regression matrix B (others x swept) and Cholesky factor L of the conditional."""
    others = [n for n in names if n not in swept]
    idx_s = [names.index(n) for n in swept if n in names]
    idx_o = [names.index(n) for n in others]
    if correlation is None or not idx_s:
        return others, idx_s, np.zeros((len(others), len(idx_s))), np.eye(len(others))
    r = np.asarray(correlation, dtype=float)
    r_ss = r[np.ix_(idx_s, idx_s)]
    r_os = r[np.ix_(idx_o, idx_s)]
    b = np.linalg.solve(r_ss, r_os.T).T
    cov = r[np.ix_(idx_o, idx_o)] - b @ r_os.T
    cov = (cov + cov.T) / 2 + 1e-12 * np.eye(len(others))
    return others, idx_s, b, np.linalg.cholesky(cov)


def scan(
    scenario: Any,
    settings: str | Sequence[str],
    *,
    ranges: Mapping[str, tuple[float, float]] | None = None,
    n_points: int | Sequence[int] | None = None,
    span: float = DEFAULT_SPAN,
    n_samples: int = 1024,
    outputs: Sequence[str] | None = None,
    confidence_level: float = 0.95,
    rng: Any = None,
    chunk_size: int = 65536,
    progress: Callable[[int, int], None] | None = None,
    executor: Any = None,
    workers: Workers = None,
) -> xr.Dataset:
    """Sweep one or two settings over a grid with the other uncertainties propagated.

    Parameters
    ----------
    scenario : Scenario
        From :func:`~trapbudget.sensitivity.load_scenario` (its bound model,
        uncertain inputs, nominal values and copula correlation are used).
    settings : str or sequence of one or two str
        The inputs to sweep.
    ranges : mapping name -> (low, high), optional
        Grid ends in SI; default: nominal plus and minus ``span`` standard
        uncertainties of the input (an input without a tolerance needs a range).
    n_points : int or (int, int), optional
        Grid points per axis (default 41 for one setting, 21 x 21 for two).
    n_samples : int
        Draws of the other uncertain inputs, the same at every grid point
        (a power of 2 gives a scrambled Sobol' design, any other size random).
    outputs : sequence of str, optional
        Default: the scenario's outputs.
    confidence_level : float
        Coverage probability of the band.
    rng : seed or Generator, optional
    executor, workers : optional
        Where the model runs, as for :func:`~trapbudget.sensitivity.propagate`.

    Returns
    -------
    xarray.Dataset
        Coordinates: one per swept setting (SI, ``units`` attr) and ``output``.
        Variables (dims ``output`` and the swept settings): ``mean``, ``median``,
        ``std``, ``low``, ``high`` (the coverage band), ``nominal_curve``; and
        ``invalid_fraction`` (swept dims only): the share of draws outside the
        model's validity. Attrs: ``swept``, ``nominal_<setting>``, ``conditioned``
        (inputs correlated with a swept one, drawn conditionally), ``n_samples``,
        ``confidence_level``, ``units_<output>``.

    Model runs: n_samples x (grid points) + (grid points).
    """
    with running_on(executor, workers):
        names = _names(settings)
        if not 0 < confidence_level < 1:
            raise UsageError(f"confidence_level {confidence_level} must lie in (0, 1)")
        if int(n_samples) < 2:
            raise UsageError(f"scan needs at least 2 samples, got {n_samples}")
        points = n_points if n_points is not None else DEFAULT_POINTS[len(names)]
        if isinstance(points, int | np.integer):
            counts = [int(points)] * len(names)
        else:
            counts = [int(p) for p in points]
        if len(counts) != len(names) or min(counts) < 2:
            raise UsageError("scan needs at least 2 grid points per swept setting")
        ranges = dict(ranges or {})
        pairs = zip(names, counts, strict=True)
        grids = [_grid(scenario, n, ranges.get(n), c, span) for n, c in pairs]
        model = scenario.model
        keep = list(outputs) if outputs is not None else list(scenario.outputs)
        known = [o for o in (getattr(model, "outputs", None) or {}) if o != "validity"]
        unknown = [o for o in keep if known and o not in known]
        if unknown:
            raise UsageError(
                f"the model has no output {unknown[0]!r}; outputs are {', '.join(known)}"
            )

        uncertain = list(scenario.inputs)
        others, idx_s, b, chol = _conditional(scenario.correlation, uncertain, names)
        n = int(n_samples)
        method: Literal["sobol", "random"] = "sobol" if is_power_of_two(n) else "random"
        unit = unit_design(n, len(others), method=method, rng=rng)
        eps = special.ndtri(unit) @ chol.T if others else np.empty((n, 0))

        mesh = np.meshgrid(*grids, indexing="ij")
        flat = [m.ravel() for m in mesh]
        n_grid = flat[0].size
        # normal scores of the swept settings that carry a distribution (for the conditioning)
        swept_dists = [scenario.inputs[s] for s in names if s in scenario.inputs]
        swept_vals = [flat[names.index(s)] for s in names if s in scenario.inputs]
        columns: dict[str, np.ndarray] = {}
        if others:
            if swept_dists:
                scores = np.column_stack(
                    [
                        special.ndtri(np.clip(d.cdf(v), _EDGE, 1 - _EDGE))
                        for d, v in zip(swept_dists, swept_vals, strict=True)
                    ]
                )
                mean = scores @ b.T  # (grid, others)
            else:
                mean = np.zeros((n_grid, len(others)))
            z = mean[:, None, :] + eps[None, :, :]  # (grid, n, others)
            u = np.clip(special.ndtr(z), _EDGE, 1 - _EDGE)
            for j, name in enumerate(others):
                columns[name] = ppf(scenario.inputs[name], u[:, :, j].ravel())
        for name, values in zip(names, flat, strict=True):
            columns[name] = np.repeat(values, n)
        result = evaluate_in_chunks(
            model, columns, chunk_size=chunk_size, progress=progress, n_samples=n_grid * n
        )
        missing = [o for o in keep if o not in result]
        if missing:
            raise ScenarioError(
                f"the model has no output {missing[0]!r}; outputs are "
                f"{', '.join(o for o in result if o != 'validity')}",
                key="outputs",
            )
        nominal_run = evaluate_in_chunks(model, dict(zip(names, flat, strict=True)))

        shape = tuple(counts)
        alpha = 0.5 * (1.0 - confidence_level)
        stats: dict[str, list[np.ndarray]] = {
            k: [] for k in ("mean", "median", "std", "low", "high")
        }
        curve = []
        for name in keep:
            values = np.asarray(result[name], dtype=float).reshape(n_grid, n)
            with np.errstate(invalid="ignore"):
                finite = np.where(np.isfinite(values), values, np.nan)
                ok = np.asarray(np.isfinite(finite).any(axis=1))
                safe = np.where(ok[:, None], finite, 0.0)
                q = np.nanquantile(safe, [alpha, 0.5, 1 - alpha], axis=1)
                mean_v = np.nanmean(safe, axis=1)
                std_v = np.nanstd(safe, axis=1, ddof=1)
            for key, value in (
                ("mean", mean_v),
                ("median", q[1]),
                ("std", std_v),
                ("low", q[0]),
                ("high", q[2]),
            ):
                stats[key].append(np.where(ok, value, np.nan).reshape(shape))
            curve.append(np.asarray(nominal_run[name], dtype=float).reshape(shape))
        dims = ("output", *names)
        data = {key: (dims, np.stack(v)) for key, v in stats.items()}
        data["nominal_curve"] = (dims, np.stack(curve))
        mask = np.asarray(result.get("validity", np.zeros(n_grid * n)), dtype=np.int64)
        _, advisory = validity_flags(model)
        invalid = ((mask & ~advisory) != 0).reshape(n_grid, n).mean(axis=1).reshape(shape)
        data["invalid_fraction"] = (tuple(names), invalid)
        specs = model.inputs
        coords: dict[str, Any] = {"output": keep}
        for name, grid in zip(names, grids, strict=True):
            coords[name] = (name, grid, {"units": specs[name].unit, "long_name": name})
        out_units = getattr(model, "outputs", {}) or {}
        conditioned = []
        if scenario.correlation is not None and idx_s:
            r = np.asarray(scenario.correlation)
            conditioned = [o for o in others if np.any(np.abs(r[uncertain.index(o), idx_s]) > 0)]
        ds = xr.Dataset(
            data,
            coords=coords,
            attrs={
                "kind": "scan",
                "swept": list(names),
                "n_samples": n,
                "method": method,
                "confidence_level": float(confidence_level),
                "conditioned": conditioned,
                "propagated": others,
                "n_evaluations": int(n_grid * (n + 1)),
                **{
                    f"nominal_{s}": float(scenario.nominal.get(s, specs[s].default)) for s in names
                },
                **{f"units_{o}": str(getattr(out_units.get(o), "unit", "") or "") for o in keep},
            },
        )
        for key, text in (
            ("mean", "mean over the other inputs' uncertainty"),
            ("median", "median"),
            ("std", "standard deviation"),
            ("low", f"lower end of the {100 * confidence_level:g} % coverage band"),
            ("high", f"upper end of the {100 * confidence_level:g} % coverage band"),
            ("nominal_curve", "model with the other inputs at nominal"),
        ):
            ds[key].attrs["long_name"] = text
        ds["invalid_fraction"].attrs["long_name"] = "share of draws outside the model's validity"
        return ds
