"""Sample designs on the unit hypercube and their transformation to input distributions.

Notes
-----
Correlated inputs use a Gaussian copula: unit values become normal scores
``z = Phi^-1(u)``, the scores are correlated with the Cholesky factor ``L`` of
the correlation matrix ``R`` (``z' = z L^T``), mapped back through ``Phi`` and
then through each marginal's ppf. The coefficients of ``R`` are therefore the
Pearson correlations of the normal scores, not of the inputs themselves (they
coincide for normal marginals; :func:`copula_to_pearson` gives the inputs' own
Pearson correlation). With a correlation, a Latin-hypercube design keeps its
stratification only approximately. A Spearman rank correlation ``rho_s`` converts
to the copula coefficient by ``2 sin(pi rho_s / 6)``
(:func:`rank_correlation_to_copula`; Kruskal 1958).

References
----------
I. M. Sobol', "On the distribution of points in a cube and the approximate
evaluation of integrals", USSR Comput. Math. Math. Phys. 7, 86 (1967);
M. D. McKay, R. J. Beckman and W. J. Conover, "A comparison of three methods
for selecting values of input variables", Technometrics 21, 239 (1979);
W. H. Kruskal, "Ordinal measures of association", J. Am. Stat. Assoc. 53, 814 (1958).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any, Literal

import numpy as np
from numpy.typing import ArrayLike

from trapbudget.models.protocol import ModelError, is_quantity, to_si
from trapbudget.sensitivity.errors import ScenarioError

__all__ = [
    "METHODS",
    "SamplingMethod",
    "UnitCubeModel",
    "check_correlation",
    "copula_to_pearson",
    "is_distribution",
    "is_power_of_two",
    "ppf",
    "rank_correlation_to_copula",
    "sample_inputs",
    "split_inputs",
    "transform",
    "unit_design",
]

SamplingMethod = Literal["random", "latin", "sobol"]
METHODS: tuple[str, ...] = ("random", "latin", "sobol")

# Unit values are kept this far from 0 and 1 so that unbounded ppfs stay finite.
_EDGE = float(np.finfo(float).eps)


def is_power_of_two(n: int) -> bool:
    """True for n = 1, 2, 4, 8, ..."""
    return isinstance(n, int | np.integer) and n >= 1 and (int(n) & (int(n) - 1)) == 0


def _next_power_of_two(n: int) -> int:
    return 1 << max(0, int(n - 1).bit_length())


def _engine(cls: Any, dimension: int, generator: np.random.Generator, **options: Any) -> Any:
    try:
        return cls(d=dimension, rng=generator, **options)
    except TypeError:  # scipy < 1.15 names the argument `seed`
        return cls(d=dimension, seed=generator, **options)


def unit_design(
    n_samples: int,
    dimension: int,
    *,
    method: SamplingMethod = "sobol",
    rng: Any = None,
) -> np.ndarray:
    """Sample points in the open unit hypercube (0, 1)^d.

    Parameters
    ----------
    n_samples : int
        Number of points n (a power of 2 for ``"sobol"``).
    dimension : int
        Dimension d.
    method : {"random", "latin", "sobol"}
        Pseudo-random, Latin hypercube (``scipy.stats.qmc.LatinHypercube``) or
        scrambled Sobol' (``scipy.stats.qmc.Sobol``).
    rng : seed or numpy.random.Generator, optional
        Anything ``numpy.random.default_rng`` accepts.

    Returns
    -------
    numpy.ndarray, shape (n, d)
        Values clipped to [eps, 1 - eps].

    Raises
    ------
    ScenarioError
        (a ValueError) Unknown method, n < 1, or n not a power of 2 for Sobol'.
    ValueError
        d < 0.
    """
    from scipy.stats import qmc

    n_samples = int(n_samples)
    dimension = int(dimension)
    if method not in METHODS:
        raise ScenarioError(f"method={method!r} is not known; use one of {', '.join(METHODS)}")
    if n_samples < 1:
        raise ScenarioError(f"n_samples must be >= 1, got {n_samples}")
    if dimension < 0:
        raise ValueError(f"dimension must be >= 0, got {dimension}")
    if method == "sobol" and not is_power_of_two(n_samples):
        raise ScenarioError(
            f"method='sobol' requires n_samples to be a power of 2; got {n_samples}, "
            f"use {_next_power_of_two(n_samples)}"
        )
    generator = np.random.default_rng(rng)
    if dimension == 0:
        return np.empty((n_samples, 0))
    if method == "random":
        points = generator.random((n_samples, dimension))
    elif method == "latin":
        points = _engine(qmc.LatinHypercube, dimension, generator).random(n_samples)
    else:
        engine = _engine(qmc.Sobol, dimension, generator, scramble=True)
        points = engine.random_base2(int(n_samples).bit_length() - 1)
    return np.clip(points, _EDGE, 1.0 - _EDGE)


def rank_correlation_to_copula(spearman: ArrayLike) -> np.ndarray:
    """Gaussian-copula coefficient from a Spearman rank correlation: ``2 sin(pi rho / 6)``.

    References
    ----------
    W. H. Kruskal, J. Am. Stat. Assoc. 53, 814 (1958).
    """
    rho = np.asarray(spearman, dtype=float)
    if np.any(np.abs(rho) > 1):
        raise ValueError("rank correlations must lie in [-1, 1]")
    return 2.0 * np.sin(np.pi * rho / 6.0)


#: Relative rounding tolerated in a correlation coefficient's magnitude above 1.
_ROUNDING = 64 * np.finfo(float).eps


def check_correlation(
    correlation: ArrayLike,
    names: Sequence[str] | None = None,
    *,
    path: object | None = None,
    key: str = "correlations",
) -> np.ndarray:
    """Check a correlation matrix and return it as a float array.

    Raises
    ------
    ScenarioError
        Not square of the right size, not symmetric, diagonal not 1,
        coefficients outside [-1, 1], or not positive definite (the message
        names the inputs that carry the offending combination).
    """
    matrix = np.asarray(correlation, dtype=float)
    d = matrix.shape[0] if matrix.ndim == 2 else -1
    labels = list(names) if names is not None else [f"#{i}" for i in range(max(d, 0))]
    if matrix.ndim != 2 or matrix.shape[1] != d or (names is not None and d != len(labels)):
        raise ScenarioError(
            f"correlation matrix has shape {matrix.shape}; it must be {len(labels)} x "
            f"{len(labels)} in the order of the uncertain inputs",
            path=path,
            key=key,
        )
    if not np.all(np.isfinite(matrix)) or not np.allclose(matrix, matrix.T, atol=1e-12):
        raise ScenarioError("correlation matrix must be finite and symmetric", path=path, key=key)
    if not np.allclose(np.diag(matrix), 1.0, atol=1e-12):
        raise ScenarioError("correlation matrix must have 1 on the diagonal", path=path, key=key)
    # Rounding: a matrix built as cov / outer(sd, sd) has entries a few ulp above 1 in
    # magnitude; such entries are accepted and the returned matrix is cleaned (symmetric,
    # unit diagonal, coefficients in [-1, 1]).
    if np.any(np.abs(matrix) > 1.0 + _ROUNDING):
        i, j = np.unravel_index(np.argmax(np.abs(matrix)), matrix.shape)
        raise ScenarioError(
            f"coefficient {matrix[i, j]:g} between {labels[i]!r} and {labels[j]!r} lies outside "
            "[-1, 1]",
            path=path,
            key=key,
        )
    eigenvalues, eigenvectors = np.linalg.eigh(matrix)
    if eigenvalues[0] <= 1e-10:
        weights = np.abs(eigenvectors[:, 0])
        involved = [labels[i] for i in np.argsort(-weights) if weights[i] > 0.1]
        raise ScenarioError(
            f"correlation matrix is not positive definite (smallest eigenvalue "
            f"{eigenvalues[0]:.3g}); the coefficients among {', '.join(map(repr, involved))} "
            "contradict each other: weaken them",
            path=path,
            key=key,
        )
    cleaned = np.clip((matrix + matrix.T) / 2, -1.0, 1.0)
    np.fill_diagonal(cleaned, 1.0)
    return cleaned


def ppf(dist: Any, unit: np.ndarray) -> np.ndarray:
    """Quantile function of a frozen distribution, with closed-form fast paths.

    Normal ``m + s Phi^-1(u)``, uniform ``a + (b - a) u`` and log-normal
    ``loc + (median - loc) exp(sigma Phi^-1(u))`` are computed directly (same
    values as ``dist.ppf``, about ten times faster); other shapes use ``dist.ppf``.
    """
    from scipy import special

    name = getattr(getattr(dist, "dist", None), "name", None)
    u = np.asarray(unit, dtype=float)
    if name == "norm":
        return float(dist.mean()) + float(dist.std()) * special.ndtri(u)
    if name == "uniform":
        low, high = (float(v) for v in dist.support())
        return low + (high - low) * u
    if name == "lognorm":
        loc = float(dist.support()[0])
        median = float(dist.median())
        sigma = math.log((float(dist.ppf(special.ndtr(1.0))) - loc) / (median - loc))
        return loc + (median - loc) * np.exp(sigma * special.ndtri(u))
    return dist.ppf(u)


class UnitCubeModel:
    """A model fed points of the unit cube, mapped to the inputs where the chunk is evaluated.

    Each column named in ``distributions`` goes through :func:`transform` (marginals and,
    with ``correlation``, the Gaussian copula) inside :meth:`evaluate`, so a worker that
    evaluates a chunk also does its quantile functions; ``fixed`` inputs are bound.

    Parameters
    ----------
    model : model
        The model (``wrapped_model``).
    distributions : mapping name -> frozen distribution
        The marginals, in the order of the copula's rows.
    correlation : array (d, d), optional
    fixed : mapping name -> float, optional
    """

    def __init__(
        self,
        model: Any,
        distributions: Mapping[str, Any],
        *,
        correlation: ArrayLike | None = None,
        fixed: Mapping[str, float] | None = None,
    ) -> None:
        self.wrapped_model = model
        self.distributions = dict(distributions)
        self.correlation = None if correlation is None else np.asarray(correlation, dtype=float)
        self.fixed = dict(fixed or {})

    @property
    def inputs(self) -> Any:
        return self.wrapped_model.inputs

    @property
    def outputs(self) -> Any:
        return self.wrapped_model.outputs

    def evaluate(self, values: Mapping[str, ArrayLike]) -> Any:
        names = list(self.distributions)
        unit = np.column_stack([np.asarray(values[name], dtype=float) for name in names])
        physical = transform(unit, list(self.distributions.values()), correlation=self.correlation)
        n = unit.shape[0]
        columns = {name: np.full(n, value) for name, value in self.fixed.items()}
        columns.update({name: physical[:, j] for j, name in enumerate(names)})
        return self.wrapped_model.evaluate(columns)


def transform(
    unit: ArrayLike,
    distributions: Sequence[Any],
    *,
    correlation: ArrayLike | None = None,
) -> np.ndarray:
    """Map unit-hypercube points to samples of the given marginals.

    Parameters
    ----------
    unit : array, shape (n, d)
        Points in (0, 1)^d, e.g. from :func:`unit_design`.
    distributions : sequence of d frozen scipy.stats distributions
        The marginals, in column order.
    correlation : array (d, d), optional
        Gaussian-copula correlation of the normal scores (see module notes).

    Returns
    -------
    numpy.ndarray, shape (n, d)
    """
    from scipy import special

    points = np.clip(np.asarray(unit, dtype=float), _EDGE, 1.0 - _EDGE)
    if points.ndim != 2 or points.shape[1] != len(distributions):
        raise ValueError(
            f"unit has shape {points.shape}; expected (n, {len(distributions)}) for "
            f"{len(distributions)} distributions"
        )
    if correlation is not None and len(distributions) > 1:
        matrix = check_correlation(correlation)
        if not np.allclose(matrix, np.eye(matrix.shape[0])):
            scores = special.ndtri(points) @ np.linalg.cholesky(matrix).T
            points = np.clip(special.ndtr(scores), _EDGE, 1.0 - _EDGE)
    out = np.empty_like(points)
    for j, dist in enumerate(distributions):
        out[:, j] = ppf(dist, points[:, j])
    return out


def copula_to_pearson(
    correlation: ArrayLike, distributions: Sequence[Any], *, order: int = 96
) -> np.ndarray:
    """Pearson correlation of the inputs implied by a Gaussian copula and the marginals.

    Parameters
    ----------
    correlation : array (d, d)
        Gaussian-copula (normal-score) correlation.
    distributions : sequence of d frozen scipy.stats distributions
        The marginals.
    order : int
        Gauss-Hermite order of the two-dimensional quadrature.

    Returns
    -------
    numpy.ndarray (d, d)
        ``corr(F_i^-1(Phi(z_i)), F_j^-1(Phi(z_j)))`` with ``corr(z_i, z_j)`` the
        copula coefficient; equal to it for normal marginals.

    Notes
    -----
    ``E[g_i(z_1) g_j(r z_1 + sqrt(1 - r^2) z_2)]`` over independent standard
    normals by the tensor Gauss-Hermite rule (probabilists' weights), with the
    means and variances from the same rule. For uniform marginals the result
    is ``(6/pi) arcsin(r/2)`` (Pearson 1907; Kruskal 1958).
    """
    from scipy import stats

    matrix = check_correlation(correlation)
    d = matrix.shape[0]
    if len(distributions) != d:
        raise ValueError(f"{d} x {d} correlation but {len(distributions)} distributions")
    nodes, weights = np.polynomial.hermite_e.hermegauss(order)
    weights = weights / weights.sum()

    def g(dist: Any, z: np.ndarray) -> np.ndarray:
        return dist.ppf(np.clip(stats.norm.cdf(z), _EDGE, 1.0 - _EDGE))

    values = [g(dist, nodes) for dist in distributions]
    means = [float(weights @ v) for v in values]
    stds = [
        math.sqrt(max(float(weights @ (v - m) ** 2), 0.0))
        for v, m in zip(values, means, strict=True)
    ]
    out = np.eye(d)
    for i in range(d):
        for j in range(i + 1, d):
            r = matrix[i, j]
            if r == 0 or stds[i] == 0 or stds[j] == 0:
                continue
            second = r * nodes[:, None] + math.sqrt(1.0 - r * r) * nodes[None, :]
            gj = g(distributions[j], second)
            cross = float(weights @ ((values[i] - means[i])[:, None] * (gj - means[j])) @ weights)
            out[i, j] = out[j, i] = cross / (stds[i] * stds[j])
    return out


def sample_inputs(
    inputs: Mapping[str, Any],
    *,
    n_samples: int,
    method: SamplingMethod = "sobol",
    correlation: ArrayLike | None = None,
    rng: Any = None,
) -> dict[str, np.ndarray]:
    """Draw n samples of the uncertain inputs.

    Parameters
    ----------
    inputs : mapping name -> frozen distribution or float
        Floats are fixed and not sampled (not in the result).
    n_samples, method, rng
        As for :func:`unit_design`.
    correlation : array, optional
        Copula correlation in the order of the distribution-valued inputs.

    Returns
    -------
    dict name -> 1-D array of n samples, for the distribution-valued inputs.
    """
    uncertain = {name: dist for name, dist in inputs.items() if is_distribution(dist)}
    points = unit_design(n_samples, len(uncertain), method=method, rng=rng)
    if correlation is not None:
        check_correlation(correlation, list(uncertain))
    values = transform(points, list(uncertain.values()), correlation=correlation)
    return {name: values[:, j] for j, name in enumerate(uncertain)}


def split_inputs(
    inputs: Mapping[str, Any], model: Any = None
) -> tuple[dict[str, Any], dict[str, float]]:
    """Split ``inputs`` into (name -> distribution, name -> fixed float).

    A fixed value may be a pint Quantity when ``model`` is given: it is
    converted to the model input's SI unit (or refused for a wrong dimension).
    Distributions are in SI (scipy.stats carries no units).

    Raises
    ------
    ScenarioError
        For a value that is neither a frozen distribution nor a number, or a
        Quantity of the wrong dimension.
    """
    specs = getattr(model, "inputs", None) or {}
    uncertain: dict[str, Any] = {}
    fixed: dict[str, float] = {}
    for name, value in inputs.items():
        if is_distribution(value):
            uncertain[name] = value
            continue
        if is_quantity(value):
            if name not in specs:
                raise ScenarioError(
                    f"{value!r} carries units, but the model declares no unit for this "
                    "input; give the number in SI",
                    key=f"inputs.{name}",
                )
            try:
                value = to_si(name, value, specs[name].unit)
            except ModelError as error:
                message = str(error).removeprefix(f"input {name!r}: ")
                raise ScenarioError(message, key=f"inputs.{name}") from None
        try:
            fixed[name] = float(value)
        except (TypeError, ValueError):
            raise ScenarioError(
                f"{value!r} is neither a frozen scipy.stats distribution nor a number; give "
                "e.g. scipy.stats.norm(4e-3, 8e-5) or 4e-3",
                key=f"inputs.{name}",
            ) from None
    return uncertain, fixed


def is_distribution(value: Any) -> bool:
    """True for a frozen scipy.stats distribution (anything with ppf and rvs)."""
    return hasattr(value, "ppf") and hasattr(value, "rvs")
