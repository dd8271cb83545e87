"""The convergence loop of a ranking: grow the base size until the indices settle."""

from __future__ import annotations

import dataclasses
import warnings
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import xarray as xr

from trapbudget.sensitivity.indices.budget import BudgetConvergenceWarning

__all__ = ["waiting_for"]


@dataclasses.dataclass(frozen=True)
class _Options:
    """Settings every budget driver shares."""

    dummy: bool
    convergence: bool
    convergence_tolerance: float
    max_samples: int
    confidence_level: float
    n_bootstrap: int
    rng: np.random.Generator
    estimator: str
    n_replicates: int = 1
    shapley: bool = False

    def analysis(self) -> dict[str, Any]:
        return {
            "confidence_level": self.confidence_level,
            "n_bootstrap": self.n_bootstrap,
            "rng": self.rng,
            "estimator": self.estimator,
        }


def _converge(step: Callable[[int], xr.Dataset], n_samples: int, opts: _Options) -> xr.Dataset:
    """Run ``step(n_new)`` (adds n_new base samples, returns the budget so far).

    One step without ``opts.convergence``; else double N until the budget
    settles (Sarrazin, Pianosi & Wagener 2016) or the next step would pass
    ``opts.max_samples``.
    """
    convergence, convergence_tolerance, max_samples = (
        opts.convergence,
        opts.convergence_tolerance,
        opts.max_samples,
    )
    history = [step(n_samples)]
    n_total = n_samples
    converged = not convergence
    while convergence:
        if len(history) >= 2 and _settled(history[-2], history[-1], convergence_tolerance):
            converged = True
            break
        if 2 * n_total > max_samples:
            waiting = waiting_for(
                history[-2] if len(history) >= 2 else None, history[-1], convergence_tolerance
            )
            history[-1].attrs["waiting_for"] = waiting
            warnings.warn(
                f"rank: the indices did not settle by n_samples = {n_total} (per replicate): "
                f"waiting for {waiting}; raise max_samples (--max-samples) or "
                "convergence_tolerance",
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


_INDEX_KEYS = ("first_order", "total_order", "delta", "shapley_effect")


def waiting_for(previous: xr.Dataset | None, current: xr.Dataset, tolerance: float) -> str:
    """Name the index the loop waits for: the widest interval, or an unsettled pair."""
    best = ("", "", "", -np.inf)
    for key in _INDEX_KEYS:
        if key not in current or not np.isfinite(current[key].values).any():
            continue
        width = (current[f"{key}_high"] - current[f"{key}_low"]).transpose("output", "input")
        values = np.where(np.isfinite(width.values), width.values, -np.inf)
        i, j = np.unravel_index(np.argmax(values), values.shape)
        if values[i, j] > best[3]:
            best = (
                key,
                str(width["output"].values[i]),
                str(width["input"].values[j]),
                values[i, j],
            )
    key, output, name, width = best
    if width >= tolerance:
        return f"{key} of {name!r} for {output!r} (interval width {width:.3g} >= {tolerance:g})"
    if previous is None:
        return "a second step to check the ranking"
    swap = _first_swap(previous, current)
    return f"a stable ranking ({swap} swapped places)" if swap else "a stable ranking"


def _max_width(ds: xr.Dataset) -> float:
    widths = [
        np.nanmax((ds[f"{k}_high"] - ds[f"{k}_low"]).values)
        for k in _INDEX_KEYS
        if k in ds and np.isfinite(ds[k].values).any()
    ]
    return float(max(widths))


def _stable_ranking(previous: xr.Dataset, current: xr.Dataset) -> bool:
    """True when no two inputs above the noise floor swapped places significantly."""
    return _first_swap(previous, current) is None


def _first_swap(previous: xr.Dataset, current: xr.Dataset) -> str | None:
    """The first pair of inputs above the noise floor that swapped places significantly.

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
        bad = np.argwhere(flipped & separate)
        if bad.size:
            inputs = now["input"].values[keep]
            return f"{inputs[bad[0, 0]]!r} and {inputs[bad[0, 1]]!r} for {name!r}"
    return None


def _settled(previous: xr.Dataset, current: xr.Dataset, convergence_tolerance: float) -> bool:
    return _max_width(current) < convergence_tolerance and _stable_ranking(previous, current)


def _add_history(ds: xr.Dataset, history: Sequence[xr.Dataset]) -> None:
    ds.coords["step_n_samples"] = ("step", [h.attrs["n_samples"] for h in history])
    for key in _INDEX_KEYS:
        if key in ds:
            ds[f"history_{key}"] = xr.concat([h[key] for h in history], dim="step")
            ds[f"history_{key}"].attrs.update(units="1", long_name=f"{key} at each step")
    ds["history_max_width"] = ("step", [_max_width(h) for h in history])
    ds["history_max_width"].attrs.update(
        units="1", long_name="widest confidence interval at each step"
    )
