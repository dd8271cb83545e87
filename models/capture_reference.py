"""Slow 3-D reference for the loading of a six-beam MOT: full trajectories, scipy solve_ivp.

Written independently of the model's compiled line kernel: its own force law in
vector form (:func:`acceleration`), curved trajectories in three dimensions, and a
final-state criterion. Used by the tests and by ``benchmarks/bench_model.py`` to
measure what the fast model (straight lines, table, corrections) costs in accuracy.

Setup (dimensionless as in :mod:`capture`: lengths in waists, speeds in Gamma / k,
time in k w / Gamma): an atom starts on a straight line of direction u and impact
offset b from the field zero, ``LIGHT_RADIUS + 1.5 + |c|`` waists before it, and
is integrated for ``T_END`` with ``scipy.integrate.solve_ivp`` (RK45). It counts as
captured if it ends within ``TRAP_RADIUS`` of the trap's equilibrium point (the field zero,
displaced by radiation-pressure imbalance: :func:`equilibrium`); the slowed atoms are then
cold and held by the trap: the criterion of the model, "slowed below the stop speed inside
the trap region", with the trap's own restoring force doing the rest.
Its capture speed on that line is found by bisection in the entry speed, all lines
of a sample integrated together.

Numerical error (measured on the Rb-87 default trap, 2026-12-02): the ODE tolerance does not
matter (rtol = 1e-6 and 1e-8 give the same capture decisions on 96 lines); 14 bisection
steps agree with 20 to 1e-4 in the mean of v^4. The line quadrature is the coarse part: a
set of 6 x 8 directions and 4 x 6 offsets gives the straight-line kernel a mean of v^4 8 %
above its converged value. Curved paths need far more directions (measured 2026-12-03 with
the compiled integrator of ``benchmarks/capture_3d_scan.py``): on a weak-capture trap
(eta 2, s0 4.2, -delta 2 Gamma, zeta 1.76) 48, 192 and 640 directions over the whole sphere
give 3.5, 6.4 and 8.7, and 8 x 6 and 12 x 10 directions over the symmetric sixteenth 9.2
and 9.5. For the aligned trap use the symmetric set of :func:`capture.line_quadrature`
with impacts scaled to 1.5 trap radii; comparisons on the coarse default set hold only
on the *same* lines. Even that set converges slowly where the capture is weak: on 16
random Rb traps 8 x 6 directions with 8 x 8 impacts (3072 lines) differ from 12 x 10 with
10 x 10 (12000 lines) by 6.7 % RMS, 19 % max, the large errors all at s0 ~ 1 and 3-4
linewidths; strong traps agree within 2 % (measured 2026-12-03).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray
from scipy.integrate import solve_ivp

__all__ = ["T_END", "acceleration", "equilibrium", "reference_lines", "reference_moments"]

LIGHT_RADIUS = 3.0
TRAP_RADIUS = 1.0
#: Integration time in units of k w / Gamma.
T_END = 40.0
_AXES = np.eye(3)


def acceleration(
    position: NDArray,
    velocity: NDArray,
    *,
    eta: float,
    saturation: float,
    red_detuning: float,
    zeta: float,
    centre: float = 0.0,
    imbalance: float = 0.0,
    aperture: float = math.inf,
) -> NDArray:
    """Six-beam rate-equation acceleration, in units of (Gamma / k)^2 / w, vector form.

    Parameters
    ----------
    position, velocity : ndarray (..., 3)
        In waists (from the beam crossing) and in Gamma / k.
    eta, saturation, red_detuning, zeta : float
        As in :mod:`capture` (``red_detuning = -delta / Gamma``; zeta of the axial z
        gradient, the x and y gradients half of it).
    centre : float
        Field zero at (centre, 0, 0).
    imbalance : float
        Returning beams weaker by this fraction.
    aperture : float
        Radius (waists) beyond which each beam has no light.

    Returns
    -------
    ndarray (..., 3)

    Notes
    -----
    Beam j of wavevector k_j = +-k e_a has ``s_j(r) = s0 exp(-2 rho_a^2)
    exp(-(r_a / 3)^8)`` (rho_a the distance from the axis a) and detuning
    ``2 delta_j / Gamma = 2 delta / Gamma - 2 k_j . v / Gamma - sign_j zeta_a (r - c)_a``;
    ``a = eta sum_j k_j / k  s_j L_j / (1 + sum_i s_i L_i)`` (Metcalf & van der
    Straten 1999, ch. 7).
    """
    r = np.asarray(position, float)
    v = np.asarray(velocity, float)
    rel = r - np.array([centre, 0.0, 0.0])
    zetas = zeta * np.array([0.5, 0.5, 1.0])
    d = -2.0 * red_detuning
    num = np.zeros_like(r)
    total = np.ones(r.shape[:-1])
    r2 = np.sum(r * r, axis=-1)
    for a in range(3):
        e = _AXES[a]
        rho2 = r2 - r[..., a] ** 2
        s = saturation * np.exp(-2.0 * rho2 - (r[..., a] / LIGHT_RADIUS) ** 8)
        s = np.where(rho2 <= aperture**2, s, 0.0)
        for sign, strength in ((1.0, 1.0), (-1.0, 1.0 - imbalance)):
            k_dot_v = sign * v[..., a]
            det = d - 2.0 * k_dot_v - sign * zetas[a] * rel[..., a]
            sl = strength * s / (1.0 + det * det)
            total = total + sl
            num = num + sign * sl[..., None] * e
    return eta * num / total[..., None]


def reference_lines(
    n_polar: int = 10, n_azimuth: int = 12, n_radial: int = 4, n_angle: int = 8, reach=1.5
) -> tuple[NDArray, NDArray, NDArray]:
    """Directions, impact offsets and weights over the whole sphere (weights: per trap disk).

    Impact offsets cover a disk of ``reach`` trap radii (curved paths can reach the trap
    from farther out); the weights are normalized to the disk of one trap radius, so the
    weighted sum is the mean over the model's reference area.
    """
    x, wx = np.polynomial.legendre.leggauss(n_polar)
    phis = (np.arange(n_azimuth) + 0.5) * 2 * np.pi / n_azimuth
    t, wt = np.polynomial.legendre.leggauss(n_radial)
    t, wt = 0.5 * (t + 1.0), 0.5 * wt
    psis = (np.arange(n_angle) + 0.5) * 2 * np.pi / n_angle
    dirs, imps, wts = [], [], []
    for c, wc in zip(x, 0.5 * wx, strict=True):
        st = math.sqrt(1.0 - c * c)
        for phi in phis:
            u = np.array([st * math.cos(phi), st * math.sin(phi), c])
            e1 = np.cross(u, [0.0, 0.0, 1.0] if abs(c) < 0.9 else [1.0, 0.0, 0.0])
            e1 /= np.linalg.norm(e1)
            e2 = np.cross(u, e1)
            for r2, wr in zip(t, wt, strict=True):
                r = reach * TRAP_RADIUS * math.sqrt(r2)
                for psi in psis:
                    dirs.append(u)
                    imps.append(r * (math.cos(psi) * e1 + math.sin(psi) * e2))
                    wts.append(wc / n_azimuth * wr / n_angle * reach**2)
    return np.array(dirs), np.array(imps), np.array(wts)


def equilibrium(params: dict, rtol: float = 1e-8) -> NDArray:
    """Where a trapped atom comes to rest: an atom released at the field zero, after T_END.

    Radiation-pressure imbalance (returning beams weaker) displaces the trap's equilibrium
    from the field zero; the capture criterion is measured from this point.
    """
    c = np.array([params.get("centre", 0.0), 0.0, 0.0])

    def rhs(_t, y):
        return np.concatenate([y[3:], acceleration(y[:3], y[3:], **params)])

    sol = solve_ivp(rhs, (0.0, 4 * T_END), np.concatenate([c, np.zeros(3)]), rtol=rtol)
    return sol.y[:3, -1]


def _captured(speeds, dirs, imps, params, rtol, rest=None):
    centre = params.get("centre", 0.0)
    start = LIGHT_RADIUS + 1.5 + abs(centre)
    c = np.array([centre, 0.0, 0.0])
    rest = c if rest is None else rest
    p0 = c + imps - start * dirs
    v0 = speeds[:, None] * dirs
    n = len(speeds)

    def rhs(_t, y):
        y = y.reshape(2, n, 3)
        return np.concatenate([y[1], acceleration(y[0], y[1], **params)]).ravel()

    y0 = np.concatenate([p0, v0]).ravel()
    sol = solve_ivp(rhs, (0.0, T_END), y0, method="RK45", rtol=rtol, atol=1e-8 * start)
    end = sol.y[:, -1].reshape(2, n, 3)
    return np.linalg.norm(end[0] - rest, axis=1) < TRAP_RADIUS


def reference_moments(
    eta: float,
    saturation: float,
    red_detuning: float,
    zeta: float,
    *,
    centre: float = 0.0,
    imbalance: float = 0.0,
    aperture: float = math.inf,
    lines: tuple[NDArray, NDArray, NDArray] | None = None,
    n_bisect: int = 14,
    rtol: float = 1e-6,
) -> tuple[float, float]:
    """Means of vc^4 and vc^6 (dimensionless) over the lines, from 3-D trajectories.

    Parameters are those of :func:`acceleration` (one trap), plus the line set
    (default :func:`reference_lines`), the bisection steps and the ODE tolerance.

    Returns
    -------
    m4, m6 : float
        Weighted means, normalized to the model's reference disk.
    """
    params = {
        "eta": eta,
        "saturation": saturation,
        "red_detuning": red_detuning,
        "zeta": zeta,
        "centre": centre,
        "imbalance": imbalance,
        "aperture": aperture,
    }
    dirs, imps, wts = reference_lines() if lines is None else lines
    start = LIGHT_RADIUS + 1.5 + abs(centre)
    rest = equilibrium(params)
    low = np.zeros(len(wts))
    high = np.full(len(wts), math.sqrt(2.0 * eta * (start + 1.0)) + 1.0)
    for _ in range(n_bisect):
        mid = 0.5 * (low + high)
        ok = _captured(mid, dirs, imps, params, rtol, rest)
        low = np.where(ok, mid, low)
        high = np.where(ok, high, mid)
    vc = 0.5 * (low + high)
    vc = np.where(low > 0, vc, 0.0)
    return float(np.sum(wts * vc**4)), float(np.sum(wts * vc**6))
