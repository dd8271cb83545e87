"""Tolerance records and the probability distributions they stand for.

A tolerance as a lab writes it ("2 %", standard; "0.5 mW", half-width of a
rectangular distribution; "1 MHz" expanded with k = 2) is parsed into a
:class:`Tolerance`; :meth:`Tolerance.distribution` gives the frozen
``scipy.stats`` distribution that the sampler draws from.

Notes
-----
Standard uncertainties of the shapes with half-width ``a`` (JCGM 100:2008,
sections 4.3.7 and 4.3.9; the arcsine case is JCGM 101:2008, section 6.4.6):

- rectangular: ``u = a / sqrt(3)``
- triangular (symmetric): ``u = a / sqrt(6)``
- arcsine (U-shaped; a sinusoidal drift of amplitude ``a``): ``u = a / sqrt(2)``

The normal has no half-width; ``meaning = "half-width"`` is refused for it.
The log-normal has median ``nominal`` and standard deviation ``u`` (not the
``sigma`` of the log), so that ``u`` means the same for every shape.
The truncated normal takes ``u`` as the standard deviation of the parent
normal centred on ``nominal``, cut at ``bounds``; its own standard deviation,
:attr:`Tolerance.standard_uncertainty`, is smaller.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any, Literal

from trapbudget.sensitivity.errors import ScenarioError

__all__ = ["MEANINGS", "SHAPES", "Meaning", "Shape", "Tolerance"]

Shape = Literal["normal", "rectangular", "triangular", "lognormal", "arcsine", "truncated-normal"]
Meaning = Literal["standard", "half-width", "expanded"]
SHAPES: tuple[str, ...] = (
    "normal",
    "rectangular",
    "triangular",
    "lognormal",
    "arcsine",
    "truncated-normal",
)
MEANINGS: tuple[str, ...] = ("standard", "half-width", "expanded")

# u = a / divisor for the shapes with a bounded support of half-width a.
_HALF_WIDTH_DIVISOR = {
    "rectangular": math.sqrt(3.0),
    "triangular": math.sqrt(6.0),
    "arcsine": math.sqrt(2.0),
}


@dataclass(frozen=True)
class Tolerance:
    """A parsed tolerance of one input, in SI.

    Parameters
    ----------
    nominal : float
        Nominal value (SI): the centre (median for the log-normal).
    value : float
        The tolerance as an absolute amount (SI), in the sense of ``meaning``.
    meaning : {"standard", "half-width", "expanded"}
        ``value`` is the standard uncertainty u, the half-width a of the
        shape's support, or the expanded uncertainty k u.
    coverage_factor : float or None
        k, required with ``meaning="expanded"``.
    shape : str
        One of :data:`SHAPES`.
    relative : bool
        Whether the tolerance was written relative to the nominal (as written).
    text : str
        The tolerance as written.
    bounds : tuple of float or None
        (low, high) in SI: truncation for ``"truncated-normal"``, otherwise a
        range the nominal must lie in.
    unit : str
        SI unit of the input (for formatting and re-parsing).
    where : str
        Key the tolerance came from, for error messages.

    Raises
    ------
    ScenarioError
        Unknown shape or meaning, missing coverage factor, a half-width of a
        normal, a non-positive nominal for the log-normal, bad bounds.
    """

    nominal: float
    value: float
    meaning: str = "standard"
    coverage_factor: float | None = None
    shape: str = "normal"
    relative: bool = False
    text: str = dataclasses.field(default="", compare=False)
    bounds: tuple[float, float] | None = None
    unit: str = ""
    where: str = dataclasses.field(default="", compare=False)

    def __post_init__(self) -> None:
        key = self.where or None
        if self.shape not in SHAPES:
            raise ScenarioError(
                f"shape {self.shape!r} is not known; use one of {', '.join(SHAPES)}", key=key
            )
        if self.meaning not in MEANINGS:
            raise ScenarioError(
                f"meaning {self.meaning!r} is not known; use one of {', '.join(MEANINGS)}",
                key=key,
            )
        if not (math.isfinite(self.value) and self.value >= 0):
            raise ScenarioError(
                f"tolerance {self.value!r} must be finite and non-negative", key=key
            )
        if self.meaning == "expanded":
            k = self.coverage_factor
            if k is None or not (math.isfinite(k) and k > 0):
                raise ScenarioError(
                    f"meaning = 'expanded' needs coverage_factor > 0, got {k!r}; "
                    "add e.g. coverage_factor = 2",
                    key=key,
                )
        if self.meaning == "half-width" and self.shape not in _HALF_WIDTH_DIVISOR:
            raise ScenarioError(
                f"a {self.shape} distribution has no half-width; use meaning = 'standard' "
                "or shape = 'rectangular', 'triangular' or 'arcsine'",
                key=key,
            )
        if self.shape == "lognormal" and not self.nominal > 0:
            raise ScenarioError(
                f"shape = 'lognormal' needs a positive nominal, got {self.nominal!r}; "
                "use shape = 'normal'",
                key=key,
            )
        if self.bounds is not None:
            low, high = self.bounds
            if not low < high:
                raise ScenarioError(
                    f"bounds {list(self.bounds)!r} must be increasing; write [low, high]",
                    key=key,
                )
            if not low <= self.nominal <= high:
                raise ScenarioError(
                    f"nominal {self.nominal!r} lies outside bounds {list(self.bounds)!r}; "
                    "widen the bounds or fix the nominal",
                    key=key,
                )
        elif self.shape == "truncated-normal":
            raise ScenarioError("shape = 'truncated-normal' needs bounds = [low, high]", key=key)

    @property
    def scale(self) -> float:
        """The shape's own scale (SI): the standard deviation of the written
        (parent, for the truncated normal) distribution, before truncation."""
        if self.meaning == "expanded":
            return self.value / float(self.coverage_factor)  # type: ignore[arg-type]
        if self.meaning == "half-width":
            return self.value / _HALF_WIDTH_DIVISOR[self.shape]
        return self.value

    @property
    def half_width(self) -> float | None:
        """Half-width a of the support (SI) for bounded shapes, else None."""
        if self.shape in _HALF_WIDTH_DIVISOR:
            return self.scale * _HALF_WIDTH_DIVISOR[self.shape]
        return None

    @property
    def standard_uncertainty(self) -> float:
        """Standard uncertainty u (SI): the standard deviation of :meth:`distribution`."""
        if self.shape == "truncated-normal":
            return float(self.distribution().std()) if self.scale > 0 else 0.0
        return self.scale

    def distribution(self) -> Any:
        """The frozen ``scipy.stats`` distribution (SI) the tolerance stands for.

        Raises
        ------
        ScenarioError
            For a zero tolerance: such an input is held fixed instead.
        """
        from scipy import stats

        u = self.scale
        if u <= 0:
            raise ScenarioError(
                "tolerance is zero; remove it to hold the input fixed", key=self.where or None
            )
        x0 = self.nominal
        if self.shape == "normal":
            return stats.norm(loc=x0, scale=u)
        if self.shape in _HALF_WIDTH_DIVISOR:
            a = u * _HALF_WIDTH_DIVISOR[self.shape]
            if self.shape == "rectangular":
                return stats.uniform(loc=x0 - a, scale=2 * a)
            if self.shape == "triangular":
                return stats.triang(0.5, loc=x0 - a, scale=2 * a)
            return stats.arcsine(loc=x0 - a, scale=2 * a)
        if self.shape == "lognormal":
            # Var = m^2 w (w - 1), w = exp(s^2): solve for w given u / m.
            ratio = u / x0
            w = 0.5 * (1.0 + math.sqrt(1.0 + 4.0 * ratio * ratio))
            return stats.lognorm(math.sqrt(math.log(w)), scale=x0)
        low, high = self.bounds  # type: ignore[misc]
        return stats.truncnorm((low - x0) / u, (high - x0) / u, loc=x0, scale=u)

    def with_value(self, new_value: float) -> Tolerance:
        """The same tolerance with a new absolute ``value`` (SI, same meaning).

        The written ``text`` is regenerated: relative stays relative.
        """
        new_value = float(new_value)
        if self.relative and self.nominal != 0:
            text = f"{100.0 * new_value / abs(self.nominal):.6g} %"
        else:
            text = f"{new_value:.6g} {self.unit}".strip()
        return dataclasses.replace(self, value=new_value, text=text)

    def scaled(self, factor: float) -> Tolerance:
        """The same tolerance with ``value`` multiplied by ``factor``."""
        return self.with_value(self.value * float(factor))

    def with_nominal(self, nominal: float) -> Tolerance:
        """Move the nominal; a relative tolerance keeps its fraction of ``|nominal|``."""
        nominal = float(nominal)
        value = self.value
        if self.relative and self.nominal != 0:
            value = self.value * abs(nominal) / abs(self.nominal)
        return dataclasses.replace(self, nominal=nominal, value=value)
