"""The sensitivity engine: scenarios, propagation, global indices and the error budget.

The main entry points::

    from trapbudget.sensitivity import load_scenario, propagate, summarize, rank
    s = load_scenario("examples/harrier-rb87.toml")
    samples = propagate(s.model, s.inputs, n_samples=4096, correlation=s.correlation, rng=1)
    budget = rank(s.model, s.inputs, n_samples=1024, correlation=s.correlation, rng=1)

and, for specs, upgrades, calibration and drift: :func:`allocate`,
:func:`compare`, :func:`compare_upgrades`, :func:`calibrate`, :func:`diagnose`.
"""

from trapbudget.sensitivity.decisions.allocate import allocate
from trapbudget.sensitivity.decisions.allocation import Allocation, InfeasibleError
from trapbudget.sensitivity.decisions.compare import compare, compare_upgrades
from trapbudget.sensitivity.errors import DataError, ScenarioError, TrapbudgetError, UsageError
from trapbudget.sensitivity.indices.budget import BudgetConvergenceWarning, analyze_budget
from trapbudget.sensitivity.indices.delta import delta_indices
from trapbudget.sensitivity.indices.screening import morris
from trapbudget.sensitivity.indices.sobol import saltelli_design, sobol_indices
from trapbudget.sensitivity.io import load_dataset, save_dataset
from trapbudget.sensitivity.lab.calibrate import calibrate
from trapbudget.sensitivity.lab.calibration import Calibration
from trapbudget.sensitivity.lab.datafiles import read_measurements
from trapbudget.sensitivity.lab.diagnose import Diagnosis, diagnose
from trapbudget.sensitivity.lab.fits import fit_loading_curve, fit_time_of_flight
from trapbudget.sensitivity.linear import compare_linear_monte_carlo, linear_propagation
from trapbudget.sensitivity.propagation import ModelValidityWarning, propagate, propagate_adaptive
from trapbudget.sensitivity.protocol import BoundModel, as_model, evaluate_in_chunks
from trapbudget.sensitivity.ranking import rank
from trapbudget.sensitivity.sampling import transform, unit_design
from trapbudget.sensitivity.scenario.core import Scenario
from trapbudget.sensitivity.scenario.costs import CostTier, SmoothCost, TieredCost
from trapbudget.sensitivity.scenario.distributions import Tolerance
from trapbudget.sensitivity.scenario.reader import load_scenario
from trapbudget.sensitivity.scenario.registry import MODELS, register_model
from trapbudget.sensitivity.scenario.requirements import Requirement, check_requirements
from trapbudget.sensitivity.scenario.settings import Settings, Upgrade
from trapbudget.sensitivity.scenario.writer import scenario_to_toml
from trapbudget.sensitivity.summary import summarize

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
    "Scenario",
    "ScenarioError",
    "Settings",
    "SmoothCost",
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
    "diagnose",
    "evaluate_in_chunks",
    "fit_loading_curve",
    "fit_time_of_flight",
    "linear_propagation",
    "load_dataset",
    "load_scenario",
    "morris",
    "propagate",
    "propagate_adaptive",
    "rank",
    "read_measurements",
    "register_model",
    "saltelli_design",
    "save_dataset",
    "scenario_to_toml",
    "sobol_indices",
    "summarize",
    "transform",
    "unit_design",
]
