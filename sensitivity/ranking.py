"""The error budget: global ranking of the inputs by variance-based indices.

:func:`rank` runs a replicated design through a model and returns the budget
Dataset (dims ``output``, ``input``) of DEVELOPERS.md; :func:`analyze_budget`
does the analysis alone on precomputed evaluations.

What ``n_samples`` means
------------------------
The Sobol' and conditional-sampling designs are run as R independent
scramblings (replicates, ``n_replicates``, default 10) of N = ``n_samples``
base points each. Every index is the mean of its R replicate estimates and
its interval the Student-t interval on R - 1 degrees of freedom (L'Ecuyer &
Lemieux 2002): the rows of one scrambled sequence are not independent, so
they are never bootstrapped. Model runs: ``R N (d + 2 + S)`` for independent
inputs (``R N (2d + 2 + S)`` with second order), ``R N (2d + 2 + S)`` with a
correlation, plus ``R N`` per group (two with a correlation); S is the number
of sets the Shapley effects need (``2^d - 1`` up to 7 inputs, about
``8 (d - 1) + 1`` above; 0 with ``shapley=False``), in ``attrs["shapley_sets"]``.
``method="delta"`` draws ``N`` times ``d + 2`` (up to a power of two)
independent random points and bootstraps them.

Columns of the budget
---------------------
Independent inputs (``method="sobol"``): ``first_order`` and ``total_order``
are Sobol' indices (Saltelli 2010 and Jansen 1999 estimators) and the
headline; ``interaction = total_order - first_order``; ``variance_share`` is
``total_order * Var(Y)``; ``shapley_effect`` beside them.

Correlated inputs (a ``correlation`` given; ``method="kucherenko"``, named
"conditional sampling (Kucherenko)"): the inputs are joined by the Gaussian
copula and every conditional law is exact. ``shapley_effect`` is the headline
share (Owen 2014; Song, Nelson & Staum 2016): non-negative, summing to one,
a drift shared through a correlation split fairly; ``rank``,
``variance_share`` (Shapley x Var(Y)) and the noise-floor verdict follow it.
Beside it ``first_order`` is the *full* first-order index
``Var(E[Y|X_i]) / Var(Y)`` (what the input explains on its own, correlations
included) and ``total_order`` the *independent* total-order index
``E[Var(Y|X_~i)] / Var(Y)`` (what it adds when it joins last; Kucherenko,
Tarantola & Annoni 2012). These two do not bracket the Shapley effect, and
``interaction`` is NaN: their difference mixes two decompositions.

Given data (``method="delta"``, named "given data (Borgonovo delta)"):
``first_order`` is the full first-order index from class means and
``delta`` Borgonovo's moment-independent index on one sample of independent
random draws, bootstrap bounds; ``total_order`` is NaN; ``rank`` follows
``delta``. ``attrs["method"]`` and ``attrs["method_name"]`` say which applies,
``attrs["headline"]`` which column is the headline share."""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any, Literal

import numpy as np
import xarray as xr

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.executors import Workers, running_on
from trapbudget.sensitivity.guard import check_memory
from trapbudget.sensitivity.indices.budget import (
    _FULL_FIRST_ORDER,
    _METHODS,
    DUMMY,
    METHOD_NAMES,
    IndexMethod,
    _normalise_groups,
    _power_of_two,
    _ranks,
    _Runner,
    _split_inputs,
    _unit_attrs,
    _units,
    _validity_counts,
)
from trapbudget.sensitivity.indices.convergence import _converge, _Options
from trapbudget.sensitivity.indices.designs import _rank_dependent, _rank_sobol
from trapbudget.sensitivity.indices.replicates import DEFAULT_REPLICATES, check_replicates
from trapbudget.sensitivity.linear import linear_propagation
from trapbudget.sensitivity.protocol import as_model
from trapbudget.sensitivity.sampling import transform

__all__ = ["rank"]


# --------------------------------------------------------------------------- drivers
def rank(
    model: Any,
    inputs: Mapping[str, Any],
    *,
    n_samples: int,
    outputs: Sequence[str] | None = None,
    second_order: bool = False,
    correlation: np.ndarray | None = None,
    nominal: Mapping[str, float] | None = None,
    rng: int | np.random.Generator | None = None,
    confidence_level: float = 0.95,
    n_bootstrap: int = 200,
    groups: Mapping[str, Any] | None = None,
    dummy: bool = True,
    convergence: bool = False,
    convergence_tolerance: float = 0.05,
    max_samples: int | None = None,
    chunk_size: int = 65536,
    progress: Callable[[int, int], None] | None = None,
    method: IndexMethod = "sobol",
    estimator: Literal["jansen", "sobol2007"] = "jansen",
    n_replicates: int = DEFAULT_REPLICATES,
    shapley: bool = True,
    executor: Any = None,
    workers: Workers = None,
) -> xr.Dataset:
    """Rank the inputs of a model by global sensitivity indices: the error budget.

    Parameters
    ----------
    model : model protocol object or callable
        Anything :func:`trapbudget.sensitivity.protocol.as_model` accepts.
    inputs : mapping of str to frozen scipy.stats distribution or float
        Uncertain inputs (distributions, SI) and fixed ones (floats, SI).
    n_samples : int
        Base size N *per replicate*, a power of two. The model runs
        ``R N (d + 2 + S)`` times for independent inputs, ``R N (2d + 2 + S)``
        with second order or with a correlation, plus ``R N`` per group
        (twice with a correlation); R = ``n_replicates``, S =
        ``attrs["shapley_sets"]`` (see the module notes). With
        ``method="delta"`` the model runs on N times d + 2 (rounded up to a
        power of two) independent random draws.
    outputs : sequence of str, optional
        Outputs to analyse (default: every float output of the model).
    second_order : bool, default False
        Also estimate the closed second-order indices (``second_order``).
    correlation : numpy.ndarray, optional
        Gaussian-copula correlation of the uncertain inputs (their order in
        ``inputs``); switches the default method to conditional sampling
        ("kucherenko") with Shapley effects as the headline (module notes).
    nominal : mapping, optional
        Nominal point for the linear (GUM) columns (default: the means).
    rng : int or numpy.random.Generator, optional
        Seed for the designs (one child stream per replicate) and, for
        ``method="delta"``, the bootstrap.
    confidence_level : float, default 0.95
    n_bootstrap : int, default 200
        Bootstrap resamples, used by ``method="delta"`` only.
    groups : mapping, optional
        Group name -> member inputs (or input -> group name): adds grouped
        indices on a ``group`` dim (``group_first_order`` etc.).
    dummy : bool, default True
        Add an independent uniform input the model ignores; marks the noise
        floor (``noise_floor``, ``below_noise_floor``).
    convergence : bool, default False
        Double N (reusing every earlier run) until every index's interval
        is narrower than ``convergence_tolerance`` and the ranking is stable between the
        last two steps (Sarrazin et al. 2016): no two inputs above the noise
        floor swap places unless their intervals overlap (a statistical tie).
    convergence_tolerance : float, default 0.05
        Largest accepted width of any index's confidence interval (replicate
        t-intervals; bootstrap for ``method="delta"``). When the loop stops
        unconverged, ``attrs["waiting_for"]`` and the warning name the index.
    max_samples : int, optional
        Largest base size per replicate the loop may reach (default 16 N).
    chunk_size : int, default 65536
        Rows per model call.
    progress : callable, optional
        ``progress(done, total)`` after each chunk of model runs.
    method : {"sobol", "delta", "kucherenko"}, default "sobol"
        "sobol": Saltelli design, independent inputs (with a correlation,
        "kucherenko" is used instead, so first- and total-order indices stay
        variance-based and groups work). "delta": given-data indices on one
        correlated sample. "kucherenko": conditional-sampling indices for
        inputs joined by the Gaussian copula (see the module notes).
    estimator : {"jansen", "sobol2007"}, default "jansen"
        Total-order estimator.
    n_replicates : int, default 10
        R, independent scramblings of the design (at least 2).
    shapley : bool, default True
        Estimate ``shapley_effect`` (always the headline with a correlation).
    executor, workers : optional
        Where the model runs, as for :func:`~trapbudget.sensitivity.propagate`.

    Returns
    -------
    xarray.Dataset
        Dims ``output`` and ``input``: ``first_order``, ``total_order`` and
        their ``_low``/``_high`` bounds, ``interaction``, ``rank``,
        ``variance_share``, ``sensitivity_coefficient``,
        ``input_uncertainty``, ``uncertainty_contribution``, ``noise_floor``,
        ``below_noise_floor``, ``output_mean``, ``output_std``,
        ``shapley_effect`` with ``_low``/``_high``; optional
        ``second_order``, ``group_*``, ``history_*`` (dim ``step``), and for
        the given-data method ``delta`` with bounds. ``attrs``: ``method``,
        ``method_name``, ``headline``, ``n_samples`` (N per replicate),
        ``n_replicates``, ``interval_method``, ``n_evaluations``, ``seed``,
        ``confidence_level``, ``converged``, ``waiting_for`` (unconverged),
        ``validity_counts``.

    Raises
    ------
    ScenarioError
        (a ValueError) ``n_samples`` not a power of two, unknown output or
        group member, reserved input name, bad option.

    Warns
    -----
    BudgetConvergenceWarning
        The convergence loop reached ``max_samples`` unconverged.

    Notes
    -----
    Sobol' indices assume independent inputs. See the module docstring for
    what the columns mean with correlated inputs.

    References
    ----------
    A. Saltelli et al., Comput. Phys. Commun. 181, 259 (2010);
    P. L'Ecuyer, C. Lemieux, in Modeling Uncertainty, Kluwer (2002), pp. 419-474;
    A. B. Owen, SIAM/ASA J. Uncertain. Quantif. 2, 245 (2014);
    S. Kucherenko, S. Tarantola, P. Annoni, Comput. Phys. Commun. 183, 937 (2012);
    F. Sarrazin, F. Pianosi, T. Wagener, Environ. Model. Softw. 79, 135 (2016);
    F. Khorashadi Zadeh et al., Environ. Model. Softw. 91, 210 (2017).
    """
    with running_on(executor, workers):
        if method not in _METHODS:
            raise ScenarioError(f"method must be one of {_METHODS}; got {method!r}")
        if not 0 < convergence_tolerance:
            raise ScenarioError(
                f"convergence_tolerance must be positive; got {convergence_tolerance!r}"
            )
        n_samples = _power_of_two(n_samples, "n_samples")
        try:
            n_replicates = check_replicates(n_replicates)
        except ValueError as error:
            raise ScenarioError(str(error)) from None
        model = as_model(model, input_names=list(inputs))
        uncertain, fixed = _split_inputs(inputs, model)
        n_outputs = (
            len(outputs) if outputs is not None else len(getattr(model, "outputs", {}) or {})
        )
        check_memory("rank", n_samples, len(uncertain), n_outputs, second_order=second_order)
        names = list(uncertain)
        group_map = _normalise_groups(groups, names)
        generator = np.random.default_rng(rng)
        if correlation is not None:
            correlation = np.asarray(correlation, dtype=float)
            if correlation.shape != (len(names), len(names)):
                raise ScenarioError(
                    f"correlation must be {len(names)}x{len(names)} for inputs {names}; "
                    f"got shape {correlation.shape}"
                )
            if np.allclose(correlation, np.eye(len(names))):
                correlation = None
        runner = _Runner(
            model, names, list(uncertain.values()), fixed, outputs, chunk_size, progress
        )
        max_samples = (
            16 * n_samples if max_samples is None else _power_of_two(max_samples, "max_samples")
        )
        opts = _Options(
            dummy=dummy,
            convergence=convergence,
            convergence_tolerance=convergence_tolerance,
            max_samples=max_samples,
            confidence_level=confidence_level,
            n_bootstrap=n_bootstrap,
            rng=generator,
            estimator=estimator,
            n_replicates=n_replicates,
            shapley=shapley,
        )
        if method == "kucherenko" or (method == "sobol" and correlation is not None):
            dependence = np.eye(len(names)) if correlation is None else correlation
            ds = _rank_dependent(runner, n_samples, opts, correlation=dependence, groups=group_map)
        elif method == "delta" or correlation is not None:
            ds = _rank_given_data(runner, n_samples, opts, correlation=correlation)
            if group_map:
                ds.attrs["groups_note"] = (
                    "no grouped indices from given data; use method='kucherenko' for groups of "
                    "correlated inputs"
                )
        else:
            ds = _rank_sobol(runner, n_samples, opts, second_order=second_order, groups=group_map)
        _add_linear(ds, model, inputs, nominal, correlation, runner.outputs)
        counts = _validity_counts(
            model, np.concatenate(runner.validity) if runner.validity else None
        )
        ds.attrs.update(
            n_evaluations=int(runner.n_evaluations),
            seed=int(rng)
            if isinstance(rng, int | np.integer) and not isinstance(rng, bool)
            else "",
            validity_counts=counts,
            n_invalid=int(counts.get("any", 0)),
            convergence_tolerance=float(convergence_tolerance),
            model=type(getattr(model, "base", model)).__name__,
        )
        ds.attrs.setdefault("converged", True)
        for name in ds.data_vars:
            if name.startswith(("first_order", "total_order", "delta", "group_", "second_order")):  # type: ignore[attr-defined]
                ds[name].attrs.setdefault("units", "1")
        return ds


def _rank_given_data(
    runner: _Runner, n_samples: int, opts: _Options, *, correlation: np.ndarray | None
) -> xr.Dataset:
    from trapbudget.sensitivity.indices.delta import delta_indices

    d = len(runner.names)
    width = d + (1 if opts.dummy else 0)
    # Points per base sample: the Saltelli design's d + 2, up to a power of two.
    per_sample = 1 << int(np.ceil(np.log2(d + 2)))
    names = [*runner.names, *([DUMMY] if opts.dummy else [])]
    parts: dict[str, list[np.ndarray]] = {"x": [], "y": []}

    def step(new: int) -> xr.Dataset:
        # Independent random rows: the bootstrap of the given-data indices needs them.
        unit = opts.rng.random((new * per_sample, width))
        phys = transform(unit[:, :d], runner.distributions, correlation=correlation)
        parts["y"].append(runner.evaluate_physical(phys))
        parts["x"].append(np.column_stack([phys, unit[:, d:]]))
        x, y = np.concatenate(parts["x"]), np.concatenate(parts["y"])
        ds = _given_data_budget(
            delta_indices(
                x,
                y,
                input_names=names,
                output_names=runner.outputs,
                confidence_level=opts.confidence_level,
                n_bootstrap=opts.n_bootstrap,
                # Each delta resample costs a kernel estimate per class: SALib's default 100.
                delta_bootstrap=min(opts.n_bootstrap, 100),
                rng=opts.rng,
            ),
            y,
            runner,
            dummy=opts.dummy,
        )
        ds.attrs.update(
            n_samples=int(x.shape[0] // per_sample),
            n_points=int(x.shape[0]),
            confidence_level=float(opts.confidence_level),
            n_bootstrap=int(opts.n_bootstrap),
        )
        return ds

    return _converge(step, n_samples, opts)


def _given_data_budget(table: xr.Dataset, y: np.ndarray, runner: _Runner, *, dummy: bool):
    """Budget columns from the given-data indices of the inputs and the dummy."""
    ds = table.sel(input=runner.names)
    if dummy:
        floor = np.maximum(table["first_order_high"].sel(input=DUMMY).values, 0.0)
        delta_floor = table["delta_high"].sel(input=DUMMY).values
    else:
        floor = np.zeros(len(runner.outputs))  # type: ignore[arg-type]
        delta_floor = np.zeros(len(runner.outputs))  # type: ignore[arg-type]
    ds["noise_floor"] = ("output", floor)
    ds["delta_noise_floor"] = ("output", delta_floor)
    ds["below_noise_floor"] = (ds["first_order"] < ds["noise_floor"]) & (
        ds["delta"] < ds["delta_noise_floor"]
    )
    for key in ("total_order", "total_order_low", "total_order_high", "interaction"):
        ds[key] = xr.full_like(ds["first_order"], np.nan)
    ds["interaction"].attrs["long_name"] = "not defined for correlated inputs"
    # Rank by delta (defined for any dependence), else by the full first-order index.
    by_delta = bool(np.isfinite(ds["delta"].values).all())
    ds["rank"] = _ranks(ds["delta"] if by_delta else ds["first_order"])
    ds.attrs["rank_by"] = "delta" if by_delta else "first_order"
    mean, std = y.mean(axis=0), y.std(axis=0, ddof=1)
    ds["output_mean"] = ("output", mean)
    ds["output_std"] = ("output", std)
    ds["variance_share"] = ds["first_order"] * xr.DataArray(std**2, dims="output")
    ds["variance_share"].attrs["long_name"] = "full first order x Var(Y), output units squared"
    _unit_attrs(ds, _units(runner.model, runner.outputs, "outputs"))  # type: ignore[arg-type]
    ds.attrs.update(
        method="delta",
        method_name=METHOD_NAMES["delta"],
        dummy=bool(dummy),
        first_order_meaning=_FULL_FIRST_ORDER,
    )
    return ds


def _add_linear(ds, model, inputs, nominal, correlation, outputs) -> None:
    """GUM columns from the linear (first-order) propagation at the nominal point."""
    lin = linear_propagation(
        model, inputs, nominal=nominal, correlation=correlation, outputs=list(outputs)
    )
    names = list(ds["input"].values)
    lin = lin.sel(input=names, output=list(ds["output"].values))
    for key in ("sensitivity_coefficient", "input_uncertainty", "uncertainty_contribution"):
        ds[key] = lin[key].transpose(*[d for d in ("output", "input") if d in lin[key].dims])
    ds["sensitivity_coefficient"].attrs["long_name"] = "dY/dX at the nominal point"
    ds["input_uncertainty"].attrs["long_name"] = "standard uncertainty of the input"
    units = _units(model, names, "inputs")
    for name in names:
        ds.attrs[f"units_{name}"] = lin.attrs.get(f"units_{name}", units[name])
    ds["uncertainty_contribution"].attrs["long_name"] = "|c_i| u_i, the GUM budget column"
