"""Designs for dependent inputs: conditional sampling under a Gaussian copula (Kucherenko)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy import special

__all__ = ["dependent_design"]


def _conditional(z, fresh, correlation, kept, drawn) -> np.ndarray:
    """Rows with columns ``kept`` from z and ``drawn`` ~ N(mean | kept, cov | kept).

    z_T | z_S ~ N(R_TS R_SS^-1 z_S, R_TT - R_TS R_SS^-1 R_ST), the fresh
    standard normals taken from the same columns of ``fresh``.
    """
    out = z.copy()
    kept, drawn = list(kept), list(drawn)
    if not drawn:
        return out
    if not kept:
        out[:, drawn] = fresh[:, drawn] @ np.linalg.cholesky(correlation).T
        return out
    r_ss = correlation[np.ix_(kept, kept)]
    r_ts = correlation[np.ix_(drawn, kept)]
    coef = np.linalg.solve(r_ss, r_ts.T)  # (|S|, |T|)
    cov = correlation[np.ix_(drawn, drawn)] - r_ts @ coef
    chol = np.linalg.cholesky(cov + 1e-12 * np.eye(len(drawn)))
    out[:, drawn] = z[:, kept] @ coef + fresh[:, drawn] @ chol.T
    return out


def dependent_design(
    base: np.ndarray,
    correlation: np.ndarray,
    *,
    factors: Sequence[Sequence[int]] | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Conditional-sampling design for inputs joined by a Gaussian copula.

    Parameters
    ----------
    base : numpy.ndarray, shape (n, 2d)
        Independent unit points (e.g. a scrambled Sobol' sequence).
    correlation : numpy.ndarray, shape (d, d)
        Correlation of the normal scores (positive definite).
    factors : sequence of sequences of int, optional
        Columns moved together (grouped indices); default one per column.

    Returns
    -------
    A, B : numpy.ndarray, shape (n, d)
        Two independent samples of the dependent inputs (copula scale, in (0, 1)).
    C : numpy.ndarray, shape (k, n, d)
        ``C[i]``: factor i from B, the other inputs drawn from their
        conditional distribution given it (for first-order indices).
    D : numpy.ndarray, shape (k, n, d)
        ``D[i]``: the other inputs from A, factor i drawn from its conditional
        distribution given them (for total-order indices).

    Notes
    -----
    For normal scores z ~ N(0, R), z_T | z_S ~ N(R_TS R_SS^-1 z_S,
    R_TT - R_TS R_SS^-1 R_ST); the fresh normals of C come from A's
    independent scores and those of D from B's, which keeps each estimator's
    pairs independent where it needs them (Kucherenko, Tarantola & Annoni
    2012, section 5). Map the columns through each marginal's inverse CDF.

    References
    ----------
    S. Kucherenko, S. Tarantola, P. Annoni, "Estimation of global sensitivity
    indices for models with dependent variables", Comput. Phys. Commun. 183,
    937 (2012).
    """
    d = base.shape[1] // 2
    tiny = np.finfo(float).eps
    eps_a = special.ndtri(np.clip(base[:, :d], tiny, 1 - tiny))
    eps_b = special.ndtri(np.clip(base[:, d:], tiny, 1 - tiny))
    lower = np.linalg.cholesky(correlation)
    z_a, z_b = eps_a @ lower.T, eps_b @ lower.T
    factors = [(j,) for j in range(d)] if factors is None else [tuple(f) for f in factors]
    n = base.shape[0]
    c = np.empty((len(factors), n, d))
    dd = np.empty((len(factors), n, d))
    for k, kept in enumerate(factors):
        rest = tuple(j for j in range(d) if j not in kept)
        # C: the factor from B, the rest drawn given it (fresh normals from A).
        c[k] = _conditional(z_b, eps_a, correlation, kept, rest)
        # D: the rest from A, the factor drawn given them (fresh normals from B).
        dd[k] = _conditional(z_a, eps_b, correlation, rest, kept)
    return special.ndtr(z_a), special.ndtr(z_b), special.ndtr(c), special.ndtr(dd)
