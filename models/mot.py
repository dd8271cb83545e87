"""Loading, loss, steady state, cloud size, repumping and fluorescence of a vapor-cell MOT.

Pure, broadcasting NumPy functions in SI. The atom number follows the rate
equation (Monroe et al. 1990; Walker, Sesko & Wieman 1990)::

    dN/dt = R - N / tau - beta nbar N,     nbar = n0 / 2^(3/2)

with the cloud either temperature-limited (a Gaussian of fixed rms radius
sigma = sqrt(k_B T / kappa), n0 = N / ((2 pi)^(3/2) sigma^3)) or
density-limited (n0 = density_limit, radius growing as N^(1/3)). Both regimes
have closed-form solutions, used here.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import constants as sc

from trapbudget.models.vapor import flux_fraction_slower

__all__ = [
    "LOADING_FRACTION",
    "SteadyState",
    "bright_fraction",
    "fluorescence",
    "fluorescence_power",
    "loading_curve",
    "loading_rate",
    "mean_density",
    "repump_rate",
    "steady_state",
    "temperature_limited_radius",
    "two_body_loss_rate",
    "vapor_loss_rate",
]

#: Fraction of the steady-state atom number that defines the loading time (1 - 1/e).
LOADING_FRACTION = 1.0 - np.exp(-1.0)
_GAUSS_VOLUME = (2.0 * np.pi) ** 1.5  # N / (n0 sigma^3) for a Gaussian cloud
_MEAN_OVER_PEAK = 2.0**-1.5  # nbar / n0 for a Gaussian cloud


def _f(a: ArrayLike) -> NDArray[np.float64]:
    return np.asarray(a, dtype=float)


def loading_rate(
    density: ArrayLike,
    capture_area: ArrayLike,
    capture_velocity: ArrayLike,
    most_probable_speed: ArrayLike,
    *,
    prefactor: ArrayLike = 1.0,
) -> NDArray[np.float64]:
    """Rate at which a thermal vapor loads the trap, atoms/s.

    Parameters
    ----------
    density : array_like, 1/m^3
        Number density of the (alkali) vapor.
    capture_area : array_like, m^2
        Surface area of the capture volume.
    capture_velocity : array_like, m/s
    most_probable_speed : array_like, m/s
        vp = sqrt(2 k_B T / m) of the vapor.
    prefactor : array_like, 1
        Explicit model constant multiplying the kinetic-theory rate (default 1).

    Returns
    -------
    ndarray, 1/s

    Notes
    -----
    Kinetic theory: the flux of atoms slower than vc through the surface A is
    ``R = (1/4) n A int_0^vc v f(v) dv = (1/4) n A vbar P(2, x^2)``,
    x = vc/vp, vbar = 2 vp / sqrt(pi), and P(2, y) = 1 - (1 + y) e^-y the
    regularized incomplete gamma function (exact Maxwell-Boltzmann integral).
    For vc << vp this is the vc^4 law ``R ~= n A vc^4 / (4 sqrt(pi) vp^3)``.
    Monroe et al. write ``R = (1/2) n V^(2/3) vc^4 (m / 2 k_B T)^(3/2)``,
    which differs by a geometric factor of order one: hence ``prefactor``.

    References
    ----------
    C. J. Foot, "Atomic Physics", OUP (2005), ch. 9. C. Monroe, W. Swann,
    H. Robinson and C. Wieman, Phys. Rev. Lett. 65, 1571 (1990).
    """
    vp = _f(most_probable_speed)
    mean_speed = 2.0 * vp / np.sqrt(np.pi)
    slow_flux = flux_fraction_slower(capture_velocity, vp)
    return _f(prefactor) * 0.25 * _f(density) * _f(capture_area) * mean_speed * slow_flux


def vapor_loss_rate(density: ArrayLike, coefficient: ArrayLike) -> NDArray[np.float64]:
    """Loss rate by collisions with the untrapped hot vapor, 1/s: ``n <sigma v>``.

    Parameters
    ----------
    density : array_like, 1/m^3
        Vapor density.
    coefficient : array_like, m^3/s
        Loss-rate coefficient <sigma v> for trapped-hot collisions.

    References
    ----------
    C. Monroe et al., Phys. Rev. Lett. 65, 1571 (1990) (loss by collisions with
    the vapor, 1/tau = n sigma v).
    """
    return _f(density) * _f(coefficient)


def mean_density(peak_density: ArrayLike) -> NDArray[np.float64]:
    """Density averaged over a Gaussian cloud's own distribution, ``nbar = n0 / 2^(3/2)``, 1/m^3.

    Notes
    -----
    nbar = int n^2 dV / int n dV for n = n0 exp(-r^2 / 2 sigma^2).
    """
    return _MEAN_OVER_PEAK * _f(peak_density)


def two_body_loss_rate(
    two_body_coefficient: ArrayLike, peak_density: ArrayLike
) -> NDArray[np.float64]:
    """Per-atom light-assisted two-body loss rate ``beta nbar``, 1/s.

    References
    ----------
    D. Sesko, T. Walker, C. Monroe, A. Gallagher and C. Wieman, Phys. Rev.
    Lett. 63, 961 (1989) (light-assisted collisional loss in a MOT).
    """
    return _f(two_body_coefficient) * mean_density(peak_density)


def temperature_limited_radius(
    temperature: ArrayLike, spring_constant: ArrayLike
) -> NDArray[np.float64]:
    """Rms radius of a thermal cloud in a harmonic trap, m: ``sigma = sqrt(k_B T / kappa)``.

    Returns ``inf`` for a zero spring constant (no trap).

    References
    ----------
    H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping",
    Springer (1999), ch. 7 (equipartition in the MOT).
    """
    kappa = _f(spring_constant)
    with np.errstate(divide="ignore", invalid="ignore"):
        sigma = np.sqrt(sc.k * _f(temperature) / kappa)
    return np.where(kappa > 0, sigma, np.inf)


class SteadyState(NamedTuple):
    """Closed-form solution of the MOT rate equation."""

    atom_number: NDArray[np.float64]
    """Steady-state atom number."""
    loading_time: NDArray[np.float64]
    """Time from empty to LOADING_FRACTION of the steady state, s."""
    peak_density: NDArray[np.float64]
    """Peak density n0 at steady state, 1/m^3."""
    cloud_radius: NDArray[np.float64]
    """Rms radius at steady state, m."""
    density_limited: NDArray[np.bool_]
    """True where the steady state is density-limited."""


def _riccati(loading_rate, loss_rate, two_body):
    """N+, r = N+/N- and the rate S of dN/dt = R - c N - b N^2 (b >= 0)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        quadratic = np.where(
            (loading_rate > 0) & (two_body > 0), 4.0 * two_body * loading_rate, 0.0
        )
        root = np.sqrt(loss_rate**2 + quadratic)
        total = loss_rate + root
        n_plus = np.where(
            total > 0, 2.0 * loading_rate / total, np.where(loading_rate > 0, np.inf, 0.0)
        )
        ratio = np.where(total > 0, -4.0 * two_body * loading_rate / total**2, 0.0)
    return n_plus, ratio, root


def _riccati_time(target_fraction, ratio, root):
    """Time for the Riccati solution from 0 to target_fraction x N+ (inf if never)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.log((1.0 - target_fraction * ratio) / (1.0 - target_fraction)) / root
    return np.where((root > 0) & (target_fraction < 1), t, np.inf)


def _coefficients(loading_rate, loss_rate, two_body_coefficient, cloud_radius, density_limit):
    r = np.maximum(_f(loading_rate), 0.0)
    c = _f(loss_rate)
    beta = _f(two_body_coefficient)
    sigma = _f(cloud_radius)
    n_lim = _f(density_limit)
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        volume = _GAUSS_VOLUME * sigma**3
        b = np.where(np.isfinite(volume), _MEAN_OVER_PEAK * beta / volume, 0.0)
        n_crit = n_lim * volume  # atom number at which n0 reaches the limit
        # linear loss rate once density-limited
        c_dense = c + np.where(beta > 0, _MEAN_OVER_PEAK * beta * n_lim, 0.0)
    return r, c, b, volume, n_crit, n_lim, c_dense


def steady_state(
    loading_rate: ArrayLike,
    loss_rate: ArrayLike,
    *,
    two_body_coefficient: ArrayLike,
    cloud_radius: ArrayLike,
    density_limit: ArrayLike = np.inf,
    fraction: float = LOADING_FRACTION,
) -> SteadyState:
    """Steady state and loading time of ``dN/dt = R - N/tau - beta nbar N``.

    Parameters
    ----------
    loading_rate : array_like, 1/s
        R.
    loss_rate : array_like, 1/s
        One-body loss rate 1/tau (vapor plus background).
    two_body_coefficient : array_like, m^3/s
        beta (light-assisted loss).
    cloud_radius : array_like, m
        Temperature-limited rms radius sigma (:func:`temperature_limited_radius`).
    density_limit : array_like, 1/m^3
        Largest peak density (reradiation limit); default no limit.
    fraction : float
        Fraction of the steady state that defines the loading time
        (default 1 - 1/e, which gives tau without two-body loss).

    Returns
    -------
    SteadyState

    Notes
    -----
    Temperature-limited, b = beta / (2^(3/2) (2 pi)^(3/2) sigma^3)::

        dN/dt = R - c N - b N^2,  N+ = 2 R / (c + S),  S = sqrt(c^2 + 4 b R)
        N(t) = N+ (1 - e^{-S t}) / (1 - r e^{-S t}),  r = N+/N- = -4 b R / (c + S)^2

    If N+ exceeds N_c = n_lim (2 pi)^(3/2) sigma^3 the cloud becomes
    density-limited at N_c (reached at t_c on the curve above) and relaxes
    linearly afterwards: ``N = N_s - (N_s - N_c) e^{-c'(t - t_c)}`` with
    c' = c + beta n_lim / 2^(3/2) and N_s = R / c'; its rms radius is then
    (N_s / ((2 pi)^(3/2) n_lim))^(1/3). The loading time is the time from
    N = 0 to ``fraction`` x N_s; without loading (R = 0) it is the
    loss-limited 1/c, and inf with no loss at all.

    References
    ----------
    C. Monroe et al., Phys. Rev. Lett. 65, 1571 (1990); T. Walker, D. Sesko
    and C. Wieman, Phys. Rev. Lett. 64, 408 (1990) (density limit);
    D. Sesko et al., Phys. Rev. Lett. 63, 961 (1989) (two-body loss).
    """
    r, c, b, volume, n_crit, n_lim, c_dense = _coefficients(
        loading_rate, loss_rate, two_body_coefficient, cloud_radius, density_limit
    )
    n_plus, ratio, root = _riccati(r, c, b)
    dense = n_plus > n_crit
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        n_dense = np.where(c_dense > 0, r / c_dense, np.inf)
        n_s = np.where(dense, n_dense, n_plus)
        t_thermal = _riccati_time(np.float64(fraction), ratio, root)
        target = fraction * n_s
        # density-limited: first along the Riccati curve up to N_c, then linear relaxation
        t_crit = _riccati_time(np.minimum(n_crit / n_plus, 1.0), ratio, root)
        t_early = _riccati_time(target / n_plus, ratio, root)
        t_late = t_crit + np.log((n_dense - n_crit) / (n_dense - target)) / c_dense
        t_dense = np.where(target <= n_crit, t_early, t_late)
        t_load = np.where(dense, t_dense, t_thermal)
        n0 = np.where(dense, n_lim, np.where(np.isfinite(volume), n_s / volume, 0.0))
        radius = np.where(dense, np.cbrt(n_s / (_GAUSS_VOLUME * n_lim)), _f(cloud_radius))
    t_load = np.where(np.isnan(t_load), np.inf, t_load)
    return SteadyState(n_s, t_load, n0, radius, dense)


def loading_curve(
    time: ArrayLike,
    loading_rate: ArrayLike,
    loss_rate: ArrayLike,
    *,
    two_body_coefficient: ArrayLike,
    cloud_radius: ArrayLike,
    density_limit: ArrayLike = np.inf,
) -> NDArray[np.float64]:
    """Atom number N(t) loading from an empty trap at t = 0 (closed form).

    Parameters are those of :func:`steady_state`, plus ``time`` (s, >= 0),
    broadcast against them.

    Returns
    -------
    ndarray
        N(t).

    Notes
    -----
    See :func:`steady_state` for the two branches. Without two-body loss
    this is ``N_s (1 - exp(-t / tau))``.
    """
    t = _f(time)
    r, c, b, _volume, n_crit, _n_lim, c_dense = _coefficients(
        loading_rate, loss_rate, two_body_coefficient, cloud_radius, density_limit
    )
    n_plus, ratio, root = _riccati(r, c, b)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        decay = np.exp(-root * t)
        # S = 0 only when c = 0 and b R = 0: then N = R t
        thermal = np.where(root > 0, n_plus * -np.expm1(-root * t) / (1.0 - ratio * decay), r * t)
        dense = n_plus > n_crit
        t_crit = _riccati_time(np.minimum(n_crit / n_plus, 1.0), ratio, root)
        n_dense = r / c_dense
        late = n_dense - (n_dense - n_crit) * np.exp(-c_dense * (t - t_crit))
        return np.where(dense & (t > t_crit), late, thermal)


def repump_rate(repump_saturation: ArrayLike, linewidth: ArrayLike) -> NDArray[np.float64]:
    """Optical pumping rate out of the dark ground state by a resonant repumper, 1/s.

    Parameters
    ----------
    repump_saturation : array_like, 1
        Repump intensity over the saturation intensity. The cycling line's
        I_sat is used as an approximation for the repump transition.
    linewidth : array_like, 1/s

    Returns
    -------
    ndarray, 1/s
        ``(Gamma / 2) s / (1 + s)``: the resonant scattering rate.

    References
    ----------
    H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping",
    Springer (1999), ch. 2 (scattering rate).
    """
    s = np.maximum(_f(repump_saturation), 0.0)
    return 0.5 * _f(linewidth) * s / (1.0 + s)


def bright_fraction(
    scattering_rate: ArrayLike, leak_probability: ArrayLike, repump_rate: ArrayLike
) -> NDArray[np.float64]:
    """Steady-state fraction of atoms in the cycling (bright) states.

    Parameters
    ----------
    scattering_rate : array_like, 1/s
        Photon scattering rate of a bright atom.
    leak_probability : array_like, 1
        Probability per photon of falling into the dark ground state
        (``Species.leak_probability``).
    repump_rate : array_like, 1/s
        Rate back into the bright states (:func:`repump_rate`).

    Returns
    -------
    ndarray
        ``f = R_rep / (R_rep + R_leak)``, R_leak = scattering rate x leak
        probability; 1 where nothing leaks.

    Notes
    -----
    Two-state balance f R_leak = (1 - f) R_rep (rate equation of optical
    pumping; Metcalf & van der Straten 1999, ch. 2).
    """
    leak = _f(scattering_rate) * _f(leak_probability)
    rep = np.maximum(_f(repump_rate), 0.0)
    total = rep + leak
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(leak > 0, rep / total, 1.0)


def fluorescence(
    atom_number: ArrayLike,
    scattering_rate: ArrayLike,
    *,
    bright_fraction: ArrayLike = 1.0,
    solid_angle: ArrayLike,
    efficiency: ArrayLike = 1.0,
) -> NDArray[np.float64]:
    """Photons per second detected from the cloud.

    Parameters
    ----------
    atom_number : array_like
    scattering_rate : array_like, 1/s
        Per bright atom.
    bright_fraction : array_like, 1
    solid_angle : array_like, sr
        Collection solid angle of the detector optics.
    efficiency : array_like, 1
        Transmission x quantum efficiency.

    Returns
    -------
    ndarray, 1/s
        ``N R_sc f (Omega / 4 pi) eta`` (isotropic emission assumed).
    """
    return (
        _f(atom_number)
        * _f(scattering_rate)
        * _f(bright_fraction)
        * _f(solid_angle)
        / (4.0 * np.pi)
        * _f(efficiency)
    )


def fluorescence_power(photon_rate: ArrayLike, wavelength: ArrayLike) -> NDArray[np.float64]:
    """Optical power carried by a photon rate, W: ``rate x h c / lambda``."""
    return _f(photon_rate) * sc.h * sc.c / _f(wavelength)
