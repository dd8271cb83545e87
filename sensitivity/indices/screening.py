"""Morris elementary-effects screening (SALib's trajectory design and analysis)."""

from __future__ import annotations

import contextlib
import warnings
from collections.abc import Callable, Iterator, Mapping, Sequence
from typing import Any

import numpy as np
import xarray as xr

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.executors import Workers, running_on

__all__ = ["morris"]


@contextlib.contextmanager
def _quiet_salib(seed: int) -> Iterator[None]:
    """Run SALib code that uses the legacy global NumPy seed and edits warning filters.

    Restores the global random state, the warning filters and
    ``warnings.formatwarning`` afterwards, so SALib leaves no trace.
    """
    state = np.random.get_state()  # noqa: NPY002 - SALib seeds the legacy global state
    formatter = warnings.formatwarning
    try:
        # record=True swallows SALib's notices even after it resets the filters itself.
        with warnings.catch_warnings(record=True):
            warnings.simplefilter("ignore")
            np.random.seed(seed)  # noqa: NPY002
            yield
    finally:
        warnings.formatwarning = formatter
        np.random.set_state(state)  # noqa: NPY002


def morris(
    model: Any,
    inputs: Mapping[str, Any],
    *,
    n_trajectories: int,
    levels: int = 4,
    outputs: Sequence[str] | None = None,
    tail: float = 0.005,
    confidence_level: float = 0.95,
    n_bootstrap: int = 100,
    rng: int | np.random.Generator | None = None,
    chunk_size: int = 65536,
    progress: Callable[[int, int], None] | None = None,
    executor: Any = None,
    workers: Workers = None,
) -> xr.Dataset:
    """Morris elementary-effects screening (SALib's trajectory design and statistics).

    Parameters
    ----------
    model : model protocol object or callable
    inputs : mapping of str to frozen scipy.stats distribution or float
        Uncertain inputs (screened) and fixed ones (held).
    n_trajectories : int
        Number of one-at-a-time trajectories r; the model runs r (d+1) times.
    levels : int, default 4
        Grid levels p of the unit interval (step Delta = p / (2 (p-1))).
    outputs : sequence of str, optional
    tail : float, default 0.005
        For an input with unbounded support, the unit interval maps to its
        quantiles [tail, 1 - tail]; a bounded end maps to the bound itself.
    confidence_level : float, default 0.95
    n_bootstrap : int, default 100
        Resamples for the confidence of mu_star.
    rng : int or numpy.random.Generator, optional
    chunk_size : int, default 65536
    progress : callable, optional
    executor, workers : optional
        Where the model runs, as for :func:`~trapbudget.sensitivity.propagate`.

    Returns
    -------
    xarray.Dataset
        Dims ``output``, ``input``: ``mu``, ``mu_star``, ``sigma``,
        ``mu_star_low``, ``mu_star_high``, and ``step`` (dim ``input``: the
        input change of one grid step Delta, SI units of the input).

    Notes
    -----
    ``EE_i = (f(x + Delta e_i) - f(x)) / Delta`` with Delta in the unit
    (quantile) coordinates, so an elementary effect is the output change per
    unit of the mapped range; for a uniform input of width w and a linear
    model ``y = sum b_i x_i``, ``EE_i = b_i w`` and ``EE_i Delta = b_i step``.
    ``mu_star`` is the mean of |EE| (Campolongo et al. 2007), ``sigma`` their
    standard deviation.

    References
    ----------
    M. D. Morris, Technometrics 33, 161 (1991);
    F. Campolongo, J. Cariboni, A. Saltelli, Environ. Model. Softw. 22, 1509 (2007).
    """
    with running_on(executor, workers):
        from SALib.analyze import morris as salib_analyze
        from SALib.sample import morris as salib_sample

        from trapbudget.sensitivity.indices.budget import _split_inputs, _units
        from trapbudget.sensitivity.protocol import as_model, evaluate_in_chunks

        if not isinstance(n_trajectories, int | np.integer) or n_trajectories < 2:
            raise ScenarioError(f"n_trajectories must be an integer >= 2; got {n_trajectories!r}")
        if not isinstance(levels, int | np.integer) or levels < 2 or levels % 2:
            raise ScenarioError(f"levels must be an even integer >= 2; got {levels!r}")
        if not 0 < tail < 0.5:
            raise ScenarioError(f"tail must be in (0, 0.5); got {tail!r}")
        model = as_model(model, input_names=list(inputs))
        generator = np.random.default_rng(rng)
        uncertain, fixed = _split_inputs(inputs, model)
        names = list(uncertain)
        problem = {"num_vars": len(names), "names": names, "bounds": [[0.0, 1.0]] * len(names)}
        unit = salib_sample.sample(problem, int(n_trajectories), num_levels=levels, seed=generator)
        low, high = [], []
        for dist in uncertain.values():
            lo, hi = dist.support()
            low.append(lo if np.isfinite(lo) else dist.ppf(tail))
            high.append(hi if np.isfinite(hi) else dist.ppf(1 - tail))
        low, high = np.array(low, float), np.array(high, float)  # type: ignore[assignment]
        quantile_low = np.array([d.cdf(v) for d, v in zip(uncertain.values(), low, strict=True)])
        quantile_high = np.array([d.cdf(v) for d, v in zip(uncertain.values(), high, strict=True)])
        q = quantile_low + unit * (quantile_high - quantile_low)
        phys = np.column_stack(
            [
                np.where(
                    unit[:, j] <= 0, low[j], np.where(unit[:, j] >= 1, high[j], d.ppf(q[:, j]))
                )
                for j, d in enumerate(uncertain.values())
            ]
        )
        columns = {n: phys[:, j] for j, n in enumerate(names)}
        columns.update({n: np.full(phys.shape[0], v) for n, v in fixed.items()})
        result = evaluate_in_chunks(model, columns, chunk_size=chunk_size, progress=progress)
        if outputs is None:
            outputs = [
                k
                for k, v in result.items()
                if k != "validity" and np.issubdtype(np.asarray(v).dtype, np.floating)
            ]
        outputs = list(outputs)
        keys = ("mu", "mu_star", "sigma", "mu_star_conf")
        table = {k: np.empty((len(outputs), len(names))) for k in keys}
        for k, name in enumerate(outputs):
            y = np.asarray(result[name], dtype=float)
            si = salib_analyze.analyze(
                problem,
                unit,
                y,
                num_resamples=n_bootstrap,
                conf_level=confidence_level,
                num_levels=levels,
                seed=generator,
            )
            for key in keys:
                table[key][k] = np.asarray(si[key], dtype=float)
        ds = xr.Dataset(coords={"output": outputs, "input": names})
        for key in ("mu", "mu_star", "sigma"):
            ds[key] = (("output", "input"), table[key])
        ds["mu_star_low"] = ds["mu_star"] - table["mu_star_conf"]
        ds["mu_star_high"] = ds["mu_star"] + table["mu_star_conf"]
        delta_step = levels / (2 * (levels - 1))
        ds["step"] = ("input", delta_step * (high - low))  # type: ignore[operator]
        ds["step"].attrs.update(long_name="input change of one grid step (SI)")
        ds["step"].attrs["units"] = [_units(model, names, "inputs")[n] for n in names]
        ds["mu"].attrs["long_name"] = "mean elementary effect"
        ds["mu_star"].attrs["long_name"] = "mean absolute elementary effect"
        ds["sigma"].attrs["long_name"] = "standard deviation of the elementary effects"
        for name in outputs:
            ds.attrs[f"units_{name}"] = _units(model, [name], "outputs")[name]
        ds.attrs.update(
            method="morris",
            n_trajectories=int(n_trajectories),
            levels=int(levels),
            n_evaluations=int(phys.shape[0]),
            confidence_level=float(confidence_level),
        )
        return ds
