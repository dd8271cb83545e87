"""Common random numbers: one unit design pushed through several scenarios.

Sample k of every scenario comes from row k of the same design, so paired
differences carry only the noise of the change. On Sobol' designs the rows come
in independently scrambled blocks (:func:`replicated_unit`) so that the
standard errors of those differences can be estimated from independent block
means.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import xarray as xr

from trapbudget.sensitivity.scenario.core import Scenario

__all__ = ["COMPARE_REPLICATES", "common_random_samples", "replicated_unit"]


def _uncertain_names(scenarios: Sequence[Scenario]) -> list[str]:
    names: list[str] = []
    for scenario in scenarios:
        for name in scenario.inputs:
            if name not in names:
                names.append(name)
    return names


def _required_outputs(scenario: Scenario, outputs: Sequence[str] | None) -> list[str]:
    wanted = list(outputs) if outputs is not None else list(scenario.outputs)
    for req in scenario.requirements:
        if req.output not in wanted:
            wanted.append(req.output)
    return wanted


def common_random_samples(
    scenarios: Sequence[Scenario],
    *,
    n_samples: int,
    method: str = "sobol",
    rng: int | np.random.Generator | None = None,
    outputs: Sequence[str] | None = None,
    unit: np.ndarray | None = None,
    chunk_size: int = 65536,
    progress: Callable[[int, int], None] | None = None,
) -> list[xr.Dataset]:
    """Propagate several scenarios through one shared unit-cube design.

    Parameters
    ----------
    scenarios : sequence of Scenario
        Scenarios to evaluate; they may differ in tolerances, nominal values,
        correlations and model.
    n_samples : int
        Number of samples (a power of 2 for ``method="sobol"``).
    method : {"random", "latin", "sobol"}
        Design of the unit cube (:func:`trapbudget.sensitivity.sampling.unit_design`).
    rng : seed or numpy.random.Generator, optional
        Randomness of the design.
    outputs : sequence of str, optional
        Outputs to keep (default each scenario's outputs plus those its
        requirements name).
    unit : array (n_samples, d), optional
        A precomputed design over the union of the scenarios' uncertain
        inputs (in order of first appearance); drawn when omitted.
    chunk_size : int
        Samples per model call (bounded memory).
    progress : callable, optional
        ``progress(done, total)`` over all scenarios.

    Returns
    -------
    list of xarray.Dataset
        One samples Dataset per scenario, dim ``sample``, in the schema of
        :func:`trapbudget.sensitivity.propagation.propagate`; sample k of every
        Dataset comes from row k of the same unit design.

    Notes
    -----
    Column j of the design always feeds the same input, whichever scenarios it
    is uncertain in; each scenario maps its columns through its own marginals
    (and Gaussian copula, if correlated), so an input with an unchanged
    distribution takes identical values on both sides.

    References
    ----------
    P. Glasserman, "Monte Carlo Methods in Financial Engineering" (Springer
    2004), section 4.2 (common random numbers).
    """
    from trapbudget.sensitivity.protocol import evaluate_in_chunks
    from trapbudget.sensitivity.sampling import transform, unit_design

    names = _uncertain_names(scenarios)
    if unit is None:
        unit = unit_design(n_samples, len(names), method=method, rng=rng)  # type: ignore[arg-type]
    unit = np.asarray(unit, dtype=float)
    total = len(scenarios) * unit.shape[0]
    results = []
    for k, scenario in enumerate(scenarios):
        own = list(scenario.inputs)
        columns = unit[:, [names.index(n) for n in own]]
        values = transform(
            columns,
            [scenario.inputs[n] for n in own],
            correlation=scenario.correlation,
        )
        mapping = {n: values[:, i] for i, n in enumerate(own)}

        def step(done: int, _total: int, k: int = k) -> None:
            if progress is not None:
                progress(k * unit.shape[0] + done, total)

        result = evaluate_in_chunks(
            scenario.model,
            mapping,
            chunk_size=chunk_size,
            progress=step,
            outputs=_required_outputs(scenario, outputs),
        )
        results.append(_samples_dataset(scenario, mapping, result, outputs, method=method))
    return results


def _samples_dataset(scenario, inputs, result, outputs, *, method) -> xr.Dataset:
    model = scenario.model
    in_specs = getattr(model, "inputs", {}) or {}
    out_specs = getattr(model, "outputs", {}) or {}
    data = {}
    for name, values in inputs.items():
        spec = in_specs.get(name)
        data[name] = xr.Variable(
            "sample",
            np.asarray(values, dtype=float),
            {
                "units": getattr(spec, "unit", ""),
                "long_name": getattr(spec, "description", name),
                "role": "input",
            },
        )
    for name in _required_outputs(scenario, outputs):
        spec = out_specs.get(name)
        data[name] = xr.Variable(
            "sample",
            np.asarray(result[name], dtype=float),
            {
                "units": getattr(spec, "unit", ""),
                "long_name": getattr(spec, "description", name),
                "role": "output",
            },
        )
    if "validity" in result:
        data["validity"] = xr.Variable(
            "sample",
            np.asarray(result["validity"]),
            {"long_name": "validity bit mask", "role": "validity"},
        )
    n = len(next(iter(inputs.values()))) if inputs else 0
    return xr.Dataset(
        data,
        attrs={"method": method, "n_samples": n, "title": str(getattr(scenario, "title", ""))},
    )


#: Independent scramblings of a Sobol' comparison design (blocks of n / 16 rows).
COMPARE_REPLICATES = 16


def replicated_unit(
    n_samples: int, dimension: int, *, method: str, rng: Any
) -> tuple[np.ndarray, int]:
    """A common-random-number design and the number of independent blocks it holds.

    On ``"sobol"`` the n rows are :data:`COMPARE_REPLICATES` independently scrambled
    Sobol' blocks of n / 16 points (fewer blocks when n is small), so that the
    standard errors of paired differences come from independent block means; the
    rows of one scrambled sequence are not independent draws. Other methods: one
    block of independent (or Latin, conservatively treated as independent) rows.
    """
    from trapbudget.sensitivity.sampling import unit_design

    if method != "sobol":
        return unit_design(n_samples, dimension, method=method, rng=rng), 1  # type: ignore[arg-type]
    blocks = min(COMPARE_REPLICATES, max(n_samples // 2, 1))
    streams = np.random.default_rng(rng).spawn(blocks)
    unit = np.concatenate(
        [unit_design(n_samples // blocks, dimension, method="sobol", rng=g) for g in streams]
    )
    return unit, blocks
