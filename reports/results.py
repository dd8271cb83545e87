"""Machine-readable results: the JSON the command line prints and saves as ``result.json``.

Built from the result Datasets only; no date or path inside, so the same seed
gives the same JSON.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import xarray as xr

from trapbudget.reports.conclusion import bottom_line
from trapbudget.reports.formatting import output_unit

__all__ = ["dim_records", "plain_value", "prediction_json", "study_json"]

_SUMMARY_FIELDS = (
    "nominal",
    "mean",
    "std",
    "median",
    "interval_low",
    "interval_high",
    "shortest_low",
    "shortest_high",
)
_BUDGET_FIELDS = (
    "first_order",
    "first_order_low",
    "first_order_high",
    "total_order",
    "total_order_low",
    "total_order_high",
    "interaction",
    "delta",
    "delta_low",
    "delta_high",
    "variance_share",
    "sensitivity_coefficient",
    "uncertainty_contribution",
)


def plain_value(value: Any) -> Any:
    """A JSON-safe Python scalar: NaN and infinities become None."""
    arr = np.asarray(value)
    if arr.dtype == bool:
        return bool(arr)
    if arr.dtype.kind in "iu":
        return int(arr)
    if arr.dtype.kind == "f":
        x = float(arr)
        return x if math.isfinite(x) else None
    return str(arr)


def _ranked(budget: xr.Dataset, output: str) -> list[dict[str, Any]]:
    row = budget.sel(output=output)
    order = np.argsort(np.asarray(row["rank"].values, dtype=float), kind="stable")
    ranked = []
    for i in order:
        item = row.isel(input=int(i))
        entry: dict[str, Any] = {
            "input": str(item["input"].values),
            "rank": plain_value(item["rank"]),
        }
        for key in _BUDGET_FIELDS:
            if key in item:
                entry[key] = plain_value(item[key])
        if "below_noise_floor" in item:
            entry["below_noise_floor"] = bool(item["below_noise_floor"])
        ranked.append(entry)
    return ranked


def dim_records(ds: xr.Dataset, dim: str) -> list[dict[str, Any]]:
    """One JSON-safe record per label of ``dim``, with every variable that has only that dim."""
    names = [str(v) for v in ds.data_vars if ds[v].dims == (dim,)]
    return [
        {dim: str(label), **{n: plain_value(ds[n].sel({dim: label})) for n in names}}
        for label in ds[dim].values
    ]


def study_json(datasets: Mapping[str, xr.Dataset], study: Mapping[str, Any]) -> dict[str, Any]:
    """The result of a ``rank`` study as plain JSON-serialisable values.

    Per output: units, the Monte Carlo summary statistics, the linear standard
    uncertainty and the inputs ranked by total-order index with first- and
    total-order indices and their confidence bounds.
    """
    summary, budget = datasets["summary"], datasets["budget"]
    linear = datasets.get("linear")
    outputs: dict[str, Any] = {}
    for name in [str(o) for o in summary["output"].values]:
        row = summary.sel(output=name)
        entry: dict[str, Any] = {
            "units": output_unit(name, summary, datasets.get("samples"), budget, linear),
            "summary": {k: plain_value(row[k]) for k in _SUMMARY_FIELDS if k in row},
        }
        if linear is not None and name in linear["output"].values:
            entry["std_linear"] = plain_value(linear["output_std_linear"].sel(output=name))
        if name in budget["output"].values:
            entry["ranked_inputs"] = _ranked(budget, name)
        outputs[name] = entry
    result: dict[str, Any] = {
        "title": study.get("title"),
        "species": study.get("species"),
        "model": study.get("model"),
        "scenario_sha256": study.get("sha256"),
        "seed": study.get("seed"),
        "n_samples": study.get("n_samples"),
        "n_evaluations": study.get("n_evaluations"),
        "confidence_level": study.get("confidence_level"),
        "converged": plain_value(budget.attrs["converged"])
        if "converged" in budget.attrs
        else None,
        # "sobol": Sobol' first/total order; "kucherenko": correlated inputs, full first order
        # and the total order of the independent part; "delta": correlated inputs, full first
        # order and the moment-independent delta (total order undefined, null).
        "index_method": str(budget.attrs.get("method", "")),
        "outputs": outputs,
    }
    if "requirements" in datasets and "requirement" in datasets["requirements"].dims:
        result["requirements"] = dim_records(datasets["requirements"], "requirement")
    if "linear_check" in datasets and "output" in datasets["linear_check"].dims:
        result["linear_check"] = dim_records(datasets["linear_check"], "output")
    findings, conclusion = bottom_line(datasets, study)
    result["conclusion"] = conclusion
    result["findings"] = findings
    samples = datasets.get("samples")
    if samples is not None and samples.attrs.get("validity_counts"):
        result["validity_counts"] = {
            str(k): int(v) for k, v in dict(samples.attrs["validity_counts"]).items()
        }
    return result


def prediction_json(linear: xr.Dataset, *, title: str = "") -> dict[str, Any]:
    """The result of ``predict``: per output the nominal value, the linear standard uncertainty
    and the inputs ranked by their contribution |c| u."""
    outputs: dict[str, Any] = {}
    for name in [str(o) for o in linear["output"].values]:
        row = linear.sel(output=name)
        contrib = np.asarray(row["uncertainty_contribution"].values, dtype=float)
        order = np.argsort(-np.nan_to_num(contrib, nan=-1.0), kind="stable")
        outputs[name] = {
            "units": output_unit(name, linear),
            "nominal": plain_value(row["output_nominal"]),
            "std_linear": plain_value(row["output_std_linear"]),
            "contributions": [
                {
                    "input": str(linear["input"].values[i]),
                    "sensitivity_coefficient": plain_value(row["sensitivity_coefficient"][i]),
                    "input_uncertainty": plain_value(linear["input_uncertainty"][i]),
                    "uncertainty_contribution": plain_value(contrib[i]),
                }
                for i in order
            ],
        }
    return {"title": title, "outputs": outputs}
