"""The error budget: global ranking of the inputs by Sobol' indices.

:func:`rank` runs the Saltelli design through a model and returns the budget
Dataset (dims ``output``, ``input``) of DEVELOPERS.md; :func:`analyze_budget`
does the analysis alone on precomputed evaluations.

Columns of the budget
---------------------
Independent inputs (``method="sobol"``): ``first_order`` and ``total_order``
are Sobol' indices (Saltelli 2010 and Jansen 1999 estimators), with bootstrap
bounds; ``interaction = total_order - first_order``; ``variance_share`` is
``total_order * Var(Y)``.

Correlated inputs (a ``correlation`` given, or ``method="delta"``): Sobol'
indices assume independent inputs, so the budget is computed from one
correlated sample instead. ``first_order`` is then the *full* first-order
index ``Var(E[Y|X_i]) / Var(Y)``, which includes the part of Y an input
explains through the inputs it is correlated with (these can add to more than
one); ``delta`` is Borgonovo's moment-independent index; ``total_order`` is NaN;
``rank`` follows ``delta``; ``variance_share`` is ``first_order * Var(Y)``.
The noise floor is the dummy's upper bounds on both, and an input is below
it when both its indices are.

Correlated inputs, conditional sampling (``method="kucherenko"``): for inputs
joined by the Gaussian copula, ``first_order`` is again the full first-order
index and ``total_order`` is ``E[Var(Y|X_~i)] / Var(Y)``, the share of the
variance X_i still carries when every other input is known (Kucherenko,
Tarantola & Annoni 2012); ``interaction = total - first`` may be negative
when correlation dominates. Model runs N(2d+2). ``rank`` follows
``total_order``. ``attrs["method"]`` says which of the three applies.
"""

from __future__ import annotations

import dataclasses
import warnings
from collections.abc import Callable, Mapping, Sequence
from typing import Any, Literal

import numpy as np
import xarray as xr
from scipy.stats import qmc

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.indices import (
    SobolResult,
    check_power_of_two,
    cross_matrices,
    dependent_design,
    design_from_base,
    first_order_given_data,
    sobol_indices,
)
from trapbudget.sensitivity.linear import linear_propagation
from trapbudget.sensitivity.protocol import as_model, evaluate_in_chunks
from trapbudget.sensitivity.sampling import is_distribution, transform

__all__ = ["BudgetConvergenceWarning", "analyze_budget", "rank"]

Method = Literal["sobol", "delta", "kucherenko"]
_METHODS = ("sobol", "delta", "kucherenko")
DUMMY = "dummy"
_FULL_FIRST_ORDER = "full first-order index Var(E[Y|Xi])/Var(Y), correlations included"


class BudgetConvergenceWarning(UserWarning):
    """The convergence loop stopped at ``max_samples`` before the indices settled."""


# --------------------------------------------------------------------------- helpers
def _power_of_two(value: int, name: str) -> int:
    try:
        return check_power_of_two(value, name=name)
    except ValueError as error:
        raise ScenarioError(str(error)) from None


def _split_inputs(inputs: Mapping[str, Any]) -> tuple[dict[str, Any], dict[str, float]]:
    uncertain, fixed = {}, {}
    for name, value in inputs.items():
        if is_distribution(value):
            uncertain[name] = value
        else:
            try:
                fixed[name] = float(value)
            except (TypeError, ValueError):
                raise ScenarioError(
                    f"inputs[{name!r}]: {value!r} is neither a frozen scipy.stats "
                    "distribution nor a number; give e.g. scipy.stats.norm(4e-3, 8e-5) or 4e-3"
                ) from None
    if not uncertain:
        raise ScenarioError("rank needs at least one uncertain input (a frozen distribution)")
    if DUMMY in uncertain:
        raise ScenarioError(
            f"input name {DUMMY!r} is reserved for the noise-floor input; rename it"
        )
    return uncertain, fixed


def _normalise_groups(
    groups: Mapping[str, Any] | None, names: Sequence[str]
) -> dict[str, tuple[str, ...]]:
    """Accept group -> [inputs] or input -> group; return group -> members."""
    if not groups:
        return {}
    values = list(groups.values())
    if all(isinstance(v, str) for v in values):  # input -> group name
        inverted: dict[str, list[str]] = {}
        for member, group in groups.items():
            inverted.setdefault(group, []).append(member)
        groups = inverted
    out = {}
    for group, members in groups.items():
        members = tuple(members)
        unknown = [m for m in members if m not in names]
        if unknown or not members:
            raise ScenarioError(
                f"groups[{group!r}]: {unknown or 'no members'} are not uncertain inputs; "
                f"choose from {list(names)}"
            )
        out[str(group)] = members
    return out


def _output_names(model, evaluated: Mapping[str, np.ndarray], outputs) -> list[str]:
    if outputs is not None:
        missing = [o for o in outputs if o not in evaluated]
        if missing:
            raise ScenarioError(
                f"outputs {missing} are not outputs of the model; choose from "
                f"{[k for k in evaluated if k != 'validity']}"
            )
        return list(outputs)
    return [k for k in evaluated if k != "validity" and np.issubdtype(evaluated[k].dtype, float)]


def _units(model, names: Sequence[str], kind: str) -> dict[str, str]:
    specs = getattr(model, kind, {}) or {}
    return {n: getattr(specs.get(n), "unit", "") if n in specs else "" for n in names}


def _validity_counts(model, validity: np.ndarray | None) -> dict[str, int]:
    if validity is None:
        return {}
    validity = np.asarray(validity).astype(np.int64)
    counts = {"any": int(np.count_nonzero(validity))}
    flags = getattr(model, "validity_flags", None)
    if flags is not None:
        for flag in flags:
            if int(flag):
                counts[str(flag.name)] = int(np.count_nonzero(validity & int(flag)))
    return counts


class _Runner:
    """Evaluate unit-cube rows through a model, collecting outputs and validity."""

    def __init__(self, model, names, distributions, fixed, outputs, chunk_size, progress):
        self.model = model
        self.names = list(names)
        self.distributions = list(distributions)
        self.fixed = dict(fixed)
        self.requested = outputs
        self.outputs: list[str] | None = None
        self.chunk_size = chunk_size
        self.progress = progress
        self.validity: list[np.ndarray] = []
        self.n_evaluations = 0

    def __call__(self, unit_rows: np.ndarray) -> np.ndarray:
        """Evaluate unit-cube rows (n, d) through the inverse CDFs; (n, m) outputs."""
        return self.evaluate_physical(transform(unit_rows, self.distributions))

    def evaluate_physical(self, phys: np.ndarray) -> np.ndarray:
        """Evaluate input rows (n, d) in SI; (n, m) outputs."""
        n = phys.shape[0]
        columns = {name: phys[:, j] for j, name in enumerate(self.names)}
        columns.update({name: np.full(n, value) for name, value in self.fixed.items()})
        done_before = self.n_evaluations
        report = None
        if self.progress is not None:
            # Cumulative over the steps of the convergence loop.
            def report(done: int, total: int) -> None:
                self.progress(done_before + done, done_before + total)

        result = evaluate_in_chunks(
            self.model, columns, chunk_size=self.chunk_size, progress=report
        )
        result = {k: np.asarray(v) for k, v in result.items()}
        if self.outputs is None:
            self.outputs = _output_names(self.model, result, self.requested)
        if "validity" in result:
            self.validity.append(result["validity"])
        self.n_evaluations += n
        return np.column_stack([np.asarray(result[o], dtype=float) for o in self.outputs])


# --------------------------------------------------------------------------- analysis
def analyze_budget(
    f_A: np.ndarray,
    f_B: np.ndarray,
    f_AB: np.ndarray,
    f_BA: np.ndarray | None = None,
    *,
    inputs: Sequence[str],
    outputs: Sequence[str],
    f_AB_total: np.ndarray | None = None,
    f_AB_groups: np.ndarray | None = None,
    f_AB_groups_total: np.ndarray | None = None,
    groups: Mapping[str, Sequence[str]] | None = None,
    dummy_samples: np.ndarray | None = None,
    output_units: Mapping[str, str] | None = None,
    confidence_level: float = 0.95,
    n_bootstrap: int = 200,
    rng: int | np.random.Generator | None = None,
    estimator: Literal["jansen", "sobol2007"] = "jansen",
) -> xr.Dataset:
    """Budget Dataset from precomputed Saltelli-design evaluations.

    Parameters
    ----------
    f_A, f_B : numpy.ndarray, shape (n, m)
        Outputs on the rows of A and B (m outputs, in the order of ``outputs``).
    f_AB : numpy.ndarray, shape (d, n, m)
        Outputs on AB_i, one per input of ``inputs``.
    f_BA : numpy.ndarray, optional, shape (d, n, m)
        Outputs on BA_i; gives ``second_order``.
    inputs, outputs : sequence of str
        Names along the ``input`` and ``output`` dims.
    f_AB_total : numpy.ndarray, optional, shape (d, n, m)
        For dependent inputs (:func:`~trapbudget.sensitivity.indices.dependent_design`):
        ``f_AB`` holds the outputs on C_i (first order) and this the outputs
        on D_i (total order).
    f_AB_groups : numpy.ndarray, optional, shape (g, n, m)
        Outputs on A with each group's columns from B (grouped indices).
    f_AB_groups_total : numpy.ndarray, optional, shape (g, n, m)
        For dependent inputs, the D rows of each group (as ``f_AB_total``).
    groups : mapping, optional
        Group name -> member inputs, in the order of ``f_AB_groups``.
    dummy_samples : numpy.ndarray, optional, shape (2n,)
        Values of an independent uniform input the model ignored, on the A
        rows then the B rows; gives the noise floor.
    output_units : mapping, optional
        Output name -> unit string.
    confidence_level : float, default 0.95
    n_bootstrap : int, default 200
    rng : int or numpy.random.Generator, optional
    estimator : {"jansen", "sobol2007"}, default "jansen"

    Returns
    -------
    xarray.Dataset
        The budget (DEVELOPERS.md, "Result Datasets"), without the linear
        (GUM) columns: :func:`rank` adds those.

    Notes
    -----
    Noise floor: a non-influential input has Jansen total index exactly zero
    in the Saltelli design (its AB rows give the outputs of A), so the
    ignored dummy cannot mark a floor through the design itself. The floor is
    the upper bootstrap bound of the dummy's first-order index estimated from
    the 2n independent A and B rows by the class-mean (given-data) estimator
    (Plischke, Borgonovo & Smith 2013): the size of index an estimator
    returns at this n for an input that does nothing. An input whose
    total-order estimate lies below it is reported as negligible, the
    screening threshold of Khorashadi Zadeh et al. (2017); the floor falls
    roughly as 1/n.

    References
    ----------
    F. Khorashadi Zadeh et al., Environ. Model. Softw. 91, 210 (2017);
    A. Saltelli et al., Comput. Phys. Commun. 181, 259 (2010).
    """
    generator = np.random.default_rng(rng)
    inputs, outputs = list(inputs), list(outputs)
    units = dict(output_units or {})
    kwargs = {
        "n_bootstrap": n_bootstrap,
        "confidence_level": confidence_level,
        "rng": generator,
        "estimator": estimator,
    }
    res = _first_and_total(f_A, f_B, f_AB, f_AB_total, f_BA, **kwargs)
    a = np.asarray(f_A, float).reshape(f_A.shape[0], -1)
    b = np.asarray(f_B, float).reshape(a.shape)
    both = np.concatenate([a, b])
    ds = _index_dataset(res, inputs, outputs, dim="input")
    ds["interaction"] = ds["total_order"] - ds["first_order"]
    ds["interaction"].attrs.update(
        units="1", long_name="total minus first order (interactions of the input)"
    )
    mean = both.mean(axis=0)
    std = both.std(axis=0, ddof=1)
    ds["output_mean"] = ("output", mean)
    ds["output_std"] = ("output", std)
    ds["variance_share"] = ds["total_order"] * xr.DataArray(std**2, dims="output")
    ds["variance_share"].attrs["long_name"] = "total order x Var(Y), output units squared"
    if dummy_samples is not None:
        _, interval = first_order_given_data(
            np.asarray(dummy_samples).reshape(-1, 1),
            both,
            n_bootstrap=max(n_bootstrap, 2),
            confidence_level=confidence_level,
            rng=generator,
        )
        floor = np.maximum(interval.high[0], 0.0)
    else:
        floor = np.zeros(len(outputs))
    ds["noise_floor"] = ("output", floor)
    ds["noise_floor"].attrs.update(
        units="1", long_name="upper bound of the ignored dummy input's index"
    )
    ds["below_noise_floor"] = ds["total_order"] < ds["noise_floor"]
    if dummy_samples is None:
        ds["below_noise_floor"][:] = False
    ds["rank"] = _ranks(ds["total_order"])
    if res.second_order is not None:
        _add_second_order(ds, res, inputs, outputs)
    if groups:
        gres = _first_and_total(f_A, f_B, f_AB_groups, f_AB_groups_total, None, **kwargs)
        gds = _index_dataset(gres, list(groups), outputs, dim="group")
        for name in gds.data_vars:
            ds[f"group_{name}"] = gds[name]
        ds["group_rank"] = _ranks(ds["group_total_order"], dim="group")
        ds["group_members"] = ("group", [",".join(m) for m in groups.values()])
    _unit_attrs(ds, units)
    ds.attrs.update(
        n_samples=int(a.shape[0]),
        confidence_level=float(confidence_level),
        n_bootstrap=int(n_bootstrap),
        estimator=estimator,
        method="sobol",
        rank_by="total_order",
        dummy=dummy_samples is not None,
    )
    return ds


def _first_and_total(f_A, f_B, f_first, f_total, f_BA, **kwargs) -> SobolResult:
    """Sobol' estimates; the total order from ``f_total`` when the design has one."""
    res = sobol_indices(f_A, f_B, f_first, f_BA, **kwargs)
    if f_total is None:
        return res
    total = sobol_indices(f_A, f_B, f_total, **kwargs)
    return dataclasses.replace(
        res,
        total_order=total.total_order,
        total_order_interval=total.total_order_interval,
        total_order_se=total.total_order_se,
    )


def _index_dataset(res: SobolResult, factors, outputs, *, dim: str) -> xr.Dataset:
    def arr(x):
        return xr.DataArray(
            np.asarray(x).reshape(len(factors), len(outputs)).T, dims=("output", dim)
        )

    ds = xr.Dataset(coords={"output": list(outputs), dim: list(factors)})
    for key, label in (("first_order", "first-order"), ("total_order", "total-order")):
        interval = getattr(res, f"{key}_interval")
        ds[key] = arr(getattr(res, key))
        ds[f"{key}_low"] = arr(interval.low)
        ds[f"{key}_high"] = arr(interval.high)
        ds[key].attrs.update(units="1", long_name=f"{label} Sobol' index")
        ds[f"{key}_low"].attrs.update(units="1", long_name=f"{label} index, lower bound")
        ds[f"{key}_high"].attrs.update(units="1", long_name=f"{label} index, upper bound")
    return ds


def _add_second_order(ds: xr.Dataset, res: SobolResult, inputs, outputs) -> None:
    d, m = len(inputs), len(outputs)
    ds.coords["input_b"] = list(inputs)
    for key, values in (
        ("second_order", res.second_order),
        ("second_order_low", res.second_order_interval.low),
        ("second_order_high", res.second_order_interval.high),
    ):
        v = np.asarray(values).reshape(d, d, m)
        ds[key] = (("output", "input", "input_b"), np.moveaxis(v, -1, 0))
        ds[key].attrs.update(units="1", long_name="closed second-order Sobol' index")


def _ranks(values: xr.DataArray, dim: str = "input") -> xr.DataArray:
    """1 = largest; NaN last; ties broken by input order."""
    v = values.transpose("output", dim).values
    key = np.where(np.isnan(v), -np.inf, v)
    order = np.argsort(-key, axis=1, kind="stable")
    ranks = np.empty_like(order)
    rows = np.arange(v.shape[0])[:, None]
    ranks[rows, order] = np.arange(1, v.shape[1] + 1)[None, :]
    out = xr.DataArray(ranks, dims=("output", dim))
    out.attrs["long_name"] = "rank (1 = largest total-order index)"
    return out


def _unit_attrs(ds: xr.Dataset, units: Mapping[str, str]) -> None:
    """Per-output units in ``attrs["units_<output>"]`` (variables mix outputs)."""
    for name in ds["output"].values:
        ds.attrs[f"units_{name}"] = units.get(str(name), "")
    ds["output"].attrs["units"] = [units.get(str(n), "") for n in ds["output"].values]
    ds["output_mean"].attrs["long_name"] = "output mean (units in attrs units_<output>)"
    ds["output_std"].attrs["long_name"] = "output standard deviation (units_<output>)"


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
    tolerance: float = 0.05,
    max_samples: int | None = None,
    chunk_size: int = 65536,
    progress: Callable[[int, int], None] | None = None,
    method: Method = "sobol",
    estimator: Literal["jansen", "sobol2007"] = "jansen",
) -> xr.Dataset:
    """Rank the inputs of a model by global sensitivity indices: the error budget.

    Parameters
    ----------
    model : model protocol object or callable
        Anything :func:`trapbudget.sensitivity.protocol.as_model` accepts.
    inputs : mapping of str to frozen scipy.stats distribution or float
        Uncertain inputs (distributions, SI) and fixed ones (floats, SI).
    n_samples : int
        Base size N of the Saltelli design, a power of two: the model runs
        N(d+2) times, N(2d+2) with second order, plus N per group. With
        ``method="delta"`` (or a correlation) the model runs on one
        correlated Sobol' sample of N times d+2 rounded up to a power of two.
    outputs : sequence of str, optional
        Outputs to analyse (default: every float output of the model).
    second_order : bool, default False
        Also estimate the closed second-order indices (``second_order``).
    correlation : numpy.ndarray, optional
        Gaussian-copula correlation of the uncertain inputs (their order in
        ``inputs``); switches to the given-data method (see module notes).
    nominal : mapping, optional
        Nominal point for the linear (GUM) columns (default: the means).
    rng : int or numpy.random.Generator, optional
        Seed for the design and the bootstrap.
    confidence_level : float, default 0.95
    n_bootstrap : int, default 200
    groups : mapping, optional
        Group name -> member inputs (or input -> group name): adds grouped
        indices on a ``group`` dim (``group_first_order`` etc.).
    dummy : bool, default True
        Add an independent uniform input the model ignores; marks the noise
        floor (``noise_floor``, ``below_noise_floor``).
    convergence : bool, default False
        Double N (reusing every earlier run) until every index's interval
        is narrower than ``tolerance`` and the ranking is stable between the
        last two steps (Sarrazin et al. 2016): no two inputs above the noise
        floor swap places unless their intervals overlap (a statistical tie).
    tolerance : float, default 0.05
        Largest accepted width of a bootstrap interval.
    max_samples : int, optional
        Largest base size the loop may reach (default 16 N).
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

    Returns
    -------
    xarray.Dataset
        Dims ``output`` and ``input``: ``first_order``, ``total_order`` and
        their ``_low``/``_high`` bounds, ``interaction``, ``rank``,
        ``variance_share``, ``sensitivity_coefficient``,
        ``input_uncertainty``, ``uncertainty_contribution``, ``noise_floor``,
        ``below_noise_floor``, ``output_mean``, ``output_std``; optional
        ``second_order``, ``group_*``, ``history_*`` (dim ``step``), and for
        the given-data method ``delta`` with bounds. ``attrs``: ``method``,
        ``n_samples``, ``n_evaluations``, ``seed``, ``confidence_level``,
        ``converged``, ``validity_counts``.

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
    F. Sarrazin, F. Pianosi, T. Wagener, Environ. Model. Softw. 79, 135 (2016);
    F. Khorashadi Zadeh et al., Environ. Model. Softw. 91, 210 (2017).
    """
    if method not in _METHODS:
        raise ScenarioError(f"method must be one of {_METHODS}; got {method!r}")
    if not 0 < tolerance:
        raise ScenarioError(f"tolerance must be positive; got {tolerance!r}")
    n_samples = _power_of_two(n_samples, "n_samples")
    model = as_model(model, input_names=list(inputs))
    uncertain, fixed = _split_inputs(inputs)
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
    runner = _Runner(model, names, list(uncertain.values()), fixed, outputs, chunk_size, progress)
    max_samples = (
        16 * n_samples if max_samples is None else _power_of_two(max_samples, "max_samples")
    )
    opts = _Options(
        dummy=dummy,
        convergence=convergence,
        tolerance=tolerance,
        max_samples=max_samples,
        confidence_level=confidence_level,
        n_bootstrap=n_bootstrap,
        rng=generator,
        estimator=estimator,
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
    counts = _validity_counts(model, np.concatenate(runner.validity) if runner.validity else None)
    ds.attrs.update(
        n_evaluations=int(runner.n_evaluations),
        seed=int(rng) if isinstance(rng, int | np.integer) and not isinstance(rng, bool) else "",
        validity_counts=counts,
        n_invalid=int(counts.get("any", 0)),
        tolerance=float(tolerance),
        model=type(getattr(model, "base", model)).__name__,
    )
    ds.attrs.setdefault("converged", True)
    for name in ds.data_vars:
        if name.startswith(("first_order", "total_order", "delta", "group_", "second_order")):
            ds[name].attrs.setdefault("units", "1")
    return ds


@dataclasses.dataclass(frozen=True)
class _Options:
    """Settings every budget driver shares."""

    dummy: bool
    convergence: bool
    tolerance: float
    max_samples: int
    confidence_level: float
    n_bootstrap: int
    rng: np.random.Generator
    estimator: str

    def analysis(self) -> dict[str, Any]:
        return {
            "confidence_level": self.confidence_level,
            "n_bootstrap": self.n_bootstrap,
            "rng": self.rng,
            "estimator": self.estimator,
        }


class _Parts(dict):
    """Evaluations collected over the steps of the convergence loop, by block name."""

    def add(self, pieces: Mapping[str, np.ndarray | None]) -> None:
        for key, value in pieces.items():
            if value is not None:
                self.setdefault(key, []).append(value)

    def joined(self, key: str, axis: int = 0) -> np.ndarray | None:
        return np.concatenate(self[key], axis=axis) if key in self else None

    def dummy(self) -> np.ndarray | None:
        """The dummy's values on the A rows, then the B rows."""
        return np.concatenate([self.joined("dA"), self.joined("dB")]) if "dA" in self else None


def _dummy_pieces(base: np.ndarray, d: int, width: int) -> dict[str, np.ndarray]:
    return {"dA": base[:, d], "dB": base[:, width + d]} if width > d else {}


def _converge(step: Callable[[int], xr.Dataset], n_samples: int, opts: _Options) -> xr.Dataset:
    """Run ``step(n_new)`` (adds n_new base samples, returns the budget so far).

    One step without ``opts.convergence``; else double N until the budget
    settles (Sarrazin, Pianosi & Wagener 2016) or the next step would pass
    ``opts.max_samples``.
    """
    convergence, tolerance, max_samples = opts.convergence, opts.tolerance, opts.max_samples
    history = [step(n_samples)]
    n_total = n_samples
    converged = not convergence
    while convergence:
        if len(history) >= 2 and _settled(history[-2], history[-1], tolerance):
            converged = True
            break
        if 2 * n_total > max_samples:
            warnings.warn(
                f"rank: the indices did not settle (interval width <= {tolerance} and a "
                f"stable ranking) by n_samples = {n_total}; raise max_samples or tolerance",
                BudgetConvergenceWarning,
                stacklevel=4,
            )
            break
        history.append(step(n_total))
        n_total *= 2
    ds = history[-1]
    if convergence:
        _add_history(ds, history)
    ds.attrs["converged"] = bool(converged)
    return ds


def _rank_sobol(
    runner: _Runner,
    n_samples: int,
    opts: _Options,
    *,
    second_order: bool,
    groups: Mapping[str, tuple[str, ...]],
) -> xr.Dataset:
    d = len(runner.names)
    width = d + (1 if opts.dummy else 0)
    # One sequence for all steps: the first 2^m points, then the next 2^m, and so on,
    # so that each step reuses every earlier model run.
    engine = qmc.Sobol(d=2 * width, scramble=True, rng=opts.rng)
    factors = [(j,) for j in range(d)]
    group_factors = [tuple(runner.names.index(m) for m in members) for members in groups.values()]
    parts = _Parts()

    def step(new: int) -> xr.Dataset:
        base = engine.random(new)
        design = design_from_base(
            np.column_stack([base[:, :d], base[:, width : width + d]]),
            factors=factors,
            second_order=second_order,
        )
        rows = [design.stacked()]
        if groups:
            rows.append(cross_matrices(design.A, design.B, group_factors).reshape(-1, d))
        y = runner(np.concatenate(rows))
        f_a, f_b, f_ab, f_ba = design.split(y[: design.n_evaluations])
        parts.add({"A": f_a, "B": f_b, "AB": f_ab, "BA": f_ba, **_dummy_pieces(base, d, width)})
        if groups:
            parts.add({"G": y[design.n_evaluations :].reshape(len(groups), new, -1)})
        return analyze_budget(
            parts.joined("A"),
            parts.joined("B"),
            parts.joined("AB", 1),
            parts.joined("BA", 1),
            inputs=runner.names,
            outputs=runner.outputs,
            f_AB_groups=parts.joined("G", 1),
            groups=groups,
            dummy_samples=parts.dummy(),
            output_units=_units(runner.model, runner.outputs, "outputs"),
            **opts.analysis(),
        )

    return _converge(step, n_samples, opts)


_INDEX_KEYS = ("first_order", "total_order", "delta")


def _max_width(ds: xr.Dataset) -> float:
    widths = [
        np.nanmax((ds[f"{k}_high"] - ds[f"{k}_low"]).values)
        for k in _INDEX_KEYS
        if k in ds and np.isfinite(ds[k].values).any()
    ]
    return float(max(widths))


def _stable_ranking(previous: xr.Dataset, current: xr.Dataset) -> bool:
    """True when no two inputs above the noise floor swapped places significantly.

    A swap counts only between inputs whose current intervals of the ranking
    index do not overlap: inputs whose indices are statistically tied may trade
    places from one step to the next without the ranking being unsettled.
    """
    key = current.attrs.get("rank_by", "total_order")
    for name in current["output"].values:
        now, before = current.sel(output=name), previous.sel(output=name)
        keep = ~now["below_noise_floor"].values.astype(
            bool
        )  # the floor of the larger, current sample
        value, old = now[key].values[keep], before[key].values[keep]
        low, high = now[f"{key}_low"].values[keep], now[f"{key}_high"].values[keep]
        flipped = np.sign(value[:, None] - value[None, :]) != np.sign(old[:, None] - old[None, :])
        separate = (low[:, None] > high[None, :]) | (high[:, None] < low[None, :])
        if np.any(flipped & separate):
            return False
    return True


def _settled(previous: xr.Dataset, current: xr.Dataset, tolerance: float) -> bool:
    return _max_width(current) < tolerance and _stable_ranking(previous, current)


def _add_history(ds: xr.Dataset, history: Sequence[xr.Dataset]) -> None:
    ds.coords["step_n_samples"] = ("step", [h.attrs["n_samples"] for h in history])
    for key in _INDEX_KEYS:
        if key in ds:
            ds[f"history_{key}"] = xr.concat([h[key] for h in history], dim="step")
            ds[f"history_{key}"].attrs.update(units="1", long_name=f"{key} at each step")
    ds["history_max_width"] = ("step", [_max_width(h) for h in history])
    ds["history_max_width"].attrs.update(
        units="1", long_name="widest bootstrap interval at each step"
    )


def _rank_dependent(
    runner: _Runner,
    n_samples: int,
    opts: _Options,
    *,
    correlation: np.ndarray,
    groups: Mapping[str, tuple[str, ...]],
) -> xr.Dataset:
    d = len(runner.names)
    width = d + (1 if opts.dummy else 0)
    engine = qmc.Sobol(d=2 * width, scramble=True, rng=opts.rng)
    parts = _Parts()

    factors = [(j,) for j in range(d)]
    factors += [tuple(runner.names.index(m) for m in members) for members in groups.values()]
    k = len(factors)

    def step(new: int) -> xr.Dataset:
        base = engine.random(new)
        a, b, c, dd = dependent_design(
            np.column_stack([base[:, :d], base[:, width : width + d]]),
            correlation,
            factors=factors,
        )
        y = runner(np.concatenate([a, b, c.reshape(-1, d), dd.reshape(-1, d)]))
        blocks = y.reshape(2 + 2 * k, new, -1)
        c_rows, d_rows = blocks[2 : 2 + k], blocks[2 + k :]
        parts.add(
            {"A": blocks[0], "B": blocks[1], "C": c_rows[:d], "D": d_rows[:d]}
            | ({"CG": c_rows[d:], "DG": d_rows[d:]} if groups else {})
            | _dummy_pieces(base, d, width)
        )
        ds = analyze_budget(
            parts.joined("A"),
            parts.joined("B"),
            parts.joined("C", 1),
            f_AB_total=parts.joined("D", 1),
            f_AB_groups=parts.joined("CG", 1),
            f_AB_groups_total=parts.joined("DG", 1),
            groups=groups,
            inputs=runner.names,
            outputs=runner.outputs,
            dummy_samples=parts.dummy(),
            output_units=_units(runner.model, runner.outputs, "outputs"),
            **opts.analysis(),
        )
        ds["interaction"].attrs["long_name"] = (
            "total minus first order; negative where correlation dominates"
        )
        ds.attrs.update(
            method="kucherenko",
            first_order_meaning=_FULL_FIRST_ORDER,
            total_order_meaning="E[Var(Y|X~i)]/Var(Y): what X_i adds beyond the other inputs",
        )
        return ds

    return _converge(step, n_samples, opts)


def _rank_given_data(
    runner: _Runner, n_samples: int, opts: _Options, *, correlation: np.ndarray | None
) -> xr.Dataset:
    from trapbudget.sensitivity.screening import delta_indices

    d = len(runner.names)
    width = d + (1 if opts.dummy else 0)
    # Points per base sample: the Saltelli design's d + 2, up to a power of two.
    per_sample = 1 << int(np.ceil(np.log2(d + 2)))
    engine = qmc.Sobol(d=width, scramble=True, rng=opts.rng)
    names = [*runner.names, *([DUMMY] if opts.dummy else [])]
    parts: dict[str, list[np.ndarray]] = {"x": [], "y": []}

    def step(new: int) -> xr.Dataset:
        unit = engine.random(new * per_sample)
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
        floor = np.zeros(len(runner.outputs))
        delta_floor = np.zeros(len(runner.outputs))
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
    _unit_attrs(ds, _units(runner.model, runner.outputs, "outputs"))
    ds.attrs.update(
        method="delta",
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
