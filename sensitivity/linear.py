"""First-order (GUM) propagation of uncertainty, and its check against Monte Carlo.

Notes
-----
The law of propagation of uncertainty (JCGM 100:2008, 5.1.2 and 5.2.2):
``u^2(y) = sum_ij c_i c_j u_i u_j r_ij`` with sensitivity coefficients
``c_i = df/dx_i`` at the estimates. The coefficients are central differences
``(f(x + h_i e_i) - f(x - h_i e_i)) / (2 h_i)`` with ``h_i`` a small fraction
of ``u_i``, all evaluated in one vectorized model call; the combination with
correlations is done by the ``uncertainties`` package
(``uncertainties.correlated_values``).

The validation of the linear result by Monte Carlo follows JCGM 101:2008,
section 8: with ``delta`` the numerical tolerance of u(y) (two significant
digits), ``d_low = |y - U_p - y_low|`` and ``d_high = |y + U_p - y_high|``;
the linear result is validated when both are at most ``delta``.

References
----------
JCGM 100:2008 (GUM), sections 5.1, 5.2; JCGM 101:2008 (GUM Supplement 1), section 8.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import xarray as xr
from numpy.typing import ArrayLike
from scipy import stats

from trapbudget.models.protocol import ModelError
from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.executors import Workers, running_on
from trapbudget.sensitivity.propagation import select_outputs
from trapbudget.sensitivity.protocol import BoundModel, as_model, evaluate_in_chunks, model_name
from trapbudget.sensitivity.sampling import check_correlation, copula_to_pearson, split_inputs
from trapbudget.sensitivity.summary import numerical_tolerance

__all__ = ["compare_linear_monte_carlo", "jacobian", "linear_propagation"]

# Step of the central difference as a fraction of the input's standard uncertainty.
_STEP_FRACTION = 1e-3


def jacobian(
    model: Any,
    point: Mapping[str, float],
    steps: Mapping[str, float],
    *,
    outputs: Sequence[str] | None = None,
) -> tuple[dict[str, float], np.ndarray, list[str]]:
    """Central-difference Jacobian of a model at a point, in one model call.

    Parameters
    ----------
    model : model
        Model-protocol object.
    point : mapping name -> float
        Where to differentiate (SI); inputs not given take their defaults.
    steps : mapping name -> float
        Step h_i (SI, > 0) for each input differentiated.
    outputs : sequence of str, optional
        Default every output except ``validity``.

    Returns
    -------
    (nominal outputs, J, output names) : J has shape (outputs, inputs in ``steps`` order).
    """
    model = as_model(model, input_names=point)
    names = list(steps)
    d = len(names)
    base = {k: float(v) for k, v in point.items()}
    columns = {k: np.full(2 * d + 1, v) for k, v in base.items()}
    for j, name in enumerate(names):
        h = float(steps[name])
        columns[name][1 + 2 * j] += h
        columns[name][2 + 2 * j] -= h
    try:
        result = evaluate_in_chunks(model, columns, n_samples=2 * d + 1)
    except ModelError as error:
        raise ScenarioError(f"model {model_name(model)}: {error}") from error
    keep = select_outputs(model, result, outputs)
    jac = np.zeros((len(keep), d))
    nominal = {}
    for i, out in enumerate(keep):
        y = np.broadcast_to(np.asarray(result[out], dtype=float), (2 * d + 1,))
        nominal[out] = float(y[0])
        for j, name in enumerate(names):
            with np.errstate(invalid="ignore", over="ignore"):  # inf - inf at a no-trap limit
                jac[i, j] = (y[1 + 2 * j] - y[2 + 2 * j]) / (2.0 * float(steps[name]))
    return nominal, jac, keep


def linear_propagation(
    model: Any,
    inputs: Mapping[str, Any],
    *,
    nominal: Mapping[str, float] | None = None,
    correlation: ArrayLike | None = None,
    outputs: Sequence[str] | None = None,
    confidence_level: float = 0.95,
    copula: bool = True,
    executor: Any = None,
    workers: Workers = None,
) -> xr.Dataset:
    """First-order (GUM) propagation of the input uncertainties.

    Parameters
    ----------
    model : model or callable
        Model-protocol object.
    inputs : mapping name -> frozen scipy.stats distribution or float
        Distributions give the standard uncertainty (their std); floats are fixed.
    nominal : mapping name -> float, optional
        Estimates x_i (SI); default the bound values of a scenario's model
        (``BoundModel.nominal``), else the means of the distributions.
    correlation : array (d, d), optional
        Correlation of the distribution-valued inputs, in their order: the
        Gaussian-copula (normal-score) coefficients, as for ``propagate``. They
        are converted to the inputs' own Pearson correlation
        (``sampling.copula_to_pearson``), which is what the GUM combines.
    copula : bool
        False: ``correlation`` is already the inputs' Pearson correlation.
    outputs : sequence of str, optional
        Default every output except ``validity``.
    confidence_level : float
        p for the expanded uncertainty ``U_p = k_p u`` (normal ``k_p``).
    executor, workers : optional
        Where the model runs, as for :func:`~trapbudget.sensitivity.propagate`.

    Returns
    -------
    xarray.Dataset
        Dims ``output``, ``input``: ``sensitivity_coefficient`` (output units
        per input unit), ``input_uncertainty`` (dim ``input``),
        ``uncertainty_contribution`` (|c_i| u_i), ``output_nominal``,
        ``output_std_linear`` (with correlations), ``output_std_independent``,
        ``interval_low``/``interval_high`` (y -+ k_p u), ``output_correlation``
        (dims ``output``, ``output_b``); attrs ``confidence_level``,
        ``coverage_factor``, ``units_<output>``, ``units_<input>``.
    """
    with running_on(executor, workers):
        model = as_model(model, input_names=inputs)
        uncertain, fixed = split_inputs(inputs, model)
        names = list(uncertain)
        u = np.array([float(dist.std()) for dist in uncertain.values()])
        x0 = {k: float(dist.mean()) for k, dist in uncertain.items()}
        if nominal is None and isinstance(model, BoundModel):
            nominal = model.nominal  # the scenario's stated estimates
        if nominal is not None:
            x0.update({k: float(v) for k, v in nominal.items() if k in uncertain})
        steps = {
            k: _STEP_FRACTION * ui if ui > 0 else 1e-12 for k, ui in zip(names, u, strict=True)
        }
        y0, jac, keep = jacobian(model, {**fixed, **x0}, steps, outputs=outputs)
        if correlation is None:
            matrix = np.eye(len(names))
        else:
            matrix = check_correlation(correlation, names)
            if copula:
                matrix = copula_to_pearson(matrix, list(uncertain.values()))
        covariance = matrix * np.outer(u, u)
        # JCGM 100:2008 eq. (13) in matrix form (JCGM 102:2011 eq. (3)): U_y = J U_x J^T.
        # Plain matrix algebra, so the result is the same in every process (the
        # `uncertainties` package, the tests' oracle, sums in an order that varies).
        out_cov = jac @ covariance @ jac.T if names else np.zeros((len(keep), len(keep)))
        std_linear = np.sqrt(np.clip(np.diag(out_cov), 0.0, None))
        scale = np.outer(std_linear, std_linear)
        with np.errstate(divide="ignore", invalid="ignore"):
            out_corr = np.where(scale > 0, out_cov / scale, 0.0)
        np.fill_diagonal(out_corr, np.where(std_linear > 0, 1.0, 0.0))
        out_corr = np.clip(out_corr, -1.0, 1.0)
        k = float(stats.norm.ppf(0.5 * (1.0 + confidence_level)))
        y_nom = np.array([y0[o] for o in keep])
        contribution = np.abs(jac) * u[None, :]
        output_units = [getattr(model.outputs.get(o), "unit", "") for o in keep]
        input_units = [model.inputs[n].unit for n in names]
        ds = xr.Dataset(
            {
                "sensitivity_coefficient": (
                    ("output", "input"),
                    jac,
                    {"long_name": "dY/dX at the nominal point"},
                ),
                "input_uncertainty": (
                    "input",
                    u,
                    {"long_name": "standard uncertainty of the input"},
                ),
                "input_nominal": ("input", np.array([x0[n] for n in names])),
                "uncertainty_contribution": (
                    ("output", "input"),
                    contribution,
                    {"long_name": "|c_i| u_i (output units)"},
                ),
                "output_nominal": ("output", y_nom),
                "output_std_linear": (
                    "output",
                    std_linear,
                    {"long_name": "first-order standard uncertainty"},
                ),
                "output_std_independent": (
                    "output",
                    np.sqrt((contribution**2).sum(axis=1)),
                    {"long_name": "first order, correlations ignored"},
                ),
                "interval_low": ("output", y_nom - k * std_linear),
                "interval_high": ("output", y_nom + k * std_linear),
                "output_correlation": (("output", "output_b"), out_corr),
            },
            coords={
                "output": keep,
                "input": names,
                "output_b": keep,
                "units": ("output", output_units),
                "input_units": ("input", input_units),
            },
            attrs={
                "method": "linear (JCGM 100)",
                "model": model_name(model),
                "confidence_level": float(confidence_level),
                "coverage_factor": k,
                "input_correlation": matrix.tolist(),
                **{f"units_{o}": un for o, un in zip(keep, output_units, strict=True)},
                **{f"units_{n}": un for n, un in zip(names, input_units, strict=True)},
            },
        )
        return ds


def compare_linear_monte_carlo(
    linear_ds: xr.Dataset, summary_ds: xr.Dataset, *, significant_digits: int = 2
) -> xr.Dataset:
    """Validate the first-order result against Monte Carlo (JCGM 101:2008, section 8).

    Parameters
    ----------
    linear_ds : xarray.Dataset
        From :func:`linear_propagation`.
    summary_ds : xarray.Dataset
        From ``propagate.summarize`` on Monte Carlo samples (same outputs; its
        ``confidence_level`` is used for both intervals).
    significant_digits : int
        Digits n_dig of the Monte Carlo u(y) that set ``delta`` (JCGM 101 8.2: u(y) =
        c x 10^l with c an n_dig-digit integer, delta = 10^l / 2); 1 or 2 in practice.

    Returns
    -------
    xarray.Dataset
        Dim ``output`` (the outputs in both): ``linear_std``, ``monte_carlo_std``,
        ``std_ratio`` (linear / MC), ``linear_low``, ``linear_high``,
        ``monte_carlo_low``, ``monte_carlo_high``, ``d_low``, ``d_high``,
        ``numerical_tolerance`` (delta), ``std_agrees`` (|u_lin - u_MC| <= delta, for
        information), ``interval_agrees``, ``validated`` (the clause 8.2 verdict: both
        coverage-interval endpoints within delta at ``significant_digits``) and
        ``validated_digits`` (the largest of 1 and 2 digits at which they are, 0 if neither).
    """
    outputs = [
        o for o in linear_ds["output"].values.tolist() if o in summary_ds["output"].values.tolist()
    ]
    if not outputs:
        raise ValueError("compare_linear_monte_carlo: no output is in both Datasets")
    p = float(summary_ds.attrs.get("confidence_level", 0.95))
    k = float(stats.norm.ppf(0.5 * (1.0 + p)))
    lin = linear_ds.sel(output=outputs)
    mc = summary_ds.sel(output=outputs)
    u_lin = lin["output_std_linear"].values
    y_lin = lin["output_nominal"].values
    u_mc = mc["std"].values
    low_lin, high_lin = y_lin - k * u_lin, y_lin + k * u_lin
    delta = np.array([numerical_tolerance(v, significant_digits=significant_digits) for v in u_mc])
    d_low = np.abs(low_lin - mc["interval_low"].values)
    d_high = np.abs(high_lin - mc["interval_high"].values)
    std_agrees = np.abs(u_lin - u_mc) <= delta
    interval_agrees = (d_low <= delta) & (d_high <= delta)
    # the largest number of significant digits (of 1 and 2) at which the endpoints agree
    validated_digits = np.zeros(len(outputs), dtype=np.int64)
    for digits in (1, 2):
        tol = np.array([numerical_tolerance(v, significant_digits=digits) for v in u_mc])
        validated_digits[(d_low <= tol) & (d_high <= tol)] = digits
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(u_mc > 0, u_lin / u_mc, math.nan)
    ds = xr.Dataset(
        {
            "linear_std": ("output", u_lin),
            "monte_carlo_std": ("output", u_mc),
            "std_ratio": ("output", ratio),
            "linear_low": ("output", low_lin),
            "linear_high": ("output", high_lin),
            "monte_carlo_low": ("output", mc["interval_low"].values),
            "monte_carlo_high": ("output", mc["interval_high"].values),
            "d_low": ("output", d_low),
            "d_high": ("output", d_high),
            "numerical_tolerance": ("output", delta),
            "std_agrees": ("output", std_agrees),
            "interval_agrees": ("output", interval_agrees),
            "validated": ("output", interval_agrees),
            "validated_digits": ("output", validated_digits),
        },
        coords={"output": outputs},
        attrs={
            "confidence_level": p,
            "significant_digits": int(significant_digits),
            "reference": "JCGM 101:2008 section 8",
        },
    )
    return ds
