"""Calibrating a model's constants to the lab's own measurements.

``calibrate(scenario, datasets, free=[...])`` fits the model constants marked
free by weighted, bounded nonlinear least squares against measured outputs,
each taken at its own apparatus settings; it reports the fitted values, their
covariance and correlations, chi-square per degree of freedom and the
residuals, says which constants (or combinations of them) the data cannot pin
down, and writes a calibrated scenario in which the fitted constants are
uncertain inputs with their fitted joint normal distribution."""

from __future__ import annotations

import math
import os
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from scipy import optimize, stats

from trapbudget.sensitivity.errors import CalibrationWarning, DataError, DataWarning, ScenarioError
from trapbudget.sensitivity.lab.calibration import (
    _SCALINGS,
    Calibration,
    CovarianceScaling,
    FlatDirection,
)
from trapbudget.sensitivity.lab.datafiles import MeasurementSet, read_measurements
from trapbudget.sensitivity.lab.fitcurves import fit_curves, fit_traces
from trapbudget.sensitivity.lab.observations import Observations, to_observations
from trapbudget.sensitivity.scenario.core import Scenario

#: Below this chi2 p-value a calibration warns that the model does not describe the data.
MISFIT_P_VALUE = 1e-3

__all__ = ["MISFIT_P_VALUE", "calibrate"]


# ----------------------------------------------------------------------- the fit


def _as_observations(
    datasets: Any, *, model: Any, mass: float | None, two_body: bool, robust: bool
) -> tuple[Observations, list[str], list[MeasurementSet]]:
    if isinstance(datasets, Observations | MeasurementSet | str | os.PathLike):
        datasets = [datasets]
    parts: list[Observations] = []
    skipped: list[str] = []
    read: list[MeasurementSet] = []
    for item in datasets:
        if isinstance(item, Observations):
            parts.append(item)
            continue
        mset = item if isinstance(item, MeasurementSet) else read_measurements(item, model=model)
        read.append(mset)
        if mset.skipped_rows:
            skipped.append(
                f"{mset.path.name if mset.path is not None else mset.label}: "
                f"{mset.skipped_rows} row(s) skipped (a needed value is empty or NaN)"
            )
        parts.append(
            to_observations(mset, model=model, mass=mass, two_body=two_body, robust=robust)
        )
    if not parts:
        raise DataError("no measurement files given; pass at least one")
    return Observations.concatenate(parts), skipped, read


def _species_mass(scenario: Scenario) -> float | None:
    name = getattr(scenario, "species", None)
    if not name:
        return None
    try:
        from trapbudget.models.catalog import species
    except ImportError:  # pragma: no cover
        return None
    try:
        return float(species(name).mass)
    except Exception:
        return None


def _free_constants(
    scenario: Scenario, model: Any, free: Sequence[str] | None, *, allow_settings: bool = False
) -> tuple[str, ...]:
    if free is None:
        free = (getattr(scenario, "calibration", None) or {}).get("free")
    if not free:
        raise ScenarioError(
            "no constants to fit; list them in [calibration] free = [...] or pass free=",
            path=getattr(scenario, "source", None),
            key="calibration.free",
        )
    names = tuple(free)
    for name in names:
        if name not in model.inputs:
            import difflib

            close = difflib.get_close_matches(name, list(model.inputs), n=3)
            hint = f"; did you mean {', '.join(map(repr, close))}?" if close else ""
            raise ScenarioError(
                f"{name!r} is not a model input{hint}",
                path=getattr(scenario, "source", None),
                key="calibration.free",
            )
        if not allow_settings and not getattr(model.inputs[name], "constant", False):
            raise ScenarioError(
                f"{name!r} is a setting of the apparatus, not a model constant: fitting it "
                "makes the data overrule what was set; fit constants (see 'trapbudget inputs') "
                "or allow it explicitly (--allow-settings, allow_settings=True)",
                path=getattr(scenario, "source", None),
                key="calibration.free",
            )
    if len(set(names)) != len(names):
        raise ScenarioError("a constant is listed twice; list each once", key="calibration.free")
    return names


def calibrate(
    scenario: Scenario,
    datasets: Any,
    *,
    free: Sequence[str] | None = None,
    robust: bool = False,
    rng: Any = None,
    two_body: bool = False,
    covariance_scaling: CovarianceScaling = "auto",
    flat_threshold: float = 1e-3,
    n_starts: int = 1,
    allow_settings: bool = False,
) -> Calibration:
    """Fit model constants to measurements by weighted, bounded least squares.

    Parameters
    ----------
    scenario : Scenario
        Gives the model (with the scenario's fixed values), the nominal
        settings and, in ``[calibration] free``, the constants to fit. Any
        object with ``model``, ``nominal`` and ``calibration`` works.
    datasets : path, MeasurementSet, Observations or a sequence of them
        Measurement files (format in :mod:`trapbudget.sensitivity.lab.datafiles`).
    free : sequence of str, optional
        Constants to fit; overrides ``[calibration] free``.
    robust : bool
        Soft-L1 loss (outlier-tolerant) instead of plain least squares.
    rng : seed or numpy Generator, optional
        Draws the extra starting points when ``n_starts > 1``.
    two_body : bool
        Fit loading curves with two-body loss.
    covariance_scaling : {"auto", "always", "never"}
        "auto" trusts the given uncertainties unless the chi-square is
        inconsistent with them (p < 0.01), then scales the covariance by
        chi2/dof (the Birge ratio squared); "always" scales; "never" does not.
        Unknown uncertainties force scaling.
    flat_threshold : float
        Singular values of the column-normalised weighted Jacobian below this
        (relative to the largest) mark directions the data cannot pin down.
    n_starts : int
        Number of starting points (the scenario values, then random ones
        within a factor 3, inside the bounds); the best fit is kept.

    Returns
    -------
    Calibration

    Notes
    -----
    Residuals ``r_i = (f(x_i; theta) - y_i) / u_i`` with ``x_i`` the settings
    of observation i (scenario nominal where the file did not set one);
    ``scipy.optimize.least_squares`` (trust-region reflective), bounded by
    the constants' valid ranges, in parameters scaled by their starting
    values. Covariance ``(J^T J)^-1`` from the weighted Jacobian at the
    optimum (central differences), as for linearised least squares. When some
    uncertainties are unknown they are taken as one common relative
    uncertainty, whose size the residual scatter sets (covariance scaled by
    chi2/dof). Flat directions come from the singular value decomposition of
    the Jacobian with respect to the logarithm of each constant, columns
    normalised: a small singular value means a combination of relative
    changes (its right singular vector) the data do not see; the constant
    with the largest share in it is held at its starting value and the fit
    repeated, so no precision is invented.

    References
    ----------
    Least squares and covariance: W. H. Press et al., "Numerical Recipes",
    3rd ed. (CUP 2007), ch. 15.4-15.5; R. T. Birge, Phys. Rev. 40, 207 (1932)
    for the chi2/dof scaling; JCGM 100:2008 for standard uncertainties.
    """
    if covariance_scaling not in _SCALINGS:
        raise ScenarioError(
            f"covariance_scaling {covariance_scaling!r} is unknown; use one of {_SCALINGS}"
        )
    model = scenario.model
    names = _free_constants(scenario, model, free, allow_settings=allow_settings)
    mass = _species_mass(scenario)
    obs, skipped, measurement_sets = _as_observations(
        datasets, model=model, mass=mass, two_body=two_body, robust=robust
    )
    nominal = dict(getattr(scenario, "nominal", {}) or {})
    start = {name: float(nominal.get(name, model.inputs[name].default)) for name in names}
    units = {name: model.inputs[name].unit for name in names}
    for output in np.unique(obs.output):
        if output not in model.outputs:
            raise DataError(f"the model has no output {output!r}; check the measurement columns")
    notes: list[str] = list(skipped)
    for note in skipped:
        warnings.warn(note, DataWarning, stacklevel=2)

    base_values = _observation_inputs(model, nominal, obs)
    unknown = ~np.isfinite(obs.uncertainty)
    sigma = obs.uncertainty.copy()
    if np.any(unknown):
        sigma[unknown] = np.abs(obs.value[unknown])
        notes.append(
            f"{int(unknown.sum())} observations had no uncertainty: weighted by a common relative "
            "uncertainty set by the residual scatter"
        )
    if np.any(~(sigma > 0)):
        raise DataError("a measurement uncertainty is zero or negative; fix the data file")
    if len(obs) < len(names):
        raise DataError(
            f"{len(obs)} observations cannot determine {len(names)} constants; "
            "add measurements or free fewer constants"
        )
    rng = np.random.default_rng(rng)

    fitted = list(names)
    values = dict(start)
    flats: list[FlatDirection] = []
    while True:
        result = _least_squares(
            model,
            base_values,
            obs,
            sigma,
            fitted,
            values,
            robust=robust,
            rng=rng,
            n_starts=n_starts,
        )
        values.update(result["values"])
        jac = result["jac"]  # weighted residuals vs constants (SI)
        theta = np.array([values[n] for n in fitted])
        jac_log = jac * np.where(theta != 0, theta, 1.0)[np.newaxis, :]
        norms = np.linalg.norm(jac_log, axis=0)
        scale = norms.max() if norms.size and norms.max() > 0 else 1.0
        dead = norms <= 1e-10 * scale
        normalised = jac_log / np.where(dead, 1.0, norms)
        singular = np.linalg.svd(normalised, compute_uv=False) if fitted else np.array([])
        if np.any(dead):
            k = int(np.flatnonzero(dead)[0])
            flats.append(FlatDirection({fitted[k]: 1.0}, 0.0, fitted[k]))
            values[fitted[k]] = start[fitted[k]]
            del fitted[k]
            continue
        if fitted:
            _, s, vt = np.linalg.svd(normalised, full_matrices=False)
            if s[-1] < flat_threshold * s[0]:
                direction = vt[-1] / np.where(norms > 0, norms, 1.0)
                direction = direction / np.max(np.abs(direction))
                # hold the constant that moves most (relatively) along the flat direction:
                # the one the data constrain least. The normalised vector cannot decide this
                # when two columns are collinear (two loss rates that add): its weights split
                # near 1/sqrt(2) each and rounding picks the side
                k = int(np.argmax(np.abs(direction)))
                relative = {
                    fitted[i]: float(direction[i])
                    for i in np.argsort(-np.abs(direction))
                    if abs(direction[i]) >= 0.05
                }
                flats.append(FlatDirection(relative, float(s[-1] / s[0]), fitted[k]))
                values[fitted[k]] = start[fitted[k]]
                del fitted[k]
                continue
        break

    residual = result["residual"]
    chi2 = float(np.sum(residual**2))
    dof = len(obs) - len(fitted)
    p_value = float(stats.chi2.sf(chi2, dof)) if dof > 0 else math.nan
    cov = np.linalg.inv(jac.T @ jac) if fitted else np.zeros((0, 0))
    scaled = False
    if dof > 0 and (
        covariance_scaling == "always"
        or np.any(unknown)
        or (covariance_scaling == "auto" and p_value < 0.01)
    ):
        scaled = True
        cov = cov * (chi2 / dof)
        sigma_used = sigma * math.sqrt(chi2 / dof) if np.any(unknown) else sigma
        if not np.any(unknown):
            notes.append(
                f"chi2/dof = {chi2 / dof:.3g} is inconsistent with the given uncertainties "
                f"(p = {p_value:.2g}): covariance scaled by chi2/dof"
                if covariance_scaling == "auto"
                else "covariance scaled by chi2/dof as requested"
            )
    else:
        sigma_used = sigma
    if dof > 0 and p_value < MISFIT_P_VALUE and not np.any(unknown):
        misfit = (
            f"chi2/dof = {chi2 / dof:.3g} (p = {p_value:.2g}): the model does not describe "
            "these data within their uncertainties; the fitted constants absorb the misfit, "
            "so check the data and the model's assumptions before using them"
        )
        notes.append(misfit)
        warnings.warn(misfit, CalibrationWarning, stacklevel=2)
    if dof <= 0:
        notes.append("no degrees of freedom left: chi2/dof undefined, uncertainties unchecked")
    if robust:
        notes.append("soft-L1 loss: covariance from the least-squares Jacobian (approximate)")
    for name in fitted:
        i = fitted.index(name)
        u = math.sqrt(max(cov[i, i], 0.0))
        if values[name] != 0 and u > abs(values[name]):
            notes.append(f"{name} is weakly determined: its uncertainty exceeds its value")
        low, high = model.inputs[name].low, model.inputs[name].high
        if any(np.isclose(values[name], b, rtol=1e-9, atol=0.0) for b in (low, high)):
            notes.append(f"{name} ended at a bound of its valid range [{low:g}, {high:g}]")
    predicted = _predict(model, base_values, obs, values)
    fitted_constants = {n: float(values[n]) for n in names}
    curves = fit_curves(
        model, base_values, obs, {n: float(start[n]) for n in names}, fitted_constants
    )
    traces = fit_traces(model, nominal, measurement_sets, fitted_constants, mass=mass)
    if traces is not None:
        curves = curves.merge(traces)
    return Calibration(
        free=names,
        fitted=tuple(fitted),
        values={n: float(values[n]) for n in names},
        start=start,
        units=units,
        covariance=cov,
        chi2=chi2,
        dof=dof,
        p_value=p_value,
        covariance_scaled=scaled,
        observations=obs,
        predicted=predicted,
        weights_uncertainty=sigma_used,
        flat_directions=tuple(flats),
        singular_values=singular,
        robust=robust,
        notes=tuple(notes),
        scenario=scenario,
        curves=curves,
    )


def _observation_inputs(model: Any, nominal: Mapping[str, float], obs: Observations):
    n = len(obs)
    values: dict[str, np.ndarray] = {}
    for name in model.inputs:
        base = float(nominal[name]) if name in nominal else None
        setting = obs.settings.get(name)
        if setting is None:
            if base is not None:
                values[name] = np.full(n, base)
            continue
        fill = model.inputs[name].default if base is None else base
        values[name] = np.where(np.isfinite(setting), setting, fill)
    return values


def _predict(
    model: Any,
    base_values: Mapping[str, np.ndarray],
    obs: Observations,
    constants: Mapping[str, float],
) -> np.ndarray:
    values = dict(base_values)
    n = len(obs)
    for name, value in constants.items():
        values[name] = np.full(n, float(value))
    outputs = model.evaluate(values)
    predicted = np.empty(n)
    for output in np.unique(obs.output):
        rows = obs.output == output
        predicted[rows] = np.broadcast_to(np.asarray(outputs[output], dtype=float), (n,))[rows]
    return predicted


def _least_squares(
    model: Any,
    base_values: Mapping[str, np.ndarray],
    obs: Observations,
    sigma: np.ndarray,
    fitted: Sequence[str],
    values: Mapping[str, float],
    *,
    robust: bool,
    rng: np.random.Generator,
    n_starts: int,
) -> dict[str, Any]:
    fixed = {name: v for name, v in values.items() if name not in fitted}
    if not fitted:
        residual = (_predict(model, base_values, obs, fixed) - obs.value) / sigma
        return {"values": {}, "jac": np.zeros((len(obs), 0)), "residual": residual}
    x_start = np.array([values[n] for n in fitted], dtype=float)
    scale = np.where(x_start != 0, np.abs(x_start), 1.0)
    low = np.array([model.inputs[n].low for n in fitted]) / scale
    high = np.array([model.inputs[n].high for n in fitted]) / scale

    def residual(p: np.ndarray) -> np.ndarray:  # type: ignore[no-redef]
        constants = {**fixed, **dict(zip(fitted, p * scale, strict=True))}
        return (_predict(model, base_values, obs, constants) - obs.value) / sigma

    starts = [np.clip(x_start / scale, low, high)]
    for _ in range(max(n_starts, 1) - 1):
        factor = np.exp(rng.uniform(-math.log(3), math.log(3), size=len(fitted)))
        starts.append(np.clip(x_start / scale * factor, low, high))
    best = None
    with np.errstate(all="ignore"):
        for x0 in starts:
            res = optimize.least_squares(
                residual,
                x0,
                bounds=(low, high),
                jac="3-point",
                loss="soft_l1" if robust else "linear",
                method="trf",
                x_scale="jac",
                xtol=1e-12,
                ftol=1e-12,
                gtol=1e-12,
                max_nfev=2000,
            )
            if best is None or res.cost < best.cost:
                best = res
    x = best.x  # type: ignore[union-attr]
    jac = _central_jacobian(residual, x, low, high) / scale[np.newaxis, :]
    return {
        "values": dict(zip(fitted, (x * scale).tolist(), strict=True)),
        "jac": jac,
        "residual": residual(x),
    }


def _central_jacobian(func, x: np.ndarray, low: np.ndarray, high: np.ndarray) -> np.ndarray:
    """Central-difference Jacobian (one-sided at a bound)."""
    f0 = func(x)
    jac = np.empty((f0.size, x.size))
    for i in range(x.size):
        h = 1e-6 * max(abs(x[i]), 1e-3)
        up, down = x.copy(), x.copy()
        up[i] = min(x[i] + h, high[i])
        down[i] = max(x[i] - h, low[i])
        jac[:, i] = (func(up) - func(down)) / (up[i] - down[i])
    return jac
