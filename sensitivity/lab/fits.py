"""Fits of loading curves and time-of-flight expansions, with their covariances."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.constants as const
from scipy import optimize

from trapbudget.models.observables import loading_curve, time_of_flight_radius
from trapbudget.sensitivity.errors import DataError

__all__ = ["CurveFit", "fit_loading_curve", "fit_time_of_flight"]


# --------------------------------------------------------------------------- fits


@dataclass(frozen=True)
class CurveFit:
    """Result of a weighted least-squares curve fit.

    Attributes
    ----------
    names : tuple of str
        Parameter names.
    values : ndarray
        Best-fit parameters (SI).
    covariance : ndarray
        Covariance of the parameters. With given uncertainties it is
        ``(J^T W J)^-1`` (the uncertainties taken as absolute); without, it is
        scaled by chi2/dof (the scatter of the residuals sets the noise).
    chi2 : float
        Weighted sum of squared residuals.
    dof : int
        Number of points minus number of parameters.
    residuals : ndarray
        Data minus model, in data units.
    absolute_uncertainty : bool
        Whether point uncertainties were given.
    derived : dict of str to (float, float)
        Derived quantities (value, standard uncertainty), first-order.
    """

    names: tuple[str, ...]
    values: np.ndarray
    covariance: np.ndarray
    chi2: float
    dof: int
    residuals: np.ndarray
    absolute_uncertainty: bool
    derived: dict[str, tuple[float, float]] = field(default_factory=dict)

    def value(self, name: str) -> float:
        """Best-fit value of one parameter."""
        return float(self.values[self.names.index(name)])

    def uncertainty(self, name: str) -> float:
        """Standard uncertainty of one parameter."""
        i = self.names.index(name)
        return float(math.sqrt(max(self.covariance[i, i], 0.0)))

    @property
    def reduced_chi2(self) -> float:
        """chi2 / dof (nan when dof is 0)."""
        return self.chi2 / self.dof if self.dof > 0 else math.nan


def _weighted_fit(
    func,
    x0: np.ndarray,
    bounds: tuple[np.ndarray, np.ndarray],
    y: np.ndarray,
    sigma: np.ndarray | None,
    *,
    names: tuple[str, ...],
    robust: bool,
    where: str,
) -> CurveFit:
    weights = 1.0 / sigma if sigma is not None else np.ones_like(y)
    if sigma is not None and not np.all(np.isfinite(weights) & (sigma > 0)):
        raise DataError(
            "uncertainties must be positive numbers; fix or drop the column", path=where
        )
    if y.size <= len(names):
        raise DataError(
            f"{y.size} points cannot fit {len(names)} parameters; take more points", path=where
        )
    scale = np.where(x0 != 0, np.abs(x0), 1.0)

    def residual(p):
        return (func(p * scale) - y) * weights

    result = optimize.least_squares(
        residual,
        x0 / scale,
        bounds=(bounds[0] / scale, bounds[1] / scale),
        loss="soft_l1" if robust else "linear",
        x_scale="jac",
        method="trf",
        xtol=1e-14,
        ftol=1e-14,
        gtol=1e-14,
    )
    values = result.x * scale
    jac = result.jac * scale[np.newaxis, :] ** -1
    chi2 = float(np.sum(((func(values) - y) * weights) ** 2))
    dof = y.size - len(names)
    try:
        cov = np.linalg.inv(jac.T @ jac)
    except np.linalg.LinAlgError:
        cov = np.linalg.pinv(jac.T @ jac)
    if sigma is None:
        cov = cov * (chi2 / dof)
    return CurveFit(
        names=names,
        values=values,
        covariance=cov,
        chi2=chi2,
        dof=dof,
        residuals=y - func(values),
        absolute_uncertainty=sigma is not None,
    )


def fit_loading_curve(
    time: Any,
    signal: Any,
    *,
    uncertainty: Any | None = None,
    two_body: bool = False,
    robust: bool = False,
    label: str = "loading curve",
) -> CurveFit:
    """Fit ``N(t) = N_s (1 - exp(-t/tau))`` (optionally with two-body loss) to a loading curve.

    Parameters
    ----------
    time : array_like, s
        Time since the start of loading (background subtracted signal, N(0) = 0).
    signal : array_like
        Atom number or fluorescence (any unit proportional to N).
    uncertainty : array_like, optional
        Standard uncertainty of each point; without it the covariance is
        scaled by the residual scatter (chi2/dof).
    two_body : bool
        Fit the two-body fraction chi as well (see :func:`loading_curve`).
    robust : bool
        Use the soft-L1 loss (outlier-tolerant) instead of plain least squares.
    label : str
        Name for error messages.

    Returns
    -------
    CurveFit
        Parameters ``steady_state``, ``time_constant`` (and
        ``two_body_fraction``); ``derived`` holds ``loading_time`` (from
        empty to 1 - 1/e of N_s), ``loading_rate`` = R,
        ``one_body_time`` = tau_1 and, with two-body, ``two_body_rate`` = b
        (signal units), each with a first-order uncertainty.

    Notes
    -----
    Weighted least squares (scipy.optimize.least_squares, trust-region
    reflective, bounded: N_s > 0, tau > 0, 0 <= chi < 1); covariance
    ``(J^T W J)^-1`` from the Jacobian at the optimum.
    """
    t = np.asarray(time, dtype=float)
    y = np.asarray(signal, dtype=float)
    sigma = None if uncertainty is None else np.asarray(uncertainty, dtype=float) * np.ones_like(y)
    if t.shape != y.shape or t.ndim != 1:
        raise DataError("time and signal must be 1-D columns of equal length", path=label)
    if np.any(t < 0):
        raise DataError("loading times must be >= 0 (time since loading started)", path=label)
    n_s0 = float(np.max(y)) if np.max(y) > 0 else 1.0
    # initial time constant: time to reach 1 - 1/e of the largest signal
    reached = t[y >= (1 - math.exp(-1)) * n_s0]
    tau0 = (
        float(reached.min()) if reached.size and reached.min() > 0 else float(np.ptp(t) / 3 or 1)
    )
    if two_body:
        names = ("steady_state", "time_constant", "two_body_fraction")
        x0 = np.array([n_s0, tau0, 0.2])
        bounds = (np.array([0.0, 0.0, 0.0]), np.array([np.inf, np.inf, 0.999999]))

        def func(p):
            return loading_curve(t, p[0], p[1], p[2])
    else:
        names = ("steady_state", "time_constant")  # type: ignore[assignment]
        x0 = np.array([n_s0, tau0])
        bounds = (np.array([0.0, 0.0]), np.array([np.inf, np.inf]))

        def func(p):
            return loading_curve(t, p[0], p[1])

    fit = _weighted_fit(func, x0, bounds, y, sigma, names=names, robust=robust, where=label)
    return _with_loading_derived(fit)


def _first_order(function, values: np.ndarray, covariance: np.ndarray) -> tuple[float, float]:
    """Value and first-order standard uncertainty of ``function(values)``."""
    value = float(function(values))
    steps = 1e-6 * np.where(values != 0, np.abs(values), 1.0)
    grad = np.empty(values.size)
    for i, step in enumerate(steps):
        up, down = values.copy(), values.copy()
        up[i] += step
        down[i] -= step
        grad[i] = (function(up) - function(down)) / (2 * step)
    return value, float(math.sqrt(max(grad @ covariance @ grad, 0.0)))


def _with_loading_derived(fit: CurveFit) -> CurveFit:
    def chi(p):
        return p[2] if p.size > 2 else 0.0

    def rise_time(p):
        # N(t)/N_s = f = 1 - 1/e at t = tau ln((1 + chi f) / (1 - f)); tau itself when chi = 0
        f = 1 - math.exp(-1)
        return p[1] * math.log((1 + chi(p) * f) / (1 - f))

    derived = {
        "loading_time": _first_order(rise_time, fit.values, fit.covariance),
        "loading_rate": _first_order(
            lambda p: p[0] / (p[1] * (1 + chi(p))), fit.values, fit.covariance
        ),
        "one_body_time": _first_order(
            lambda p: p[1] * (1 + chi(p)) / (1 - chi(p)), fit.values, fit.covariance
        ),
    }
    if len(fit.names) > 2:
        derived["two_body_rate"] = _first_order(
            lambda p: p[2] / (p[0] * (1 + p[2]) * p[1]), fit.values, fit.covariance
        )
    return CurveFit(**{**fit.__dict__, "derived": derived})


def fit_time_of_flight(
    time: Any,
    radius: Any,
    *,
    mass: float,
    uncertainty: Any | None = None,
    robust: bool = False,
    label: str = "time of flight",
) -> CurveFit:
    """Fit ``sigma^2 = sigma_0^2 + k_B T t^2 / m`` to rms radii after free expansion.

    Parameters
    ----------
    time : array_like, s
        Expansion times.
    radius : array_like, m
        Rms cloud radius at each time.
    mass : float, kg
        Atomic mass.
    uncertainty : array_like, m, optional
        Standard uncertainty of each radius; without it the covariance is
        scaled by chi2/dof.
    robust : bool
        Soft-L1 loss instead of plain least squares.
    label : str
        Name for error messages.

    Returns
    -------
    CurveFit
        Parameters ``initial_radius`` (m) and ``temperature`` (K).

    Notes
    -----
    The residuals are in the radius (not its square), weighted by 1/u;
    bounded sigma_0 >= 0, T >= 0. Starting values from the straight-line fit
    of sigma^2 against t^2.

    References
    ----------
    See :func:`time_of_flight_radius`.
    """
    t = np.asarray(time, dtype=float)
    y = np.asarray(radius, dtype=float)
    sigma = None if uncertainty is None else np.asarray(uncertainty, dtype=float) * np.ones_like(y)
    if t.shape != y.shape or t.ndim != 1:
        raise DataError("time and radius must be 1-D columns of equal length", path=label)
    if not mass > 0:
        raise DataError(f"mass {mass!r} must be positive (kg)", path=label)
    slope, intercept = np.polyfit(t**2, y**2, 1)
    x0 = np.array(
        [math.sqrt(max(intercept, (0.5 * y.min()) ** 2)), max(slope * mass / const.k, 1e-9)]
    )

    def func(p):
        return time_of_flight_radius(t, p[0], p[1], mass=mass)

    return _weighted_fit(
        func,
        x0,
        (np.array([0.0, 0.0]), np.array([np.inf, np.inf])),
        y,
        sigma,
        names=("initial_radius", "temperature"),
        robust=robust,
        where=label,
    )
