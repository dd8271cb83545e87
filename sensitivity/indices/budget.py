"""The budget Dataset of a ranking: indices, intervals, ranks and GUM columns from a design.

:func:`~trapbudget.sensitivity.ranking.rank` runs the replicated design
through a model and returns the budget Dataset (dims ``output``, ``input``) of
DEVELOPERS.md; :func:`analyze_budget` here does the analysis alone on
precomputed evaluations. What each column means for independent and for
correlated inputs, and how the intervals are computed, is in the notes of
:mod:`trapbudget.sensitivity.ranking`."""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable, Iterator, Mapping, Sequence
from typing import Any, Literal

import numpy as np
import xarray as xr

from trapbudget.sensitivity.errors import ConvergenceWarning, ScenarioError
from trapbudget.sensitivity.indices.givendata import first_order_given_data
from trapbudget.sensitivity.indices.replicates import replicate_interval, split_replicates
from trapbudget.sensitivity.indices.sobol import SobolResult, check_power_of_two, sobol_indices
from trapbudget.sensitivity.protocol import (
    evaluate_chunks,
    evaluate_in_chunks,
    select_outputs,
    validity_counts,
)
from trapbudget.sensitivity.sampling import UnitCubeModel, split_inputs

__all__ = ["DUMMY", "METHOD_NAMES", "BudgetConvergenceWarning", "IndexMethod", "analyze_budget"]

IndexMethod = Literal["sobol", "delta", "kucherenko"]
_METHODS = ("sobol", "delta", "kucherenko")
DUMMY = "dummy"
_FULL_FIRST_ORDER = "full first-order index Var(E[Y|Xi])/Var(Y), correlations included"
_INDEPENDENT_TOTAL = (
    "independent total-order index E[Var(Y|X~i)]/Var(Y): the share X_i adds when it joins last"
)
#: One printed name per method, wherever a method is named.
METHOD_NAMES = {
    "sobol": "Sobol' indices (Saltelli design)",
    "kucherenko": "conditional sampling (Kucherenko)",
    "delta": "given data (Borgonovo delta)",
    "shapley": "Shapley effects",
}


class BudgetConvergenceWarning(ConvergenceWarning):
    """The convergence loop stopped at ``max_samples`` before the indices settled."""


# --------------------------------------------------------------------------- helpers
def _power_of_two(value: int, name: str) -> int:
    try:
        return check_power_of_two(value, name=name)
    except ValueError as error:
        raise ScenarioError(str(error)) from None


def _split_inputs(
    inputs: Mapping[str, Any], model: Any = None
) -> tuple[dict[str, Any], dict[str, float]]:
    """Uncertain and fixed inputs of a ranking (at least one uncertain, no input named dummy)."""
    uncertain, fixed = split_inputs(inputs, model)
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


def _units(model, names: Sequence[str], kind: str) -> dict[str, str]:
    specs = getattr(model, kind, {}) or {}
    return {n: getattr(specs.get(n), "unit", "") if n in specs else "" for n in names}


def _validity_counts(model, validity: np.ndarray | None) -> dict[str, int]:
    if validity is None:
        return {}
    return {"any": int(np.count_nonzero(validity)), **validity_counts(model, validity)}


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

    def blocks(self, blocks: Iterable[np.ndarray], n_blocks: int, rows: int) -> np.ndarray:
        """Evaluate ``n_blocks`` blocks of ``rows`` unit-cube rows each; (n_blocks * rows, m).

        The blocks come one at a time (a generator builds each while the chunks of the one
        before are evaluated), so the inputs held at once are about one block, not the
        whole design; the outputs fill one preallocated array. The chunk grid (``chunk_size``
        rows within each block) does not depend on the executor.
        """
        model = UnitCubeModel(
            self.model, dict(zip(self.names, self.distributions, strict=True)), fixed=self.fixed
        )
        size = self.chunk_size
        starts = range(0, rows, size)
        sizes = [min(start + size, rows) - start for start in starts] * n_blocks
        d = len(self.names)

        def chunks() -> Iterator[dict[str, np.ndarray]]:
            for block in blocks:
                if block.shape != (rows, d):
                    raise ValueError(f"a block of shape {block.shape}, expected {(rows, d)}")
                for start in starts:
                    piece = block[start : start + size]
                    yield {name: np.array(piece[:, j]) for j, name in enumerate(self.names)}

        total = n_blocks * rows
        done_before = self.n_evaluations
        out: np.ndarray | None = None
        validity: np.ndarray | None = None
        done = 0
        results = evaluate_chunks(model, chunks(), sizes, outputs=self.requested)
        for n, result in zip(sizes, results, strict=True):
            if self.outputs is None:
                self.outputs = select_outputs(self.model, result, self.requested)
            if out is None:
                out = np.empty((total, len(self.outputs)))
                if "validity" in result:
                    validity = np.empty(total, dtype=np.asarray(result["validity"]).dtype)
            for j, name in enumerate(self.outputs):
                out[done : done + n, j] = result[name]
            if validity is not None:
                validity[done : done + n] = result["validity"]
            done += n
            if self.progress is not None:
                self.progress(done_before + done, done_before + total)
        if validity is not None:
            self.validity.append(validity)
        self.n_evaluations += total
        assert out is not None
        return out

    def evaluate_physical(self, phys: np.ndarray) -> np.ndarray:
        """Evaluate input rows (n, d) in SI; (n, m) outputs."""
        n = phys.shape[0]
        columns = {name: phys[:, j] for j, name in enumerate(self.names)}
        columns.update({name: np.full(n, value) for name, value in self.fixed.items()})
        return self._run(self.model, columns, n)

    def _run(self, model: Any, columns: dict[str, np.ndarray], n: int) -> np.ndarray:
        done_before = self.n_evaluations
        report = None
        if self.progress is not None:
            # Cumulative over the steps of the convergence loop.
            def report(done: int, total: int) -> None:
                self.progress(done_before + done, done_before + total)

        result = evaluate_in_chunks(
            model, columns, chunk_size=self.chunk_size, progress=report, outputs=self.requested
        )
        result = {k: np.asarray(v) for k, v in result.items()}
        if self.outputs is None:
            self.outputs = select_outputs(self.model, result, self.requested)
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
    n_replicates: int = 1,
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
        For dependent inputs (:func:`~trapbudget.sensitivity.indices.dependent.dependent_design`):
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
    n_replicates : int, default 1
        R >= 2: every block holds R independent randomizations of the design,
        replicate-major (n = R N rows, N per replicate; the dummy's values
        likewise within its A and B halves): every index and the noise floor
        get Student-t intervals on R - 1 degrees of freedom. 1: one design of
        independent random rows and bootstrap intervals.

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
        "n_replicates": n_replicates,
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
        floor = _noise_floor(
            np.asarray(dummy_samples), a, b, n_replicates, n_bootstrap, confidence_level, generator
        )
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
        n_samples=int(a.shape[0] // n_replicates),
        n_replicates=int(n_replicates),
        interval_method="replicates" if n_replicates > 1 else "bootstrap",
        confidence_level=float(confidence_level),
        n_bootstrap=0 if n_replicates > 1 else int(n_bootstrap),
        estimator=estimator,
        method="sobol",
        method_name=METHOD_NAMES["sobol"],
        rank_by="total_order",
        dummy=dummy_samples is not None,
    )
    return ds


def _noise_floor(dummy, a, b, n_replicates, n_bootstrap, confidence_level, generator):
    """Upper bound of the ignored dummy's given-data first-order index, per output."""
    if n_replicates == 1:
        _, interval = first_order_given_data(
            dummy.reshape(-1, 1),
            np.concatenate([a, b]),
            n_bootstrap=max(n_bootstrap, 2),
            confidence_level=confidence_level,
            rng=generator,
        )
        return np.maximum(interval.high[0], 0.0)
    half = dummy.size // 2
    d_a = split_replicates(dummy[:half], n_replicates)
    d_b = split_replicates(dummy[half:], n_replicates)
    a_r, b_r = split_replicates(a, n_replicates), split_replicates(b, n_replicates)
    reps = [
        first_order_given_data(
            np.concatenate([d_a[r], d_b[r]]).reshape(-1, 1),
            np.concatenate([a_r[r], b_r[r]]),
            n_bootstrap=0,
        )[0][0]
        for r in range(n_replicates)
    ]
    high = replicate_interval(np.stack(reps), confidence_level=confidence_level).high
    return np.maximum(high, 0.0)


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
        ("second_order_low", res.second_order_interval.low),  # type: ignore[union-attr]
        ("second_order_high", res.second_order_interval.high),  # type: ignore[union-attr]
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
