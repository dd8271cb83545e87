"""Capture velocity of a MOT from the full position- and velocity-dependent force.

The standard one-dimensional crossing model: an atom enters the light along a
line through the trap, feels the scattering force of one counter-propagating
beam pair with the Zeeman shift of the quadrupole field, and is captured when
it is slowed to the stop speed before it leaves the light on the far side. The
capture velocity is the largest entry speed that is still captured. It is
computed, for all samples at once, by running the critical trajectory
backwards from (almost) rest at the far edge of the light to the near edge.

Conventions
-----------
* Beam size: ``waist`` is the 1/e^2 intensity radius w of each Gaussian beam
  (a "1 cm beam" in the 1/e^2-diameter sense is ``waist = 5 mm``).
* Intensity along the path: the atom crosses the Gaussian profile
  s(x) = s0 exp(-2 (x - x_b)^2 / w^2), centred on the beam axis x_b (the
  pointing offset ``beam_offset`` from the field zero), and no light beyond the
  clipping aperture.
* Capture region: from x_b - R to x_b + R with
  R = min(aperture radius, 2 w) (:func:`capture_radius`); at 2 w the
  intensity is e^-8 = 3e-4 of its peak, so the light beyond adds nothing.
  The stopping distance is therefore r = 2 R, the length of the region.
* Field along the path: B(x) = A x + B_bias, A the gradient along the path and
  B_bias the stray field along it; its zero (the trap centre) is at
  x = -B_bias / A.
* Stop speed: an atom counts as captured once slowed to ``stop_speed``
  (default 0.1 m/s, about the rms speed of a Doppler-cooled Rb cloud), which
  also seeds the backward trajectory where the force at rest vanishes
  (zero gradient: an optical molasses still slows atoms, with no trap).

Direction: by default the atom enters moving along +x and is slowed by the
returning (weaker, by the imbalance) beam; ``direction=-1`` gives the atom
entering from the other side (:func:`mirrored_path`).

Honest limits: zero power or blue (non-negative) detuning give a capture
velocity of exactly 0 (no slowing, or heating). Zero gradient gives the
molasses capture velocity: atoms are slowed but not trapped; the trap model
flags that case and returns zero atoms.
"""

from __future__ import annotations

import math

import numba
import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import constants as sc
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from trapbudget.models.protocol import ModelError

__all__ = [
    "CAPTURE_RADIUS_WAISTS",
    "N_STEPS",
    "STOP_SPEED",
    "capture_radius",
    "capture_velocity",
    "capture_velocity_bound",
    "capture_velocity_reference",
    "mirrored_path",
    "scattering_acceleration",
]

#: Half-length of the capture region in units of the 1/e^2 beam radius.
CAPTURE_RADIUS_WAISTS = 2.0
#: Speed (m/s) below which an atom counts as stopped.
STOP_SPEED = 0.1
#: RK4 steps across the capture region (error vs the reference well below 0.1 %).
N_STEPS = 48
_CHUNK = 1 << 12


def capture_radius(waist: ArrayLike, aperture_radius: ArrayLike = np.inf) -> NDArray[np.float64]:
    """Half-length R of the capture region, m.

    Parameters
    ----------
    waist : array_like, m
        1/e^2 intensity radius of the beams.
    aperture_radius : array_like, m
        Clear radius of the limiting optic (default: no clipping).

    Returns
    -------
    ndarray, m
        ``R = min(aperture_radius, 2 waist)``.
    """
    return np.minimum(
        np.asarray(aperture_radius, dtype=float), CAPTURE_RADIUS_WAISTS * np.asarray(waist, float)
    )


def capture_velocity_bound(
    capture_radius: ArrayLike, *, wavenumber: ArrayLike, linewidth: ArrayLike, mass: ArrayLike
) -> NDArray[np.float64]:
    """Upper bound on the capture velocity, m/s: ``sqrt(2 a_max r + v_stop^2)``.

    Parameters
    ----------
    capture_radius : array_like, m
        Half-length R of the capture region; the stopping distance is r = 2 R.
    wavenumber : array_like, 1/m
    linewidth : array_like, 1/s (angular decay rate Gamma)
    mass : array_like, kg

    Notes
    -----
    The scattering force of one beam never exceeds hbar k Gamma / 2, so an
    atom decelerated over r at most loses the kinetic energy m a_max r with
    a_max = hbar k Gamma / (2 m) (Metcalf & van der Straten 1999, ch. 3).
    """
    a_max = sc.hbar * np.asarray(wavenumber) * np.asarray(linewidth) / (2 * np.asarray(mass))
    return np.sqrt(2 * a_max * 2 * np.asarray(capture_radius) + STOP_SPEED**2)


def scattering_acceleration(
    position: ArrayLike,
    velocity: ArrayLike,
    *,
    saturation: ArrayLike,
    waist: ArrayLike,
    detuning: ArrayLike,
    gradient: ArrayLike,
    wavenumber: ArrayLike,
    linewidth: ArrayLike,
    mass: ArrayLike,
    zeeman_coefficient: ArrayLike,
    beam_offset: ArrayLike = 0.0,
    imbalance: ArrayLike = 0.0,
    bias_field: ArrayLike = 0.0,
    bright_fraction: ArrayLike = 1.0,
    aperture_radius: ArrayLike = np.inf,
) -> NDArray[np.float64]:
    """Acceleration of an atom in one beam pair with the quadrupole field, m/s^2.

    Parameters
    ----------
    position : array_like, m
        Position along the path; the field zero (without bias) is at 0.
    velocity : array_like, m/s
    saturation : array_like, 1
        Peak saturation parameter I/I_sat of the incoming beam on its axis.
    waist : array_like, m
        1/e^2 intensity radius.
    detuning : array_like, Hz
        Detuning from the cycling line (cyclic frequency, red < 0).
    gradient : array_like, T/m
        Field gradient along the path.
    wavenumber, linewidth, mass : array_like
        k (1/m), Gamma (1/s, angular), m (kg).
    zeeman_coefficient : array_like, J/T
        mu' of the cycling transition (its magnitude is used; the beam
        polarisations are taken as the restoring ones).
    beam_offset : array_like, m
        Beam axis position relative to the field zero.
    imbalance : array_like, 1
        Fractional intensity lost on the returning (backward) beam.
    bias_field : array_like, T
        Stray uniform field along the path.
    bright_fraction : array_like, 1
        Fraction of atoms in the cycling (bright) states.
    aperture_radius : array_like, m
        Hard clip: no light beyond this distance from the beam axis.

    Returns
    -------
    ndarray, m/s^2

    Notes
    -----
    Two-beam form, each beam saturating independently (Metcalf & van der
    Straten, "Laser Cooling and Trapping", Springer 1999, eqs. 7.2 and 11.2)::

        F = +- hbar k (Gamma/2) s(x) / (1 + s(x) + 4 (delta -+ k v -+ mu' B(x)/hbar)^2 / Gamma^2)

    with delta = 2 pi detuning, B(x) = A x + B_bias, the backward beam's
    s(x) multiplied by (1 - imbalance), and the sum scaled by the bright
    fraction.
    """
    x = np.asarray(position, float)
    s_peak = np.asarray(saturation, float)
    w = np.asarray(waist, float)
    xi = x - np.asarray(beam_offset, float)
    s = np.where(
        np.abs(xi) <= np.asarray(aperture_radius, float), s_peak * np.exp(-2 * xi**2 / w**2), 0.0
    )
    gamma = np.asarray(linewidth, float)
    k = np.asarray(wavenumber, float)
    zeeman = np.abs(np.asarray(zeeman_coefficient, float)) / sc.hbar
    shift = zeeman * (np.asarray(gradient, float) * x + np.asarray(bias_field, float))
    delta = 2 * np.pi * np.asarray(detuning, float)
    kv = k * np.asarray(velocity, float)
    s_back = s * (1 - np.asarray(imbalance, float))
    forward = s / (1 + s + 4 * (delta - kv - shift) ** 2 / gamma**2)
    backward = s_back / (1 + s_back + 4 * (delta + kv + shift) ** 2 / gamma**2)
    a_max = sc.hbar * k * gamma / (2 * np.asarray(mass, float))
    return np.asarray(bright_fraction, float) * a_max * (forward - backward)


@numba.njit(cache=True, fastmath=False, error_model="numpy", inline="always")
def _rate(u, s_f, s_b, d, kk, z):  # pragma: no cover - compiled
    # Dimensionless deceleration -F/(m a0) on the backward path, u = v^2/2.
    kv = kk * math.sqrt(2.0 * max(u, 0.0))
    p = d - kv - z
    q = d + kv + z
    return s_b / (1.0 + s_b + q * q) - s_f / (1.0 + s_f + p * p)


@numba.njit(cache=True, fastmath=False, error_model="numpy")
def _capture_kernel(
    s0, radius, waist, offset, d, kk, z_slope, z_bias, back, accel, u_stop, n_steps, out
):  # pragma: no cover - compiled
    """Backward RK4 in position for u = v^2/2; every input has length 1 or n.

    The step loop is outside the sample loop so that independent samples fill
    the pipeline (the per-sample chain of square roots and divisions is
    latency-bound otherwise).
    """
    n = out.shape[0]
    g = np.empty(n)
    rho = np.empty(n)
    mu = np.empty(n)
    z = np.empty(n)
    dz = np.empty(n)
    ha = np.empty(n)
    sb = np.empty(n)
    dd = np.empty(n)
    kv = np.empty(n)
    us = np.empty(n)
    u = np.empty(n)
    live = np.empty(n, dtype=np.bool_)
    for i in range(n):
        s_i = s0[i if s0.shape[0] > 1 else 0]
        r_i = radius[i if radius.shape[0] > 1 else 0]
        w_i = waist[i if waist.shape[0] > 1 else 0]
        c_i = offset[i if offset.shape[0] > 1 else 0]
        d_i = d[i if d.shape[0] > 1 else 0]
        zs = z_slope[i if z_slope.shape[0] > 1 else 0]
        zb = z_bias[i if z_bias.shape[0] > 1 else 0]
        a_i = accel[i if accel.shape[0] > 1 else 0]
        ok = s_i > 0.0 and a_i > 0.0 and d_i < 0.0 and r_i > 0.0 and w_i > 0.0
        live[i] = ok
        if not ok:  # harmless values; the result is set to 0 below
            s_i, r_i, w_i, c_i, zs, zb, a_i = 0.0, 1.0, 1.0, 0.0, 0.0, 0.0, 0.0
        h = 2.0 * r_i / n_steps
        hh = 0.5 * h
        inv_w2 = 1.0 / (w_i * w_i)
        # Gaussian on the half-step grid by recurrence: g_{j+1} = g_j rho_j, rho_{j+1} = rho_j mu
        g[i] = s_i * math.exp(-2.0 * r_i * r_i * inv_w2)
        rho[i] = math.exp(4.0 * r_i * hh * inv_w2 - 2.0 * hh * hh * inv_w2)
        mu[i] = math.exp(-4.0 * hh * hh * inv_w2)
        z[i] = zs * (c_i + r_i) + zb
        dz[i] = zs * hh
        ha[i] = h * a_i
        sb[i] = back[i if back.shape[0] > 1 else 0]
        dd[i] = d_i
        kv[i] = kk[i if kk.shape[0] > 1 else 0]
        us[i] = u_stop[i if u_stop.shape[0] > 1 else 0]
        u[i] = us[i]
    for _ in range(n_steps):
        for i in range(n):
            g0 = g[i]
            g_mid = g0 * rho[i]
            r1 = rho[i] * mu[i]
            g_end = g_mid * r1
            rho[i] = r1 * mu[i]
            z0 = z[i]
            z_mid = z0 - dz[i]
            z_end = z_mid - dz[i]
            b_i = sb[i]
            d_i = dd[i]
            k_i = kv[i]
            h_i = ha[i]
            u0 = u[i]
            k1 = _rate(u0, g0, g0 * b_i, d_i, k_i, z0)
            k2 = _rate(u0 + 0.5 * h_i * k1, g_mid, g_mid * b_i, d_i, k_i, z_mid)
            k3 = _rate(u0 + 0.5 * h_i * k2, g_mid, g_mid * b_i, d_i, k_i, z_mid)
            k4 = _rate(u0 + h_i * k3, g_end, g_end * b_i, d_i, k_i, z_end)
            u[i] = max(u0 + h_i * (k1 + 2.0 * k2 + 2.0 * k3 + k4) / 6.0, us[i])
            g[i] = g_end
            z[i] = z_end
    for i in range(n):
        ok = live[i] and u[i] > us[i] * (1.0 + 1e-9)
        out[i] = math.sqrt(2.0 * u[i]) if ok else 0.0


def mirrored_path(
    saturation: ArrayLike,
    *,
    beam_offset: ArrayLike = 0.0,
    imbalance: ArrayLike = 0.0,
    bias_field: ArrayLike = 0.0,
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Arguments that describe the same beam pair seen by an atom entering from the other side.

    Parameters
    ----------
    saturation : array_like, 1
        Peak saturation of the incoming beam.
    beam_offset : array_like, m
    imbalance : array_like, 1
        Must be below 1.
    bias_field : array_like, T

    Returns
    -------
    saturation, beam_offset, imbalance, bias_field : ndarray
        ``s (1 - eps)``, ``-offset``, ``1 - 1/(1 - eps)`` (a stronger
        returning beam), ``-B_bias``.

    Notes
    -----
    Under x -> -x the incoming and returning beams swap roles, so the force of
    :func:`scattering_acceleration` obeys ``a(x, v) = -a'(-x, -v)`` with the
    primed (returned) arguments; the capture velocity of atoms entering
    from +x is then that of the mirrored problem. An imbalance of 1 or more
    gives a saturation of 0 (no capture).
    """
    eps = np.asarray(imbalance, dtype=float)
    ok = eps < 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        back = np.where(ok, 1.0 - 1.0 / (1.0 - eps), 0.0)
    return (
        np.where(ok, np.asarray(saturation, dtype=float) * (1.0 - eps), 0.0),
        -np.asarray(beam_offset, dtype=float),
        back,
        -np.asarray(bias_field, dtype=float),
    )


def _direction(direction, saturation, beam_offset, imbalance, bias_field):
    if direction == 1:
        return saturation, beam_offset, imbalance, bias_field
    if direction == -1:
        return mirrored_path(
            saturation, beam_offset=beam_offset, imbalance=imbalance, bias_field=bias_field
        )
    raise ModelError(f"capture_velocity: direction={direction!r} is not valid; use 1 or -1")


def _prepare(
    saturation,
    detuning,
    *,
    waist,
    capture_radius,
    gradient,
    wavenumber,
    linewidth,
    mass,
    zeeman_coefficient,
    beam_offset,
    imbalance,
    bias_field,
    bright_fraction,
    stop_speed,
):
    """Dimensionless kernel parameters (arrays, broadcast) for the capture kernel."""
    gamma = np.asarray(linewidth, float)
    zeeman = np.abs(np.asarray(zeeman_coefficient, float)) / sc.hbar
    params = {
        "s0": np.asarray(saturation, float),
        "radius": np.asarray(capture_radius, float),
        "waist": np.asarray(waist, float),
        "offset": np.asarray(beam_offset, float),
        "d": 4 * np.pi * np.asarray(detuning, float) / gamma,
        "kk": 2 * np.asarray(wavenumber, float) / gamma,
        "z_slope": 2 * zeeman * np.asarray(gradient, float) / gamma,
        "z_bias": 2 * zeeman * np.asarray(bias_field, float) / gamma,
        "back": 1 - np.asarray(imbalance, float),
        "accel": np.asarray(bright_fraction, float)
        * sc.hbar
        * np.asarray(wavenumber, float)
        * gamma
        / (2 * np.asarray(mass, float)),
        "u_stop": 0.5 * np.asarray(stop_speed, float) ** 2,
    }
    return params


def capture_velocity(
    saturation: ArrayLike,
    detuning: ArrayLike,
    *,
    waist: ArrayLike,
    capture_radius: ArrayLike,
    gradient: ArrayLike,
    wavenumber: ArrayLike,
    linewidth: ArrayLike,
    mass: ArrayLike,
    zeeman_coefficient: ArrayLike,
    beam_offset: ArrayLike = 0.0,
    imbalance: ArrayLike = 0.0,
    bias_field: ArrayLike = 0.0,
    bright_fraction: ArrayLike = 1.0,
    stop_speed: float = STOP_SPEED,
    n_steps: int = N_STEPS,
    direction: int = 1,
) -> NDArray[np.float64]:
    """Capture velocity of a MOT beam pair, m/s, for all samples at once.

    Parameters
    ----------
    saturation : array_like, 1
        Peak saturation parameter I/I_sat of each incoming beam on its axis.
    detuning : array_like, Hz
        Cooling-light detuning from the cycling line (cyclic, red < 0).
    waist : array_like, m
        1/e^2 intensity radius of the beams.
    capture_radius : array_like, m
        Half-length R of the capture region (:func:`capture_radius`).
    gradient : array_like, T/m
        Field gradient along the atom's path.
    wavenumber, linewidth, mass : array_like
        k (1/m), Gamma (1/s, angular), m (kg) of the species.
    zeeman_coefficient : array_like, J/T
        mu' of the cycling transition.
    beam_offset : array_like, m
        Beam axis relative to the field zero (default 0).
    imbalance : array_like, 1
        Fractional intensity lost on the returning beam (default 0).
    bias_field : array_like, T
        Stray field along the path (default 0).
    bright_fraction : array_like, 1
        Fraction of atoms in the cycling states (default 1).
    stop_speed : float, m/s
        Speed that counts as stopped (default :data:`STOP_SPEED`).
    n_steps : int
        RK4 steps across the region (default :data:`N_STEPS`).
    direction : {1, -1}
        1: the atom enters moving along +x, slowed by the returning (weaker)
        beam; -1: it enters from the other side, slowed by the incoming beam
        (:func:`mirrored_path`).

    Returns
    -------
    ndarray, m/s
        Broadcast shape of the inputs. 0 for zero power, zero bright fraction
        or non-negative (blue) detuning.

    Notes
    -----
    With u = v^2/2 the equation of motion becomes du/dx = F(x, v)/m, integrated
    by fixed-step RK4 from u = v_stop^2/2 at the far edge x_b + R back to the
    near edge x_b - R; the capture velocity is sqrt(2 u) there (clamping u at
    u_stop where the force would speed the atom up on its way in). The force
    is :func:`scattering_acceleration`. The Gaussian profile is evaluated on
    the uniform grid by the exact recurrence exp(-2(xi - h)^2/w^2) =
    exp(-2 xi^2/w^2) exp(4 xi h / w^2) exp(-2 h^2/w^2). Compiled with numba,
    one loop over samples, in chunks to bound memory.

    References
    ----------
    H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping",
    Springer (1999), ch. 7 and 11. C. J. Foot, "Atomic Physics", OUP (2005),
    ch. 9 (capture velocity of a MOT).
    """
    if int(n_steps) < 4:
        raise ModelError(f"capture_velocity: n_steps={n_steps!r} is too small; use at least 4")
    saturation, beam_offset, imbalance, bias_field = _direction(
        direction, saturation, beam_offset, imbalance, bias_field
    )
    params = _prepare(
        saturation,
        detuning,
        waist=waist,
        capture_radius=capture_radius,
        gradient=gradient,
        wavenumber=wavenumber,
        linewidth=linewidth,
        mass=mass,
        zeeman_coefficient=zeeman_coefficient,
        beam_offset=beam_offset,
        imbalance=imbalance,
        bias_field=bias_field,
        bright_fraction=bright_fraction,
        stop_speed=stop_speed,
    )
    shape = np.broadcast_shapes(*(a.shape for a in params.values()))
    n = math.prod(shape)
    flat = {}
    for key, a in params.items():
        if a.size == 1:
            flat[key] = np.ascontiguousarray(a, dtype=np.float64).reshape(1)
        else:
            flat[key] = np.ascontiguousarray(np.broadcast_to(a, shape).reshape(-1))
    out = np.empty(n, dtype=np.float64)
    for start in range(0, n, _CHUNK):
        stop = min(n, start + _CHUNK)
        chunk = [a if a.shape[0] == 1 else a[start:stop] for a in flat.values()]
        _capture_kernel(*chunk, int(n_steps), out[start:stop])  # type: ignore[call-arg]
    return out.reshape(shape)


def capture_velocity_reference(
    saturation: float,
    detuning: float,
    *,
    waist: float,
    capture_radius: float,
    gradient: float,
    wavenumber: float,
    linewidth: float,
    mass: float,
    zeeman_coefficient: float,
    beam_offset: float = 0.0,
    imbalance: float = 0.0,
    bias_field: float = 0.0,
    bright_fraction: float = 1.0,
    stop_speed: float = STOP_SPEED,
    rtol: float = 1e-9,
    direction: int = 1,
) -> float:
    """Capture velocity of one sample by forward trajectories and root finding, m/s.

    Parameters are those of :func:`capture_velocity`, as scalars.

    Returns
    -------
    float, m/s

    Notes
    -----
    An atom starts at the near edge x_b - R with speed v and is integrated
    forward in time (scipy.integrate.solve_ivp, DOP853) until it is slowed to
    the stop speed (captured) or crosses the far edge x_b + R (lost). The
    margin (distance left before the far edge when captured, minus the speed
    left at the far edge when lost) changes sign at the capture velocity,
    which scipy.optimize.brentq locates. Slow, per sample: the check on the
    vectorized solver.
    """
    saturation, beam_offset, imbalance, bias_field = (
        float(a) for a in _direction(direction, saturation, beam_offset, imbalance, bias_field)
    )
    if not (saturation > 0 and bright_fraction > 0 and detuning < 0):
        return 0.0
    x_near = beam_offset - capture_radius
    x_far = beam_offset + capture_radius
    kwargs = {
        "saturation": saturation,
        "waist": waist,
        "detuning": detuning,
        "gradient": gradient,
        "wavenumber": wavenumber,
        "linewidth": linewidth,
        "mass": mass,
        "zeeman_coefficient": zeeman_coefficient,
        "beam_offset": beam_offset,
        "imbalance": imbalance,
        "bias_field": bias_field,
        "bright_fraction": bright_fraction,
    }

    def rhs(_t, y):
        return [y[1], float(scattering_acceleration(y[0], y[1], **kwargs))]

    def stopped(_t, y):
        return y[1] - stop_speed

    stopped.terminal = True  # type: ignore[attr-defined]
    stopped.direction = -1  # type: ignore[attr-defined]

    def escaped(_t, y):
        return y[0] - x_far

    escaped.terminal = True  # type: ignore[attr-defined]
    escaped.direction = 1  # type: ignore[attr-defined]

    def margin(v0: float) -> float:
        t_max = 50 * (x_far - x_near) / stop_speed
        sol = solve_ivp(
            rhs,
            (0.0, t_max),
            [x_near, v0],
            method="DOP853",
            events=(stopped, escaped),
            rtol=rtol,
            atol=1e-12,
        )
        if sol.t_events[1].size:
            return -(sol.y_events[1][0][1] - stop_speed)
        return x_far - sol.y[0, -1]

    v_high = float(
        capture_velocity_bound(
            capture_radius, wavenumber=wavenumber, linewidth=linewidth, mass=mass
        )
    )
    v_high = 1.01 * v_high + 1.0
    v_low = stop_speed * (1 + 1e-6)
    if margin(v_low) < 0:
        return 0.0
    return float(brentq(margin, v_low, v_high, xtol=1e-6, rtol=1e-8))
