"""The engine's side of the model protocol: checking, wrapping, binding, chunked evaluation.

A model is any object with ``inputs`` (name -> InputSpec), ``outputs``
(name -> OutputSpec) and ``evaluate(values) -> dict``; a plain callable
``f(mapping) -> mapping`` is wrapped by :func:`as_model`.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from typing import Any, Protocol, runtime_checkable

import numpy as np
from numpy.typing import ArrayLike

from trapbudget.models.protocol import InputSpec, ModelError, OutputSpec
from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.executors import check_picklable, current_executor, map_chunks

__all__ = [
    "BoundModel",
    "CallableModel",
    "Model",
    "as_model",
    "evaluate_chunks",
    "evaluate_in_chunks",
    "model_name",
    "nominal_validity",
    "select_outputs",
    "validity_counts",
    "validity_flags",
]


@runtime_checkable
class Model(Protocol):
    """What the engine needs from a model."""

    inputs: Mapping[str, InputSpec]
    outputs: Mapping[str, OutputSpec]

    def evaluate(self, values: Mapping[str, ArrayLike]) -> dict[str, np.ndarray]: ...


class CallableModel:
    """A plain callable ``f(mapping) -> mapping`` seen as a model.

    Parameters
    ----------
    function : callable
        Takes a mapping name -> array, returns a mapping name -> array.
    input_names : iterable of str, optional
        Names of the inputs (from the scenario or the ``inputs`` of
        ``propagate``); they have no default and an unbounded range.
    units : mapping name -> str, optional
        SI units of inputs and outputs, for result attrs.

    Notes
    -----
    Outputs are discovered on the first call of :meth:`evaluate`.
    """

    def __init__(
        self,
        function: Callable[[Mapping[str, Any]], Mapping[str, Any]],
        input_names: Iterable[str] = (),
        *,
        units: Mapping[str, str] | None = None,
    ) -> None:
        self.function = function
        self.units = dict(units or {})
        self.inputs: dict[str, InputSpec] = {}
        self.add_inputs(input_names)
        self.outputs: dict[str, OutputSpec] = {}

    def add_inputs(self, names: Iterable[str]) -> None:
        """Declare more input names (a callable accepts whatever it is given)."""
        for name in names:
            if name not in self.inputs:
                self.inputs[name] = InputSpec(
                    name,
                    self.units.get(name, ""),
                    math.nan,
                    -math.inf,
                    math.inf,
                    "input of a plain callable",
                )

    def evaluate(self, values: Mapping[str, ArrayLike]) -> dict[str, np.ndarray]:
        result = self.function(dict(values))
        if not isinstance(result, Mapping):
            raise ModelError(
                f"model callable {getattr(self.function, '__name__', self.function)!r} returned "
                f"{type(result).__name__}, not a mapping name -> array"
            )
        out = {str(k): np.asarray(v) for k, v in result.items()}
        for name in out:
            if name not in self.outputs:
                self.outputs[name] = OutputSpec(name, self.units.get(name, ""), "callable output")
        return out


def as_model(obj: Any, *, input_names: Iterable[str] = (), units=None) -> Any:
    """Return ``obj`` as a model-protocol object.

    Parameters
    ----------
    obj : model or callable
        An object with ``inputs``, ``outputs`` and ``evaluate`` is checked and
        returned unchanged; a plain callable is wrapped in :class:`CallableModel`.
    input_names : iterable of str
        For a callable: its input names.
    units : mapping name -> str, optional
        For a callable: SI units of inputs and outputs.

    Raises
    ------
    ModelError
        If ``obj`` is neither, or its ``inputs``/``outputs`` are not mappings
        of specs.
    """
    if all(hasattr(obj, attr) for attr in ("inputs", "outputs", "evaluate")):
        for attr in ("inputs", "outputs"):
            if not isinstance(getattr(obj, attr), Mapping):
                raise ModelError(
                    f"model {model_name(obj)}: .{attr} must be a mapping name -> spec, got "
                    f"{type(getattr(obj, attr)).__name__}"
                )
        if not callable(obj.evaluate):
            raise ModelError(f"model {model_name(obj)}: .evaluate is not callable")
        if isinstance(obj, CallableModel):
            obj.add_inputs(input_names)
        return obj
    if callable(obj):
        return CallableModel(obj, input_names, units=units)
    raise ModelError(
        f"{type(obj).__name__} is not a model: give an object with inputs, outputs and "
        "evaluate, or a callable f(mapping) -> mapping"
    )


def model_name(model: Any) -> str:
    """A short name for a model (class name; the wrapped one for bound models)."""
    wrapped = getattr(model, "wrapped_model", None)
    if wrapped is not None:
        return model_name(wrapped)
    base = getattr(model, "base", None)
    if base is not None and isinstance(model, BoundModel):
        return model_name(base)
    if isinstance(model, CallableModel):
        return getattr(model.function, "__name__", "callable")
    return type(model).__name__


class BoundModel:
    """A model whose defaults are replaced by fixed values (a scenario's fixed inputs).

    Parameters
    ----------
    model : model
        The wrapped model (``.base``).
    fixed : mapping name -> float
        SI values that replace the defaults of these inputs.

    Notes
    -----
    Same ``inputs`` (with new defaults), ``outputs`` and ``evaluate`` as the
    base; values given to :meth:`evaluate` still override. ``.nominal`` maps
    every input to its (new) default. Other attributes (``validity_flags``,
    ...) are those of the base model.
    """

    def __init__(self, model: Any, fixed: Mapping[str, float]) -> None:
        base = as_model(model, input_names=fixed)
        self.base = base
        self.fixed = {str(k): float(v) for k, v in fixed.items()}
        unknown = [k for k in self.fixed if k not in base.inputs]
        if unknown:
            raise ModelError(
                f"model {model_name(base)}: unknown input {unknown[0]!r}; "
                f"inputs are {', '.join(base.inputs)}"
            )
        self.inputs = {
            name: dataclasses.replace(spec, default=self.fixed[name])
            if name in self.fixed and spec.low <= self.fixed[name] <= spec.high
            else spec
            for name, spec in base.inputs.items()
        }

    @property
    def outputs(self) -> Mapping[str, OutputSpec]:
        return self.base.outputs

    @property
    def nominal(self) -> dict[str, float]:
        """Every input's value when not given: fixed value or the base default."""
        out = {name: float(spec.default) for name, spec in self.base.inputs.items()}
        out.update(self.fixed)
        return out

    def evaluate(self, values: Mapping[str, ArrayLike]) -> dict[str, np.ndarray]:
        return self.base.evaluate({**self.fixed, **values})

    def __getattr__(self, name: str) -> Any:
        if name == "base":  # not yet set during unpickling
            raise AttributeError(name)
        return getattr(self.base, name)

    def __repr__(self) -> str:
        return f"BoundModel({model_name(self.base)}, fixed={self.fixed!r})"


def _evaluate_chunk(
    model: Any, chunk: Mapping[str, np.ndarray], size: int, outputs: Sequence[str] | None = None
):
    """One chunk's outputs, each as an array of ``size`` rows (runs in a worker too).

    With ``outputs``, only those and ``validity`` come back (less to send), unless one
    is missing: then all do, for the caller to name the missing one.
    """
    out = {}
    # Arrays that arrive read-only (dask hands out views on its message buffers) are
    # copied: compiled kernels would otherwise be compiled again for read-only arrays.
    chunk = {k: v if v.flags.writeable else np.array(v) for k, v in chunk.items()}
    result = model.evaluate(chunk)
    if outputs is not None and all(name in result for name in outputs):
        result = {k: v for k, v in result.items() if k in outputs or k == "validity"}
    for name, value in result.items():
        value = np.asarray(value)
        if value.ndim == 0 or value.shape[0] != size:
            value = np.broadcast_to(value, (size, *value.shape[value.ndim > 0 :]))
        out[name] = np.array(value)
    return out


def evaluate_in_chunks(
    model: Any,
    columns: Mapping[str, np.ndarray],
    *,
    chunk_size: int = 65536,
    progress: Callable[[int, int], None] | None = None,
    n_samples: int | None = None,
    executor: Any = None,
    outputs: Sequence[str] | None = None,
) -> dict[str, np.ndarray]:
    """Evaluate ``model`` on 1-D sample columns in chunks of bounded memory.

    Parameters
    ----------
    model : model
        Model-protocol object (see :func:`as_model`).
    columns : mapping name -> 1-D array
        One column per varied input, all of the same length n.
    chunk_size : int
        Samples per model call (default 65536). The chunks are the same whatever
        runs them, so the result is bit for bit the same on any executor.
    progress : callable(done, total), optional
        Called after each chunk.
    n_samples : int, optional
        Number of samples when ``columns`` is empty (every input fixed).
    executor : Executor-like, optional
        Runs the chunks (``submit``); default the executor of the enclosing
        :func:`~trapbudget.sensitivity.executors.running_on` block, else this process.
    outputs : sequence of str, optional
        Return only these outputs and ``validity`` (default every output).

    Returns
    -------
    dict name -> 1-D array
        Each output over the n samples (scalars broadcast to n).

    Raises
    ------
    UsageError
        When the chunks go to other processes and the model cannot be pickled.
    """
    model = as_model(model, input_names=columns)
    arrays = {name: np.asarray(col) for name, col in columns.items()}
    lengths = {a.shape[0] for a in arrays.values() if a.ndim >= 1}
    if any(a.ndim != 1 for a in arrays.values()) or len(lengths) > 1:
        raise ValueError("evaluate_in_chunks: columns must be 1-D arrays of one length")
    total = lengths.pop() if lengths else int(n_samples or 0)
    if total == 0:
        raise ValueError("evaluate_in_chunks: no samples (give columns or n_samples)")
    if chunk_size < 1:
        raise ValueError(f"chunk_size must be >= 1, got {chunk_size}")
    starts = range(0, total, chunk_size)
    # Every chunk is a fresh contiguous copy, here as in a worker: same arrays, same bits.
    chunks = (
        {name: np.array(a[start : start + chunk_size]) for name, a in arrays.items()}
        for start in starts
    )
    sizes = [min(start + chunk_size, total) - start for start in starts]
    # Each chunk's outputs are copied into place as they arrive, while the workers compute
    # the next chunks, not in one serial concatenation at the end (that took 1.4 s of a
    # 7-8 s run of 5 outputs of 2^22 samples on two local processes, measured 2026-12-03).
    out: dict[str, np.ndarray] = {}
    done = 0
    for size, result in zip(
        sizes,
        evaluate_chunks(model, chunks, sizes, executor=executor, outputs=outputs),
        strict=True,
    ):
        for name, value in result.items():
            held = out.get(name)
            if held is None:
                held = out[name] = np.empty((total, *value.shape[1:]), dtype=value.dtype)
            elif np.result_type(held, value) != held.dtype:  # as np.concatenate would promote
                held = out[name] = held.astype(np.result_type(held, value))
            held[done : done + size] = value
        done += size
        if progress is not None:
            progress(done, total)
    return out


def evaluate_chunks(
    model: Any,
    chunks: Iterable[Mapping[str, np.ndarray]],
    sizes: Sequence[int],
    *,
    executor: Any = None,
    outputs: Sequence[str] | None = None,
) -> Iterator[dict[str, np.ndarray]]:
    """Each chunk's outputs, in order, evaluated here or on the executor.

    ``chunks`` may be a generator (drawn as they are sent, so memory stays bounded);
    ``sizes`` gives the rows of each; ``outputs`` as for :func:`evaluate_in_chunks`.
    Without ``executor``, the one of the enclosing
    :func:`~trapbudget.sensitivity.executors.running_on` block, if the run is large
    enough to share. This is the loop :func:`evaluate_in_chunks` runs.
    """
    if executor is None:
        executor = current_executor(int(sum(sizes)), len(sizes))
    if executor is not None:
        check_picklable(model, model_name(model))
    keep = None if outputs is None else list(outputs)
    work = ((model, chunk, size, keep) for chunk, size in zip(chunks, sizes, strict=True))
    return map_chunks(_evaluate_chunk, work, executor)


def select_outputs(
    model: Any, results: Mapping[str, Any], outputs: Sequence[str] | None
) -> list[str]:
    """Names of the outputs to keep; unknown names raise.

    Without ``outputs``: every floating-point output the model returned
    (``validity`` and other integer masks are left out).

    Raises
    ------
    ScenarioError
        For a name the model did not return.
    """
    if outputs is None:
        return [
            name
            for name, value in results.items()
            if name != "validity" and np.issubdtype(np.asarray(value).dtype, np.floating)
        ]
    keep = list(outputs)
    missing = [name for name in keep if name not in results]
    if missing:
        raise ScenarioError(
            f"model {model_name(model)} has no output {missing[0]!r}; outputs are "
            f"{', '.join(o for o in results if o != 'validity')}",
            key="outputs.names",
        )
    return keep


def validity_flags(model: Any) -> tuple[Any, int]:
    """The model's validity flag class (or None) and the bits of its advisory flags.

    Advisory flags (``model.advisory_flags``) qualify a result without invalidating
    it: they are counted, but give no validity warning. A bound model answers for
    its base.
    """
    for obj in (model, getattr(model, "base", None)):
        flags = getattr(obj, "validity_flags", None)
        if flags is not None:
            return flags, int(getattr(obj, "advisory_flags", 0) or 0)
    return None, 0


def validity_counts(model: Any, mask: ArrayLike) -> dict[str, int]:
    """Samples outside the model's validity, per flag of ``model.validity_flags``.

    Without flags on the model, the one key ``"invalid"`` counts every sample
    with a non-zero mask.
    """
    mask = np.asarray(mask)
    if mask.dtype.kind not in "iu":
        mask = mask.astype(np.int64)
    flags, _ = validity_flags(model)
    if flags is None:
        return {"invalid": int(np.count_nonzero(mask))}
    return {
        str(flag.name or int(flag)): int(np.count_nonzero(mask & int(flag)))
        for flag in flags
        if int(flag)
    }


def nominal_validity(model: Any) -> list[Any]:
    """The non-advisory validity flags the model sets at its nominal point (its defaults)."""
    flags, advisory = validity_flags(model)
    mask = int(np.asarray(model.evaluate({}).get("validity", 0)).reshape(-1)[0])
    if flags is None or not mask:
        return []
    return [f for f in flags if int(f) and mask & int(f) and not int(f) & advisory]
