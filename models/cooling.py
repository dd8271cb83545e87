"""Laser cooling in a MOT: damping, spring constant and temperature.

Pure, broadcasting NumPy functions in SI: detuning in Hz of cyclic
frequency (red < 0), linewidth Gamma in 1/s (angular), wavenumber in 1/m,
gradient in T/m, temperature in K.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants

__all__ = [
    "SUB_DOPPLER_COEFFICIENT",
    "SUB_DOPPLER_MINIMUM_RECOILS",
    "damping_coefficient",
    "doppler_temperature",
    "shared_damping_coefficient",
    "spring_constant",
    "sub_doppler_temperature",
    "temperature",
]

_HBAR = constants.hbar
_KB = constants.k

#: Default of the calibratable sub-Doppler coefficient C in k_B T = k_B T_min + C hbar Omega^2 /
#: |delta| (Omega^2 = Gamma^2 s_tot / 2 of all six beams). Lett et al., PRL 61, 169 (1988):
#: Na molasses at 43 +- 20 uK with s_tot ~ 1 and delta ~ -3 Gamma (settings from memory) gives
#: C = 0.3-0.8; Rb and Cs MOTs at 100-300 uK with s0 ~ 1-2 per beam at -2 Gamma (Townsend et al.,
#: PRA 52, 1423 (1995), from memory) give C = 0.15-0.35. 0.3 sits in both ranges.
SUB_DOPPLER_COEFFICIENT = 0.3
#: T_min of the sub-Doppler law in recoil temperatures (common practice: polarization-gradient
#: cooling bottoms out at a few recoil temperatures).
SUB_DOPPLER_MINIMUM_RECOILS = 4.0


def _as_float(*values: ArrayLike) -> list[np.ndarray]:
    return [np.asarray(v, dtype=float) for v in values]


def damping_coefficient(
    saturation: ArrayLike,
    detuning: ArrayLike,
    linewidth: ArrayLike,
    wavenumber: ArrayLike,
) -> np.ndarray:
    """Damping coefficient of one pair of counter-propagating beams (optical molasses), kg/s.

    Parameters
    ----------
    saturation : array_like
        Saturation parameter s0 of each beam of the pair.
    detuning : array_like, Hz
        Laser detuning (cyclic; red < 0).
    linewidth : array_like, 1/s
        Natural decay rate Gamma.
    wavenumber : array_like, 1/m
        k = 2 pi / lambda.

    Returns
    -------
    numpy.ndarray, kg/s
        Positive (a damping force ``F = -beta v``) for red detuning, negative for blue.

    Notes
    -----
    Low-velocity expansion of the two beams' scattering forces,
    ``beta = -8 hbar k^2 delta s0 / (Gamma (1 + s0 + (2 delta / Gamma)^2)^2)``,
    ``delta = 2 pi detuning``. For fixed s0 it is largest at
    ``delta = -Gamma / (2 sqrt(3))`` x sqrt(1 + s0).

    References
    ----------
    H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping"
    (Springer, 1999), ch. 7 (optical molasses).
    """
    s0, det, gamma, k = _as_float(saturation, detuning, linewidth, wavenumber)
    delta = 2.0 * np.pi * det
    return (
        -8.0 * _HBAR * k**2 * delta * s0 / (gamma * (1.0 + s0 + (2.0 * delta / gamma) ** 2) ** 2)
    )


def spring_constant(
    damping: ArrayLike,
    zeeman_coefficient: ArrayLike,
    gradient: ArrayLike,
    wavenumber: ArrayLike,
) -> np.ndarray:
    """Restoring-force constant of a MOT along one axis, N/m.

    Parameters
    ----------
    damping : array_like, kg/s
        Damping coefficient beta (:func:`damping_coefficient`).
    zeeman_coefficient : array_like, J/T
        mu' of the cycling transition (``Species.zeeman_coefficient``).
    gradient : array_like, T/m
        Field gradient A along that axis.
    wavenumber : array_like, 1/m

    Returns
    -------
    numpy.ndarray, N/m

    Notes
    -----
    The Zeeman shift ``mu' A x / hbar`` enters the force like the Doppler shift
    ``k v``, so ``F = -beta v - kappa x`` with ``kappa = mu' A beta / (hbar k)``.
    The trap frequency is ``sqrt(kappa / m) / (2 pi)``.

    References
    ----------
    H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping"
    (Springer, 1999), ch. 7 (the MOT).
    """
    beta, mu, a, k = _as_float(damping, zeeman_coefficient, gradient, wavenumber)
    return mu * a * beta / (_HBAR * k)


def doppler_temperature(
    total_saturation: ArrayLike, detuning: ArrayLike, linewidth: ArrayLike
) -> np.ndarray:
    """Doppler-cooling temperature in three-dimensional molasses, K.

    Parameters
    ----------
    total_saturation : array_like
        Saturation parameter of all cooling beams together, s_tot.
    detuning : array_like, Hz
        Laser detuning (cyclic; red < 0).
    linewidth : array_like, 1/s
        Natural decay rate Gamma.

    Returns
    -------
    numpy.ndarray, K
        ``inf`` for ``detuning >= 0``: blue or resonant light heats, no steady state.

    Notes
    -----
    Balance of the diffusion (heating) and damping (cooling) rates,

    ``k_B T = (hbar Gamma / 4) (1 + s_tot + (2 delta / Gamma)^2) / (2 |delta| / Gamma)``,

    ``delta = 2 pi detuning``. For ``s_tot -> 0`` the minimum is the Doppler
    limit ``hbar Gamma / 2`` at ``delta = -Gamma / 2``; intensity raises it
    through the ``s_tot`` term.

    References
    ----------
    P. D. Lett, W. D. Phillips, S. L. Rolston, C. E. Tanner, R. N. Watts and
    C. I. Westbrook, J. Opt. Soc. Am. B 6, 2084 (1989); H. J. Metcalf and
    P. van der Straten, "Laser Cooling and Trapping" (Springer, 1999), ch. 7.
    """
    s, det, gamma = _as_float(total_saturation, detuning, linewidth)
    x = 4.0 * np.pi * det / gamma  # 2 delta / Gamma
    with np.errstate(divide="ignore", invalid="ignore"):
        t = _HBAR * gamma / (4.0 * _KB) * (1.0 + s + x**2) / np.abs(x)
    return np.where(det < 0, t, np.inf)


def shared_damping_coefficient(
    pair_saturation: ArrayLike,
    total_saturation: ArrayLike,
    detuning: ArrayLike,
    linewidth: ArrayLike,
    wavenumber: ArrayLike,
) -> np.ndarray:
    """Damping coefficient of one beam pair when all beams share the atom's saturation, kg/s.

    Parameters
    ----------
    pair_saturation : array_like
        Saturation s of each beam of the pair at the atom.
    total_saturation : array_like
        Sum S of the saturations of all beams at the atom.
    detuning : array_like, Hz (cyclic; red < 0)
    linewidth : array_like, 1/s
    wavenumber : array_like, 1/m

    Returns
    -------
    numpy.ndarray, kg/s

    Notes
    -----
    Slope at v = 0 of the rate-equation force ``hbar k (Gamma/2) s (L+ - L-) /
    (1 + sum_j s_j L_j)`` (the denominator is even in v to first order):
    ``beta = -8 hbar k^2 delta s / (Gamma (1 + x^2) (1 + x^2 + S))``, ``x = 2 delta /
    Gamma``. For one pair with S = 2 s it differs from :func:`damping_coefficient`
    (each beam saturating alone) only in the denominator.

    References
    ----------
    H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping" (Springer,
    1999), ch. 7.
    """
    s, big, det, gamma, k = _as_float(
        pair_saturation, total_saturation, detuning, linewidth, wavenumber
    )
    delta = 2.0 * np.pi * det
    x2 = (2.0 * delta / gamma) ** 2
    return -8.0 * _HBAR * k**2 * delta * s / (gamma * (1.0 + x2) * (1.0 + x2 + big))


def sub_doppler_temperature(
    coefficient: ArrayLike,
    total_saturation: ArrayLike,
    detuning: ArrayLike,
    linewidth: ArrayLike,
    *,
    minimum: ArrayLike = 0.0,
) -> np.ndarray:
    """Sub-Doppler (polarization-gradient) temperature ``T_min + C hbar Omega^2 / (k_B |delta|)``.

    Parameters
    ----------
    coefficient : array_like
        Dimensionless prefactor C (calibratable; default :data:`SUB_DOPPLER_COEFFICIENT`).
    total_saturation : array_like
        Saturation parameter of all cooling beams together, s_tot.
    detuning : array_like, Hz
        Laser detuning (cyclic; red < 0).
    linewidth : array_like, 1/s
    minimum : array_like, K
        T_min, a few recoil temperatures.

    Returns
    -------
    numpy.ndarray, K
        ``inf`` for ``detuning >= 0`` (no cooling).

    Notes
    -----
    ``Omega^2 = Gamma^2 s_tot / 2`` (from ``s = 2 Omega^2 / Gamma^2``), ``delta = 2 pi
    detuning``: the light-shift scaling ``T ~ I / |delta|``. The prefactor depends on
    the level structure and polarization configuration, hence calibratable.

    References
    ----------
    J. Dalibard and C. Cohen-Tannoudji, J. Opt. Soc. Am. B 6, 2023 (1989);
    P. D. Lett et al., J. Opt. Soc. Am. B 6, 2084 (1989); C. G. Townsend et al.,
    Phys. Rev. A 52, 1423 (1995).
    """
    c, s, det, gamma, t0 = _as_float(coefficient, total_saturation, detuning, linewidth, minimum)
    delta = 2.0 * np.pi * np.abs(det)
    omega2 = gamma**2 * s / 2.0
    with np.errstate(divide="ignore", invalid="ignore"):
        t = t0 + c * _HBAR * omega2 / (delta * _KB)
    return np.where(det < 0, t, np.inf)


def temperature(
    total_saturation: ArrayLike,
    detuning: ArrayLike,
    linewidth: ArrayLike,
    *,
    sub_doppler_coefficient: ArrayLike | None = None,
    recoil_temperature: ArrayLike,
    minimum_recoils: float = SUB_DOPPLER_MINIMUM_RECOILS,
) -> np.ndarray:
    """Temperature of the cloud: sub-Doppler law capped by Doppler theory, or Doppler alone.

    Parameters
    ----------
    total_saturation : array_like
        Saturation parameter of all cooling beams together.
    detuning : array_like, Hz
        Laser detuning (cyclic; red < 0).
    linewidth : array_like, 1/s
    sub_doppler_coefficient : array_like or None
        C of :func:`sub_doppler_temperature`; ``None`` means Doppler theory only.
    recoil_temperature : array_like, K
        ``Species.recoil_temperature``.
    minimum_recoils : float
        T_min in recoil temperatures (sub-Doppler only).

    Returns
    -------
    numpy.ndarray, K
        ``inf`` for ``detuning >= 0``: blue or resonant light does not cool.

    Notes
    -----
    With a coefficient: ``T = min(T_min + C hbar Omega^2 / (k_B |delta|), T_Doppler)``,
    ``T_min = minimum_recoils x T_r``; it falls with |delta| and rises with intensity,
    continuous in C. Without: ``max(T_Doppler, T_r)``.

    References
    ----------
    P. D. Lett et al., J. Opt. Soc. Am. B 6, 2084 (1989); J. Dalibard and
    C. Cohen-Tannoudji, J. Opt. Soc. Am. B 6, 2023 (1989).
    """
    t = doppler_temperature(total_saturation, detuning, linewidth)
    tr = np.asarray(recoil_temperature, dtype=float)
    if sub_doppler_coefficient is None:
        t = np.maximum(t, tr)
    else:
        sub = sub_doppler_temperature(
            sub_doppler_coefficient,
            total_saturation,
            detuning,
            linewidth,
            minimum=minimum_recoils * tr,
        )
        t = np.minimum(t, sub)
    return np.where(np.asarray(detuning, dtype=float) < 0, t, np.inf)
