"""Atomic data for the laser-cooling transitions trapbudget models.

Each :class:`Species` carries the cycling line of one isotope (the D2 line of
an alkali, or the 461 nm / 689 nm lines of Sr-88), the g-factors of the
stretched cycling states, the dark-state leak that a repumper must close, the
vapor-pressure coefficients of the element, and the published source of every
value in ``Species.sources``.

All values are SI: wavelength in m (vacuum), linewidth as the decay rate
Gamma = 1/tau in 1/s, saturation intensity in W/m^2, mass in kg, hyperfine
splittings in Hz (cyclic).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from fractions import Fraction
from types import MappingProxyType

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants

from trapbudget.models.vapor_pressure import (
    ALCOCK_SOURCE,
    VaporPressure,
)

__all__ = ["SPECIES", "SR_1D2_DECAY_RATE", "Citations", "Species", "VaporPressure"]

_HBAR = constants.hbar
_C = constants.c
_KB = constants.k
_MU_B = constants.physical_constants["Bohr magneton"][0]
_U = constants.physical_constants["atomic mass constant"][0]

_STECK_RB87 = 'D. A. Steck, "Rubidium 87 D Line Data", rev. 2.2.1 (2019)'
_STECK_RB85 = 'D. A. Steck, "Rubidium 85 D Line Data", rev. 2.2.1 (2019)'
_STECK_CS = 'D. A. Steck, "Cesium D Line Data", rev. 2.2.1 (2019)'
_STECK_NA = 'D. A. Steck, "Sodium D Line Data", rev. 2.2.1 (2019)'
_TIECKE_K = 'T. G. Tiecke, "Properties of Potassium", v1.02 (2019)'
_GEHM_LI = 'M. E. Gehm, "Properties of 6Li" (2003), Li-7 D2 linewidth'
_NIST_MASS = "NIST Atomic Weights and Isotopic Compositions (atomic masses)"
_FORMULA_ISAT = "computed: I_sat = hbar w0^3 Gamma / (12 pi c^2) (Steck's convention)"
_HF_FACTORS = (
    "relative hyperfine transition strength factors S_FF' and decay branching from 6j "
    "symbols, as tabulated by Steck (D Line Data, section 'Hyperfine dipole matrix elements')"
)
_LANDE = "g_F from g_J and I (Lande formula; g_J = 2, g_J' = 4/3), as in Steck's D Line Data"


class Citations(Mapping[str, str]):
    """Read-only field -> citation mapping that hashes and pickles (unlike a mappingproxy)."""

    __slots__ = ("_items",)

    def __init__(self, items: Mapping[str, str] | None = None) -> None:
        self._items = tuple(dict(items or {}).items())

    def __getitem__(self, key: str) -> str:
        for k, v in self._items:
            if k == key:
                return v
        raise KeyError(key)

    def __iter__(self):
        return (k for k, _ in self._items)

    def __len__(self) -> int:
        return len(self._items)

    def __hash__(self) -> int:
        return hash(self._items)

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Mapping) and dict(self) == dict(other)

    def __repr__(self) -> str:
        return f"Citations({dict(self._items)!r})"

    def __reduce__(self):
        return (Citations, (dict(self._items),))


@dataclass(frozen=True)
class Species:
    """One atomic species and its laser-cooling (cycling) transition.

    Parameters
    ----------
    name : str
        Key in :data:`SPECIES`, e.g. ``"Rb87"``.
    label : str
        Human-readable line, e.g. ``"Rb-87 D2, 5S1/2 F=2 -> 5P3/2 F'=3"``.
    element : str
        Chemical symbol.
    wavelength : float
        Vacuum wavelength of the cycling line, m.
    linewidth : float
        Natural decay rate Gamma = 1/tau of the upper level, 1/s (angular).
    saturation_intensity : float
        Saturation intensity of the cycling transition, W/m^2.
    mass : float
        Atomic mass, kg.
    g_lower, m_lower, g_upper, m_upper : float
        Lande g_F factors and m_F of the stretched lower and upper cycling states.
    vapor : VaporPressure or None
        Vapor-pressure coefficients of the element, or None (density given directly).
    upper_hyperfine_splitting : float
        Frequency of the nearest leaky upper level minus that of the cycling
        upper level, Hz (cyclic; negative when the leaky level lies below).
        NaN for a line with no such leak.
    leak_branching : float
        Probability that an atom excited into the leaky level decays to the dark ground state.
    leak_relative_strength : float
        Strength of the off-resonant excitation relative to the cycling one (S_FF' ratio).
    leak_probability_floor : float
        Detuning-independent leak per scattered photon (e.g. Sr 1P1 -> 1D2); 0 for alkalis.
    sources : Mapping[str, str]
        Field name -> citation.
    """

    name: str
    label: str
    element: str
    wavelength: float
    linewidth: float
    saturation_intensity: float
    mass: float
    g_lower: float
    m_lower: float
    g_upper: float
    m_upper: float
    vapor: VaporPressure | None
    upper_hyperfine_splitting: float
    leak_branching: float
    leak_relative_strength: float
    leak_probability_floor: float
    sources: Mapping[str, str] = field(default_factory=Citations)

    def __post_init__(self) -> None:
        if not isinstance(self.sources, Citations):
            object.__setattr__(self, "sources", Citations(self.sources))

    @property
    def wavenumber(self) -> float:
        """k = 2 pi / lambda, 1/m."""
        return 2.0 * math.pi / self.wavelength

    @property
    def angular_frequency(self) -> float:
        """omega0 = 2 pi c / lambda, rad/s."""
        return 2.0 * math.pi * _C / self.wavelength

    @property
    def linewidth_hz(self) -> float:
        """Gamma / 2 pi, Hz."""
        return self.linewidth / (2.0 * math.pi)

    @property
    def doppler_temperature(self) -> float:
        """Doppler limit T_D = hbar Gamma / (2 k_B), K (Steck's convention)."""
        return _HBAR * self.linewidth / (2.0 * _KB)

    @property
    def recoil_velocity(self) -> float:
        """v_r = hbar k / m, m/s."""
        return _HBAR * self.wavenumber / self.mass

    @property
    def recoil_temperature(self) -> float:
        """T_r = hbar^2 k^2 / (m k_B), K (Steck's convention, no factor 1/2)."""
        return (_HBAR * self.wavenumber) ** 2 / (self.mass * _KB)

    @property
    def zeeman_coefficient(self) -> float:
        """mu' = (g_upper m_upper - g_lower m_lower) mu_B, J/T.

        Differential magnetic moment of the stretched cycling transition: its
        angular frequency shifts by mu' B / hbar in a field B.
        """
        return (self.g_upper * self.m_upper - self.g_lower * self.m_lower) * _MU_B

    @property
    def max_acceleration(self) -> float:
        """a_max = hbar k Gamma / (2 m), m/s^2 (fully saturated scattering force)."""
        return _HBAR * self.wavenumber * self.linewidth / (2.0 * self.mass)

    def leak_probability(self, detuning: ArrayLike, *, saturation: ArrayLike = 0.0) -> np.ndarray:
        """Probability per scattered photon of leaving the cycling transition.

        Parameters
        ----------
        detuning : array_like, Hz
            Laser detuning from the cycling line (cyclic frequency; red < 0).
        saturation : array_like, optional
            Total saturation parameter s of the cooling light (default 0: low
            intensity). It power-broadens both Lorentzians.

        Returns
        -------
        numpy.ndarray
            Leak per photon, in [0, 1].

        Notes
        -----
        With ``Delta`` the frequency of the leaky upper level minus the cycling
        upper level, ``S`` the relative strength and ``b`` the branching ratio
        into the dark ground state, the off-resonant to resonant excitation
        ratio is the ratio of two Lorentzians of equal width,

        ``r = S (1 + s + (2 delta / Gamma)^2) / (1 + s + (2 (delta - Delta) / Gamma)^2)``,

        with ``delta = 2 pi detuning`` and ``Delta`` in rad/s. The fraction of
        scattering events that go through the leaky level is ``r / (1 + r)``, so

        ``p = floor + (1 - floor) b r / (1 + r)``.

        For Rb-87 near the usual MOT detunings (-1 to -2 Gamma) this gives 1e-4 to
        4e-4 per photon. ``S`` is the isotropic (polarization-averaged)
        hyperfine strength ratio: in a MOT the light polarization at the atom is
        mixed, so the stretched-state selection rule does not hold.

        References
        ----------
        H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping"
        (Springer, 1999), ch. 2 (scattering rate); D. A. Steck, "Rubidium 87 D
        Line Data" (S_FF' factors and hyperfine splittings).
        """
        d = 2.0 * math.pi * np.asarray(detuning, dtype=float)
        s = np.asarray(saturation, dtype=float)
        if math.isnan(self.upper_hyperfine_splitting):
            excited = np.zeros(np.broadcast(d, s).shape)
        else:
            split = 2.0 * math.pi * self.upper_hyperfine_splitting
            gamma = self.linewidth
            on = 1.0 + s + (2.0 * d / gamma) ** 2
            off = 1.0 + s + (2.0 * (d - split) / gamma) ** 2
            r = self.leak_relative_strength * on / off
            excited = self.leak_branching * r / (1.0 + r)
        floor = self.leak_probability_floor
        return floor + (1.0 - floor) * excited


def _saturation_intensity(wavelength: float, linewidth: float) -> float:
    omega = 2.0 * math.pi * _C / wavelength
    return _HBAR * omega**3 * linewidth / (12.0 * math.pi * _C**2)


def _alkali(
    *,
    name: str,
    label: str,
    element: str,
    wavelength: float,
    linewidth_hz: float,
    mass_u: float,
    nuclear_spin: Fraction,
    vapor: VaporPressure | None,
    splitting: float,
    branching: Fraction,
    strength: Fraction,
    sources: dict[str, str],
) -> Species:
    """An alkali D2 line: cycling F = I + 1/2 -> F' = I + 3/2, stretched states."""
    f_lower = nuclear_spin + Fraction(1, 2)
    f_upper = nuclear_spin + Fraction(3, 2)
    # Lande g_F with g_J(S1/2) = 2, g_J(P3/2) = 4/3, nuclear term neglected
    g_lower = 2 * (f_lower * (f_lower + 1) + Fraction(3, 4) - nuclear_spin * (nuclear_spin + 1))
    g_lower /= 2 * f_lower * (f_lower + 1)
    g_upper = Fraction(4, 3) * (
        f_upper * (f_upper + 1) + Fraction(15, 4) - nuclear_spin * (nuclear_spin + 1)
    )
    g_upper /= 2 * f_upper * (f_upper + 1)
    gamma = 2.0 * math.pi * linewidth_hz
    base = {
        "saturation_intensity": _FORMULA_ISAT,
        "g_lower": _LANDE,
        "g_upper": _LANDE,
        "leak_branching": _HF_FACTORS,
        "leak_relative_strength": _HF_FACTORS,
        "leak_probability_floor": "none for a closed alkali D2 cycling line (common practice)",
        "vapor": ALCOCK_SOURCE,
    }
    base.update(sources)
    return Species(
        name=name,
        label=label,
        element=element,
        wavelength=wavelength,
        linewidth=gamma,
        saturation_intensity=_saturation_intensity(wavelength, gamma),
        mass=mass_u * _U,
        g_lower=float(g_lower),
        m_lower=float(f_lower),
        g_upper=float(g_upper),
        m_upper=float(f_upper),
        vapor=vapor,
        upper_hyperfine_splitting=splitting,
        leak_branching=float(branching),
        leak_relative_strength=float(strength),
        leak_probability_floor=0.0,
        sources=base,
    )


def _celsius(t: float) -> float:
    return t + constants.zero_Celsius


_RB_VAPOR = VaporPressure(4.857, -4215.0, 4.312, -4040.0, _celsius(39.31))
_CS_VAPOR = VaporPressure(4.711, -3999.0, 4.165, -3830.0, _celsius(28.44))
# Liquid-K coefficients from memory (Alcock Table 2), checked against `arc` in the tests
_K_VAPOR = VaporPressure(4.961, -4646.0, 4.402, -4453.0, _celsius(63.5))
_NA_VAPOR = VaporPressure(5.298, -5603.0, 4.704, -5377.0, _celsius(97.79))
# Li coefficients from memory (Alcock Table 2, as quoted by Gehm), checked against `arc`
_LI_VAPOR = VaporPressure(5.667, -8310.0, 5.055, -8023.0, _celsius(180.54))

_HALF_32 = (Fraction(1, 2), Fraction(5, 14))  # I = 3/2: b(F'=2 -> F=1), S22/S23
_RB85 = (Fraction(4, 9), Fraction(35, 81))  # I = 5/2: b(F'=3 -> F=2), S33/S34
_CS133 = (Fraction(5, 12), Fraction(21, 44))  # I = 7/2: b(F'=4 -> F=3), S44/S45

_RECORDS: list[Species] = [
    _alkali(
        name="Rb87",
        label="Rb-87 D2, 5S1/2 F=2 -> 5P3/2 F'=3",
        element="Rb",
        wavelength=780.241209686e-9,
        linewidth_hz=6.0666e6,
        mass_u=86.909180531,
        nuclear_spin=Fraction(3, 2),
        vapor=_RB_VAPOR,
        splitting=-266.6500e6,
        branching=_HALF_32[0],
        strength=_HALF_32[1],
        sources={
            "wavelength": _STECK_RB87,
            "linewidth": _STECK_RB87 + " (tau = 26.2348 ns)",
            "mass": _NIST_MASS + "; " + _STECK_RB87,
            "upper_hyperfine_splitting": _STECK_RB87 + " (F'=3 - F'=2 = 266.650 MHz)",
        },
    ),
    _alkali(
        name="Rb85",
        label="Rb-85 D2, 5S1/2 F=3 -> 5P3/2 F'=4",
        element="Rb",
        wavelength=780.241368271e-9,
        linewidth_hz=6.0666e6,
        mass_u=84.911789738,
        nuclear_spin=Fraction(5, 2),
        vapor=_RB_VAPOR,
        splitting=-120.640e6,
        branching=_RB85[0],
        strength=_RB85[1],
        sources={
            "wavelength": _STECK_RB85,
            "linewidth": _STECK_RB85 + " (tau = 26.2348 ns; from memory)",
            "mass": _NIST_MASS + "; " + _STECK_RB85,
            "upper_hyperfine_splitting": _STECK_RB85 + " (F'=4 - F'=3 = 120.640 MHz)",
        },
    ),
    _alkali(
        name="Cs133",
        label="Cs-133 D2, 6S1/2 F=4 -> 6P3/2 F'=5",
        element="Cs",
        wavelength=852.34727582e-9,
        linewidth_hz=5.2227e6,
        mass_u=132.905451961,
        nuclear_spin=Fraction(7, 2),
        vapor=_CS_VAPOR,
        splitting=-251.0916e6,
        branching=_CS133[0],
        strength=_CS133[1],
        sources={
            "wavelength": _STECK_CS,
            "linewidth": _STECK_CS + " (tau = 30.473 ns)",
            "mass": _NIST_MASS + "; " + _STECK_CS,
            "upper_hyperfine_splitting": _STECK_CS + " (F'=5 - F'=4 = 251.0916 MHz)",
        },
    ),
    _alkali(
        name="K39",
        label="K-39 D2, 4S1/2 F=2 -> 4P3/2 F'=3",
        element="K",
        wavelength=766.700921822e-9,
        linewidth_hz=6.035e6,
        mass_u=38.963706486,
        nuclear_spin=Fraction(3, 2),
        vapor=_K_VAPOR,
        splitting=-21.1e6,
        branching=_HALF_32[0],
        strength=_HALF_32[1],
        sources={
            "wavelength": _TIECKE_K,
            "linewidth": _TIECKE_K + " (tau = 26.37 ns)",
            "mass": _NIST_MASS + "; " + _TIECKE_K,
            "upper_hyperfine_splitting": _TIECKE_K
            + " (F'=3 at +14.4 MHz, F'=2 at -6.7 MHz; from memory)",
        },
    ),
    _alkali(
        name="Na23",
        label="Na-23 D2, 3S1/2 F=2 -> 3P3/2 F'=3",
        element="Na",
        wavelength=589.1583264e-9,
        linewidth_hz=9.7946e6,
        mass_u=22.989769282,
        nuclear_spin=Fraction(3, 2),
        vapor=_NA_VAPOR,
        splitting=-58.326e6,
        branching=_HALF_32[0],
        strength=_HALF_32[1],
        sources={
            "wavelength": _STECK_NA + " (from memory)",
            "linewidth": _STECK_NA + " (tau = 16.2492 ns; from memory)",
            "mass": _NIST_MASS,
            "upper_hyperfine_splitting": _STECK_NA + " (F'=3 - F'=2 = 58.326 MHz; from memory)",
        },
    ),
    _alkali(
        name="Li7",
        label="Li-7 D2, 2S1/2 F=2 -> 2P3/2 F'=3",
        element="Li",
        wavelength=_C / 446.810184e12,
        linewidth_hz=5.87e6,
        mass_u=7.016003437,
        nuclear_spin=Fraction(3, 2),
        vapor=_LI_VAPOR,
        splitting=+9.39e6,
        branching=_HALF_32[0],
        strength=_HALF_32[1],
        sources={
            "wavelength": "D2 at 446.810184 THz, about 670.961 nm (from memory)",
            "linewidth": _GEHM_LI,
            "mass": _NIST_MASS,
            "upper_hyperfine_splitting": (
                "2P3/2 A = -3.055 MHz, B = -0.221 MHz (inverted; F'=2 above F'=3 by 3A+B); "
                "from memory (Arimondo, Inguscio & Violino, Rev. Mod. Phys. 49, 31 (1977))"
            ),
        },
    ),
]

_SR_TAU_1P1 = 5.216e-9
# Alcock, Itkin & Horrigan 1984, Table 1 form log10(P/atm) = A + B/T + C log10 T, solid Sr
# (298 K to the melting point, 1050 K); the same coefficients as the arc library quotes. The
# solid branch is continued above the melting point (ovens stay below it).
_SR_VAPOR = VaporPressure(
    9.226,
    -8572.0,
    9.226,
    -8572.0,
    1050.15,
    ALCOCK_SOURCE + " (Table 1, solid Sr)",
    -1.1926,
    -1.1926,
)
#: 1P1 -> 1D2 decay rate, 1/s: 5.3(5)e3 (Okamoto, Aoki & Torii, arXiv:2510.22184 (2025), direct
#: measurement, as read in the abstract), consistent with Hunter et al., PRL 56, 823 (1986).
SR_1D2_DECAY_RATE = 5.3e3
_SR_MASS_U = 87.9056125
_PULJIC = "Puljic et al., arXiv:2501.07395 (2025): 1P1 lifetime 5.216 ns"
_RECORDS.append(
    Species(
        name="Sr88",
        label="Sr-88 461 nm, 5s2 1S0 -> 5s5p 1P1",
        element="Sr",
        wavelength=460.862e-9,
        linewidth=1.0 / _SR_TAU_1P1,
        saturation_intensity=_saturation_intensity(460.862e-9, 1.0 / _SR_TAU_1P1),
        mass=_SR_MASS_U * _U,
        g_lower=0.0,
        m_lower=0.0,
        g_upper=1.0,
        m_upper=1.0,
        vapor=_SR_VAPOR,
        upper_hyperfine_splitting=math.nan,
        leak_branching=0.0,
        leak_relative_strength=0.0,
        leak_probability_floor=SR_1D2_DECAY_RATE * _SR_TAU_1P1,
        sources={
            "wavelength": "460.862 nm vacuum (from memory), checked against arc",
            "linewidth": _PULJIC,
            "saturation_intensity": _FORMULA_ISAT,
            "mass": _NIST_MASS + " (from memory)",
            "g_upper": "1P1 g_J = 1 (LS coupling, common practice)",
            "leak_probability_floor": (
                "1P1 -> 1D2 decay rate 5.3(5)e3 /s times the 1P1 lifetime: 2.8e-5 per photon "
                "(Okamoto, Aoki & Torii, arXiv:2510.22184 (2025))"
            ),
            "vapor": ALCOCK_SOURCE + " (Table 1, solid Sr)",
        },
    )
)
_SR_GAMMA_689 = 2.0 * math.pi * 7.5e3
_RECORDS.append(
    Species(
        name="Sr88-689",
        label="Sr-88 689 nm, 5s2 1S0 -> 5s5p 3P1 (intercombination line)",
        element="Sr",
        wavelength=689.449e-9,
        linewidth=_SR_GAMMA_689,
        saturation_intensity=_saturation_intensity(689.449e-9, _SR_GAMMA_689),
        mass=_SR_MASS_U * _U,
        g_lower=0.0,
        m_lower=0.0,
        g_upper=1.5,
        m_upper=1.0,
        vapor=_SR_VAPOR,
        upper_hyperfine_splitting=math.nan,
        leak_branching=0.0,
        leak_relative_strength=0.0,
        leak_probability_floor=0.0,
        sources={
            "wavelength": "689.449 nm vacuum (from memory), checked against arc",
            "linewidth": "Gamma/2pi = 7.5 kHz, 3P1 lifetime ~21 us (from memory; also 7.4 kHz)",
            "saturation_intensity": _FORMULA_ISAT,
            "mass": _NIST_MASS + " (from memory)",
            "g_upper": "3P1 g_J = 3/2 (LS coupling, common practice)",
            "leak_probability_floor": "3P1 decays only to 1S0 (closed line)",
            "vapor": ALCOCK_SOURCE + " (Table 1, solid Sr)",
        },
    )
)

SPECIES: Mapping[str, Species] = MappingProxyType({s.name: s for s in _RECORDS})
"""Every species trapbudget carries, by name."""
