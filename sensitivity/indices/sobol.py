"""Variance-based (Sobol') sensitivity indices: the Saltelli design and its estimators.

Sampling (:func:`saltelli_design`) and analysis (:func:`sobol_indices`) are
separate, so a model can be run anywhere in between. The estimators are
vectorized over outputs and over bootstrap resamples: a resample is a vector
of multiplicities (how often each base row was drawn), so every bootstrap
estimate is a weighted mean computed as one matrix product."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy import stats
from scipy.stats import qmc

from trapbudget.sensitivity.indices.bootstrap import (
    ConfidenceInterval,
    bootstrap_estimates,
    bootstrap_interval,
)
from trapbudget.sensitivity.indices.replicates import replicate_interval, split_replicates
from trapbudget.sensitivity.sampling import is_power_of_two

__all__ = [
    "ConfidenceInterval",
    "Estimator",
    "IntervalMethod",
    "SaltelliDesign",
    "SobolResult",
    "check_power_of_two",
    "cross_matrices",
    "design_from_base",
    "saltelli_design",
    "sobol_indices",
]

Estimator = Literal["jansen", "sobol2007"]
IntervalMethod = Literal["normal", "percentile"]
_ESTIMATORS = ("jansen", "sobol2007")
_INTERVALS = ("normal", "percentile")


def check_power_of_two(n_samples: int, *, name: str = "n_samples") -> int:
    """Return ``n_samples`` as int, or raise ValueError naming the nearest power of two."""
    if not isinstance(n_samples, int | np.integer) or isinstance(n_samples, bool) or n_samples < 1:
        raise ValueError(f"{name} must be an integer power of 2; got {n_samples!r}")
    if not is_power_of_two(n_samples):
        suggestion = 1 << max(1, round(np.log2(max(int(n_samples), 1))))
        raise ValueError(
            f"the Saltelli design requires {name} to be a power of 2; got {n_samples}, "
            f"use {suggestion}"
        )
    return int(n_samples)


@dataclass(frozen=True)
class SaltelliDesign:
    """Unit-hypercube matrices of a Saltelli design.

    Attributes
    ----------
    A, B : numpy.ndarray, shape (n, d)
        Two independent base matrices (columns 0..d-1 and d..2d-1 of one
        scrambled Sobol' sequence of dimension 2d).
    AB : numpy.ndarray, shape (k, n, d)
        ``AB[i]`` is A with the columns of factor i taken from B.
    BA : numpy.ndarray or None, shape (k, n, d)
        ``BA[i]`` is B with the columns of factor i taken from A (second order).
    factors : tuple of tuple of int
        The columns of each factor (one column each unless grouped).
    """

    A: np.ndarray
    B: np.ndarray
    AB: np.ndarray
    BA: np.ndarray | None
    factors: tuple[tuple[int, ...], ...]

    @property
    def n_samples(self) -> int:
        """Base size N."""
        return self.A.shape[0]

    @property
    def n_evaluations(self) -> int:
        """Model runs the design needs: N(k+2), or N(2k+2) with second order."""
        blocks = 2 + self.AB.shape[0] + (0 if self.BA is None else self.BA.shape[0])
        return blocks * self.n_samples

    def stacked(self) -> np.ndarray:
        """All rows as one (n_evaluations, d) matrix, blocks A, B, AB_1.., BA_1.."""
        parts = [self.A[None], self.B[None], self.AB]
        if self.BA is not None:
            parts.append(self.BA)
        return np.concatenate(parts, axis=0).reshape(-1, self.A.shape[1])

    def split(self, values: np.ndarray) -> tuple[np.ndarray, ...]:
        """Split evaluations of :meth:`stacked` rows into (f_A, f_B, f_AB, f_BA).

        ``values`` has shape (n_evaluations,) or (n_evaluations, n_outputs);
        ``f_AB`` and ``f_BA`` get a leading factor axis. ``f_BA`` is None
        without second order.
        """
        values = np.asarray(values)
        n, k = self.n_samples, self.AB.shape[0]
        blocks = values.reshape(-1, n, *values.shape[1:])
        f_ba = None if self.BA is None else blocks[2 + k :]
        return blocks[0], blocks[1], blocks[2 : 2 + k], f_ba  # type: ignore[return-value]


def _sobol_engine(dimension: int, rng) -> qmc.Sobol:
    generator = np.random.default_rng(rng)
    return qmc.Sobol(d=dimension, scramble=True, rng=generator)


def cross_matrices(
    A: np.ndarray,
    B: np.ndarray,
    factors: Sequence[Sequence[int]],
) -> np.ndarray:
    """Return (k, n, d): A with the columns of each factor replaced by those of B."""
    out = np.repeat(A[None], len(factors), axis=0)
    for i, columns in enumerate(factors):
        cols = list(columns)
        out[i][:, cols] = B[:, cols]
    return out


def saltelli_design(
    n_samples: int,
    dimension: int,
    *,
    second_order: bool = False,
    factors: Sequence[Sequence[int]] | None = None,
    rng: int | np.random.Generator | None = None,
) -> SaltelliDesign:
    """Build the Saltelli design on the unit hypercube.

    Parameters
    ----------
    n_samples : int
        Base size N, a power of two (the balance properties of Sobol' points).
    dimension : int
        Number of input columns d.
    second_order : bool, default False
        Also build the BA matrices for second-order indices.
    factors : sequence of sequences of int, optional
        Columns moved together for each factor (grouped indices). Default:
        one factor per column.
    rng : int or numpy.random.Generator, optional
        Seed or generator for the scrambling.

    Returns
    -------
    SaltelliDesign
        Model runs N(k+2), or N(2k+2) with second order, k the number of
        factors.

    Raises
    ------
    ValueError
        ``n_samples`` not a power of two, or bad dimension or factors.

    Notes
    -----
    A and B are the first and last d columns of one scrambled Sobol'
    sequence of dimension 2d, so that they are independent and each of them
    is itself well spread (Saltelli et al. 2010, section 3), the layout
    ``SALib.sample.sobol.sample`` uses too.

    References
    ----------
    A. Saltelli et al., "Variance based sensitivity analysis of model output.
    Design and estimator for the total sensitivity index", Comput. Phys.
    Commun. 181, 259 (2010).
    """
    n_samples = check_power_of_two(n_samples)
    if not isinstance(dimension, int | np.integer) or dimension < 1:
        raise ValueError(f"dimension must be a positive integer; got {dimension!r}")
    if factors is None:
        factors = [(j,) for j in range(dimension)]
    factors = tuple(tuple(int(c) for c in f) for f in factors)
    for f in factors:
        if not f or min(f) < 0 or max(f) >= dimension:
            raise ValueError(f"factor columns {f} must be non-empty and in 0..{dimension - 1}")
    base = _sobol_engine(2 * dimension, rng).random(n_samples)
    return design_from_base(base, factors=factors, second_order=second_order)


def design_from_base(
    base: np.ndarray,
    *,
    factors: Sequence[Sequence[int]],
    second_order: bool = False,
) -> SaltelliDesign:
    """Build a design from base points (n, 2d): A = first d columns, B = last d."""
    d = base.shape[1] // 2
    A, B = base[:, :d].copy(), base[:, d:].copy()
    factors = tuple(tuple(f) for f in factors)
    AB = cross_matrices(A, B, factors)
    BA = cross_matrices(B, A, factors) if second_order else None
    return SaltelliDesign(A=A, B=B, AB=AB, BA=BA, factors=factors)  # type: ignore[arg-type]


@dataclass(frozen=True)
class SobolResult:
    """Sobol' indices with bootstrap confidence intervals.

    Arrays have shape (k,) for one output or (k, m) for m outputs (factor
    first); second-order arrays (k, k) or (k, k, m), symmetric, NaN on the
    diagonal.

    Attributes
    ----------
    first_order, total_order : numpy.ndarray
        Point estimates.
    first_order_interval, total_order_interval : ConfidenceInterval
        Bootstrap intervals at ``confidence_level``.
    first_order_se, total_order_se : numpy.ndarray
        Bootstrap standard errors (ddof=1).
    second_order, second_order_interval, second_order_se
        Closed second-order indices, when f_BA was given; else None.
    variance, mean : numpy.ndarray
        Output variance and mean over the A and B rows.
    confidence_level : float
    n_bootstrap : int
        Bootstrap resamples (0 when the intervals come from replicates).
    n_replicates : int
        Independent randomizations behind the intervals (1: bootstrap).
    """

    first_order: np.ndarray
    total_order: np.ndarray
    first_order_interval: ConfidenceInterval
    total_order_interval: ConfidenceInterval
    first_order_se: np.ndarray
    total_order_se: np.ndarray
    second_order: np.ndarray | None
    second_order_interval: ConfidenceInterval | None
    second_order_se: np.ndarray | None
    variance: np.ndarray
    mean: np.ndarray
    confidence_level: float
    n_bootstrap: int
    n_replicates: int = 1


def _integrands(
    a: np.ndarray,
    b: np.ndarray,
    ab: np.ndarray,
    ba: np.ndarray | None,
    estimator: str,
) -> np.ndarray:
    """Every per-row integrand of the estimators as columns of one (n, p) matrix.

    a, b (n, m); ab, ba (k, n, m). Column blocks: f_A + f_B, f_A^2 + f_B^2,
    f_A f_B (m each), first-order and total-order integrands (k m each), and
    with second order f(BA_i) f(AB_j) for every pair (k k m).
    """
    n, m = a.shape
    k = ab.shape[0]
    ab_flat = ab.transpose(1, 0, 2).reshape(n, k * m)
    a_rep = np.tile(a, (1, k))
    b_rep = np.tile(b, (1, k))
    # First order, Saltelli et al. 2010 (Table 2, b): E[f(B) (f(AB_i) - f(A))].
    first = b_rep * (ab_flat - a_rep)
    if estimator == "jansen":
        # Jansen 1999: E[(f(A) - f(AB_i))^2] / 2.
        total = 0.5 * (a_rep - ab_flat) ** 2
    else:
        # Sobol' et al. 2007: E[f(A) (f(A) - f(AB_i))].
        total = a_rep * (a_rep - ab_flat)
    columns = [a + b, a * a + b * b, a * b, first, total]
    if ba is not None:
        columns.append(np.einsum("inm,jnm->nijm", ba, ab).reshape(n, k * k * m))
    return np.concatenate(columns, axis=1)


def _weighted_estimates(
    w: np.ndarray, integrands: np.ndarray, n: int, k: int, m: int, second_order: bool
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """Estimates for weight rows ``w`` (r, n) from :func:`_integrands`.

    Every expectation is ``w @ x / n``: a row of multiplicities reproduces a
    bootstrap resample exactly, a row of ones the point estimate; all of them
    come from one matrix product.
    """
    r = w.shape[0]
    sums = (w @ integrands) / n
    s1, s2, ab_mean = sums[:, :m] / 2, sums[:, m : 2 * m] / 2, sums[:, 2 * m : 3 * m]
    # Population variance of the stacked A and B outputs (as SALib: np.var of r_[A, B]).
    var = s2 - s1 * s1  # (r, m)
    safe = np.where(var > np.finfo(float).eps, var, np.nan)
    start = 3 * m
    v1 = sums[:, start : start + k * m].reshape(r, k, m)
    vt = sums[:, start + k * m : start + 2 * k * m].reshape(r, k, m)
    first = v1 / safe[:, None, :]
    total = vt / safe[:, None, :]
    second = None
    if second_order:
        # Saltelli 2002: V_ij^c = E[f(BA_i) f(AB_j) - f(A) f(B)]; S_ij = V_ij^c/V - S_i - S_j.
        cross = sums[:, start + 2 * k * m :].reshape(r, k, k, m) - ab_mean[:, None, None, :]
        second = cross / safe[:, None, None, :]
        second = second - first[:, :, None, :] - first[:, None, :, :]
        idx = np.arange(k)
        second[:, idx, idx, :] = np.nan
        # Symmetrize from the upper triangle (SALib reports j < k only).
        upper = np.triu_indices(k, 1)
        second[:, upper[1], upper[0], :] = second[:, upper[0], upper[1], :]
    return first, total, second


def sobol_indices(
    f_A: np.ndarray,
    f_B: np.ndarray,
    f_AB: np.ndarray,
    f_BA: np.ndarray | None = None,
    *,
    n_bootstrap: int = 200,
    confidence_level: float = 0.95,
    interval: IntervalMethod = "percentile",
    rng: int | np.random.Generator | None = None,
    estimator: Estimator = "jansen",
    n_replicates: int = 1,
) -> SobolResult:
    """First-, total- and second-order Sobol' indices from Saltelli-design evaluations.

    Parameters
    ----------
    f_A, f_B : numpy.ndarray, shape (n,) or (n, m)
        Model outputs on the rows of A and B (m outputs at once).
    f_AB : numpy.ndarray, shape (k, n) or (k, n, m)
        Outputs on each AB_i.
    f_BA : numpy.ndarray, optional, shape like f_AB
        Outputs on each BA_i; gives the second-order indices.
    n_bootstrap : int, default 200
        Bootstrap resamples of the N base rows (0: no intervals, NaN).
    confidence_level : float, default 0.95
    interval : {"percentile", "normal"}, default "percentile"
        Percentile bootstrap interval, or estimate +- z * bootstrap standard
        error (the half-width SALib reports as ``*_conf``).
    rng : int or numpy.random.Generator, optional
        Seed for the resampling; an int seed draws the same resamples as
        ``SALib.analyze.sobol.analyze(..., seed=seed)``.
    estimator : {"jansen", "sobol2007"}, default "jansen"
        Total-order estimator.
    n_replicates : int, default 1
        R >= 2: the rows of every block are R independent randomizations of
        the design, replicate-major (rows ``r n .. (r + 1) n - 1`` of f_A, f_B
        and of each f_AB_i belong to replicate r). Each index is then the mean
        of the R replicate estimates and its interval the Student-t interval
        on R - 1 degrees of freedom (:func:`~trapbudget.sensitivity.indices.
        replicates.replicate_interval`), valid on scrambled Sobol' points;
        ``n_bootstrap`` and ``interval`` are not used. R = 1: one design, and
        the bootstrap of its rows, valid only for independent random rows.

    Returns
    -------
    SobolResult

    Raises
    ------
    ValueError
        Shapes that do not fit together, or a bad option.

    Notes
    -----
    Outputs are first centred on the mean of all evaluations (A, B, AB, BA)
    and scaled by their standard deviation, as SALib does; the estimators are
    ratios, so scaling changes nothing, and centring reduces the bias of the
    first-order estimator for outputs far from zero. With V the population
    variance of the A and B outputs:

    ``S_i = mean(f_B (f_AB_i - f_A)) / V`` (Saltelli et al. 2010),
    ``ST_i = mean((f_A - f_AB_i)^2) / (2 V)`` (Jansen 1999),
    ``S_ij = mean(f_BA_i f_AB_j - f_A f_B) / V - S_i - S_j`` (Saltelli 2002).

    References
    ----------
    A. Saltelli et al., Comput. Phys. Commun. 181, 259 (2010);
    M. J. W. Jansen, Comput. Phys. Commun. 117, 35 (1999);
    A. Saltelli, Comput. Phys. Commun. 145, 280 (2002);
    I. M. Sobol' et al., Reliab. Eng. Syst. Saf. 92, 957 (2007).
    """
    if estimator not in _ESTIMATORS:
        raise ValueError(f"estimator must be one of {_ESTIMATORS}; got {estimator!r}")
    if interval not in _INTERVALS:
        raise ValueError(f"interval must be one of {_INTERVALS}; got {interval!r}")
    if not 0 < confidence_level < 1:
        raise ValueError(f"confidence_level must be in (0, 1); got {confidence_level!r}")
    if not isinstance(n_replicates, int | np.integer) or n_replicates < 1:
        raise ValueError(f"n_replicates must be a positive integer; got {n_replicates!r}")
    if not isinstance(n_bootstrap, int | np.integer) or n_bootstrap < 0 or n_bootstrap == 1:
        raise ValueError(f"n_bootstrap must be 0 or an integer >= 2; got {n_bootstrap!r}")
    a = np.asarray(f_A, dtype=float)
    single = a.ndim == 1
    a = a.reshape(a.shape[0], -1)
    n, m = a.shape
    b = np.asarray(f_B, dtype=float).reshape(n, m)
    ab_in = np.asarray(f_AB, dtype=float)
    if ab_in.ndim < 2 or ab_in.shape[1] != n:
        raise ValueError(f"f_AB must have shape (k, {n}) or (k, {n}, {m}); got {ab_in.shape}")
    k = ab_in.shape[0]
    ab = ab_in.reshape(k, n, m)
    ba = None if f_BA is None else np.asarray(f_BA, dtype=float).reshape(k, n, m)

    shape = (n, k, m, ba is not None)
    nan = np.full((k, m), np.nan)
    fo_iv = to_iv = ConfidenceInterval(nan, nan)
    fo_se = to_se = nan
    so_iv, so_se = None, None
    if ba is not None:
        nan2 = np.full((k, k, m), np.nan)
        so_iv, so_se = ConfidenceInterval(nan2, nan2), nan2
    if n_replicates > 1:
        first, total, second, reps = _replicated(a, b, ab, ba, n_replicates, estimator)
        fo_se, fo_iv = _t_interval(reps[0], confidence_level)
        to_se, to_iv = _t_interval(reps[1], confidence_level)
        if second is not None:
            so_se, so_iv = _t_interval(reps[2], confidence_level)
    else:
        a, b, ab, ba = _standardised(a, b, ab, ba)
        integrands = _integrands(a, b, ab, ba, estimator)
        first, total, second = _weighted_estimates(np.ones((1, n)), integrands, *shape)
        first, total = first[0], total[0]
        second = None if second is None else second[0]
        if n_bootstrap:
            samples = bootstrap_estimates(integrands, shape, n_bootstrap, rng, _weighted_estimates)
            z = stats.norm.ppf(0.5 + confidence_level / 2)
            fo_iv, fo_se = bootstrap_interval(samples[0], first, z, confidence_level, interval)
            to_iv, to_se = bootstrap_interval(samples[1], total, z, confidence_level, interval)
            if second is not None:
                so_iv, so_se = bootstrap_interval(
                    samples[2], second, z, confidence_level, interval
                )

    if single:
        first, total, fo_se, to_se = first[..., 0], total[..., 0], fo_se[..., 0], to_se[..., 0]
        fo_iv = ConfidenceInterval(fo_iv.low[..., 0], fo_iv.high[..., 0])
        to_iv = ConfidenceInterval(to_iv.low[..., 0], to_iv.high[..., 0])
        if second is not None:
            second, so_se = second[..., 0], so_se[..., 0]  # type: ignore[index]
            so_iv = ConfidenceInterval(so_iv.low[..., 0], so_iv.high[..., 0])  # type: ignore[union-attr]
    raw = np.concatenate([np.asarray(f_A, float), np.asarray(f_B, float)])
    mean, variance = raw.mean(axis=0), raw.var(axis=0)
    return SobolResult(
        first_order=first,
        total_order=total,
        first_order_interval=fo_iv,
        total_order_interval=to_iv,
        first_order_se=fo_se,
        total_order_se=to_se,
        second_order=second,
        second_order_interval=so_iv,
        second_order_se=so_se,
        variance=np.asarray(variance),
        mean=np.asarray(mean),
        confidence_level=float(confidence_level),
        n_bootstrap=0 if n_replicates > 1 else int(n_bootstrap),
        n_replicates=int(n_replicates),
    )


def _standardised(a, b, ab, ba):
    """Centre on the mean of all evaluations and scale by their standard deviation."""
    m = a.shape[1]
    everything = [a, b, ab.reshape(-1, m)] + ([] if ba is None else [ba.reshape(-1, m)])
    stacked = np.concatenate(everything, axis=0)
    centre = stacked.mean(axis=0)
    scale = stacked.std(axis=0)
    scale = np.where(scale > 0, scale, 1.0)
    a, b, ab = (a - centre) / scale, (b - centre) / scale, (ab - centre) / scale
    if ba is not None:
        ba = (ba - centre) / scale
    return a, b, ab, ba


def _replicated(a, b, ab, ba, n_replicates, estimator):
    """Estimates of each replicate (rows replicate-major); their means and the replicates."""
    a_r = split_replicates(a, n_replicates)
    b_r = split_replicates(b, n_replicates)
    ab_r = np.moveaxis(split_replicates(ab, n_replicates, axis=1), 2, 1)  # (R, k, n, m)
    ba_r = None if ba is None else np.moveaxis(split_replicates(ba, n_replicates, axis=1), 2, 1)
    n, m = a_r.shape[1], a_r.shape[2]
    k = ab_r.shape[1]
    shape = (n, k, m, ba is not None)
    firsts, totals, seconds = [], [], []
    for r in range(n_replicates):
        parts = _standardised(a_r[r], b_r[r], ab_r[r], None if ba_r is None else ba_r[r])
        f, t, s2 = _weighted_estimates(np.ones((1, n)), _integrands(*parts, estimator), *shape)
        firsts.append(f[0])
        totals.append(t[0])
        if s2 is not None:
            seconds.append(s2[0])
    reps = [np.stack(firsts), np.stack(totals)] + ([np.stack(seconds)] if seconds else [])
    means = [x.mean(axis=0) for x in reps]
    return means[0], means[1], (means[2] if seconds else None), reps


def _t_interval(replicates, confidence_level):
    res = replicate_interval(replicates, confidence_level=confidence_level)
    return res.standard_error, ConfidenceInterval(res.low, res.high)
