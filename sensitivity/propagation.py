"""Monte Carlo propagation of distributions through a model (fixed size or JCGM 101 adaptive).

Notes
-----
Coverage intervals follow JCGM 101:2008, section 7.7: with the M output
values sorted, ``q = pM`` (rounded to the nearest integer); the
probabilistically symmetric interval is ``[y_(r), y_(r+q)]`` with
``r = (M - q)/2`` (rounded up to an integer when it is not); the shortest is
the ``[y_(r), y_(r+q)]`` of least width over ``r = 1 .. M - q``.
The adaptive procedure is that of JCGM 101:2008, section 7.9.

References
----------
JCGM 101:2008, "Evaluation of measurement data - Supplement 1 to the GUM -
Propagation of distributions using a Monte Carlo method"."""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Mapping, Sequence
from importlib import metadata
from typing import Any

import numpy as np
import xarray as xr
from numpy.typing import ArrayLike

from trapbudget.models.protocol import ModelError
from trapbudget.sensitivity.errors import ConvergenceWarning, ScenarioError, TrapbudgetWarning
from trapbudget.sensitivity.executors import (
    Workers,
    check_picklable,
    current_executor,
    map_chunks,
    running_on,
)
from trapbudget.sensitivity.guard import check_memory
from trapbudget.sensitivity.protocol import (
    BoundModel,
    as_model,
    evaluate_in_chunks,
    model_name,
    select_outputs,
    validity_counts,
    validity_flags,
)
from trapbudget.sensitivity.sampling import (
    SamplingMethod,
    is_distribution,
    sample_inputs,
    split_inputs,
)
from trapbudget.sensitivity.streaming import Keep, choose_keep, merge_moments, propagate_outputs
from trapbudget.sensitivity.summary import _output_names, coverage_interval, numerical_tolerance

__all__ = ["ModelValidityWarning", "propagate", "propagate_adaptive", "select_outputs"]


class ModelValidityWarning(TrapbudgetWarning):
    """Some samples fell outside the model's region of validity."""


def _version() -> str:
    try:
        return metadata.version("trapbudget")
    except metadata.PackageNotFoundError:  # pragma: no cover - not installed
        return "unknown"


def _seed_attr(rng: Any) -> int | None:
    if isinstance(rng, int | np.integer) and not isinstance(rng, bool):
        return int(rng)
    return None


def _split_inputs(model: Any, inputs: Mapping[str, Any]):
    unknown = [name for name in inputs if name not in model.inputs]
    if unknown:
        raise ScenarioError(
            f"model {model_name(model)} has no input {unknown[0]!r}; inputs are "
            f"{', '.join(model.inputs)}",
            key=f"inputs.{unknown[0]}",
        )
    return split_inputs(inputs, model)


def _evaluate(model, columns, *, n_samples, chunk_size, progress, outputs=None):
    try:
        return evaluate_in_chunks(
            model,
            columns,
            chunk_size=chunk_size,
            progress=progress,
            n_samples=n_samples,
            outputs=outputs,
        )
    except ModelError as error:
        raise ScenarioError(f"model {model_name(model)}: {error}") from error


def _nominal_point(
    model: Any, uncertain: Mapping[str, Any], nominal: Mapping[str, float] | None
) -> dict[str, float]:
    point = {name: float(dist.median()) for name, dist in uncertain.items()}
    if nominal is None and isinstance(model, BoundModel):
        nominal = model.nominal  # a scenario's model carries the scenario's nominal values
    if nominal is not None:
        point.update({k: float(v) for k, v in nominal.items() if k in uncertain})
    return point


def propagate(
    model: Any,
    inputs: Mapping[str, Any],
    *,
    n_samples: int,
    method: SamplingMethod = "sobol",
    correlation: ArrayLike | None = None,
    rng: Any = None,
    outputs: Sequence[str] | None = None,
    chunk_size: int = 65536,
    progress: Callable[[int, int], None] | None = None,
    nominal: Mapping[str, float] | None = None,
    keep: Keep | None = None,
    executor: Any = None,
    workers: Workers = None,
) -> xr.Dataset:
    """Propagate input distributions through a model by Monte Carlo.

    Parameters
    ----------
    model : model or callable
        Model-protocol object or plain callable (see ``protocol.as_model``).
    inputs : mapping name -> frozen scipy.stats distribution or float
        Distributions are sampled (SI); floats are held fixed. Inputs not
        given take the model's defaults.
    n_samples : int
        Number of samples M (a power of 2 for ``"sobol"``).
    method : {"random", "latin", "sobol"}
        Sample design (default scrambled Sobol').
    correlation : array (d, d), optional
        Gaussian-copula correlation in the order of the distribution-valued
        entries of ``inputs``.
    rng : seed or numpy.random.Generator, optional
        Same seed, same numbers.
    outputs : sequence of str, optional
        Outputs to keep (default all; ``validity`` is always kept).
    chunk_size : int
        Samples per model call (bounded memory).
    progress : callable(done, total), optional
        Progress callback.
    nominal : mapping name -> float, optional
        Nominal input values (SI) at which the model is evaluated once for the
        ``nominal_outputs`` attr; default the bound values of a scenario's
        model (``BoundModel.nominal``), else the medians of the distributions.
    keep : {"all", "outputs"}, optional
        ``"all"``: every input and output sample in float64. ``"outputs"``
        (summary-only, bounded memory): the requested outputs as float32 and
        ``validity``, no inputs, mean and std streamed in float64 into
        ``attrs["moments"]`` (see :mod:`~trapbudget.sensitivity.streaming`).
        Default: ``"outputs"`` from ``streaming.SUMMARY_ONLY_SAMPLES`` (2^22)
        samples on or when the full run would not fit in memory, else ``"all"``.
    executor : Executor-like, optional
        Runs the model evaluations (anything with ``submit``: a process pool,
        ``dask.distributed.Client.get_executor()``); the result is bit for bit
        the same on any executor and any number of workers.
    workers : int or "auto", optional
        Local processes instead of an executor (``"auto"``: every core for
        large evaluations); default one, this process
        (see :func:`~trapbudget.sensitivity.executors.running_on`).

    Returns
    -------
    xarray.Dataset
        Dim ``sample``; one variable per uncertain input (``role="input"``)
        and per output (``role="output"``), ``validity`` (``role="validity"``)
        when the model gives one; ``units`` and ``long_name`` on each. Attrs:
        ``method``, ``n_samples``, ``seed``, ``model``, ``trapbudget_version``,
        ``fixed_inputs`` (name -> SI value), ``nominal_inputs``,
        ``nominal_outputs``, ``correlation`` (or None), and
        ``validity_counts`` when the model reports validity, ``kept`` ("all" or
        "outputs") and, summary-only, ``moments``.

    Warns
    -----
    ModelValidityWarning
        When some samples fall outside the model's region of validity.
    """
    with running_on(executor, workers):
        model = as_model(model, input_names=inputs)
        uncertain, fixed = _split_inputs(model, inputs)
        n_outputs = (
            len(outputs) if outputs is not None else len(getattr(model, "outputs", {}) or {})
        )
        keep = choose_keep(keep, int(n_samples), len(uncertain), n_outputs)
        check_memory(
            "propagate" if keep == "all" else "propagate-outputs",
            int(n_samples),
            len(uncertain),
            n_outputs,
            power_of_two=method == "sobol",
        )
        # fixed values are bound as scalars: the model broadcasts them (bounded memory)
        runner = BoundModel(model, fixed) if fixed else model
        moments = None
        if keep == "outputs":
            columns: dict[str, np.ndarray] = {}
            try:
                results, moments = propagate_outputs(
                    runner,
                    uncertain,
                    n_samples=int(n_samples),
                    method=method,
                    correlation=correlation,
                    rng=rng,
                    outputs=outputs,
                    chunk_size=chunk_size,
                    progress=progress,
                )
            except ModelError as error:
                raise ScenarioError(f"model {model_name(model)}: {error}") from error
        else:
            columns = sample_inputs(
                uncertain, n_samples=n_samples, method=method, correlation=correlation, rng=rng
            )
            results = _evaluate(
                runner,
                columns,
                n_samples=n_samples,
                chunk_size=chunk_size,
                progress=progress,
                outputs=outputs,
            )
        kept = select_outputs(model, results, outputs)
        if "validity" in results and "validity" not in kept:
            kept.append("validity")

        point = {**_nominal_point(model, uncertain, nominal), **fixed}
        nominal_results = _evaluate(
            model,
            {k: np.array([v]) for k, v in point.items()},
            n_samples=1,
            chunk_size=1,
            progress=None,
        )
        data_vars: dict[str, xr.DataArray] = {}
        for name, values in columns.items():
            spec = model.inputs[name]
            data_vars[name] = xr.DataArray(
                values,
                dims="sample",
                attrs={"units": spec.unit, "long_name": spec.description, "role": "input"},
            )
        for name in kept:
            spec = model.outputs.get(name)
            role = "validity" if name == "validity" else "output"
            data_vars[name] = xr.DataArray(
                results[name],
                dims="sample",
                attrs={
                    "units": spec.unit if spec is not None else "",
                    "long_name": spec.description if spec is not None else name,
                    "role": role,
                },
            )
        attrs: dict[str, Any] = {
            "method": method,
            "n_samples": int(n_samples),
            "seed": _seed_attr(rng),
            "model": model_name(model),
            "trapbudget_version": _version(),
            "fixed_inputs": dict(fixed),
            "nominal_inputs": point,
            "nominal_outputs": {
                name: float(np.asarray(nominal_results[name]).ravel()[0])
                for name in kept
                if name != "validity"
            },
            "correlation": None if correlation is None else np.asarray(correlation).tolist(),
        }
        attrs["kept"] = keep
        if moments is not None:
            attrs["moments"] = moments  # output -> [finite count, mean, std], float64
        # a summary-only run carries no sample coordinate (8 bytes a sample)
        coords = {"sample": np.arange(int(n_samples))} if keep == "all" else {}
        ds = xr.Dataset(data_vars, coords=coords, attrs=attrs)
        if "validity" in results:
            _report_validity(ds, model, stacklevel=3)
        return ds


def _report_validity(ds: xr.Dataset, model: Any, *, stacklevel: int) -> None:
    mask = np.asarray(ds["validity"].values).astype(np.int64)
    counts = validity_counts(model, mask)
    flags, advisory = validity_flags(model)
    serious = mask & ~advisory
    n_invalid = int(np.count_nonzero(serious))
    ds.attrs["validity_counts"] = counts
    ds.attrs["invalid_fraction"] = n_invalid / mask.size
    ds.attrs["advisory_fraction"] = int(np.count_nonzero(mask & advisory)) / mask.size
    if n_invalid:
        advisory_names = {f.name for f in flags if int(f) & advisory} if flags else set()
        reasons = ", ".join(
            f"{name} {count} ({100.0 * count / mask.size:.3g} %)"
            for name, count in counts.items()
            if count and name not in advisory_names
        )
        warnings.warn(
            f"{100.0 * n_invalid / mask.size:.3g} % of {mask.size} samples fell outside the "
            f"validity of model {model_name(model)}: {reasons}",
            ModelValidityWarning,
            stacklevel=stacklevel,
        )


def _propagate_batch(model: Any, inputs: Mapping[str, Any], options: dict) -> xr.Dataset:
    """One batch of an adaptive run (in a worker, too); validity is reported at the end."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelValidityWarning)
        return propagate(model, inputs, **options)


def _batch_statistics(ds: xr.Dataset, names: Sequence[str], confidence_level: float):
    out = np.empty((len(names), 4))
    for i, name in enumerate(names):
        y = np.asarray(ds[name].values, dtype=float)
        y = y[np.isfinite(y)]
        if y.size < 2:  # the output is undefined in (almost) every run: nothing to settle
            out[i] = np.nan
            continue
        low, high = coverage_interval(y, confidence_level=confidence_level)
        out[i] = (np.mean(y), np.std(y, ddof=1), low, high)
    return out


def propagate_adaptive(
    model: Any,
    inputs: Mapping[str, Any],
    *,
    confidence_level: float = 0.95,
    significant_digits: int = 2,
    max_samples: int = 1_000_000,
    rng: Any = None,
    method: SamplingMethod = "random",
    correlation: ArrayLike | None = None,
    outputs: Sequence[str] | None = None,
    chunk_size: int = 65536,
    progress: Callable[[int, int], None] | None = None,
    nominal: Mapping[str, float] | None = None,
    executor: Any = None,
    workers: Workers = None,
) -> xr.Dataset:
    """Adaptive Monte Carlo propagation (JCGM 101:2008, section 7.9).

    Batches of ``M = max(ceil(100 / (1 - p)), 10^4)`` trials (the next power
    of two for ``"sobol"``, each batch an independent scramble) are drawn
    until, for every output, twice the standard deviation of the batch means
    of y, u(y) and both coverage-interval ends is below the numerical
    tolerance ``delta = 0.5 * 10^l`` of u(y) written with
    ``significant_digits`` significant digits.

    Parameters
    ----------
    model, inputs, method, correlation, outputs, chunk_size, nominal
        As for :func:`propagate`.
    confidence_level : float
        Coverage probability p.
    significant_digits : int
        n_dig, significant digits of u(y) to stabilise.
    max_samples : int
        Stop (unconverged) after this many trials in all.
    rng : seed or Generator
        One child stream per batch is spawned from it.
    progress : callable(done, total), optional
        Called after each batch with (trials so far, max_samples).
    executor, workers : optional
        Where the model runs, as for :func:`~trapbudget.sensitivity.propagate`.

    Returns
    -------
    xarray.Dataset
        All samples, as from :func:`propagate`, with attrs ``converged``
        (bool), ``n_batches``, ``batch_size``, ``numerical_tolerance`` and
        ``achieved_tolerance`` (output -> [mean, std, low, high], 2 s of the
        batch means), ``confidence_level`` and ``significant_digits``.
    """
    with running_on(executor, workers):
        if not 0 < confidence_level < 1:
            raise ValueError(f"confidence_level must lie in (0, 1), got {confidence_level}")
        batch = max(math.ceil(100.0 / (1.0 - confidence_level)), 10_000)
        if method == "sobol":
            batch = 1 << (batch - 1).bit_length()
        parent = np.random.default_rng(rng)
        # The whole run decides what is kept: summary-only if max_samples samples would be.
        n_inputs = sum(1 for value in inputs.values() if is_distribution(value))
        keep = choose_keep(None, max(max_samples, batch), n_inputs, len(outputs or ()) or 8)
        batches: list[xr.Dataset] = []
        stats: list[np.ndarray] = []
        names: list[str] = []
        converged = False
        delta: dict[str, float] = {}
        achieved: dict[str, list[float]] = {}
        n_batches = max(max_samples, batch) // batch
        options = {
            "n_samples": batch,
            "method": method,
            "correlation": correlation,
            "outputs": outputs,
            "chunk_size": chunk_size,
            "nominal": nominal,
            "keep": keep,
        }
        # Batches go out a few at a time to the executor, if any (each a whole propagate
        # with its own child stream, spawned in order); those drawn past the batch at
        # which the run converges are dropped, so the result is the sequential one.
        runner = current_executor(max(max_samples, batch), n_batches)
        if runner is not None:
            check_picklable(model, model_name(model))
        stream = map_chunks(
            _propagate_batch,
            ((model, inputs, {**options, "rng": parent.spawn(1)[0]}) for _ in range(n_batches)),
            runner,
        )
        for ds in stream:
            if not names:
                names = _output_names(ds, outputs)
            batches.append(ds)
            stats.append(_batch_statistics(ds, names, confidence_level))
            if progress is not None:
                progress(len(batches) * batch, max_samples)
            if len(batches) < 2:
                continue
            table = np.stack(stats)  # (h, outputs, 4)
            h = table.shape[0]
            spread = 2.0 * table.std(axis=0, ddof=1) / math.sqrt(h)
            done = True
            for i, name in enumerate(names):
                y = np.concatenate([np.asarray(b[name].values, dtype=float) for b in batches])
                y = y[np.isfinite(y)]
                u = float(np.std(y, ddof=1)) if y.size >= 2 else math.nan
                tol = numerical_tolerance(u, significant_digits=significant_digits)
                delta[name] = tol
                achieved[name] = [float(v) for v in spread[i]]
                if math.isfinite(tol) and not np.all(spread[i] <= tol):
                    done = False
            if done:
                converged = True
                break
        stream.close()  # batches still out are cancelled
        result = xr.concat(batches, dim="sample", combine_attrs="override")
        if keep == "all":
            result = result.assign_coords(sample=np.arange(result.sizes["sample"]))
        else:
            result.attrs["moments"] = merge_moments([b.attrs["moments"] for b in batches])
        n_total = int(result.sizes["sample"])
        result.attrs.update(
            {
                "n_samples": n_total,
                "seed": _seed_attr(rng),
                "converged": bool(converged),
                "n_batches": len(batches),
                "batch_size": int(batch),
                "numerical_tolerance": delta,
                "achieved_tolerance": achieved,
                "confidence_level": float(confidence_level),
                "significant_digits": int(significant_digits),
            }
        )
        if "validity" in result:
            _report_validity(result, as_model(model), stacklevel=3)
        if not converged:
            warnings.warn(
                f"adaptive Monte Carlo did not converge within max_samples={max_samples}; "
                "raise max_samples or lower significant_digits",
                ConvergenceWarning,
                stacklevel=2,
            )
        return result
