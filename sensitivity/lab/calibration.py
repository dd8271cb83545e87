"""The result of a calibration: fitted constants, covariance, flat directions, new scenario."""

from __future__ import annotations

import datetime as _dt
import math
import os
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np
import xarray as xr

from trapbudget.sensitivity.errors import ScenarioError

try:
    import tomllib
except ImportError:  # pragma: no cover - Python 3.10
    import tomli as tomllib
from trapbudget.sensitivity.io import atomic_write_text
from trapbudget.sensitivity.lab.observations import Observations
from trapbudget.sensitivity.textfiles import read_toml

__all__ = ["Calibration", "CovarianceScaling", "FlatDirection"]

CovarianceScaling = Literal["auto", "always", "never"]
_SCALINGS = ("auto", "always", "never")


@dataclass(frozen=True)
class FlatDirection:
    """A combination of constants the data cannot pin down.

    Attributes
    ----------
    relative_change : dict of str to float
        Relative changes of the constants (largest magnitude 1) that leave the
        fit unchanged to first order, e.g. ``{"a": 1, "b": -1}`` when only the
        product a*b enters.
    singular_value : float
        Singular value of the column-normalised weighted Jacobian (0 = exactly
        flat; 1 = as well determined as an uncorrelated constant).
    held : str
        The constant held at its starting value because of this direction.
    """

    relative_change: dict[str, float]
    singular_value: float
    held: str

    def describe(self) -> str:
        """One line for reports."""
        terms = ", ".join(f"{name} {value:+.2f}" for name, value in self.relative_change.items())
        if len(self.relative_change) == 1:
            return f"the data do not constrain {self.held}; held at its starting value"
        return (
            f"only a combination is constrained (relative changes {terms} leave the fit "
            f"unchanged); {self.held} held at its starting value"
        )


@dataclass(frozen=True)
class Calibration:
    """Result of :func:`calibrate`.

    Attributes
    ----------
    free : tuple of str
        Constants asked to be fitted.
    fitted : tuple of str
        Constants actually fitted (``free`` minus those held).
    values : dict of str to float
        Fitted values (SI), and the starting values of held constants.
    start : dict of str to float
        Starting values.
    units : dict of str to str
        SI unit of each constant.
    covariance : ndarray
        Covariance of ``fitted`` (SI), see ``covariance_scaled``.
    chi2, dof : float, int
        Weighted sum of squared residuals and degrees of freedom.
    p_value : float
        Probability of a chi-square at least as large, given the uncertainties.
    covariance_scaled : bool
        Whether the covariance was multiplied by chi2/dof.
    observations : Observations
        The data fitted.
    predicted : ndarray
        Model prediction for each observation at the fitted constants.
    weights_uncertainty : ndarray
        Uncertainty used to weight each observation (SI).
    flat_directions : tuple of FlatDirection
        What the data cannot determine.
    singular_values : ndarray
        Of the column-normalised weighted Jacobian of the final fit.
    robust : bool
        Whether the soft-L1 loss was used.
    notes : tuple of str
        Statements for the report (scaling, unknown uncertainties, ...).
    scenario : object
        The scenario calibrated.
    curves : xarray.Dataset or None
        The model over each data set's scanned setting, before and after the fit
        (:func:`~trapbudget.sensitivity.lab.fitcurves.fit_curves`); merged into
        :meth:`to_dataset`.
    """

    free: tuple[str, ...]
    fitted: tuple[str, ...]
    values: dict[str, float]
    start: dict[str, float]
    units: dict[str, str]
    covariance: np.ndarray
    chi2: float
    dof: int
    p_value: float
    covariance_scaled: bool
    observations: Observations
    predicted: np.ndarray
    weights_uncertainty: np.ndarray
    flat_directions: tuple[FlatDirection, ...]
    singular_values: np.ndarray
    robust: bool
    notes: tuple[str, ...] = ()
    scenario: Any = field(default=None, repr=False, compare=False)
    curves: xr.Dataset | None = field(default=None, repr=False, compare=False)

    def __repr__(self) -> str:
        fitted = ", ".join(f"{n}={self.values[n]:.4g}" for n in self.free)
        ratio = self.chi2 / self.dof if self.dof > 0 else float("nan")
        return f"Calibration({fitted}; chi2/dof={ratio:.3g}, {len(self.notes)} notes)"

    def _repr_html_(self) -> str:
        import html

        return f"<pre>{html.escape(repr(self))}</pre>"

    @property
    def reduced_chi2(self) -> float:
        """chi2 / dof (nan with no degrees of freedom)."""
        return self.chi2 / self.dof if self.dof > 0 else math.nan

    @property
    def uncertainties(self) -> dict[str, float]:
        """Standard uncertainty of each fitted constant (SI)."""
        return {
            name: float(math.sqrt(max(self.covariance[i, i], 0.0)))
            for i, name in enumerate(self.fitted)
        }

    @property
    def correlation(self) -> np.ndarray:
        """Correlation matrix of the fitted constants."""
        std = np.sqrt(np.clip(np.diag(self.covariance), 0.0, None))
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = self.covariance / np.outer(std, std)
        return np.where(np.isfinite(corr), corr, 0.0)

    @property
    def held(self) -> tuple[str, ...]:
        """Constants the data could not determine (kept at their starting values)."""
        return tuple(name for name in self.free if name not in self.fitted)

    @property
    def normalized_residuals(self) -> np.ndarray:
        """(measured - predicted) / uncertainty per observation."""
        return (self.observations.value - self.predicted) / self.weights_uncertainty

    def to_dataset(self) -> xr.Dataset:
        """The result as a Dataset (dims ``constant``, ``constant_b``, ``observation``)."""
        fitted = list(self.fitted)
        unc = self.uncertainties
        ds = xr.Dataset(
            {
                "value": ("constant", [self.values[n] for n in self.free]),
                "start": ("constant", [self.start[n] for n in self.free]),
                "uncertainty": (
                    "constant",
                    [unc.get(n, math.nan) for n in self.free],
                ),
                "fitted": ("constant", [n in self.fitted for n in self.free]),
                "correlation": (("constant_fit", "constant_fit_b"), self.correlation),
                "covariance": (("constant_fit", "constant_fit_b"), self.covariance),
                "measured": ("observation", self.observations.value),
                "measurement_uncertainty": ("observation", self.weights_uncertainty),
                "predicted": ("observation", self.predicted),
                "normalized_residual": ("observation", self.normalized_residuals),
                "output": ("observation", self.observations.output.astype(str)),
                "source": ("observation", self.observations.source.astype(str)),
                "singular_value": ("direction", self.singular_values),
            },
            coords={
                "constant": list(self.free),
                "constant_fit": fitted,
                "constant_fit_b": fitted,
            },
            attrs={
                "chi2": self.chi2,
                "dof": self.dof,
                "reduced_chi2": self.reduced_chi2,
                "p_value": self.p_value,
                "covariance_scaled": self.covariance_scaled,
                "robust": self.robust,
                "units": {n: self.units[n] for n in self.free},
                "flat_directions": [d.describe() for d in self.flat_directions],
                "notes": list(self.notes),
                "title": str(getattr(self.scenario, "title", "")),
            },
        )
        for name, values in self.observations.settings.items():
            ds[f"setting_{name}"] = ("observation", values)
        if self.curves is not None:
            ds = ds.merge(self.curves)
        return ds

    # ----------------------------------------------------------- calibrated scenario

    def scenario_mapping(self) -> dict[str, Any]:
        """The calibrated scenario as a TOML-ready mapping.

        The base is the scenario's own file (``scenario.source``) or, without
        one, ``scenario_to_toml(scenario)``. Each fitted constant becomes an
        input with ``nominal`` the fitted value, ``tolerance`` its standard
        uncertainty, ``meaning = "standard"``, ``shape = "normal"``, and each
        pair of fitted constants a ``[[correlations]]`` entry with the fitted
        correlation (for normal marginals the copula coefficient is the
        Pearson correlation). Held constants keep what the scenario said.
        """
        data = _scenario_source_mapping(self.scenario)
        inputs = data.setdefault("inputs", {})
        for name in self.fitted:
            unit = self.units[name]
            entry = {
                "nominal": _quantity_text(self.values[name], unit),
                "tolerance": _quantity_text(self.uncertainties[name], unit),
                "meaning": "standard",
                "shape": "normal",
                "note": (
                    f"calibrated {_dt.date.today().isoformat()} "
                    f"(chi2/dof = {self.reduced_chi2:.3g}, {len(self.observations)} observations)"
                ),
            }
            previous = inputs.get(name, {})
            if isinstance(previous, Mapping) and "group" in previous:
                entry["group"] = previous["group"]
            inputs[name] = entry
        fitted = set(self.fitted)
        kept = [c for c in data.get("correlations", []) if not (set(c.get("inputs", ())) & fitted)]
        corr = self.correlation
        for i, a in enumerate(self.fitted):
            for j in range(i + 1, len(self.fitted)):
                if abs(corr[i, j]) > 1e-9:
                    kept.append(
                        {"inputs": [a, self.fitted[j]], "coefficient": round(float(corr[i, j]), 6)}
                    )
        if kept:
            data["correlations"] = kept
        else:
            data.pop("correlations", None)
        calibration = dict(data.get("calibration", {}))
        calibration["free"] = list(self.free)
        data["calibration"] = calibration
        return data

    def scenario_toml(self) -> str:
        """The calibrated scenario as TOML text (see :meth:`scenario_mapping`)."""
        header = (
            "# Calibrated scenario written by trapbudget calibrate.\n"
            f"# Fitted: {', '.join(self.fitted) or 'nothing'}; "
            f"held (not determined by the data): {', '.join(self.held) or 'none'}.\n"
            f"# chi2/dof = {self.reduced_chi2:.4g} (dof {self.dof}); "
            f"covariance {'scaled by chi2/dof' if self.covariance_scaled else 'not scaled'}.\n"
        )
        from trapbudget.sensitivity.scenario.writer import toml_dumps

        return header + toml_dumps(self.scenario_mapping())

    def write_scenario(self, path: str | os.PathLike[str]) -> Path:
        """Write the calibrated scenario atomically and return its path."""
        return atomic_write_text(path, self.scenario_toml())


def _quantity_text(value: float, unit: str) -> Any:
    if not unit or unit == "1":
        return float(f"{value:.10g}")
    return f"{value:.10g} {unit}"


def _scenario_source_mapping(scenario: Any) -> dict[str, Any]:
    source = getattr(scenario, "source", None)
    if source is not None and Path(source).is_file():
        return read_toml(source, what="scenario file")
    try:
        from trapbudget.sensitivity.scenario.writer import scenario_to_toml
    except ImportError:  # pragma: no cover - the scenario module is part of the package
        raise ScenarioError(
            "the scenario has no source file to extend; load it from a TOML file"
        ) from None
    return tomllib.loads(scenario_to_toml(scenario))
