"""Physics of a vapor-cell magneto-optical trap: pure, vectorized NumPy functions in SI."""

from trapbudget.models.protocol import InputSpec, ModelError, OutputSpec

__all__ = ["InputSpec", "ModelError", "OutputSpec"]
