"""Monte Carlo runs too large to hold: the outputs kept as float32, the moments streamed.

``propagate(..., keep="outputs")`` (chosen by itself above :data:`SUMMARY_ONLY_SAMPLES`
samples, or when the full samples would not fit in memory) draws the input samples and
evaluates the model chunk by chunk, and keeps only

- the requested outputs, as float32 (4 bytes a value: the coverage intervals and
  quantiles are read from them; rounding to float32 moves a value by at most 2^-24 of
  itself, 6e-8, far below the Monte Carlo standard error of any quantile of a run that
  can be held in float64),
- the validity mask, as int32,
- mean and standard deviation of each output accumulated in float64 chunk by chunk
  (the pairwise update of Chan, Golub & LeVeque), in ``attrs["moments"]``,

and no input columns. The points are the very points a full run with the same seed
draws (chunked Sobol' and random streams continue where the last chunk stopped), so a
summary-only run and a full one agree to float32 rounding.

References
----------
T. F. Chan, G. H. Golub and R. J. LeVeque, "Algorithms for computing the sample
variance: analysis and recommendations", The American Statistician 37, 242 (1983).
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping, Sequence
from typing import Any, Literal

import numpy as np

from trapbudget.sensitivity.guard import available_memory, memory_needed
from trapbudget.sensitivity.protocol import evaluate_chunks, select_outputs
from trapbudget.sensitivity.sampling import _EDGE, UnitCubeModel, _engine, unit_design

__all__ = ["SUMMARY_ONLY_SAMPLES", "Keep", "choose_keep", "merge_moments", "propagate_outputs"]

#: What a Monte Carlo run keeps: every input and output in float64, or outputs only.
Keep = Literal["all", "outputs"]

#: From this many samples on (2^22, about 4.2e6) ``propagate`` keeps the outputs only:
#: a full run of the trap's 12 uncertain inputs and 4 outputs would hold about 0.5 GiB of
#: samples and three times that at its peak.
SUMMARY_ONLY_SAMPLES = 2**22


def choose_keep(keep: Keep | None, n_samples: int, n_inputs: int, n_outputs: int) -> Keep:
    """What a run of ``n_samples`` keeps.

    ``keep=None``: ``"outputs"`` from :data:`SUMMARY_ONLY_SAMPLES` samples on, or when
    the full run would not fit in :func:`~trapbudget.sensitivity.guard.available_memory`;
    else ``"all"``.
    """
    if keep not in (None, "all", "outputs"):
        raise ValueError(f"keep={keep!r} is not known; use 'all' or 'outputs'")
    if keep is None:
        full = memory_needed("propagate", n_samples, n_inputs, n_outputs)
        big = n_samples >= SUMMARY_ONLY_SAMPLES or full > available_memory()
        keep = "outputs" if big else "all"
    return keep


def _unit_chunks(
    n_samples: int, dimension: int, *, method: str, rng: Any, chunk_size: int
) -> Iterator[np.ndarray]:
    """The points of ``unit_design(n_samples, dimension, method, rng)``, chunk by chunk."""
    from scipy.stats import qmc

    generator = np.random.default_rng(rng)
    power_of_two = (n_samples & (n_samples - 1)) == 0
    if (
        method not in ("random", "sobol")
        or dimension == 0
        or not (power_of_two or method == "random")
    ):
        # A Latin design permutes over all n: drawn whole (n x d float64), then cut;
        # unit_design also refuses an unknown method or a Sobol' n that is no power of 2.
        points = unit_design(n_samples, dimension, method=method, rng=generator)  # type: ignore[arg-type]
        for start in range(0, n_samples, chunk_size):
            yield points[start : start + chunk_size]
        return
    engine = _engine(qmc.Sobol, dimension, generator, scramble=True) if method == "sobol" else None
    for start in range(0, n_samples, chunk_size):
        size = min(chunk_size, n_samples - start)
        points = engine.random(size) if engine is not None else generator.random((size, dimension))
        yield np.clip(points, _EDGE, 1.0 - _EDGE)


class _Moments:
    """Count, mean and sum of squared deviations of the finite values, merged chunk by chunk."""

    def __init__(self) -> None:
        self.n = 0
        self.mean = 0.0
        self.m2 = 0.0

    def add(self, values: np.ndarray) -> None:
        y = np.asarray(values, dtype=float)
        y = y[np.isfinite(y)]
        if y.size == 0:
            return
        mean_b = float(np.mean(y))
        self.merge(y.size, mean_b, float(np.sum((y - mean_b) ** 2)))

    def merge(self, count: int, mean: float, m2: float) -> None:
        """Join a part of ``count`` values with this mean and sum of squared deviations."""
        n = self.n + count
        delta = mean - self.mean
        self.mean += delta * count / n
        self.m2 += m2 + delta * delta * self.n * count / n
        self.n = n

    def as_list(self) -> list[float]:
        std = (self.m2 / (self.n - 1)) ** 0.5 if self.n > 1 else float("nan")
        return [float(self.n), self.mean if self.n else float("nan"), std]


def merge_moments(parts: Sequence[Mapping[str, Sequence[float]]]) -> dict[str, list[float]]:
    """The ``[count, mean, std]`` of runs joined, from those of each (Chan et al. 1983)."""
    merged: dict[str, _Moments] = {}
    for part in parts:
        for name, (count, mean, std) in part.items():
            total = merged.setdefault(name, _Moments())
            if int(count) > 0:
                m2 = std * std * (count - 1) if count > 1 else 0.0
                total.merge(int(count), float(mean), float(m2))
    return {name: m.as_list() for name, m in merged.items()}


def propagate_outputs(
    model: Any,
    uncertain: Mapping[str, Any],
    *,
    n_samples: int,
    method: str,
    correlation: Any,
    rng: Any,
    outputs: Sequence[str] | None,
    chunk_size: int,
    progress: Callable[[int, int], None] | None,
) -> tuple[dict[str, np.ndarray], dict[str, list[float]]]:
    """Draw, evaluate and keep the outputs of ``n_samples`` runs, chunk by chunk.

    Returns the kept outputs (float32; ``validity`` int32) and, per output,
    ``[finite count, mean, standard deviation (ddof 1)]`` accumulated in float64.
    The model must be bound to its fixed inputs already.
    """
    names = list(uncertain)
    sizes = [min(chunk_size, n_samples - start) for start in range(0, n_samples, chunk_size)]
    # unit points go out; the quantile functions run where each chunk is evaluated
    runner = UnitCubeModel(model, uncertain, correlation=correlation)
    chunks = (
        dict(zip(names, unit.T, strict=True))
        for unit in _unit_chunks(
            n_samples, len(names), method=method, rng=rng, chunk_size=chunk_size
        )
    )
    kept: dict[str, np.ndarray] = {}
    moments: dict[str, _Moments] = {}
    start = 0
    for size, result in zip(
        sizes, evaluate_chunks(runner, chunks, sizes, outputs=outputs), strict=True
    ):
        if not kept:
            keep = select_outputs(model, result, outputs)
            for name in keep:
                kept[name] = np.empty(n_samples, dtype=np.float32)
                moments[name] = _Moments()
            if "validity" in result:
                kept["validity"] = np.empty(n_samples, dtype=np.int32)
        for name, target in kept.items():
            value = np.asarray(result[name])
            target[start : start + size] = value
            if name in moments:
                moments[name].add(value)
        start += size
        if progress is not None:
            progress(start, n_samples)
    return kept, {name: m.as_list() for name, m in moments.items()}
