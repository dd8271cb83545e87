"""Gaussian cooling beams: intensity at the cloud, saturation and scattering rate.

Pure, broadcasting NumPy functions in SI: power in W, lengths in m,
intensity in W/m^2, detuning in Hz of cyclic frequency, linewidth Gamma in
1/s (angular).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "absorption_cross_section",
    "beam_intensity",
    "beam_scattering_rates",
    "clipped_fraction",
    "cloud_intensities",
    "peak_intensity",
    "saturation_parameter",
    "scattering_rate",
]


def peak_intensity(power: ArrayLike, waist: ArrayLike) -> np.ndarray:
    """Peak (on-axis) intensity of a Gaussian beam.

    Parameters
    ----------
    power : array_like, W
        Total beam power.
    waist : array_like, m
        1/e^2 intensity radius w.

    Returns
    -------
    numpy.ndarray, W/m^2

    Notes
    -----
    ``I(r) = I0 exp(-2 r^2 / w^2)`` integrates to ``P = pi w^2 I0 / 2``, so
    ``I0 = 2 P / (pi w^2)``.

    References
    ----------
    A. E. Siegman, "Lasers" (University Science Books, 1986), ch. 17.
    """
    p = np.asarray(power, dtype=float)
    w = np.asarray(waist, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return 2.0 * p / (np.pi * w**2)


def clipped_fraction(waist: ArrayLike, aperture_radius: ArrayLike) -> np.ndarray:
    """Fraction of a centred Gaussian beam's power passing a circular aperture.

    Parameters
    ----------
    waist : array_like, m
        1/e^2 intensity radius w.
    aperture_radius : array_like, m
        Clear radius a of the aperture (``inf`` for none).

    Returns
    -------
    numpy.ndarray
        Transmitted fraction in [0, 1].

    Notes
    -----
    ``T = 1 - exp(-2 a^2 / w^2)`` (integral of the Gaussian profile over the disk).

    References
    ----------
    A. E. Siegman, "Lasers" (University Science Books, 1986), ch. 17.
    """
    w = np.asarray(waist, dtype=float)
    a = np.asarray(aperture_radius, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return -np.expm1(-2.0 * a**2 / w**2)


def beam_intensity(
    power: ArrayLike,
    waist: ArrayLike,
    radius: ArrayLike,
    *,
    aperture_radius: ArrayLike = np.inf,
) -> np.ndarray:
    """Intensity of a Gaussian beam at a distance from its axis, hard-clipped by an aperture.

    Parameters
    ----------
    power : array_like, W
        Beam power before the aperture.
    waist : array_like, m
        1/e^2 intensity radius w.
    radius : array_like, m
        Distance from the beam axis.
    aperture_radius : array_like, m, optional
        Clear radius of the limiting optic (default: no clipping).

    Returns
    -------
    numpy.ndarray, W/m^2

    Notes
    -----
    ``I(r) = (2 P / (pi w^2)) exp(-2 r^2 / w^2)`` for ``|r| <= a`` and 0
    beyond: the geometric (shadow) approximation, which ignores diffraction
    rings from the aperture edge.

    References
    ----------
    A. E. Siegman, "Lasers" (University Science Books, 1986), ch. 17.
    """
    w = np.asarray(waist, dtype=float)
    r = np.asarray(radius, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        profile = np.exp(-2.0 * r**2 / w**2)
    inside = np.abs(r) <= np.asarray(aperture_radius, dtype=float)
    return np.where(inside, peak_intensity(power, w) * profile, 0.0)


def cloud_intensities(
    power: ArrayLike,
    waist: ArrayLike,
    *,
    offset: ArrayLike = 0.0,
    aperture_radius: ArrayLike = np.inf,
    imbalance: ArrayLike = 0.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Intensities of the incoming and retro-reflected beam of one pair at the cloud.

    Parameters
    ----------
    power : array_like, W
        Power of the incoming beam.
    waist : array_like, m
        1/e^2 intensity radius.
    offset : array_like, m, optional
        Distance of the cloud from the beam axis (pointing error), default 0.
    aperture_radius : array_like, m, optional
        Clear radius of the limiting optic, default no clipping.
    imbalance : array_like, optional
        Fraction of the intensity lost on the return pass (window, wave plate,
        mirror), default 0.

    Returns
    -------
    forward, backward : numpy.ndarray, W/m^2
        ``backward = forward (1 - imbalance)``.

    Notes
    -----
    The retro-reflected beam retraces the incoming one, so both see the same
    offset and clipping; see :func:`beam_intensity`.
    """
    forward = beam_intensity(power, waist, offset, aperture_radius=aperture_radius)
    backward = forward * (1.0 - np.asarray(imbalance, dtype=float))
    return forward, backward


def saturation_parameter(intensity: ArrayLike, saturation_intensity: ArrayLike) -> np.ndarray:
    """On-resonance saturation parameter ``s = I / I_sat`` (dimensionless).

    Parameters
    ----------
    intensity : array_like, W/m^2
    saturation_intensity : array_like, W/m^2

    Returns
    -------
    numpy.ndarray

    References
    ----------
    H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping"
    (Springer, 1999), ch. 2.
    """
    return np.asarray(intensity, dtype=float) / np.asarray(saturation_intensity, dtype=float)


def scattering_rate(
    saturation: ArrayLike,
    detuning: ArrayLike,
    linewidth: ArrayLike,
    *,
    total_saturation: ArrayLike | None = None,
) -> np.ndarray:
    """Photon scattering rate of a two-level atom, photons per second.

    Parameters
    ----------
    saturation : array_like
        Saturation parameter ``s`` of the beam(s) whose scattering is wanted.
    detuning : array_like, Hz
        Laser detuning from resonance (cyclic frequency; red < 0), including
        any Doppler or Zeeman shift.
    linewidth : array_like, 1/s
        Natural decay rate Gamma (angular).
    total_saturation : array_like, optional
        Saturation parameter of all the light that saturates the atom
        (default: ``saturation``). Use it to share the saturation among beams.

    Returns
    -------
    numpy.ndarray, 1/s

    Notes
    -----
    ``R = (Gamma / 2) s / (1 + s_tot + (2 delta / Gamma)^2)``,
    ``delta = 2 pi detuning``. ``R -> Gamma / 2`` for ``s -> inf`` on resonance.

    References
    ----------
    H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping"
    (Springer, 1999), ch. 2.
    """
    s = np.asarray(saturation, dtype=float)
    s_tot = s if total_saturation is None else np.asarray(total_saturation, dtype=float)
    gamma = np.asarray(linewidth, dtype=float)
    delta = 2.0 * np.pi * np.asarray(detuning, dtype=float)
    return 0.5 * gamma * s / (1.0 + s_tot + (2.0 * delta / gamma) ** 2)


def beam_scattering_rates(
    saturations: ArrayLike, detunings: ArrayLike, linewidth: ArrayLike, *, axis: int = -1
) -> np.ndarray:
    """Photons scattered per second from each of several beams that share one atom.

    Parameters
    ----------
    saturations : array_like
        Saturation parameter s_i of each beam (beams along ``axis``).
    detunings : array_like, Hz
        Each beam's detuning seen by the atom (cyclic; laser, Doppler and Zeeman shifts
        included), broadcast against ``saturations``.
    linewidth : array_like, 1/s
        Gamma.
    axis : int
        Axis that runs over the beams.

    Returns
    -------
    numpy.ndarray, 1/s
        ``R_i = (Gamma / 2) s_i L_i / (1 + sum_j s_j L_j)``,
        ``L_i = 1 / (1 + 4 delta_i^2 / Gamma^2)``.

    Notes
    -----
    The rate-equation treatment of a two-level atom in several incoherent beams: the
    excited population is ``rho_ee = (1/2) sum_i s_i L_i / (1 + sum_j s_j L_j) < 1/2``,
    so the summed rate never exceeds Gamma / 2 and each beam's force
    ``hbar k_i R_i`` is bounded by ``hbar k Gamma / 2``. For equal detunings it reduces
    to :func:`scattering_rate` with ``total_saturation`` the sum of the s_i.

    References
    ----------
    H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping" (Springer,
    1999), ch. 2 and 7.
    """
    s = np.asarray(saturations, dtype=float)
    gamma = np.asarray(linewidth, dtype=float)
    x = 4.0 * np.pi * np.asarray(detunings, dtype=float) / gamma
    sl = s / (1.0 + x * x)
    return 0.5 * gamma * sl / (1.0 + np.sum(sl, axis=axis, keepdims=True))


def absorption_cross_section(
    wavelength: ArrayLike, detuning: ArrayLike, linewidth: ArrayLike, total_saturation: ArrayLike
) -> np.ndarray:
    """Absorption cross-section of a two-level atom at a detuning and saturation, m^2.

    Parameters
    ----------
    wavelength : array_like, m
    detuning : array_like, Hz (cyclic)
    linewidth : array_like, 1/s
    total_saturation : array_like
        Saturation of all the light on the atom.

    Returns
    -------
    numpy.ndarray, m^2
        ``sigma = (3 lambda^2 / 2 pi) / (1 + s + 4 delta^2 / Gamma^2)``.

    Notes
    -----
    Beer-Lambert attenuation of a beam crossing a length L of vapor of density n is
    ``exp(-n sigma L)``. The Doppler width of a room-temperature vapor (hundreds of MHz)
    is ignored here: the caller averages over it.

    References
    ----------
    C. J. Foot, "Atomic Physics" (OUP, 2005), ch. 7; D. A. Steck, "Rubidium 87 D Line
    Data" (resonant cross-section 3 lambda^2 / 2 pi for the cycling transition).
    """
    lam = np.asarray(wavelength, dtype=float)
    x = 4.0 * np.pi * np.asarray(detuning, dtype=float) / np.asarray(linewidth, dtype=float)
    return 3.0 * lam**2 / (2.0 * np.pi) / (1.0 + np.asarray(total_saturation, float) + x * x)
