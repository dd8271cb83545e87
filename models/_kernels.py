"""Compiled kernels of the capture model (numba; imported only on first use).

Everything here is dimensionless: lengths in units of the beam waist w, speeds
in units of Gamma / k, detunings as 2 delta / Gamma. See :mod:`capture` for the
physics and the conventions; these functions only integrate it fast.
"""

from __future__ import annotations

import math

import numba
import numpy as np

#: Light of each beam is counted within this many waists of the beam crossing, along its
#: axis (smooth super-Gaussian window exp(-(x / (LIGHT_RADIUS w))^8)).
LIGHT_RADIUS = 3.0
#: Radius of the trap region, in waists, around the field zero.
TRAP_RADIUS = 1.0
#: Speed below which an atom counts as stopped, in units of Gamma / k.
STOP_SPEED = 0.25


@numba.njit(cache=True, fastmath=False, inline="always")
def _along(p0, p1, p2, u0, u1, u2, v, s0, d, zx, zz, c0, back, clip):  # pragma: no cover
    """Component along the motion of the six-beam force / (m a_max) at point p, speed v."""
    r2 = p0 * p0 + p1 * p1 + p2 * p2
    total = 1.0
    num = 0.0
    for a in range(3):
        if a == 0:
            pa, ua, za, xa = p0, u0, zx, p0 - c0
        elif a == 1:
            pa, ua, za, xa = p1, u1, zx, p1
        else:
            pa, ua, za, xa = p2, u2, zz, p2
        rho2 = r2 - pa * pa
        if rho2 > clip:
            continue
        q = pa / LIGHT_RADIUS
        q2 = q * q
        s = s0 * math.exp(-2.0 * rho2 - q2 * q2 * q2 * q2)
        shift = 2.0 * v * ua + za * xa
        dp = d - shift
        dm = d + shift
        lp = s / (1.0 + dp * dp)
        lm = back * s / (1.0 + dm * dm)
        total += lp + lm
        num += ua * (lp - lm)
    return num / total


@numba.njit(cache=True, fastmath=False, nogil=True)
def line_speeds(
    eta, s0, d, zz, c0, back, clip, directions, impacts, n_steps, out
):  # pragma: no cover
    """Capture speed along each straight line (backward RK4 in position for u = v^2 / 2).

    ``directions`` (n, 3) unit vectors and ``impacts`` (n, 3) offsets perpendicular to
    them, measured from the field zero at (c0, 0, 0). The atom must be slowed to
    STOP_SPEED before it leaves the trap sphere; the light begins at the far side of
    the light sphere. ``clip`` is the squared aperture radius (inf for none).
    """
    zx = 0.5 * zz
    u_stop = 0.5 * STOP_SPEED * STOP_SPEED
    start = LIGHT_RADIUS + 1.5 + abs(c0)
    for j in range(directions.shape[0]):
        u0, u1, u2 = directions[j, 0], directions[j, 1], directions[j, 2]
        b0, b1, b2 = impacts[j, 0] + c0, impacts[j, 1], impacts[j, 2]
        b2sum = impacts[j, 0] ** 2 + impacts[j, 1] ** 2 + impacts[j, 2] ** 2
        if b2sum >= TRAP_RADIUS * TRAP_RADIUS:
            out[j] = 0.0
            continue
        l_out = math.sqrt(TRAP_RADIUS * TRAP_RADIUS - b2sum)
        h = (l_out + start) / n_steps
        u = u_stop
        ell = l_out
        for _ in range(n_steps):
            # backward: u(ell - h) = u(ell) - int a d ell; a < 0 where the atom is slowed
            v = math.sqrt(2.0 * u)
            k1 = _along(
                b0 + ell * u0,
                b1 + ell * u1,
                b2 + ell * u2,
                u0,
                u1,
                u2,
                v,
                s0,
                d,
                zx,
                zz,
                c0,
                back,
                clip,
            )
            em = ell - 0.5 * h
            um = max(u - 0.5 * h * eta * k1, 0.0)
            k2 = _along(
                b0 + em * u0,
                b1 + em * u1,
                b2 + em * u2,
                u0,
                u1,
                u2,
                math.sqrt(2.0 * um),
                s0,
                d,
                zx,
                zz,
                c0,
                back,
                clip,
            )
            um = max(u - 0.5 * h * eta * k2, 0.0)
            k3 = _along(
                b0 + em * u0,
                b1 + em * u1,
                b2 + em * u2,
                u0,
                u1,
                u2,
                math.sqrt(2.0 * um),
                s0,
                d,
                zx,
                zz,
                c0,
                back,
                clip,
            )
            ee = ell - h
            ue = max(u - h * eta * k3, 0.0)
            k4 = _along(
                b0 + ee * u0,
                b1 + ee * u1,
                b2 + ee * u2,
                u0,
                u1,
                u2,
                math.sqrt(2.0 * ue),
                s0,
                d,
                zx,
                zz,
                c0,
                back,
                clip,
            )
            u = max(u - h * eta * (k1 + 2.0 * k2 + 2.0 * k3 + k4) / 6.0, u_stop)
            ell = ee
        out[j] = math.sqrt(2.0 * u)


@numba.njit(cache=True, fastmath=False, nogil=True)
def line_moments(
    eta, s0, d, zz, c0, back, clip, directions, impacts, weights, n_steps, moments
):  # pragma: no cover
    """Weighted means of v^4 and v^6 over the lines (``moments`` gets both)."""
    speeds = np.empty(directions.shape[0])
    line_speeds(eta, s0, d, zz, c0, back, clip, directions, impacts, n_steps, speeds)
    m4 = 0.0
    m6 = 0.0
    for j in range(speeds.shape[0]):
        v2 = speeds[j] * speeds[j]
        m4 += weights[j] * v2 * v2
        m6 += weights[j] * v2 * v2 * v2
    moments[0] = m4
    moments[1] = m6


@numba.njit(cache=True, fastmath=False, inline="always")
def _cubic_weights(t, w, mode):  # pragma: no cover
    # Catmull-Rom weights (mode 1) or linear ones (mode 0) for the four nodes around a point
    # at fraction t of its interval
    if mode == 0:
        w[0] = 0.0
        w[1] = 1.0 - t
        w[2] = t
        w[3] = 0.0
        return
    t2 = t * t
    t3 = t2 * t
    w[0] = -0.5 * t3 + t2 - 0.5 * t
    w[1] = 1.5 * t3 - 2.5 * t2 + 1.0
    w[2] = -1.5 * t3 + 2.0 * t2 + 0.5 * t
    w[3] = 0.5 * t3 - 0.5 * t2


@numba.njit(cache=True, fastmath=False, nogil=True)
def interpolate(table, lows, steps, coords, modes, out):  # pragma: no cover
    """Tensor-product interpolation of a 4-D table (last axis: quantities).

    ``modes[a]`` is 1 for Catmull-Rom (cubic) along axis a, 0 for linear.

    ``coords`` (n, 4) are table coordinates; ``lows``/``steps`` give the uniform grids.
    Coordinates beyond the grid are clamped to its edge (the caller flags them).
    """
    shape = table.shape
    n_out = shape[4]
    wts = np.empty((4, 4))
    base = np.empty(4, dtype=np.int64)
    for i in range(coords.shape[0]):
        for a in range(4):
            x = (coords[i, a] - lows[a]) / steps[a]
            x = min(max(x, 0.0), shape[a] - 1.0)
            k = min(math.floor(x), shape[a] - 2)
            _cubic_weights(x - k, wts[a], modes[a])
            base[a] = k - 1
        for q in range(n_out):
            out[i, q] = 0.0
        # taps of zero weight (the outer two of a linear axis) are skipped: the table is
        # finite, so the sum is unchanged, and a linear axis costs 2 taps instead of 4
        for i0 in range(4):
            w0 = wts[0, i0]
            if w0 == 0.0:
                continue
            j0 = min(max(base[0] + i0, 0), shape[0] - 1)
            for i1 in range(4):
                if wts[1, i1] == 0.0:
                    continue
                j1 = min(max(base[1] + i1, 0), shape[1] - 1)
                w1 = w0 * wts[1, i1]
                for i2 in range(4):
                    if wts[2, i2] == 0.0:
                        continue
                    j2 = min(max(base[2] + i2, 0), shape[2] - 1)
                    w2 = w1 * wts[2, i2]
                    for i3 in range(4):
                        if wts[3, i3] == 0.0:
                            continue
                        j3 = min(max(base[3] + i3, 0), shape[3] - 1)
                        w3 = w2 * wts[3, i3]
                        for q in range(n_out):
                            out[i, q] += w3 * table[j0, j1, j2, j3, q]
