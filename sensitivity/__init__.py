"""The sensitivity engine: scenarios, propagation, global indices and the error budget."""

from trapbudget.sensitivity.errors import DataError, ScenarioError, TrapbudgetError, UsageError

__all__ = ["DataError", "ScenarioError", "TrapbudgetError", "UsageError"]
