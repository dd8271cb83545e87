"""Cloud of a MOT: temperature-limited Gaussian, density-limited flat top, steady state.

Pure, broadcasting NumPy functions in SI. The atom number follows

    dN/dt = R - c N - beta nbar(N) N,      nbar = int n^2 dV / int n dV,

with the mean density ``nbar`` of the cloud's actual profile. Below the critical
number ``N_c = n_lim (2 pi)^(3/2) sigma^3`` the cloud is the thermal Gaussian of rms
radius sigma (``nbar = n0 / 2^(3/2)``). Above it the peak density stays at the
limit ``n_lim`` (Walker, Sesko & Wieman 1990) and the cloud grows a flat core of
radius ``a`` with the same Gaussian edge of width sigma ("cored Gaussian"):

    n(r) = n_lim                              r < a
    n(r) = n_lim exp(-(r - a)^2 / (2 sigma^2))  r > a

so that ``N = n_lim V1(a)`` and ``int n^2 = n_lim^2 V2(a)`` with cubic polynomials
V1, V2 in a. At ``a = 0`` it is the Gaussian, so nbar and every output are
continuous across the change of regime; for ``a >> sigma`` nbar tends to n_lim
(flat top).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["CloudState", "cloud_steady_state", "cored_volumes", "limiting_density"]

_S2 = np.sqrt(np.pi / 2.0)
_S1 = np.sqrt(np.pi) / 2.0
_GL_X, _GL_W = np.polynomial.legendre.leggauss(8)


def _f(a: ArrayLike) -> NDArray[np.float64]:
    return np.asarray(a, dtype=float)


def cored_volumes(core: ArrayLike, sigma: ArrayLike) -> tuple[NDArray, NDArray, NDArray]:
    """Volumes V1 = N / n_lim and V2 = int n^2 dV / n_lim^2 of the cored Gaussian, m^3.

    Parameters
    ----------
    core : array_like, m
        Radius a of the flat core.
    sigma : array_like, m
        Width of the Gaussian edge.

    Returns
    -------
    v1, v2, dv1 : ndarray
        ``V1 = 4 pi (a^3/3 + sqrt(pi/2) s a^2 + 2 s^2 a + sqrt(pi/2) s^3)``,
        ``V2 = 4 pi (a^3/3 + (sqrt(pi)/2) s a^2 + s^2 a + (sqrt(pi)/4) s^3)`` and dV1/da.

    Notes
    -----
    Radial integrals of the profile in the module docstring; at a = 0,
    ``V1 = (2 pi)^(3/2) s^3`` and ``V2 = pi^(3/2) s^3`` (the Gaussian).
    """
    a, s = _f(core), _f(sigma)
    v1 = 4 * np.pi * (a**3 / 3 + _S2 * s * a**2 + 2 * s**2 * a + _S2 * s**3)
    v2 = 4 * np.pi * (a**3 / 3 + _S1 * s * a**2 + s**2 * a + 0.5 * _S1 * s**3)
    dv1 = 4 * np.pi * (a**2 + 2 * _S2 * s * a + 2 * s**2)
    return v1, v2, dv1


def limiting_density(
    reference_density: ArrayLike,
    spring_constant: ArrayLike,
    intensity: ArrayLike,
    cross_section: ArrayLike,
    reference_ratio: ArrayLike,
) -> NDArray[np.float64]:
    """Peak density at which reradiated light balances the trap, 1/m^3.

    Parameters
    ----------
    reference_density : array_like, 1/m^3
        The limit at the reference trap (calibratable constant).
    spring_constant : array_like, N/m
    intensity : array_like, W/m^2
        Total intensity of the cooling light at the cloud.
    cross_section : array_like, m^2
        Absorption cross-section of the trapped atoms for it.
    reference_ratio : array_like, m^2 s / m^2 ... (same unit as the ratio below)
        ``kappa / (I sigma_L^2)`` of the reference trap.

    Returns
    -------
    ndarray, 1/m^3
        ``n_lim = n_ref (kappa / (I sigma_L^2)) / reference_ratio``.

    Notes
    -----
    Walker, Sesko & Wieman: the repulsion of reradiated photons balances the trap at
    ``n_max = 3 c kappa / (sigma_L (sigma_R - sigma_L) I)``; with the ratio of the
    reabsorption to the absorption cross-section taken as fixed, ``n_max`` scales as
    ``kappa / (I sigma_L^2)``. Zero intensity or zero spring constant gives 0.

    References
    ----------
    T. Walker, D. Sesko and C. Wieman, Phys. Rev. Lett. 64, 408 (1990).
    """
    k, i, sig = _f(spring_constant), _f(intensity), _f(cross_section)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where((i > 0) & (sig > 0), np.maximum(k, 0.0) / (i * sig**2), 0.0)
    return _f(reference_density) * ratio / _f(reference_ratio)


class CloudState(NamedTuple):
    """Steady state of the rate equation with the cloud's own profile."""

    atom_number: NDArray[np.float64]
    loading_time: NDArray[np.float64]
    peak_density: NDArray[np.float64]
    cloud_radius: NDArray[np.float64]
    """Rms radius, m (of the profile: sqrt(<r^2>/3))."""
    mean_density: NDArray[np.float64]
    density_limited: NDArray[np.bool_]


def _core_for(target, p3, p2, p1, p0):
    """Positive root a of p3 a^3 + p2 a^2 + p1 a + p0 = target (all p >= 0), by Newton."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        a = np.cbrt(np.maximum(target - p0, 0.0) / p3)  # an upper bound: Newton from above
        a = np.where(np.isfinite(a), a, 0.0)
        for _ in range(30):
            f = ((p3 * a + p2) * a + p1) * a + p0 - target
            df = (3 * p3 * a + 2 * p2) * a + p1
            a = np.maximum(a - np.where(df > 0, f / df, 0.0), 0.0)
    return a


def cloud_steady_state(
    loading_rate: ArrayLike,
    loss_rate: ArrayLike,
    *,
    two_body_coefficient: ArrayLike,
    sigma: ArrayLike,
    density_limit: ArrayLike,
    fraction: float = 1.0 - np.exp(-1.0),
) -> CloudState:
    """Steady state and loading time of ``dN/dt = R - c N - beta nbar(N) N``.

    Parameters
    ----------
    loading_rate : array_like, 1/s
    loss_rate : array_like, 1/s
        One-body loss rate c.
    two_body_coefficient : array_like, m^3/s
        beta.
    sigma : array_like, m
        Temperature-limited rms radius (``inf`` where there is no trap).
    density_limit : array_like, 1/m^3
        Peak density limit n_lim (``inf``: none).
    fraction : float
        Loading time: from N = 0 to ``fraction`` x the steady state.

    Returns
    -------
    CloudState

    Notes
    -----
    Temperature-limited (``N <= N_c``) this is the Riccati equation with
    ``b = beta / (2^(3/2) (2 pi)^(3/2) sigma^3)``, solved in closed form. Above N_c
    both N and the two-body term are cubic polynomials in the core radius a, so the
    steady state is the positive root of a cubic (Newton from an upper bound) and
    the time spent above N_c is ``int n_lim V1'(a) da / (R - c N(a) - beta n_lim^2
    V2(a))`` by 8-point Gauss-Legendre quadrature.

    References
    ----------
    T. Walker, D. Sesko and C. Wieman, Phys. Rev. Lett. 64, 408 (1990); C. G.
    Townsend et al., Phys. Rev. A 52, 1423 (1995) (flat-topped dense clouds).
    """
    r = np.maximum(_f(loading_rate), 0.0)
    c = _f(loss_rate)
    beta = np.maximum(_f(two_body_coefficient), 0.0)
    s = _f(sigma)
    n_lim = _f(density_limit)
    r, c, beta, s, n_lim = np.broadcast_arrays(r, c, beta, s, n_lim)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        v_gauss = (2 * np.pi) ** 1.5 * s**3
        b = np.where(np.isfinite(v_gauss) & (v_gauss > 0), beta / (2**1.5 * v_gauss), 0.0)
        root = np.sqrt(c * c + 4 * b * r)
        n_plus = np.where(c + root > 0, 2 * r / (c + root), np.where(r > 0, np.inf, 0.0))
        n_crit = n_lim * v_gauss
        dense = (n_plus > n_crit) & np.isfinite(n_crit)
        # cubic coefficients of R = c N(a) + beta n_lim^2 V2(a) in the core radius a
        k = 4 * np.pi
        p3 = k / 3 * (c * n_lim + beta * n_lim**2)
        p2 = k * s * (_S2 * c * n_lim + _S1 * beta * n_lim**2)
        p1 = k * s**2 * (2 * c * n_lim + beta * n_lim**2)
        p0 = k * s**3 * (_S2 * c * n_lim + 0.5 * _S1 * beta * n_lim**2)
        safe = np.where(dense, 1.0, 0.0)
        core = np.where(
            dense,
            _core_for(np.where(dense, r, 1.0), p3 + 1 - safe, p2 * safe, p1 * safe, p0 * safe),
            0.0,
        )
        v1, v2, _ = cored_volumes(core, s)
        n_dense = n_lim * v1
        n_s = np.where(dense, n_dense, n_plus)
        nbar = np.where(
            dense, n_lim * v2 / v1, np.where(v_gauss > 0, n_s / v_gauss, 0.0) * 2**-1.5
        )
        n0 = np.where(dense, n_lim, np.where(v_gauss > 0, n_s / v_gauss, 0.0))
        # rms radius from <r^2> of the profile (the Gaussian's sigma below N_c)
        radius = np.where(dense, _rms_radius(core, s), s)
        # loading time: Riccati part up to min(target, N_c), quadrature above N_c
        target = fraction * n_s
        ratio = np.where(c + root > 0, -4 * b * r / (c + root) ** 2, 0.0)
        t_a = _riccati_time(
            np.minimum(target, np.where(dense, n_crit, target)) / n_plus, ratio, root
        )
        core_t = np.where(
            dense,
            _core_for(
                np.where(dense, target / n_lim, 1.0),
                (k / 3) * safe + 1 - safe,
                k * _S2 * s * safe,
                2 * k * s**2 * safe,
                k * _S2 * s**3 * safe,
            ),
            0.0,
        )
        t_b = np.zeros_like(core_t)
        for x, w in zip(_GL_X, _GL_W, strict=True):
            a = 0.5 * core_t * (x + 1)
            v1a, v2a, dv1a = cored_volumes(a, s)
            g = r - c * n_lim * v1a - beta * n_lim**2 * v2a
            t_b += 0.5 * core_t * w * n_lim * dv1a / np.where(g > 0, g, np.inf)
        t_load = np.where(dense, t_a + t_b, t_a)
        t_load = np.where((r > 0) | (c > 0), t_load, np.inf)
        t_load = np.where(r > 0, t_load, np.where(c > 0, 1.0 / c, np.inf))
    t_load = np.where(np.isnan(t_load), np.inf, t_load)
    return CloudState(n_s, t_load, n0, radius, nbar, dense)


def _rms_radius(core, sigma):
    # sqrt(<r^2> / 3) of the cored Gaussian, <r^2> = int r^4 n / int r^2 n
    a, s = core, sigma
    m4 = a**5 / 5 + _S2 * s * (a**4 + 6 * a**2 * s**2 + 3 * s**4) + 4 * a**3 * s**2 + 8 * a * s**4
    m2 = a**3 / 3 + _S2 * s * a**2 + 2 * s**2 * a + _S2 * s**3
    return np.sqrt(m4 / m2 / 3)


def _riccati_time(target_fraction, ratio, root):
    """Time for the Riccati solution from 0 to target_fraction x N+ (inf if never)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.log((1.0 - target_fraction * ratio) / (1.0 - target_fraction)) / root
    return np.where(
        (root > 0) & (target_fraction < 1), t, np.where(target_fraction <= 0, 0, np.inf)
    )
