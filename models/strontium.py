"""The strontium blue MOT's leak: 1P1 -> 1D2 -> 3P2 (shelved) and -> 3D1 -> 3P0, and its repumping.

Pure, broadcasting NumPy functions in SI. A Sr-88 atom cycling on the 461 nm line
leaves it with probability ``p_D = A(1P1 -> 1D2) tau(1P1)`` per photon (2.8e-5); from
1D2 a fraction ``b_2`` decays to the metastable 3P2 (lifetime 17 min: shelved, lost to
the MOT unless repumped) and the rest returns through 3P1 within tens of microseconds.
A second, weaker path 1P1 -> 5s4d 3D1 -> 3P0 shelves atoms in 3P0, which no single
3P2 repumper reaches; it limits any single-repumper scheme to a lifetime gain of
26.9(2) (Okamoto, Aoki & Torii 2024).

Repump schemes (option ``repump``):

* ``"none"``: shelved atoms leave the MOT; the trap still holds atoms, its lifetime set by
  the leak, ``1 / (R_sc (p_2 + p_0))``.
* ``"707+679"``: 3P2 -> 3S1 (707 nm) and 3P0 -> 3S1 (679 nm); both return.
* ``"481"``: one laser on 3P2 -> 5p2 3P2 (481 nm); 3P0 stays dark.

A shelved atom is lost if it leaves the MOT region (rate ``escape``) before a repumper
returns it (rate ``rho``): the lost fraction is ``escape / (escape + rho)``.
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import constants

from trapbudget.models.protocol import OutputSpec
from trapbudget.models.species import SPECIES

__all__ = [
    "METASTABLE_LIFETIME",
    "REPUMP_SCHEMES",
    "RESERVOIR_OUTPUT",
    "SHELVED_ESCAPE_RATE",
    "SINGLE_REPUMP_GAIN",
    "TO_3P2",
    "RepumpScheme",
    "leak_paths",
    "reservoir_atoms",
    "shelving",
]

RepumpScheme = Literal["none", "707+679", "481"]
REPUMP_SCHEMES: tuple[str, ...] = ("none", "707+679", "481")

#: Branching of 1D2 to 3P2: 0.177(4), Okamoto, Aoki & Torii, arXiv:2510.22184 (2025) (direct
#: measurement, as read in the abstract; the older theory gave about 1/3).
TO_3P2 = 0.177
#: Largest lifetime gain of any single 3P2 repumper, 26.9(2): Okamoto, Aoki & Torii,
#: arXiv:2406.18942 (2024). It fixes the 3P0 path relative to the 3P2 one.
SINGLE_REPUMP_GAIN = 26.9
#: Radiative lifetime of 3P2, s: about 17 min (as quoted by arXiv:2007.10465; from memory
#: its source, Yasuda & Katori, PRL 92, 153004 (2004)).
METASTABLE_LIFETIME = 17 * 60.0
#: Lande g_J of 3P2 (LS coupling, common practice).
_G_3P2 = 1.5
RESERVOIR_OUTPUT = OutputSpec(
    "reservoir_atoms", "", "atoms shelved in 3P2 and held by the quadrupole field (repump none)"
)
#: Rate at which an atom shelved in 3P2 or 3P0 leaves the MOT region, 1/s (a calibratable
#: constant): a few-mK atom crossing a millimetre-sized cloud (common practice).
SHELVED_ESCAPE_RATE = 1.0e3


def leak_paths() -> tuple[float, float]:
    """Probabilities per 461 nm photon of shelving in 3P2 and in 3P0.

    Returns
    -------
    p2, p0 : float
        ``p2 = A(1P1 -> 1D2) tau(1P1) b_2`` (4.9e-6) and ``p0 = p2 / (26.9 - 1)`` (1.9e-7,
        1 in 5.3e6; Okamoto et al. estimate 1 in 3.9e6 from a 3D1 rate of 83(32) /s).
    """
    p_d = SPECIES["Sr88"].leak_probability_floor
    p2 = p_d * TO_3P2
    return p2, p2 / (SINGLE_REPUMP_GAIN - 1.0)


def shelving(
    scattering_rate: ArrayLike,
    scheme: RepumpScheme,
    *,
    rate_3p2: ArrayLike = 0.0,
    rate_3p0: ArrayLike = 0.0,
    escape_rate: ArrayLike = SHELVED_ESCAPE_RATE,
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Bright fraction and loss rate of a Sr-88 blue MOT from the 1D2 leak.

    Parameters
    ----------
    scattering_rate : array_like, 1/s
        461 nm photons per second per bright atom.
    scheme : {"none", "707+679", "481"}
    rate_3p2, rate_3p0 : array_like, 1/s
        Repump rates out of 3P2 and 3P0 (used as the scheme allows).
    escape_rate : array_like, 1/s
        Rate at which a shelved atom leaves the MOT region.

    Returns
    -------
    bright_fraction : ndarray
        ``1 / (1 + sum_i R_i / (escape + rho_i))``: the time share spent cycling.
    loss_rate : ndarray, 1/s
        ``sum_i R_i escape / (escape + rho_i)``, ``R_i = R_sc p_i``.

    References
    ----------
    N. Okamoto, T. Aoki and Y. Torii, arXiv:2406.18942 (2024) and arXiv:2510.22184 (2025);
    X. Xu et al., J. Opt. Soc. Am. B 20, 968 (2003) (the leak and the 707/679 nm repumpers).
    """
    if scheme not in REPUMP_SCHEMES:
        raise ValueError(f"repump={scheme!r} is not valid; use one of {REPUMP_SCHEMES}")
    p2, p0 = leak_paths()
    r = np.maximum(np.asarray(scattering_rate, dtype=float), 0.0)
    esc = np.asarray(escape_rate, dtype=float)
    zero = np.zeros_like(r)
    rho2 = zero if scheme == "none" else np.maximum(np.asarray(rate_3p2, dtype=float), 0.0)
    rho0 = np.maximum(np.asarray(rate_3p0, dtype=float), 0.0) if scheme == "707+679" else zero
    with np.errstate(divide="ignore", invalid="ignore"):
        dark = r * p2 / (esc + rho2) + r * p0 / (esc + rho0)
        loss = r * p2 * esc / (esc + rho2) + r * p0 * esc / (esc + rho0)
    bright = 1.0 / (1.0 + np.where(np.isfinite(dark), dark, 0.0))
    return bright, np.nan_to_num(loss, nan=0.0)


def reservoir_atoms(
    atom_number: ArrayLike,
    bright_scattering_rate: ArrayLike,
    gradient: ArrayLike,
    loss_rate: ArrayLike,
    duration: ArrayLike,
) -> NDArray[np.float64]:
    """Atoms accumulated in 3P2 and held by the MOT's quadrupole field (no repumpers).

    Parameters
    ----------
    atom_number : array_like
        Atoms in the blue MOT.
    bright_scattering_rate : array_like, 1/s
        461 nm photons per atom (scattering rate times bright fraction).
    gradient : array_like, T/m
        Axial (vertical) gradient of the quadrupole.
    loss_rate : array_like, 1/s
        One-body loss of a held atom other than the leak (background, vapor).
    duration : array_like, s
        How long the MOT has run (the reservoir fills for that time before a repump pulse).

    Returns
    -------
    ndarray
        ``N R p_2 f (1 - exp(-gamma' t)) / gamma'``, ``gamma' = gamma + 1 / tau_3P2``:
        shelving into 3P2 at ``R p_2`` per atom, the held share ``f`` of the five m_J
        states (equally populated, an assumption),
        ``m_J = 1, 2`` held where ``mu_B g_J m_J A`` exceeds ``m g`` (a smoothstep from 1 to
        2 times m g), lost at the background rate and by the 17 min radiative decay, over the
        time t (collisions among the held atoms, which limit a long accumulation, are not
        modelled). A later repump pulse returns them to the ground state.

    References
    ----------
    S. B. Nagel et al., Phys. Rev. A 67, 011401 (2003) (the magnetically trapped 3P2
    reservoir of a Sr blue MOT; from memory); arXiv:2007.10465 (3P2 lifetime).
    """
    sp = SPECIES["Sr88"]
    mu_b = constants.physical_constants["Bohr magneton"][0]
    force = mu_b * _G_3P2 * np.abs(np.asarray(gradient, dtype=float)) / (sp.mass * constants.g)
    held = np.zeros_like(force)
    for m_j in (1, 2):
        x = np.clip(m_j * force - 1.0, 0.0, 1.0)
        held = held + 0.2 * x * x * (3.0 - 2.0 * x)
    p2, _ = leak_paths()
    loss = np.asarray(loss_rate, dtype=float) + 1.0 / METASTABLE_LIFETIME
    rate = np.asarray(atom_number, dtype=float) * np.asarray(bright_scattering_rate, float) * p2
    filled = -np.expm1(-loss * np.asarray(duration, dtype=float)) / loss
    return rate * held * filled if not math.isnan(p2) else np.zeros_like(rate)
