"""The narrow-line (689 nm) MOT of Sr-88, loaded from a blue MOT, with gravity.

``NarrowLineMOT`` follows the model protocol. On a line as narrow as Sr-88's 7.5 kHz
intercombination line the largest light acceleration is only about 16 g and the photon
recoil shift is a large part of the linewidth, so the vapor-cell treatment fails; here:

1. capture (frequency-modulated stage): the comb of depth ``modulation_depth`` and line
   spacing ``modulation_frequency`` addresses the blue MOT's atoms up to the Doppler speed
   ``lambda x depth``, each line saturating with its share of the power; atoms are stopped
   within one waist if slower than ``sqrt(2 a_line w)``; the transfer is the blue cloud's
   Maxwell-Boltzmann fraction below the smaller of the two (a smooth minimum);
2. single-frequency stage: the vertical pair's force (each beam saturating alone, power
   broadened, Zeeman-shifted by the axial gradient along gravity) balances gravity at the
   sag ``z``, found by bisection; the trap holds the atoms only where ``a_max s/(1+s) > g``
   and the depth of the well against gravity exceeds k_B T (``1 - exp(-U / k_B T)``);
3. temperature: damping and heating of the vertical pair at the sag (spontaneous
   emission of all six beams, a third along the vertical), ``k_B T = hbar^2 k^2 R_heat /
   (2 beta)``, combined smoothly with the recoil-limited floor ``T_r / 2``. This gives the
   regimes of Loftus et al. (2004): near the field zero (|delta| below the power-broadened
   width) the power-broadened Doppler law with its minimum ``hbar Gamma sqrt(1 + s) / 2``;
   far detuned, the atoms sag to where one beam balances gravity and T no longer depends
   on the detuning, rising as sqrt(s); at s ~ 1 the recoil floor (Katori et al. 1999).
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import constants

from trapbudget.models import light, sources, vapor
from trapbudget.models.catalog import species as lookup_species
from trapbudget.models.protocol import (
    InputSpec,
    ModelError,
    OutputSpec,
    evaluate_flat_in_chunks,
)
from trapbudget.models.species import Species
from trapbudget.models.trap_specs import BACKGROUND_LOSS_INPUT
from trapbudget.models.validity import Validity

__all__ = ["NarrowLineMOT", "sag_and_rates", "vertical_temperature"]

_HBAR, _KB, _G = constants.hbar, constants.k, constants.g
_CHUNK = 1 << 15
_BISECTIONS = 48

ASSUMPTIONS: tuple[str, ...] = (
    "Loaded from a blue MOT (its atom number and temperature are inputs): a frequency-"
    "modulated capture stage takes the blue cloud's atoms slower than the smaller of the comb's "
    "Doppler reach and the speed its per-line deceleration stops within one waist.",
    "Each beam saturates on its own (power broadening Gamma sqrt(1 + s)); the vertical pair, "
    "Zeeman-shifted by the axial gradient along gravity, holds the cloud at the sag where its "
    "force equals m g; the horizontal beams only add spontaneous-emission heating.",
    "Temperature: damping and heating of the vertical pair at the sag, spontaneous emission "
    "isotropic, combined smoothly with the recoil floor T_r / 2; sub-Doppler cooling is absent "
    "(J = 0 ground state).",
    "The cloud is Gaussian: vertical size from the force gradient at the sag, horizontal size "
    "from the radial spring and, once sagged, from the curvature of the resonance shell.",
    "Losses after transfer: background gas only (lifetime output); the atom number is the "
    "number just after transfer.",
)


def _rate(s, delta, gamma):
    """Scattering rate of one beam saturating alone (angular detuning delta), 1/s."""
    d = 1.0 + s + 4.0 * delta * delta / (gamma * gamma)
    return 0.5 * gamma * s / d, d


def sag_and_rates(
    saturation: ArrayLike,
    detuning: ArrayLike,
    gradient: ArrayLike,
    sp: Species,
) -> tuple[NDArray, NDArray, NDArray, NDArray]:
    """Sag of the cloud below the field zero and the vertical beams' state there.

    Parameters
    ----------
    saturation : array_like
        s of each beam at the cloud.
    detuning : array_like, Hz
        Red detuning (< 0) of the single-frequency stage.
    gradient : array_like, T/m
        Axial (vertical) gradient A.
    sp : Species
        The narrow line.

    Returns
    -------
    sag : ndarray, m
        Depth z of the balance ``hbar k [R(delta + zeta z) - R(delta - zeta z)] = m g``,
        ``zeta = mu' A / hbar``; inf where the light cannot hold (``GRAVITY_WINS``).
    up, down : ndarray, rad/s
        Detunings of the upward and downward beams at the sag.
    excess : ndarray, N
        Largest upward force minus m g on the way to resonance (< 0: no hold).

    References
    ----------
    T. H. Loftus, T. Ido, M. M. Boyd, A. D. Ludlow and J. Ye, Phys. Rev. A 70, 063413
    (2004) (the gravitational sag of a narrow-line MOT).
    """
    s = np.asarray(saturation, dtype=float)
    delta = 2.0 * math.pi * np.minimum(np.asarray(detuning, dtype=float), 0.0)
    zeta = abs(sp.zeeman_coefficient) * np.abs(np.asarray(gradient, dtype=float)) / _HBAR
    gamma, hk, weight = sp.linewidth, _HBAR * sp.wavenumber, sp.mass * _G
    s, delta, zeta = np.broadcast_arrays(s, delta, zeta)

    def excess_force(z):
        return hk * (_rate(s, delta + zeta * z, gamma)[0] - _rate(s, delta - zeta * z, gamma)[0])

    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        z_res = np.where(zeta > 0, -delta / zeta, 0.0)
        peak = excess_force(z_res) - weight
        low, high = np.zeros_like(z_res), z_res.copy()
        for _ in range(_BISECTIONS):
            mid = 0.5 * (low + high)
            below = excess_force(mid) < weight
            low, high = np.where(below, mid, low), np.where(below, high, mid)
        sag = np.where(peak >= 0, 0.5 * (low + high), np.inf)
        finite = np.where(np.isfinite(sag), sag, z_res)
    return sag, delta + zeta * finite, delta - zeta * finite, peak


def vertical_temperature(
    saturation: ArrayLike, up: ArrayLike, down: ArrayLike, detuning: ArrayLike, sp: Species
) -> NDArray:
    """Temperature set by the vertical pair at the sag, with the recoil floor, K.

    Parameters
    ----------
    saturation : array_like
        s of each beam.
    up, down : array_like, rad/s
        Detunings of the upward and downward beams at the cloud.
    detuning : array_like, Hz
        Laser detuning (the four horizontal beams see it unshifted).
    sp : Species

    Returns
    -------
    ndarray, K
        ``T = (T_s^4 + (T_r / 2)^4)^(1/4)``, ``k_B T_s = hbar^2 k^2 (R_u + R_d + R_heat) /
        (2 beta)``, ``R_heat = (R_u + R_d + 4 R_h) / 3``, ``beta = sum_i 8 hbar k^2 R_i
        |delta_i| / (Gamma^2 D_i)``.

    Notes
    -----
    At the field zero (all detunings delta) this is the three-dimensional Doppler law
    ``hbar Gamma (1 + s + 4 delta^2 / Gamma^2) / (8 |delta|)`` with power broadening,
    minimum ``hbar Gamma sqrt(1 + s) / 2`` (Loftus et al. 2004, their regime II). Far
    detuned, the upward beam alone balances gravity at ``R_u = m g / hbar k``, so T
    depends on s and not on delta (their regime I), growing as sqrt(s). The floor
    ``T_r / 2`` is the recoil limit of Doppler cooling on a narrow line (Castin, Wallis &
    Dalibard 1989, from memory); Katori et al. 1999 reached temperatures near it.

    References
    ----------
    T. H. Loftus et al., Phys. Rev. Lett. 93, 073003 (2004) and Phys. Rev. A 70, 063413
    (2004); H. Katori, T. Ido, Y. Isoya and M. Kuwata-Gonokami, Phys. Rev. Lett. 82, 1116
    (1999); Y. Castin, H. Wallis and J. Dalibard, J. Opt. Soc. Am. B 6, 2046 (1989).
    """
    s = np.asarray(saturation, dtype=float)
    gamma, k = sp.linewidth, sp.wavenumber
    r_u, d_u = _rate(s, np.asarray(up, float), gamma)
    r_d, d_d = _rate(s, np.asarray(down, float), gamma)
    r_h, _ = _rate(s, 2.0 * math.pi * np.asarray(detuning, float), gamma)
    beta = 8.0 * _HBAR * k * k / gamma**2 * (r_u * np.abs(up) / d_u + r_d * np.abs(down) / d_d)
    heat = r_u + r_d + (r_u + r_d + 4.0 * r_h) / 3.0
    with np.errstate(divide="ignore", invalid="ignore"):
        t_semi = np.where(beta > 0, _HBAR**2 * k * k * heat / (2.0 * beta * _KB), np.inf)
    floor = 0.5 * sp.recoil_temperature
    return (t_semi**4 + floor**4) ** 0.25


def _inputs(sp: Species) -> dict[str, InputSpec]:
    specs = [
        InputSpec("blue_atom_number", "", 5e7, 0.0, 1e11, "atoms in the blue MOT at transfer"),
        InputSpec("blue_temperature", "K", 2e-3, 1e-6, 0.1, "temperature of the blue MOT"),
        InputSpec("beam_power", "W", 1.2e-5, 0.0, 0.1, "689 nm power per beam, single-frequency"),
        InputSpec("capture_power", "W", 2e-3, 0.0, 0.1, "689 nm power per beam, modulated stage"),
        InputSpec("beam_waist", "m", 5e-3, 2e-4, 0.05, "1/e^2 radius of each 689 nm beam"),
        InputSpec("detuning", "Hz", -2e5, -2e7, 1e6, "single-frequency detuning (red < 0)"),
        InputSpec("modulation_depth", "Hz", 2e6, 0.0, 2e7, "span of the frequency comb"),
        InputSpec("modulation_frequency", "Hz", 3e4, 1e3, 1e6, "spacing of the comb lines"),
        InputSpec("gradient", "T/m", 0.03, 0.0, 0.5, "axial (vertical) quadrupole gradient"),
        InputSpec("background_pressure", "Pa", 1e-8, 0.0, 1e-2, "background gas pressure"),
        InputSpec(
            "transfer_prefactor", "", 1.0, 0.0, 1.0, "overlap and timing losses", constant=True
        ),
        BACKGROUND_LOSS_INPUT,
        InputSpec(
            "detector_solid_angle", "sr", 0.02, 0.0, 4 * math.pi, "collection", constant=True
        ),
        InputSpec("detector_efficiency", "", 0.5, 0.0, 1.0, "optics x QE", constant=True),
    ]
    return {s.name: s for s in specs}


_OUTPUTS = [
    OutputSpec("atom_number", "", "atoms in the narrow-line MOT after transfer"),
    OutputSpec("transfer_efficiency", "", "fraction of the blue MOT transferred"),
    OutputSpec("temperature", "K", "temperature in the single-frequency stage"),
    OutputSpec("capture_velocity", "m/s", "capture velocity of the modulated stage"),
    OutputSpec("sag", "m", "depth of the cloud below the field zero (gravity)"),
    OutputSpec("light_acceleration", "m/s**2", "largest light acceleration a_max s/(1+s)"),
    OutputSpec("cloud_radius", "m", "rms radius (geometric mean of the axes)"),
    OutputSpec("peak_density", "1/m**3", "peak density of the cloud"),
    OutputSpec("scattering_rate", "1/s", "photons scattered per second per atom"),
    OutputSpec("fluorescence", "1/s", "photons per second reaching the detector"),
    OutputSpec("loss_rate", "1/s", "per-atom loss rate after transfer"),
    OutputSpec("lifetime", "s", "1/e lifetime after transfer"),
    OutputSpec("saturation_parameter", "", "I/I_sat of one beam, single-frequency stage"),
    OutputSpec("validity", "", "bit mask of Validity flags (0 = valid)"),
]


class NarrowLineMOT:
    """A narrow-line MOT (Sr-88 689 nm) loaded from a blue MOT, with gravity.

    Parameters
    ----------
    species : str or Species
        Default ``"Sr88-689"``; a line whose largest light acceleration is a few tens of g.

    Notes
    -----
    See the module docstring and :attr:`assumptions`. Valid inputs give finite outputs;
    ``GRAVITY_WINS`` (no hold) gives zero atoms; ``WEAK_LIGHT_FORCE`` (under 10 g) is
    advisory here, since gravity is part of the model.

    References
    ----------
    T. H. Loftus et al., Phys. Rev. Lett. 93, 073003 (2004); Phys. Rev. A 70, 063413 (2004);
    H. Katori et al., Phys. Rev. Lett. 82, 1116 (1999).
    """

    validity_flags = Validity
    advisory_flags = Validity.EXTRAPOLATING | Validity.WEAK_LIGHT_FORCE
    assumptions: tuple[str, ...] = ASSUMPTIONS

    def __init__(self, species: str | Species = "Sr88-689") -> None:
        self.species = lookup_species(species)
        if self.species.linewidth > 2 * math.pi * 1e6:
            raise ModelError(
                f"NarrowLineMOT: species {self.species.name!r} is a broad line; use "
                "VaporCellMOT or BeamLoadedMOT (e.g. 'Sr88-689' for the narrow line)"
            )
        self.inputs: Mapping[str, InputSpec] = _inputs(self.species)
        self.outputs: Mapping[str, OutputSpec] = {o.name: o for o in _OUTPUTS}

    def __repr__(self) -> str:
        return f"NarrowLineMOT({self.species.name!r})"

    def evaluate(self, values: Mapping[str, ArrayLike]) -> dict[str, NDArray]:
        """Evaluate every output for arrays of inputs (broadcast, any shape; SI)."""
        return evaluate_flat_in_chunks(self, values, self._evaluate_flat, chunk=_CHUNK)

    def _evaluate_flat(self, x: Mapping[str, NDArray]) -> dict[str, NDArray]:
        sp = self.species
        flags = np.zeros(x["beam_power"].shape, dtype=np.int64)
        for name, spec in self.inputs.items():
            flags[~((x[name] >= spec.low) & (x[name] <= spec.high))] |= Validity.OUTSIDE_RANGE
        lam, a_max, w = sp.wavelength, sp.max_acceleration, x["beam_waist"]
        s = light.peak_intensity(x["beam_power"], w) / sp.saturation_intensity
        s_cap = light.peak_intensity(x["capture_power"], w) / sp.saturation_intensity

        # 1. modulated capture of the blue cloud
        lines = np.maximum(x["modulation_depth"] / x["modulation_frequency"], 1.0)
        s_line = s_cap / lines
        a_line = a_max * s_line / (1.0 + s_line)
        reach = lam * (x["modulation_depth"] + sp.linewidth_hz * np.sqrt(1.0 + s_line))
        v_cap = sources.soft_minimum(reach, np.sqrt(2.0 * np.maximum(a_line - _G, 0.0) * w))
        vp_blue = vapor.most_probable_speed(sp.mass, x["blue_temperature"])
        transfer = x["transfer_prefactor"] * vapor.fraction_slower(v_cap, vp_blue)

        # 2. single-frequency stage: the sag, the hold against gravity
        sag, up, down, excess = sag_and_rates(s, x["detuning"], x["gradient"], sp)
        temp = vertical_temperature(s, up, down, x["detuning"], sp)
        zeta = abs(sp.zeeman_coefficient) * x["gradient"] / _HBAR
        hk, gamma = _HBAR * sp.wavenumber, sp.linewidth
        r_u, d_u = _rate(s, up, gamma)
        r_d, d_d = _rate(s, down, gamma)
        stiffness = (
            hk * zeta * 8.0 / gamma**2 * (r_u * np.abs(up) / d_u + r_d * np.abs(down) / d_d)
        )
        # depth of the well: the excess force over the distance left to resonance
        depth = (
            np.maximum(excess, 0.0) * 0.5 * np.maximum(-up / np.where(zeta > 0, zeta, 1.0), 0.0)
        )
        held = -np.expm1(-depth / (_KB * temp))
        cools = x["detuning"] < 0
        holds = np.isfinite(sag) & cools & (zeta > 0) & (s > 0)
        atoms = np.where(holds, x["blue_atom_number"] * transfer * held, 0.0)

        # 3. cloud, losses, light
        sigma_z = np.sqrt(_KB * temp / stiffness)
        finite_sag = np.where(np.isfinite(sag), sag, 0.0)
        sigma_x = np.sqrt(
            2.0 * _KB * temp / stiffness + 4.0 * _KB * temp * finite_sag / (sp.mass * _G)
        )
        volume = (2.0 * math.pi) ** 1.5 * sigma_x**2 * sigma_z
        rate = r_u + r_d + 4.0 * _rate(s, 2.0 * math.pi * x["detuning"], gamma)[0]
        loss = x["background_loss_coefficient"] * x["background_pressure"]
        strongest = a_max * s / (1.0 + s)

        flags[~(s > 0)] |= Validity.NO_POWER
        flags[~cools] |= Validity.BLUE_DETUNING
        flags[~(zeta > 0)] |= Validity.NO_GRADIENT
        flags[~(transfer > 0) & (s > 0)] |= Validity.NO_CAPTURE
        flags[~np.isfinite(sag) & cools & (zeta > 0) & (s > 0)] |= Validity.GRAVITY_WINS
        flags[(strongest < 10.0 * _G) | (a_line < 10.0 * _G)] |= Validity.WEAK_LIGHT_FORCE
        radius = np.where(holds, np.cbrt(sigma_x**2 * sigma_z), 0.0)
        return {
            "atom_number": atoms,
            "transfer_efficiency": np.where(holds, transfer * held, 0.0),
            "temperature": np.where(cools, temp, np.inf),
            "capture_velocity": v_cap,
            "sag": np.where(holds, sag, np.inf),
            "light_acceleration": strongest,
            "cloud_radius": radius,
            "peak_density": np.where(holds, atoms / volume, 0.0),
            "scattering_rate": rate,
            "fluorescence": atoms
            * rate
            * x["detector_solid_angle"]
            / (4 * math.pi)
            * x["detector_efficiency"],
            "loss_rate": loss,
            "lifetime": np.where(loss > 0, 1.0 / loss, np.inf),
            "saturation_parameter": s,
            "validity": flags,
        }
