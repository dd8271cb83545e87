"""Saturated vapor pressure of the metals in Alcock's form, continuous at melting."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants

__all__ = ["ALCOCK_LOWEST", "ALCOCK_SOURCE", "MELT_BLEND", "VaporPressure"]

_ATM = constants.atm  # Pa
ALCOCK_SOURCE = (
    "C. B. Alcock, V. P. Itkin and M. K. Horrigan, Can. Metall. Q. 23, 309 (1984), Table 2"
)
#: Half-width (K) of the blend of the solid and liquid vapor-pressure branches at the melting
#: point.
MELT_BLEND = 3.0
#: Lowest temperature of Alcock's fit (K): below it the vapor pressure is extrapolated.
ALCOCK_LOWEST = 298.0


@dataclass(frozen=True)
class VaporPressure:
    """Vapor-pressure coefficients of one element in the Alcock form.

    Parameters
    ----------
    solid_a, solid_b : float
        ``A`` (1) and ``B`` (K) of ``log10(P / atm) = A + B / T`` below the melting point.
    liquid_a, liquid_b : float
        The same above the melting point.
    melting_point : float
        Melting temperature, K.
    source : str
        Citation of the coefficients.
    solid_c, liquid_c : float
        ``C`` of Alcock's Table 1 form ``log10(P / atm) = A + B / T + C log10(T / K)``
        (0 for the two-term Table 2 form of the alkalis).

    Notes
    -----
    ``log10(P / atm) = A + B / T``, quoted to about +-5 % over the range of
    the table; 1 atm = 101 325 Pa.

    References
    ----------
    C. B. Alcock, V. P. Itkin and M. K. Horrigan, "Vapour pressure equations for
    the metallic elements: 298-2500 K", Can. Metall. Q. 23, 309 (1984), Table 2.
    """

    solid_a: float
    solid_b: float
    liquid_a: float
    liquid_b: float
    melting_point: float
    source: str = ALCOCK_SOURCE
    solid_c: float = 0.0
    liquid_c: float = 0.0

    def pressure(self, temperature: ArrayLike) -> np.ndarray:
        """Saturated vapor pressure, Pa, at ``temperature`` (K, broadcasts).

        The solid branch applies below ``melting_point - MELT_BLEND``, the liquid
        branch above ``melting_point + MELT_BLEND``; in between log P is blended with
        a smoothstep weight, so P and its slope stay continuous (within Alcock's
        +-5 %). Non-positive temperatures give 0 Pa.
        """
        t = np.asarray(temperature, dtype=float)
        # smoothstep weight of the liquid branch over T_m -+ MELT_BLEND: continuous with a
        # finite slope; the two branches differ by less than Alcock's 5 % within the blend
        x = np.clip((t - self.melting_point + MELT_BLEND) / (2 * MELT_BLEND), 0.0, 1.0)
        weight = x * x * (3.0 - 2.0 * x)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            log_t = np.log10(t) if (self.solid_c or self.liquid_c) else 0.0
            log_solid = self.solid_a + self.solid_b / t + self.solid_c * log_t
            log_liquid = self.liquid_a + self.liquid_b / t + self.liquid_c * log_t
            p = _ATM * 10.0 ** (log_solid + weight * (log_liquid - log_solid))
        return np.where(t > 0, p, 0.0)
