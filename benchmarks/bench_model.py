"""Throughput of VaporCellMOT and accuracy of its loading rate against the reference integrals.

Run by hand (not in CI), on an otherwise quiet machine::

    python benchmarks/bench_model.py [--samples 300] [--trajectories 200] [--seed 1]

1. Full evaluations per second of ``VaporCellMOT().evaluate`` on 10^5 and 10^6 parameter
   sets drawn around the nominal cell (every uncertain input varied at once), one core;
   then of ``BeamLoadedMOT`` (each source) and ``NarrowLineMOT`` on 10^5 sets around their
   defaults (every input spread by 2 %), side by side in the same run, with the
   NarrowLineMOT sag (bisection) against scipy's brentq on the same points (slow reference).
2. Loading-rate error of the fast capture against curved 3-D trajectories (the force law
   and criterion of ``capture_reference``; the compiled integrator of
   ``capture_3d_scan.py``, checked in the same run against the scipy ``solve_ivp``
   reference on two traps) on ``--trajectories`` random aligned Rb-87 traps (waist, power,
   detuning, gradient varied), over a converged symmetric line set (8 x 6 directions over
   one sixteenth of the sphere, 8 x 8 impact offsets out to 1.5 trap radii): RMS and
   maximum relative error of the mean vc^4, of the model (table times curved-path factor)
   and of the straight-line table alone, on two processes. Then the reference's own
   quadrature error: that line set against a finer one (12 x 10 directions, 10 x 10
   impact offsets; 12000 lines) on ``--reference-traps`` of those traps. It bounds what
   the comparison above can resolve (measured 2026-12-03 on 16 random traps: 6.7 % RMS,
   19 % max, all in weak-capture traps; the 600 lines of the correction's generator
   13.9 % RMS, 31 % max).
3. The geometry part, on ``--samples`` random traps (offset, stray field, imbalance,
   aperture and vapor temperature varied too), against straight-line integrals of the
   real, unsymmetric geometry with a converged quadrature (20 x 32 directions, 5 x 8
   impact offsets) and the exact Maxwell-Boltzmann flux of every line: the straight-line
   part of the model (the fast rate over its curved-path factor), and where its error
   comes from: the table against the line integrals it stands for (interpolation), that
   quadrature against the converged one (aligned trap), and the smooth geometry
   corrections against the line integrals of the real geometry.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # one core

import argparse  # noqa: E402
import math  # noqa: E402
import time  # noqa: E402
from concurrent.futures import ProcessPoolExecutor  # noqa: E402

import numpy as np  # noqa: E402
from scipy import special  # noqa: E402

from trapbudget.models import (  # noqa: E402
    BeamLoadedMOT,
    NarrowLineMOT,
    VaporCellMOT,
    _kernels,
    capture,
    capture_reference,
    curved_paths,
    species,
)
from trapbudget.models.vapor import most_probable_speed  # noqa: E402

RB = species("Rb87")


def draw(model: VaporCellMOT, n: int, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Random spreads around the nominal cell (a few percent to tens of percent)."""
    d = {name: spec.default for name, spec in model.inputs.items()}
    return {
        "beam_power": rng.normal(d["beam_power"], 0.1 * d["beam_power"], n),
        "beam_waist": rng.normal(d["beam_waist"], 0.05 * d["beam_waist"], n),
        "beam_offset": rng.normal(0.0, 0.5e-3, n),
        "beam_imbalance": rng.uniform(0.0, 0.1, n),
        "detuning": rng.normal(d["detuning"], 1e6, n),
        "gradient": rng.normal(d["gradient"], 0.1 * d["gradient"], n),
        "bias_field": rng.normal(0.0, 2e-6, n),
        "repump_power": rng.normal(d["repump_power"], 1e-4, n),
        "cell_temperature": rng.normal(d["cell_temperature"], 1.0, n),
        "vapor_fraction": rng.uniform(0.05, 0.2, n),
        "background_pressure": rng.lognormal(np.log(d["background_pressure"]), 0.3, n),
    }


def spread(model, n: int, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Every non-zero input of a model spread by 2 % (normal) around its default."""
    return {
        name: rng.normal(spec.default, 0.02 * abs(spec.default), n)
        for name, spec in model.inputs.items()
        if spec.default != 0 and not spec.constant
    }


def sag_error(rng: np.random.Generator, n: int = 200) -> float:
    """NarrowLineMOT's bisected sag against scipy's brentq on the same force balance."""
    from scipy import constants, optimize

    from trapbudget.models.narrow import sag_and_rates

    red = species("Sr88-689")
    s = np.exp(rng.uniform(np.log(0.5), np.log(500.0), n))
    det = -rng.uniform(20e3, 1e6, n)
    grad = rng.uniform(0.01, 0.1, n)
    fast, *_ = sag_and_rates(s, det, grad, red)
    worst = 0.0
    hk, gamma = constants.hbar * red.wavenumber, red.linewidth
    for si, di, gi, zi in zip(s, det, grad, fast, strict=True):
        if not np.isfinite(zi):
            continue
        zeta = abs(red.zeeman_coefficient) * gi / constants.hbar
        delta = 2 * math.pi * di

        def balance(z, si=si, delta=delta, zeta=zeta):
            up = 0.5 * gamma * si / (1 + si + 4 * (delta + zeta * z) ** 2 / gamma**2)
            down = 0.5 * gamma * si / (1 + si + 4 * (delta - zeta * z) ** 2 / gamma**2)
            return hk * (up - down) - red.mass * constants.g

        ref = optimize.brentq(balance, 0.0, -delta / zeta, xtol=1e-15, rtol=1e-13)
        worst = max(worst, abs(zi / ref - 1))
    return worst


def traps(n: int, rng: np.random.Generator) -> list[dict[str, float]]:
    """Random Rb-87 traps over the ordinary working range, in SI."""
    cases = []
    for _ in range(n):
        w = math.exp(rng.uniform(math.log(2e-3), math.log(12e-3)))
        cases.append(
            {
                "waist": w,
                "saturation": math.exp(rng.uniform(math.log(0.5), math.log(30.0))),
                "detuning": -rng.uniform(1.0, 4.0) * RB.linewidth_hz,
                "gradient": rng.uniform(0.04, 0.25),
                "centre": abs(rng.normal(0.0, 0.2)) * w,
                "imbalance": rng.uniform(0.0, 0.15),
                "aperture_radius": w * rng.uniform(1.5, 3.0),
                "temperature": rng.uniform(295.0, 320.0),
            }
        )
    return cases


def fast_rates(cases: list[dict[str, float]]) -> np.ndarray:
    s = {key: np.array([c[key] for c in cases]) for key in cases[0]}
    out = capture.capture(
        s["saturation"],
        s["detuning"],
        waist=s["waist"],
        gradient=s["gradient"],
        density=1.0,
        most_probable_speed=most_probable_speed(RB.mass, s["temperature"]),
        wavenumber=RB.wavenumber,
        linewidth=RB.linewidth,
        mass=RB.mass,
        zeeman_coefficient=RB.zeeman_coefficient,
        centre=s["centre"],
        imbalance=s["imbalance"],
        aperture_radius=s["aperture_radius"],
    )
    return out.loading_rate


def _table_args(case):
    eta, red, zeta = capture.dimensionless(
        waist=case["waist"],
        detuning=case["detuning"],
        gradient=case["gradient"],
        wavenumber=RB.wavenumber,
        linewidth=RB.linewidth,
        mass=RB.mass,
        zeeman_coefficient=RB.zeeman_coefficient,
    )
    geometry = {
        "centre": case["centre"] / case["waist"],
        "imbalance": case["imbalance"],
        "aperture": case["aperture_radius"] / case["waist"],
    }
    return (float(eta), case["saturation"], float(red), float(zeta)), geometry


def curved_factor(case) -> float:
    """The model's curved-path factor of a trap (its aligned table variables)."""
    (eta, s0, red, zeta), g = _table_args(case)
    return float(
        curved_paths.curved_path_factor(eta, s0 * math.sqrt(1.0 - g["imbalance"]), red, zeta)
    )


def _curved_check(case):
    """Mean vc^4 of the aligned trap: compiled 3-D paths, the model, the table alone."""
    (eta, s0, red, zeta), _ = _table_args(case)
    curved = _curved_m4((eta, s0, red, zeta), CURVED_LINES)
    table = float(capture.aligned_moments(eta, s0, red, zeta)[0])
    model = table * float(curved_paths.curved_path_factor(eta, s0, red, zeta))
    return (eta, s0, red, zeta), curved, model, table


def _solver_check(params):
    """The compiled 3-D integrator against the solve_ivp reference on the same lines."""
    from capture_3d_scan import trajectory_speeds

    d, i, w = capture.line_quadrature(3, 3, 3, 6, symmetric=True)
    d, i, w = np.ascontiguousarray(d), np.ascontiguousarray(i * 1.5), w * 2.25
    speeds = np.empty(len(w))
    trajectory_speeds(*params[:2], -2.0 * params[2], params[3], d, i, 14, speeds)
    ref, _ = capture_reference.reference_moments(*params, lines=(d, i, w), n_bisect=14)
    return float(np.sum(w * speeds**4)) / ref


#: Symmetric line set of the 3-D check: directions (polar, azimuth), impacts (radial, angle).
CURVED_LINES = (8, 6, 8, 8)


#: Finer symmetric line set for the reference's own quadrature error.
FINE_LINES = (12, 10, 10, 10)


def _curved_m4(params, spec) -> float:
    """Mean vc^4 of the aligned trap over a symmetric line set (compiled 3-D paths)."""
    from capture_3d_scan import trajectory_speeds

    eta, s0, red, zeta = params
    d, i, w = capture.line_quadrature(*spec, symmetric=True)
    d, i, w = np.ascontiguousarray(d), np.ascontiguousarray(i * 1.5), w * 2.25
    speeds = np.empty(len(w))
    trajectory_speeds(eta, s0, -2.0 * red, zeta, d, i, 12, speeds)
    return float(np.sum(w * speeds**4))


def _reference_check(params) -> float:
    """The 3-D check's line set against the finer one, on one trap (relative error)."""
    floor = capture.STOP_SPEED**4
    fine = max(_curved_m4(params, FINE_LINES), floor)
    return max(_curved_m4(params, CURVED_LINES), floor) / fine - 1


def _rate_from_speeds(case, speeds, weights):
    # (1/4) n A vbar <P(2, vc^2 / vp^2)>, n = 1, A = 4 pi w^2, exact Maxwell-Boltzmann flux
    unit = RB.linewidth / RB.wavenumber
    vp = float(most_probable_speed(RB.mass, case["temperature"]))
    flux = np.sum(weights * special.gammainc(2.0, (speeds * unit / vp) ** 2))
    return 0.25 * 4 * math.pi * case["waist"] ** 2 * 2 * vp / math.sqrt(math.pi) * flux


def line_rate(case, lines) -> float:
    (eta, s0, red, zeta), g = _table_args(case)
    dirs, imps, wts = lines
    speeds = np.empty(len(wts))
    _kernels.line_speeds(
        eta,
        s0,
        -2 * red,
        zeta,
        g["centre"],
        1 - g["imbalance"],
        g["aperture"] ** 2,
        dirs,
        imps,
        capture.N_STEPS,
        speeds,
    )
    return _rate_from_speeds(case, speeds, wts)


def _aligned_rate(case, eta, s0, red, zeta, quadrature, n_steps) -> float:
    m4, m6 = capture.line_average(eta, s0, red, zeta, quadrature=quadrature, n_steps=n_steps)
    return _rate_from_moments(case, m4, m6)


def _rate_from_moments(case, m4, m6) -> float:
    unit = RB.linewidth / RB.wavenumber
    vp = float(most_probable_speed(RB.mass, case["temperature"]))
    flux = float(capture._flux_below(np.asarray(m4), np.asarray(m6), vp / unit))
    return 0.25 * 4 * math.pi * case["waist"] ** 2 * 2 * vp / math.sqrt(math.pi) * flux


def error_sources(cases, real: np.ndarray, lines) -> dict[str, np.ndarray]:
    """Relative errors of each approximation of the fast capture, trap by trap.

    ``real``: the converged line integrals of the real geometry (``line_rate``).
    """
    table_lines = capture.line_quadrature(*capture.TABLE_QUADRATURE)
    rows = []
    for case in cases:
        (eta, s0, red, zeta), g = _table_args(case)
        s_eff = s0 * math.sqrt(1.0 - g["imbalance"])
        m4, m6, _ = capture.aligned_moments(eta, s_eff, red, zeta)
        table = _rate_from_moments(case, m4, m6)
        coarse = _aligned_rate(case, eta, s_eff, red, zeta, table_lines, capture.TABLE_STEPS)
        fine = _aligned_rate(case, eta, s_eff, red, zeta, lines, capture.N_STEPS)
        transmitted = -math.expm1(-2.0 * g["aperture"] ** 2)
        geometry = transmitted * math.exp(-capture.CENTRE_DECAY * g["centre"] ** 2)
        rows.append((table / coarse, coarse / fine, fine * geometry))
    ratios = np.array(rows)
    return {
        "interpolation (table vs its line integrals)": ratios[:, 0] - 1,
        "table quadrature (vs converged, aligned)": ratios[:, 1] - 1,
        "geometry corrections (vs real geometry)": ratios[:, 2] / real - 1,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=300, help="traps for the line check")
    parser.add_argument(
        "--trajectories", type=int, default=200, help="aligned traps for the 3-D check"
    )
    parser.add_argument(
        "--reference-traps", type=int, default=8, help="traps for the reference's own error"
    )
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()
    rng = np.random.default_rng(args.seed)
    model = VaporCellMOT()

    model.evaluate(draw(model, 16, rng))  # compile / load the numba cache
    rates = {}
    for n, repeats in ((10**5, 3), (10**6, 1)):
        values = draw(model, n, rng)
        best = math.inf
        for _ in range(repeats):
            start = time.perf_counter()
            model.evaluate(values)
            best = min(best, time.perf_counter() - start)
        rates[n] = n / best
        print(f"VaporCellMOT.evaluate, n = {n:>7}: {best:7.3f} s, {rates[n]:,.0f} evaluations/s")

    others = [BeamLoadedMOT(source=s) for s in ("oven", "zeeman-slower", "2d-mot")]
    for other in [*others, NarrowLineMOT()]:
        values = spread(other, 10**5, rng)
        other.evaluate({k: v[:16] for k, v in values.items()})
        best = math.inf
        for _ in range(3):
            start = time.perf_counter()
            other.evaluate(values)
            best = min(best, time.perf_counter() - start)
        print(f"{other!r}.evaluate, n = 100000: {best:7.3f} s, {1e5 / best:,.0f} evaluations/s")
    print(f"NarrowLineMOT sag, bisection vs brentq: max relative error {sag_error(rng):.1e}")

    aligned = [
        {**c, "centre": 0.0, "imbalance": 0.0, "aperture_radius": math.inf}
        for c in traps(args.trajectories, rng)
    ]
    if aligned:
        start = time.perf_counter()
        with ProcessPoolExecutor(2) as pool:
            rows = list(pool.map(_curved_check, aligned))
            agree = list(pool.map(_solver_check, [(25.0, 4.6, 2.0, 2.3), (12.0, 1.5, 3.0, 1.0)]))
        seconds = time.perf_counter() - start
        floor = capture.STOP_SPEED**4
        curved = np.maximum([r[1] for r in rows], floor)
        print(
            f"compiled 3-D paths vs the solve_ivp reference (same "
            f"{len(capture.line_quadrature(3, 3, 3, 6)[2])} lines, two traps): "
            f"{', '.join(f'{a:.4f}' for a in agree)}"
        )
        print(
            f"loading rate (mean vc^4) against curved 3-D paths, {len(rows)} aligned traps, "
            f"{len(capture.line_quadrature(*CURVED_LINES)[2])} lines each ({seconds:.0f} s, "
            "two processes):"
        )
        for k, name in ((2, "model (table x curved-path factor)"), (3, "straight-line table")):
            e = np.array([r[k] for r in rows]) / curved - 1
            print(f"  {name}: RMS {np.sqrt(np.mean(e**2)):.1%}, max {np.max(np.abs(e)):.1%}")
        strong = np.array([r[0][2] <= 3.0 and r[0][1] >= 2.0 for r in rows])
        e = np.array([r[2] for r in rows]) / curved - 1
        if strong.any() and (~strong).any():
            print(
                f"  model, detuning within 3 Gamma and s0 >= 2 ({strong.sum()} traps): RMS "
                f"{np.sqrt(np.mean(e[strong] ** 2)):.1%}, max {np.max(np.abs(e[strong])):.1%}; "
                f"the rest: RMS {np.sqrt(np.mean(e[~strong] ** 2)):.1%}"
            )

        checked = [r[0] for r in rows[: args.reference_traps]]
        if checked:
            start = time.perf_counter()
            with ProcessPoolExecutor(2) as pool:
                e = np.array(list(pool.map(_reference_check, checked)))
            print(
                f"  the reference's own quadrature error "
                f"({len(capture.line_quadrature(*CURVED_LINES)[2])} lines against "
                f"{len(capture.line_quadrature(*FINE_LINES)[2])}, {len(e)} traps, "
                f"{time.perf_counter() - start:.0f} s): RMS {np.sqrt(np.mean(e**2)):.1%}, "
                f"max {np.max(np.abs(e)):.1%}"
            )

    cases = traps(args.samples, rng)
    fast = fast_rates(cases) / np.array([curved_factor(c) for c in cases])
    lines = capture.line_quadrature(20, 32, 5, 8, symmetric=False)
    start = time.perf_counter()
    slow = np.array([line_rate(c, lines) for c in cases])
    seconds = time.perf_counter() - start
    err = fast / slow - 1
    print(
        f"straight-line part of the model vs converged line integrals of the real geometry, "
        f"{args.samples} traps ({seconds:.0f} s): RMS {np.sqrt(np.mean(err**2)):.2%}, "
        f"max {np.max(np.abs(err)):.2%}"
    )
    for name, e in error_sources(cases, slow, lines).items():
        print(f"  {name}: RMS {np.sqrt(np.mean(e**2)):.2%}, max {np.max(np.abs(e)):.2%}")


if __name__ == "__main__":
    main()
