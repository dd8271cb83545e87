"""The sensitivity engine: scenarios, propagation, global indices and the error budget.

The main entry points::

    from trapbudget.sensitivity import load_scenario, propagate, rank, run_study
    s = load_scenario("examples/harrier-rb87.toml")
    study = run_study(s, rng=1)                      # what `trapbudget rank` runs
    samples = propagate(s.model, s.inputs, n_samples=4096, correlation=s.correlation, rng=1)
    budget = rank(s.model, s.inputs, n_samples=1024, correlation=s.correlation, rng=1)

and, for specs, upgrades, calibration and drift: :func:`allocate`,
:func:`compare`, :func:`compare_upgrades`, :func:`calibrate`, :func:`diagnose`.

The names are imported on first use (PEP 562), so ``import trapbudget.sensitivity``
is cheap and the command line starts fast; each lives in the module given in
:data:`_LOCATIONS`.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

_LOCATIONS: dict[str, str] = {
    "Allocation": "trapbudget.sensitivity.decisions.allocation",
    "BoundModel": "trapbudget.sensitivity.protocol",
    "BudgetConvergenceWarning": "trapbudget.sensitivity.indices.budget",
    "Calibration": "trapbudget.sensitivity.lab.calibration",
    "CostTier": "trapbudget.sensitivity.scenario.costs",
    "DataError": "trapbudget.sensitivity.errors",
    "Diagnosis": "trapbudget.sensitivity.lab.diagnose",
    "InfeasibleError": "trapbudget.sensitivity.decisions.allocation",
    "MODELS": "trapbudget.sensitivity.scenario.registry",
    "ModelValidityWarning": "trapbudget.sensitivity.propagation",
    "Requirement": "trapbudget.sensitivity.scenario.requirements",
    "RunOptions": "trapbudget.sensitivity.scenario.settings",
    "Scenario": "trapbudget.sensitivity.scenario.core",
    "ScenarioError": "trapbudget.sensitivity.errors",
    "Settings": "trapbudget.sensitivity.scenario.settings",
    "SmoothCost": "trapbudget.sensitivity.scenario.costs",
    "Study": "trapbudget.sensitivity.study",
    "TieredCost": "trapbudget.sensitivity.scenario.costs",
    "Tolerance": "trapbudget.sensitivity.scenario.distributions",
    "TrapbudgetError": "trapbudget.sensitivity.errors",
    "Upgrade": "trapbudget.sensitivity.scenario.settings",
    "UsageError": "trapbudget.sensitivity.errors",
    "allocate": "trapbudget.sensitivity.decisions.allocate",
    "analyze_budget": "trapbudget.sensitivity.indices.budget",
    "as_model": "trapbudget.sensitivity.protocol",
    "calibrate": "trapbudget.sensitivity.lab.calibrate",
    "check_requirements": "trapbudget.sensitivity.compliance",
    "compare": "trapbudget.sensitivity.decisions.compare",
    "compare_linear_monte_carlo": "trapbudget.sensitivity.linear",
    "compare_upgrades": "trapbudget.sensitivity.decisions.compare",
    "delta_indices": "trapbudget.sensitivity.indices.delta",
    "describe_study": "trapbudget.sensitivity.study_record",
    "diagnose": "trapbudget.sensitivity.lab.diagnose",
    "evaluate_in_chunks": "trapbudget.sensitivity.protocol",
    "fit_loading_curve": "trapbudget.sensitivity.lab.fits",
    "fit_time_of_flight": "trapbudget.sensitivity.lab.fits",
    "linear_propagation": "trapbudget.sensitivity.linear",
    "load_dataset": "trapbudget.sensitivity.io",
    "load_scenario": "trapbudget.sensitivity.scenario.reader",
    "morris": "trapbudget.sensitivity.indices.screening",
    "propagate": "trapbudget.sensitivity.propagation",
    "propagate_adaptive": "trapbudget.sensitivity.propagation",
    "rank": "trapbudget.sensitivity.ranking",
    "read_measurements": "trapbudget.sensitivity.lab.datafiles",
    "register_model": "trapbudget.sensitivity.scenario.registry",
    "run_study": "trapbudget.sensitivity.study",
    "scan": "trapbudget.sensitivity.scanning",
    "saltelli_design": "trapbudget.sensitivity.indices.sobol",
    "save_dataset": "trapbudget.sensitivity.io",
    "scenario_to_toml": "trapbudget.sensitivity.scenario.writer",
    "select_outputs": "trapbudget.sensitivity.protocol",
    "sobol_indices": "trapbudget.sensitivity.indices.sobol",
    "summarize": "trapbudget.sensitivity.summary",
    "transform": "trapbudget.sensitivity.sampling",
    "unit_design": "trapbudget.sensitivity.sampling",
    "probability_interval": "trapbudget.sensitivity.compliance",
    "replicate_interval": "trapbudget.sensitivity.indices.replicates",
    "shapley_plan": "trapbudget.sensitivity.indices.shapley",
}

__all__ = [
    "MODELS",
    "Allocation",
    "BoundModel",
    "BudgetConvergenceWarning",
    "Calibration",
    "CostTier",
    "DataError",
    "Diagnosis",
    "InfeasibleError",
    "ModelValidityWarning",
    "Requirement",
    "RunOptions",
    "Scenario",
    "ScenarioError",
    "Settings",
    "SmoothCost",
    "Study",
    "TieredCost",
    "Tolerance",
    "TrapbudgetError",
    "Upgrade",
    "UsageError",
    "allocate",
    "analyze_budget",
    "as_model",
    "calibrate",
    "check_requirements",
    "compare",
    "compare_linear_monte_carlo",
    "compare_upgrades",
    "delta_indices",
    "describe_study",
    "diagnose",
    "evaluate_in_chunks",
    "fit_loading_curve",
    "fit_time_of_flight",
    "linear_propagation",
    "load_dataset",
    "load_scenario",
    "morris",
    "probability_interval",
    "propagate",
    "propagate_adaptive",
    "rank",
    "read_measurements",
    "register_model",
    "replicate_interval",
    "run_study",
    "saltelli_design",
    "save_dataset",
    "scan",
    "scenario_to_toml",
    "select_outputs",
    "shapley_plan",
    "sobol_indices",
    "summarize",
    "transform",
    "unit_design",
]


def __getattr__(name: str) -> Any:
    try:
        module = _LOCATIONS[name]
    except KeyError:
        raise AttributeError(
            f"module 'trapbudget.sensitivity' has no attribute {name!r}"
        ) from None
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))


if TYPE_CHECKING:  # for type checkers and IDEs: the same names, imported eagerly
    from trapbudget.sensitivity.compliance import check_requirements, probability_interval
    from trapbudget.sensitivity.decisions.allocate import allocate
    from trapbudget.sensitivity.decisions.allocation import Allocation, InfeasibleError
    from trapbudget.sensitivity.decisions.compare import compare, compare_upgrades
    from trapbudget.sensitivity.errors import DataError, ScenarioError, TrapbudgetError, UsageError
    from trapbudget.sensitivity.indices.budget import BudgetConvergenceWarning, analyze_budget
    from trapbudget.sensitivity.indices.delta import delta_indices
    from trapbudget.sensitivity.indices.replicates import replicate_interval
    from trapbudget.sensitivity.indices.screening import morris
    from trapbudget.sensitivity.indices.shapley import shapley_plan
    from trapbudget.sensitivity.indices.sobol import saltelli_design, sobol_indices
    from trapbudget.sensitivity.io import load_dataset, save_dataset
    from trapbudget.sensitivity.lab.calibrate import calibrate
    from trapbudget.sensitivity.lab.calibration import Calibration
    from trapbudget.sensitivity.lab.datafiles import read_measurements
    from trapbudget.sensitivity.lab.diagnose import Diagnosis, diagnose
    from trapbudget.sensitivity.lab.fits import fit_loading_curve, fit_time_of_flight
    from trapbudget.sensitivity.linear import compare_linear_monte_carlo, linear_propagation
    from trapbudget.sensitivity.propagation import (
        ModelValidityWarning,
        propagate,
        propagate_adaptive,
    )
    from trapbudget.sensitivity.protocol import (
        BoundModel,
        as_model,
        evaluate_in_chunks,
        select_outputs,
    )
    from trapbudget.sensitivity.ranking import rank
    from trapbudget.sensitivity.sampling import transform, unit_design
    from trapbudget.sensitivity.scanning import scan
    from trapbudget.sensitivity.scenario.core import Scenario
    from trapbudget.sensitivity.scenario.costs import CostTier, SmoothCost, TieredCost
    from trapbudget.sensitivity.scenario.distributions import Tolerance
    from trapbudget.sensitivity.scenario.reader import load_scenario
    from trapbudget.sensitivity.scenario.registry import MODELS, register_model
    from trapbudget.sensitivity.scenario.requirements import Requirement
    from trapbudget.sensitivity.scenario.settings import RunOptions, Settings, Upgrade
    from trapbudget.sensitivity.scenario.writer import scenario_to_toml
    from trapbudget.sensitivity.study import Study, run_study
    from trapbudget.sensitivity.study_record import describe_study
    from trapbudget.sensitivity.summary import summarize
