"""Slow-atom sources for a MOT in ultra-high vacuum: effusive oven, Zeeman slower, 2D-MOT.

Pure, broadcasting NumPy functions in SI: temperature in K, lengths in m, speeds in
m/s, fluxes in atoms/s, intensities of a beam in atoms/(s sr), detuning in Hz
(cyclic), fields in T, accelerations in m/s^2.

Every function is smooth in its inputs (no knife edge): where a condition switches a
process on (the slower light strong enough, the capture region inside the beam), the
transition is a continuous average over a profile.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import constants as sc
from scipy import special

from trapbudget.models.vapor import fraction_slower, mean_speed

__all__ = [
    "GRAVITY",
    "beam_fraction_into",
    "beam_mean_speed",
    "beam_speed_density",
    "clausing_factor",
    "effusive_flux",
    "forward_intensity",
    "push_exit_velocity",
    "push_stopped_fraction",
    "slower_capture_velocity",
    "slower_light_fraction",
    "soft_minimum",
    "transverse_source_flux",
]

#: Standard acceleration of gravity, m/s^2 (CODATA, scipy.constants.g).
GRAVITY = sc.g


def _f(a: ArrayLike) -> NDArray[np.float64]:
    return np.asarray(a, dtype=float)


def soft_minimum(a: ArrayLike, b: ArrayLike, *, order: float = 8.0) -> NDArray[np.float64]:
    """A smooth minimum of two non-negative quantities, ``(a^-p + b^-p)^(-1/p)``.

    Within 9 % of ``min(a, b)`` for p = 8 (at a = b it is ``2^(-1/p)`` of it), exact when
    one is much smaller, and differentiable everywhere: used where two limits compete
    (a slower's field and its deceleration) so that no knife edge reaches fits or
    derivative methods.
    """
    x, y = np.maximum(_f(a), 0.0), np.maximum(_f(b), 0.0)
    with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
        out = (x ** (-order) + y ** (-order)) ** (-1.0 / order)
    return np.where((x > 0) & (y > 0), out, 0.0)


def clausing_factor(length: ArrayLike, radius: ArrayLike) -> NDArray[np.float64]:
    """Transmission probability W of a cylindrical tube for molecular flow (Clausing factor).

    Parameters
    ----------
    length : array_like, m
        Tube (nozzle, capillary) length L; 0 for a thin-walled orifice.
    radius : array_like, m
        Tube radius R.

    Returns
    -------
    ndarray
        W in (0, 1]; 1 for a thin orifice, about ``8 R / (3 L)`` for a long tube.

    Notes
    -----
    Santeler's approximation, ``W = 1 / (1 + (3 L / 8 R) (1 + 1 / (3 (1 + L / 7 R))))``,
    within about 1 % of Clausing's tabulated values at every L / R, with the long-tube
    (Knudsen) limit ``8 R / 3 L``.

    References
    ----------
    D. J. Santeler, J. Vac. Sci. Technol. A 4, 338 (1986); P. Clausing, Ann. Phys. 12,
    961 (1932); N. F. Ramsey, "Molecular Beams" (OUP, 1956), ch. 2.
    """
    ratio = np.maximum(_f(length), 0.0) / _f(radius)
    return 1.0 / (1.0 + 0.375 * ratio * (1.0 + 1.0 / (3.0 * (1.0 + ratio / 7.0))))


def effusive_flux(
    density: ArrayLike,
    temperature: ArrayLike,
    mass: float,
    area: ArrayLike,
    transmission: ArrayLike = 1.0,
) -> NDArray[np.float64]:
    """Total atom flux leaving an oven through an aperture in the molecular regime, 1/s.

    Parameters
    ----------
    density : array_like, 1/m^3
        Vapor density in the oven.
    temperature : array_like, K
    mass : float, kg
    area : array_like, m^2
        Aperture area.
    transmission : array_like
        Clausing factor W of the nozzle (:func:`clausing_factor`); 1 for an orifice.

    Returns
    -------
    ndarray, 1/s
        ``W n vbar A / 4`` with ``vbar = sqrt(8 k_B T / pi m)`` (Knudsen effusion).

    References
    ----------
    N. F. Ramsey, "Molecular Beams" (OUP, 1956), ch. 2; F. Reif, "Fundamentals of
    Statistical and Thermal Physics" (McGraw-Hill, 1965), ch. 7.
    """
    return 0.25 * _f(density) * mean_speed(mass, temperature) * _f(area) * _f(transmission)


def forward_intensity(
    density: ArrayLike, temperature: ArrayLike, mass: float, area: ArrayLike
) -> NDArray[np.float64]:
    """On-axis beam intensity of an effusive source, atoms/(s sr).

    Returns
    -------
    ndarray
        ``n vbar A / (4 pi)``: the cosine law of a thin orifice. A tube nozzle keeps the
        same forward intensity and narrows the beam, so its total flux falls by W while
        the forward intensity does not (Ramsey, ch. 2).
    """
    return effusive_flux(density, temperature, mass, area) / math.pi


def beam_fraction_into(
    transmission: ArrayLike, capture_radius: ArrayLike, distance: ArrayLike
) -> NDArray[np.float64]:
    """Fraction of an effusive beam's total flux that enters a disk at a distance.

    Parameters
    ----------
    transmission : array_like
        Clausing factor W of the nozzle.
    capture_radius : array_like, m
        Radius R of the capture region seen from the nozzle.
    distance : array_like, m

    Returns
    -------
    ndarray
        ``1 - exp(-theta^2 / W)``, theta = R / d.

    Notes
    -----
    The beam is taken as a Gaussian cone ``j(theta) = j0 exp(-theta^2 / theta_b^2)`` with the
    forward intensity j0 of :func:`forward_intensity`; conserving the total flux
    (``pi j0 theta_b^2 = W n vbar A / 4``) gives ``theta_b^2 = W``. A small capture region
    then receives ``j0 pi theta^2`` (the on-axis solid-angle law), and a wide one at most
    the whole beam, smoothly.

    References
    ----------
    N. F. Ramsey, "Molecular Beams" (OUP, 1956), ch. 2 (forward intensity and peaking
    factor 1 / W of a tube).
    """
    theta2 = (_f(capture_radius) / _f(distance)) ** 2
    return -np.expm1(-theta2 / _f(transmission))


def beam_speed_density(speed: ArrayLike, most_probable_speed: ArrayLike) -> NDArray[np.float64]:
    """Speed distribution of the atoms in an effusive beam (flux-weighted), s/m.

    Returns
    -------
    ndarray
        ``f(v) = 2 v^3 / vp^4 exp(-v^2 / vp^2)``, normalized on [0, inf).

    References
    ----------
    N. F. Ramsey, "Molecular Beams" (OUP, 1956), ch. 2: the beam carries the Maxwell
    density weighted by v.
    """
    v, vp = _f(speed), _f(most_probable_speed)
    return 2.0 * v**3 / vp**4 * np.exp(-((v / vp) ** 2))


def beam_mean_speed(most_probable_speed: ArrayLike) -> NDArray[np.float64]:
    """Mean speed of an effusive beam, ``(3 sqrt(pi) / 4) vp``, m/s (Ramsey, ch. 2)."""
    return 0.75 * math.sqrt(math.pi) * _f(most_probable_speed)


def slower_capture_velocity(
    *,
    length: ArrayLike,
    design_fraction: ArrayLike,
    final_velocity: ArrayLike,
    max_acceleration: float,
    field_velocity: ArrayLike = np.inf,
) -> NDArray[np.float64]:
    """Capture velocity of a Zeeman slower, m/s.

    Parameters
    ----------
    length : array_like, m
        Slowing length L.
    design_fraction : array_like
        eta of the design deceleration ``eta a_max``.
    final_velocity : array_like, m/s
        Exit velocity v_f.
    max_acceleration : float, m/s^2
        ``a_max = hbar k Gamma / (2 m)``.
    field_velocity : array_like, m/s
        The largest velocity the peak field and the detuning bring into resonance,
        ``(mu' B_peak / hbar + |delta|) / k``; default unlimited.

    Returns
    -------
    ndarray
        ``soft_min(sqrt(v_f^2 + 2 eta a_max L), field_velocity)``.

    References
    ----------
    W. D. Phillips and H. Metcalf, Phys. Rev. Lett. 48, 596 (1982); H. J. Metcalf and
    P. van der Straten, "Laser Cooling and Trapping" (Springer, 1999), ch. 6.
    """
    eta = np.clip(_f(design_fraction), 0.0, 1.0)
    design = np.sqrt(_f(final_velocity) ** 2 + 2.0 * eta * max_acceleration * _f(length))
    field = _f(field_velocity)
    return np.where(np.isinf(field), design, soft_minimum(design, field))


def slower_light_fraction(
    peak_saturation: ArrayLike,
    design_fraction: ArrayLike,
    beam_waist: ArrayLike,
    atom_beam_radius: ArrayLike,
) -> NDArray[np.float64]:
    """Fraction of the atomic beam for which the slower light supplies the design deceleration.

    Parameters
    ----------
    peak_saturation : array_like
        On-axis saturation s0 of the slowing beam.
    design_fraction : array_like
        eta: the atom follows the field only where ``a_max s / (1 + s) >= eta a_max``.
    beam_waist : array_like, m
        1/e^2 radius w of the slowing beam.
    atom_beam_radius : array_like, m
        Rms radius sigma of the atomic beam (Gaussian) inside the slower.

    Returns
    -------
    ndarray
        ``1 - (s0 (1 - eta) / eta)^(-w^2 / (4 sigma^2))`` above threshold, 0 below.

    Notes
    -----
    With ``s(r) = s0 exp(-2 r^2 / w^2)`` the condition ``s / (1 + s) >= eta`` holds inside
    ``r_c^2 = (w^2 / 2) ln(s0 (1 - eta) / eta)``; a Gaussian atomic beam puts the fraction
    ``1 - exp(-r_c^2 / 2 sigma^2)`` there. It rises continuously from 0 at the threshold
    ``s0 = eta / (1 - eta)``: no knife edge in the slower power.

    References
    ----------
    W. D. Phillips and H. Metcalf, Phys. Rev. Lett. 48, 596 (1982); H. J. Metcalf and
    P. van der Straten, "Laser Cooling and Trapping" (Springer, 1999), ch. 6.
    """
    eta = np.clip(_f(design_fraction), 1e-12, 1.0 - 1e-12)
    margin = np.maximum(_f(peak_saturation), 0.0) * (1.0 - eta) / eta
    with np.errstate(divide="ignore", invalid="ignore"):
        r2 = 0.5 * _f(beam_waist) ** 2 * np.log(np.maximum(margin, 1.0))
        return -np.expm1(-r2 / (2.0 * _f(atom_beam_radius) ** 2))


def transverse_source_flux(
    density: ArrayLike,
    *,
    most_probable_speed: ArrayLike,
    capture_velocity: ArrayLike,
    waist: ArrayLike,
    cooling_length: ArrayLike,
    output_velocity: ArrayLike,
    loss_coefficient: ArrayLike,
    transverse_acceleration: ArrayLike,
    turned_fraction: ArrayLike = 0.0,
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Flux of a 2D-MOT source, atoms/s, and its saturation length, m.

    Parameters
    ----------
    density : array_like, 1/m^3
        Vapor density in the source cell.
    most_probable_speed : array_like, m/s
        Of the vapor.
    capture_velocity : array_like, m/s
        Transverse capture velocity of the 2D-MOT beams.
    waist : array_like, m
        1/e^2 radius of the transverse beams (radius of the capture cylinder).
    cooling_length : array_like, m
        Length L of the cooling region along the axis.
    output_velocity : array_like, m/s
        Mean longitudinal velocity of the atoms leaving the source.
    loss_coefficient : array_like, m^3/s
        <sigma v> of collisions of a cooled atom with the vapor.
    transverse_acceleration : array_like, m/s^2
        Deceleration of the transverse light (sets the cooling time).
    turned_fraction : array_like
        Share of the atoms moving away from the exit that a push beam turns round
        (:func:`push_stopped_fraction`; 0 without one: half the cooled atoms leave).

    Returns
    -------
    flux : ndarray, 1/s
        ``Phi = lambda L_c (1 - exp(-L / L_c))``.
    saturation_length : ndarray, m
        ``L_c = v_out / (n <sigma v>)``.

    Notes
    -----
    Atoms enter the capture cylinder of radius w through its side at the thermal rate
    ``n (vp / 2 sqrt(pi)) 2 pi w`` per unit length; those with a transverse speed below
    the capture velocity (the two-dimensional flux-weighted fraction, equal to the
    three-dimensional number fraction ``erf(x) - 2 x exp(-x^2) / sqrt(pi)``) and slow
    enough along the axis to be cooled within the length,
    ``|v_z| < L a / v_c`` (fraction ``erf(v_zmax / vp)``, half of it towards the exit),
    form the beam: a capture rate lambda per length. Collisions with the vapor remove
    a cooled atom on its way out at the rate ``n <sigma v>``, over the time
    ``(L - z) / v_out``; integrating along the axis gives the flux above: linear in n and
    L at first, saturating with both (Dieckmann et al. 1998; Schoser et al. 2002).

    References
    ----------
    K. Dieckmann, R. J. C. Spreeuw, M. Weidemueller and J. T. M. Walraven, Phys. Rev. A
    58, 3891 (1998); J. Schoser et al., Phys. Rev. A 66, 023410 (2002).
    """
    n, vp = _f(density), _f(most_probable_speed)
    length = np.maximum(_f(cooling_length), 0.0)
    vc = _f(capture_velocity)
    with np.errstate(divide="ignore", invalid="ignore"):
        vz_max = length * _f(transverse_acceleration) / vc
        longitudinal = (
            0.5 * (1.0 + _f(turned_fraction)) * special.erf(np.where(vc > 0, vz_max, 0.0) / vp)
        )
        per_length = (
            n * vp / (2.0 * math.sqrt(math.pi)) * 2.0 * math.pi * _f(waist)
        ) * fraction_slower(vc, vp)
        per_length = per_length * longitudinal
        decay = n * _f(loss_coefficient) / _f(output_velocity)  # 1 / L_c
        saturation_length = np.where(decay > 0, 1.0 / decay, np.inf)
        # lambda L_c (1 - exp(-L / L_c)) -> lambda L for L << L_c (no collisions)
        effective = np.where(decay > 0, -np.expm1(-length * decay) / decay, length)
    return per_length * effective, saturation_length


def _push_acceleration(v, saturation, detuning, other, *, max_acceleration, wavenumber, linewidth):
    """Push-beam acceleration of an atom moving at v along the beam (rate-equation form)."""
    delta = 2.0 * math.pi * detuning - wavenumber * v  # the atom recedes: Doppler shift -k v
    lorentz = 1.0 / (1.0 + 4.0 * delta**2 / linewidth**2)
    return max_acceleration * saturation * lorentz / (1.0 + saturation * lorentz + other)


def push_exit_velocity(
    distance: ArrayLike,
    *,
    saturation: ArrayLike,
    detuning: ArrayLike,
    other_saturation: ArrayLike,
    max_acceleration: float,
    wavenumber: float,
    linewidth: float,
    start_velocity: ArrayLike = 0.0,
    n_steps: int = 48,
) -> NDArray[np.float64]:
    """Speed of an atom after a push beam has accelerated it over ``distance``, m/s.

    Parameters
    ----------
    distance : array_like, m
        Path along the push beam (in a 2D-MOT, where the axial molasses leaves the push
        beam alone: the shadow of the hole in the retarding mirror).
    saturation : array_like
        Peak saturation parameter s of the push beam.
    detuning : array_like, Hz
        Push-beam detuning from the cycling line (cyclic frequency; red < 0).
    other_saturation : array_like
        Saturation the other light adds to the rate-equation denominator (the 2D-MOT beams).
    max_acceleration, wavenumber, linewidth : float
        hbar k Gamma / 2m (m/s^2), k (1/m) and Gamma (1/s) of the cycling line.
    start_velocity : array_like, m/s
        Axial velocity where the push takes over (0: axially cooled atoms).
    n_steps : int
        Fourth-order Runge-Kutta steps in ``v^2`` along the path.

    Returns
    -------
    ndarray, m/s

    Notes
    -----
    ``d(v^2)/dz = 2 a(v)``, ``a(v) = a_max s L / (1 + s L + s_other)``,
    ``L = 1 / (1 + 4 (2 pi delta - k v)^2 / Gamma^2)`` (the rate-equation light force of
    Metcalf & van der Straten 1999, ch. 7, with the Doppler shift of a receding atom).
    Far in the wing the force falls as ``C / v^2``, ``C = a_max s Gamma^2 / 4 k^2``, and
    ``v^4 - v0^4 = 4 C z`` (for s << 1 at large k v): the exit speed is
    set by the push intensity and detuning, the published way of tuning a 2D-MOT beam
    (Dieckmann et al. 1998; Schoser et al. 2002).
    """
    z = np.maximum(_f(distance), 0.0)
    s, det, other = _f(saturation), _f(detuning), _f(other_saturation)
    shape = np.broadcast_shapes(z.shape, s.shape, det.shape, other.shape, np.shape(start_velocity))
    u = np.broadcast_to(_f(start_velocity) ** 2, shape).astype(float)
    h = np.broadcast_to(z / n_steps, shape)
    kw = {"max_acceleration": max_acceleration, "wavenumber": wavenumber, "linewidth": linewidth}

    def slope(u2: NDArray) -> NDArray:
        return 2.0 * _push_acceleration(np.sqrt(np.maximum(u2, 0.0)), s, det, other, **kw)

    for _ in range(n_steps):
        k1 = slope(u)
        k2 = slope(u + 0.5 * h * k1)
        k3 = slope(u + 0.5 * h * k2)
        k4 = slope(u + h * k3)
        u = u + h * (k1 + 2.0 * k2 + 2.0 * k3 + k4) / 6.0
    return np.sqrt(np.maximum(u, 0.0))


def push_stopped_fraction(
    stop_speed: ArrayLike, axial_limit: ArrayLike, most_probable_speed: ArrayLike
) -> NDArray[np.float64]:
    """Share of the captured atoms moving away from the exit that the push turns round.

    Of the atoms cooled transversely (axial speeds below ``axial_limit``, a Maxwellian
    of ``most_probable_speed`` in one dimension), those moving backwards slower than
    ``stop_speed`` (the speed the push beam removes over its path) leave through the
    exit too: ``erf(min(v_stop, v_max) / vp) / erf(v_max / vp)``, a smooth soft minimum.
    """
    vp = _f(most_probable_speed)
    limit = np.maximum(_f(axial_limit), 0.0)
    stop = soft_minimum(stop_speed, limit)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = special.erf(stop / vp) / special.erf(limit / vp)
    return np.where(limit > 0, np.clip(out, 0.0, 1.0), 0.0)
