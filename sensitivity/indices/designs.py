"""Drivers of the replicated designs: Saltelli (independent inputs) and conditional sampling.

Each replicate is its own scrambled Sobol' sequence; a step of the convergence
loop draws the next ``new`` points of every replicate, runs the model on all
of them at once and re-analyses everything so far (``n_samples`` is N per
replicate). Beside the Sobol' or Kucherenko indices each step estimates the
Shapley effects from set-redrawn rows of the same A matrix
(:mod:`~trapbudget.sensitivity.indices.shapley`).
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence

import numpy as np
import xarray as xr
from scipy.stats import qmc

from trapbudget.sensitivity.indices.budget import (
    _FULL_FIRST_ORDER,
    _INDEPENDENT_TOTAL,
    METHOD_NAMES,
    _Runner,
    _units,
    analyze_budget,
)
from trapbudget.sensitivity.indices.convergence import _converge, _Options
from trapbudget.sensitivity.indices.dependent import dependent_design
from trapbudget.sensitivity.indices.shapley import add_shapley, shapley_design, shapley_plan
from trapbudget.sensitivity.indices.sobol import SaltelliDesign, cross_matrices, design_from_base

__all__: list[str] = []


class _Parts(dict):
    """Evaluations collected over the steps of the convergence loop, by block name.

    Each piece carries the replicate axis first and its sample axis at
    ``axis + 1``; :meth:`joined` concatenates the steps and lays the
    replicates out replicate-major along the sample axis, as
    :func:`analyze_budget` takes them with ``n_replicates``.
    """

    def add(self, pieces: Mapping[str, np.ndarray | None]) -> None:
        for key, value in pieces.items():
            if value is not None:
                self.setdefault(key, []).append(value)

    def joined(self, key: str, axis: int = 0) -> np.ndarray | None:
        if key not in self:
            return None
        full = np.moveaxis(np.concatenate(self[key], axis=axis + 1), 0, axis)
        shape = full.shape
        return full.reshape(*shape[:axis], shape[axis] * shape[axis + 1], *shape[axis + 2 :])

    def dummy(self) -> np.ndarray | None:
        """The dummy's values on the A rows, then the B rows."""
        return np.concatenate([self.joined("dA"), self.joined("dB")]) if "dA" in self else None


def _dummy_pieces(bases: Sequence[np.ndarray], d: int, width: int) -> dict[str, np.ndarray]:
    if width <= d:
        return {}
    return {
        "dA": np.stack([b[:, d] for b in bases]),
        "dB": np.stack([b[:, width + d] for b in bases]),
    }


def _engines(dimension: int, opts: _Options) -> list[qmc.Sobol]:
    """One independently scrambled Sobol' sequence per replicate."""
    streams = opts.rng.spawn(opts.n_replicates)
    return [qmc.Sobol(d=dimension, scramble=True, rng=g) for g in streams]


def _plans(d: int, opts: _Options) -> list:
    """One Shapley plan per replicate (its own permutations above EXACT_LIMIT inputs)."""
    if not opts.shapley:
        return []
    return [shapley_plan(d, rng=g) for g in opts.rng.spawn(opts.n_replicates)]


def _with_shapley(ds: xr.Dataset, parts: _Parts, plans: list, opts: _Options, headline: bool):
    if plans:
        f_a = np.concatenate(parts["A"], axis=1)
        f_u = np.concatenate(parts["SU"], axis=2)
        add_shapley(ds, f_a, f_u, plans, confidence_level=opts.confidence_level, headline=headline)
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
    # One sequence per replicate for all steps: its first 2^m points, then the next
    # 2^m, and so on, so that each step reuses every earlier model run.
    engines = _engines(2 * width, opts)
    factors = [(j,) for j in range(d)]
    group_factors = [tuple(runner.names.index(m) for m in members) for members in groups.values()]
    parts = _Parts()
    plans = _plans(d, opts)

    def step(new: int) -> xr.Dataset:
        bases = [engine.random(new) for engine in engines]

        def design(r: int) -> SaltelliDesign:
            joined = np.column_stack([bases[r][:, :d], bases[r][:, width : width + d]])
            return design_from_base(joined, factors=factors, second_order=second_order)

        first = design(0)  # every replicate's design has this layout

        def replicate_rows() -> Iterator[np.ndarray]:
            # built one replicate at a time, while the one before is evaluated
            for r in range(opts.n_replicates):
                this = first if r == 0 else design(r)
                rows = [this.stacked()]
                if groups:
                    rows.append(cross_matrices(this.A, this.B, group_factors).reshape(-1, d))
                if plans:
                    # Independent inputs: a set redrawn given the rest is the set from B.
                    rows.append(cross_matrices(this.A, this.B, plans[r].subsets).reshape(-1, d))
                yield np.concatenate(rows)

        n_eval = first.n_evaluations
        n_group = len(groups) * new
        n_plan = len(plans[0].subsets) * new if plans else 0
        y = runner.blocks(replicate_rows(), opts.n_replicates, n_eval + n_group + n_plan)
        y = y.reshape(opts.n_replicates, -1, y.shape[-1])
        split = [first.split(y_r[:n_eval]) for y_r in y]
        if plans:
            n_sets = len(plans[0].subsets)
            parts.add({"SU": y[:, n_eval + n_group :].reshape(opts.n_replicates, n_sets, new, -1)})
        parts.add(
            {
                "A": np.stack([s[0] for s in split]),
                "B": np.stack([s[1] for s in split]),
                "AB": np.stack([s[2] for s in split]),
                "BA": None if second_order is False else np.stack([s[3] for s in split]),
                **_dummy_pieces(bases, d, width),
            }
        )
        if groups:
            parts.add(
                {
                    "G": y[:, n_eval : n_eval + n_group].reshape(
                        opts.n_replicates, -1, new, y.shape[-1]
                    )
                }
            )
        ds = analyze_budget(
            parts.joined("A"),  # type: ignore[arg-type]
            parts.joined("B"),  # type: ignore[arg-type]
            parts.joined("AB", 1),  # type: ignore[arg-type]
            parts.joined("BA", 1),
            inputs=runner.names,
            outputs=runner.outputs,  # type: ignore[arg-type]
            f_AB_groups=parts.joined("G", 1),
            groups=groups,
            dummy_samples=parts.dummy(),
            output_units=_units(runner.model, runner.outputs, "outputs"),  # type: ignore[arg-type]
            n_replicates=opts.n_replicates,
            **opts.analysis(),
        )
        return _with_shapley(ds, parts, plans, opts, headline=False)

    return _converge(step, n_samples, opts)


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
    engines = _engines(2 * width, opts)
    parts = _Parts()

    factors = [(j,) for j in range(d)]
    factors += [tuple(runner.names.index(m) for m in members) for members in groups.values()]
    k = len(factors)
    plans = _plans(d, opts)
    n_sets = len(plans[0].subsets) if plans else 0
    correlated = not np.allclose(correlation, np.eye(d))

    def step(new: int) -> xr.Dataset:
        bases = [engine.random(new) for engine in engines]

        def replicate_rows() -> Iterator[np.ndarray]:
            # built one replicate at a time, while the one before is evaluated
            for r, base in enumerate(bases):
                joined = np.column_stack([base[:, :d], base[:, width : width + d]])
                a, b, c, dd = dependent_design(joined, correlation, factors=factors)
                rows = [a, b, c.reshape(-1, d), dd.reshape(-1, d)]
                if plans:
                    # Same A as the design (same scores); each set redrawn given the rest.
                    rows.append(
                        shapley_design(joined, correlation, plans[r].subsets)[1].reshape(-1, d)
                    )
                yield np.concatenate(rows)

        per_replicate = (2 + 2 * k + n_sets) * new
        y = runner.blocks(replicate_rows(), opts.n_replicates, per_replicate)
        blocks = y.reshape(opts.n_replicates, 2 + 2 * k + n_sets, new, -1)
        if plans:
            parts.add({"SU": blocks[:, 2 + 2 * k :]})
        c_rows, d_rows = blocks[:, 2 : 2 + k], blocks[:, 2 + k : 2 + 2 * k]
        parts.add(
            {"A": blocks[:, 0], "B": blocks[:, 1], "C": c_rows[:, :d], "D": d_rows[:, :d]}
            | ({"CG": c_rows[:, d:], "DG": d_rows[:, d:]} if groups else {})
            | _dummy_pieces(bases, d, width)
        )
        ds = analyze_budget(
            parts.joined("A"),  # type: ignore[arg-type]
            parts.joined("B"),  # type: ignore[arg-type]
            parts.joined("C", 1),  # type: ignore[arg-type]
            f_AB_total=parts.joined("D", 1),
            f_AB_groups=parts.joined("CG", 1),
            f_AB_groups_total=parts.joined("DG", 1),
            groups=groups,
            inputs=runner.names,
            outputs=runner.outputs,  # type: ignore[arg-type]
            dummy_samples=parts.dummy(),
            output_units=_units(runner.model, runner.outputs, "outputs"),  # type: ignore[arg-type]
            n_replicates=opts.n_replicates,
            **opts.analysis(),
        )
        _dependent_meanings(ds)
        return _with_shapley(ds, parts, plans, opts, headline=correlated)

    return _converge(step, n_samples, opts)


def _dependent_meanings(ds: xr.Dataset) -> None:
    """Names and meanings of the conditional-sampling columns (correlated inputs)."""
    # total - first mixes two different decompositions under correlation: not shown.
    ds["interaction"] = xr.full_like(ds["first_order"], np.nan)
    ds["interaction"].attrs.update(
        units="1", long_name="not defined for correlated inputs (see shapley_effect)"
    )
    ds["first_order"].attrs["long_name"] = "full first-order index (correlations included)"
    ds["total_order"].attrs["long_name"] = "independent total-order index (added when last)"
    ds.attrs.update(
        method="kucherenko",
        method_name=METHOD_NAMES["kucherenko"],
        first_order_meaning=_FULL_FIRST_ORDER,
        total_order_meaning=_INDEPENDENT_TOTAL,
    )
