"""The composed vapor-cell MOT model: inputs, outputs and vectorized evaluation.

``VaporCellMOT`` follows the model protocol (``inputs``, ``outputs``,
``evaluate``). It wires the kernels of the sibling modules together:

1. vapor density and its Beer-Lambert attenuation of the beams (``vapor``, ``light``);
2. light of the six beams at the trap centre (the field zero, moved by the stray field
   and the pointing offset) -> one shared saturation for the scattering rate, the
   bright fraction with the repumper (``mot``), the temperature and the force;
3. loading over the real geometry: every direction and impact parameter (``capture``);
4. sub-Doppler (default) or Doppler temperature, damping and spring constants per
   axis (``cooling``) -> temperature-limited cloud, and the fraction of it the light
   holds;
5. density limit from the spring constant over the intensity, one-body and
   light-assisted two-body loss with the mean density of the cloud's own profile
   -> steady state and loading time (``cloud``);
6. fluorescence on a detector.

Outside its region of validity the model returns the honest limit and sets
a bit of the ``validity`` output (:class:`Validity`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import constants, special

from trapbudget.models import capture, cloud, cooling, field, light, mot, strontium, vapor
from trapbudget.models.catalog import species as lookup_species
from trapbudget.models.protocol import (
    InputSpec,
    ModelError,
    OutputSpec,
    evaluate_flat_in_chunks,
)
from trapbudget.models.species import Species
from trapbudget.models.trap_specs import OUTPUTS as _OUTPUTS
from trapbudget.models.trap_specs import inputs as _inputs
from trapbudget.models.validity import NO_TRAP as _NO_TRAP
from trapbudget.models.validity import Validity
from trapbudget.models.vapor_pressure import ALCOCK_LOWEST

__all__ = ["Validity", "VaporCellMOT"]

_CHUNK = 1 << 14


#: Reference trap of the density limit: s0 = 2 per beam, delta = -2 Gamma, 10 G/cm, balanced.
_REFERENCE_TRAP = (2.0, -2.0, 0.1)

ASSUMPTIONS: tuple[str, ...] = (
    "Three retro-reflected Gaussian beam pairs of equal waist cross at right angles; the "
    "returning beams are weaker by the imbalance and the optically thick vapor attenuates "
    "both (Beer-Lambert with the Doppler-broadened cross-section at the MOT detuning).",
    "The atom is a two-level system on the cycling line in the rate-equation form: each beam "
    "scatters (Gamma/2) s_i L_i / (1 + sum_j s_j L_j) with its own Doppler and Zeeman "
    "detuning, so the excited population never exceeds 1/2; force, scattering rate, "
    "temperature and bright fraction share this one saturation.",
    "The loading rate counts vapor atoms from every direction and impact parameter that are "
    "slowed below Gamma/(4k) inside one waist of the field zero, through the light counted "
    "within three waists of the beam crossing: tabulated once for the aligned trap along "
    "straight lines, carried to curved 3-D paths by a coarse factor from 3-D trajectories "
    "(about 5 % RMS near ordinary operating points, worse where the capture collapses), and "
    "corrected smoothly for imbalance, clipping and a displaced trap centre.",
    "The loading-rate prefactor is a calibratable constant, so absolute atom numbers are only "
    "as good as its calibration; the shapes against power, detuning, gradient and beam size "
    "come from the physics.",
    "Temperature follows the sub-Doppler law T = T_min + C hbar Omega^2/(k_B |delta|) with a "
    "calibratable C, capped by Doppler theory (or Doppler theory alone on request).",
    "The cloud is a thermal Gaussian up to the density limit, which scales as the spring "
    "constant over the intensity (reradiation, Walker, Sesko & Wieman 1990); above it a "
    "flat-topped core grows, and light-assisted two-body loss uses the mean density of that "
    "profile.",
    "Losses: hot alkali and background-gas collisions and light-assisted two-body loss; the "
    "steady state and loading time solve the rate equation.",
    "Repumping sets a bright fraction from repump and leak rates; fluorescence is isotropic "
    "into the detector's solid angle.",
    "A trap whose centre sits in weak light, without light, or with blue detuning holds "
    "no atoms, reached smoothly; inputs outside a fitted range are flagged as extrapolated "
    "but still computed.",
)


def _vapor_strength(sp: Species) -> float:
    """Absorption of an unpolarized thermal vapor relative to the cycling transition.

    Fraction of the atoms in the upper ground hyperfine level F = I + 1/2,
    ``(2F + 1) / (2 (2I + 1))``, times the isotropic-light strength of F -> F' = F + 1,
    ``(2F' + 1) / (3 (2F + 1))`` (Steck, D Line Data: 7/15 and 5/8 for Rb-87). 1 for a
    line without hyperfine structure.
    """
    f, fp = abs(sp.m_lower), abs(sp.m_upper)
    population = (2 * f + 1) / (4 * f) if f >= 0.5 else 1.0
    return population * (2 * fp + 1) / (3 * (2 * f + 1))


class _Strengths(dict):
    def __missing__(self, key):
        return _vapor_strength(lookup_species(key))


_VAPOR_STRENGTH = _Strengths()


class VaporCellMOT:
    """A six-beam vapor-cell magneto-optical trap: three retro-reflected beam pairs.

    Parameters
    ----------
    species : str or Species
        Atomic species (default ``"Rb87"``); see :data:`trapbudget.models.SPECIES`.
    gradient_source : {"direct", "coils"}
        ``"direct"``: the input ``gradient`` (axial, T/m); ``"coils"``: from
        ``coil_current``, ``coil_turns``, ``coil_radius``, ``coil_separation``.
    vapor_source : {"fraction", "density"}
        ``"fraction"``: ``vapor_fraction`` of the saturated density at the cell
        temperature (needs vapor-pressure data); ``"density"``: ``vapor_density``.
    cooling : {"sub-doppler", "doppler"}, optional
        Default: ``"sub-doppler"`` for the alkalis, ``"doppler"`` for a J = 0 ground state
        (Sr-88). ``"sub-doppler"``: ``T = T_min + C hbar Omega^2 / (k_B |delta|)``
        capped by Doppler theory, C the calibratable ``sub_doppler_coefficient``
        (:data:`trapbudget.models.cooling.SUB_DOPPLER_COEFFICIENT`), T_min four recoil
        temperatures. ``"doppler"``: Doppler theory alone (Lett et al. 1989).

    Notes
    -----
    The physics and its limits are listed, one sentence each, in :attr:`assumptions`.
    Geometry: the stray field ``bias_field`` lies along a radial axis x and moves the
    field zero to ``-B / (A/2)``; the beam axes are offset from the trap by
    ``beam_offset`` along the same axis. The field zero therefore sits on the x beams'
    axis and at distance ``c = |x0 - offset|`` from the y and z beam axes.
    Holding: the loading rate counts only atoms the trap keeps, the fraction
    ``prod_a erf(w / (sqrt(2) sigma_a))`` of the thermal cloud (rms ``sigma_a =
    sqrt(k_B T / kappa_a)`` per axis) inside the light, times a smoothstep in
    ``log10`` of the weakest pair's light at the field zero that is 1 above 0.1 of its
    peak and exactly 0 below 1e-3 (flag ``CENTRE_IN_DARK``): a trap drifting into the
    dark, losing its light or its red detuning empties smoothly.
    Beer-Lambert: optical depth ``n sigma_D L`` with the Doppler-broadened cross-section
    ``sigma_D = f_v (3 lambda^2 / 2 pi) (sqrt(pi) Gamma / (2 k v_p)) exp(-(delta / k v_p)^2)``
    (Foot 2005, ch. 7), ``f_v`` the unpolarized vapor's strength relative to the cycling
    line (0.29 for Rb-87, from Steck's factors); the incoming beams reach the trap through
    half the cell, the returning ones through one and a half cells.
    Defaults: vapor-loss coefficient 3e-15 m^3/s (sigma of order 1e-13 cm^2 times
    300 m/s; from memory, the order Monroe et al. 1990 quote); two-body coefficient
    1e-17 m^3/s (1e-11 cm^3/s, from memory); density limit 1e17 m^-3 at the reference
    trap (Walker, Sesko & Wieman 1990: about 1e11 cm^-3).

    References
    ----------
    C. Monroe, W. Swann, H. Robinson and C. Wieman, Phys. Rev. Lett. 65, 1571 (1990);
    T. Walker, D. Sesko and C. Wieman, Phys. Rev. Lett. 64, 408 (1990); H. J. Metcalf
    and P. van der Straten, "Laser Cooling and Trapping" (Springer, 1999).
    """

    validity_flags = Validity
    #: Flags that qualify a result without invalidating it (outputs computed as usual):
    #: counted and reported, but no cause for a validity warning.
    advisory_flags = Validity.EXTRAPOLATING
    assumptions: tuple[str, ...] = ASSUMPTIONS

    def __init__(
        self,
        species: str | Species = "Rb87",
        *,
        gradient_source: Literal["direct", "coils"] = "direct",
        vapor_source: Literal["fraction", "density"] = "fraction",
        cooling: Literal["doppler", "sub-doppler"] | None = None,
        repump: strontium.RepumpScheme | None = None,
    ) -> None:
        if gradient_source not in ("direct", "coils"):
            raise ModelError(
                f"VaporCellMOT: gradient_source={gradient_source!r} is not valid; "
                "use 'direct' or 'coils'"
            )
        if vapor_source not in ("fraction", "density"):
            raise ModelError(
                f"VaporCellMOT: vapor_source={vapor_source!r} is not valid; "
                "use 'fraction' or 'density'"
            )
        if cooling not in ("doppler", "sub-doppler", None):
            raise ModelError(
                f"VaporCellMOT: cooling={cooling!r} is not valid; use 'doppler' or 'sub-doppler'"
            )
        self.species = lookup_species(species)
        if vapor_source == "fraction" and self.species.vapor is None:
            raise ModelError(
                f"VaporCellMOT: species {self.species.name!r} has no vapor-pressure data; "
                "use vapor_source='density'"
            )
        self.gradient_source = gradient_source
        self.vapor_source = vapor_source
        if cooling is None:
            # no sub-Doppler cooling without ground-state structure (J = 0, as Sr-88's 1S0)
            cooling = "sub-doppler" if self.species.g_lower else "doppler"
        self.cooling = cooling
        self.repump = _repump_scheme(type(self).__name__, self.species, repump)
        self.inputs: Mapping[str, InputSpec] = self._build_inputs()
        self.outputs: Mapping[str, OutputSpec] = {o.name: o for o in self._output_specs()}
        s_ref, det_ref, grad_ref = _REFERENCE_TRAP
        sp = self.species
        ref = self._light_and_trap(
            np.array([s_ref]),
            np.array([det_ref * sp.linewidth_hz]),
            np.array([grad_ref]),
            np.array([1.0]),
            np.array([1.0]),
            np.array([1.0]),
        )
        self._reference_ratio = float(ref["ratio"][0])

    def _build_inputs(self) -> dict[str, InputSpec]:
        return _inputs(
            self.species, self.gradient_source, self.vapor_source, self.cooling, self.repump
        )

    def _output_specs(self) -> list[OutputSpec]:
        if self.repump != "none":
            return list(_OUTPUTS)
        return [*_OUTPUTS[:-1], strontium.RESERVOIR_OUTPUT, _OUTPUTS[-1]]

    def __repr__(self) -> str:
        repump = "" if self.repump is None else f", repump={self.repump!r}"
        return (
            f"VaporCellMOT({self.species.name!r}, gradient_source={self.gradient_source!r}, "
            f"vapor_source={self.vapor_source!r}, cooling={self.cooling!r}{repump})"
        )

    def explain(self, validity: ArrayLike) -> dict[str, int]:
        """Count each validity flag over an array of ``validity`` masks.

        Parameters
        ----------
        validity : array_like of int
            The ``validity`` output.

        Returns
        -------
        dict
            Flag name -> number of samples with that flag set (flags never set
            are included with 0; ``"OK"`` counts the fully valid samples).
        """
        v = np.asarray(validity, dtype=np.int64).reshape(-1)
        counts = {"OK": int(np.count_nonzero(v == 0))}
        for flag in Validity:
            if flag.value:
                counts[flag.name] = int(np.count_nonzero(v & flag.value))  # type: ignore[index]
        return counts

    def evaluate(self, values: Mapping[str, ArrayLike]) -> dict[str, NDArray]:
        """Evaluate every output for arrays of inputs (broadcast, any shape).

        Parameters
        ----------
        values : mapping
            Input name -> array_like in SI units, or a pint Quantity (converted
            to the input's unit, or refused if its dimension is wrong); missing
            inputs take their defaults.

        Returns
        -------
        dict
            Output name -> float array of the broadcast shape; ``validity``
            is an int64 bit mask (:class:`Validity`).

        Raises
        ------
        ModelError
            For an input name the model does not have.
        """
        return evaluate_flat_in_chunks(self, values, self._evaluate_flat, chunk=_CHUNK)

    def _light_and_trap(self, s_x, detuning, axial, g, back, scale):
        """Light at the field zero and the trap it makes (shared saturation).

        ``s_x``: incoming x beam's saturation there; ``g``: light of the y and z pairs
        there relative to the x pair; ``back``: returning / incoming; ``scale``:
        effective I_sat over the cycling one.
        """
        sp = self.species
        k, gamma = sp.wavenumber, sp.linewidth
        zeeman = abs(sp.zeeman_coefficient)
        pair = s_x * (1.0 + back)  # both beams of the x pair
        s_total = pair * (1.0 + 2.0 * g)
        kappas = []
        for s_pair, grad in ((pair, 0.5 * axial), (pair * g, 0.5 * axial), (pair * g, axial)):
            damping = cooling.shared_damping_coefficient(0.5 * s_pair, s_total, detuning, gamma, k)
            kappas.append(np.maximum(cooling.spring_constant(damping, zeeman, grad, k), 0.0))
        kappa = np.cbrt(kappas[0] * kappas[1] * kappas[2])
        intensity = s_total * sp.saturation_intensity * scale
        sigma_l = light.absorption_cross_section(sp.wavelength, detuning, gamma, s_total)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(intensity > 0, kappa / (intensity * sigma_l**2), 0.0)
        return {
            "s_total": s_total,
            "kappas": kappas,
            "kappa": kappa,
            "intensity": intensity,
            "sigma_l": sigma_l,
            "ratio": ratio,
        }

    def _evaluate_flat(self, x: Mapping[str, NDArray]) -> dict[str, NDArray]:
        sp = self.species
        k, gamma, mass = sp.wavenumber, sp.linewidth, sp.mass
        flags = np.zeros(x["beam_power"].shape, dtype=np.int64)

        outside = np.zeros(flags.shape, dtype=bool)
        for name, spec in self.inputs.items():
            v = x[name]
            outside |= ~((v >= spec.low) & (v <= spec.high))
        flags[outside] |= Validity.OUTSIDE_RANGE

        if self.gradient_source == "direct":
            axial = np.abs(x["gradient"])
        else:
            axial = np.abs(
                field.coil_gradient(
                    x["coil_current"],
                    turns=x["coil_turns"],
                    radius=x["coil_radius"],
                    separation=x["coil_separation"],
                )
            )
        radial = field.radial_gradient(axial)
        power, waist, detuning = x["beam_power"], x["beam_waist"], x["detuning"]
        aperture, imbalance = x["aperture_radius"], np.clip(x["beam_imbalance"], 0.0, 1.0)
        # red of resonance by more than 1e-6 linewidths: otherwise no cooling (honest limit)
        cools = detuning < -1e-6 * sp.linewidth_hz
        cooling_detuning = np.where(cools, detuning, 0.0)
        scale = x["saturation_scale"]
        i_sat = sp.saturation_intensity * scale
        peak_saturation = light.peak_intensity(power, waist) / i_sat

        # vapor, and its Beer-Lambert attenuation of the beams (Doppler-broadened line)
        density, t_cell = self._vapor(x, flags)
        speed = vapor.most_probable_speed(mass, t_cell)
        kvp = k * speed
        sigma_vapor = (
            _VAPOR_STRENGTH[sp.name]
            * (3 * sp.wavelength**2 / (2 * np.pi) * math.sqrt(math.pi) * gamma / (2 * kvp))
            * np.exp(-((2 * np.pi * detuning / kvp) ** 2))
        )
        depth = density * sigma_vapor * x.get("cell_length", 0.0)
        flags[depth > 1.0] |= Validity.OPTICALLY_THICK
        s0 = peak_saturation * np.exp(-0.5 * depth)
        back = (1.0 - imbalance) * np.exp(-depth)

        # field zero relative to the beam crossing; the y and z pairs pass at distance c
        centre = np.where(radial > 0, -x["bias_field"] / np.where(radial > 0, radial, 1.0), 0.0)
        c = np.abs(centre - x["beam_offset"])
        g = np.where(c <= aperture, np.exp(-2.0 * (c / waist) ** 2), 0.0)
        trap = self._light_and_trap(s0, cooling_detuning, axial, g, back, scale)
        s_total = trap["s_total"]
        rate = light.scattering_rate(s_total, detuning, gamma)

        def repump_rate(name: str, detuning_name: str = "") -> NDArray:
            intensity = light.beam_intensity(x[name], waist, c, aperture_radius=aperture)
            # a detuned repumper: (Gamma/2) s / (1 + s + x^2) = the resonant form at s/(1 + x^2)
            off = (4.0 * math.pi * x[detuning_name] / gamma) ** 2 if detuning_name else 0.0
            return mot.repump_rate(intensity / i_sat / (1.0 + off), gamma)

        if self.repump is None:
            leak = sp.leak_probability(detuning, saturation=s_total)
            bright = mot.bright_fraction(rate, leak, repump_rate("repump_power"))
            leak_loss = np.zeros_like(rate)
            flags[(leak > 0) & ~(x["repump_power"] > 0)] |= Validity.NO_REPUMP
        else:
            bright, leak_loss = strontium.shelving(
                rate,
                self.repump,
                rate_3p2=(
                    repump_rate("repump_power", "repump_detuning")
                    if self.repump != "none"
                    else 0.0
                ),
                rate_3p0=(
                    repump_rate("repump_679_power", "repump_679_detuning")
                    if self.repump == "707+679"
                    else 0.0
                ),
                escape_rate=x["shelved_escape_rate"],
            )
        # the largest push of one beam against gravity (issue: flag under ten g)
        strongest = sp.max_acceleration * peak_saturation / (1.0 + peak_saturation)
        flags[strongest < 10.0 * constants.g] |= Validity.WEAK_LIGHT_FORCE
        if constants.hbar * k**2 / (2.0 * mass) > 0.1 * gamma:
            flags |= Validity.RECOIL_LIMITED

        loading = capture.capture(
            s0,
            cooling_detuning,
            waist=waist,
            gradient=axial,
            density=density,
            most_probable_speed=speed,
            wavenumber=k,
            linewidth=gamma,
            mass=mass,
            zeeman_coefficient=sp.zeeman_coefficient,
            centre=c,
            imbalance=1.0 - back,
            aperture_radius=aperture,
            bright_fraction=bright,
        )
        flags[loading.extrapolating] |= Validity.EXTRAPOLATING

        temp = cooling.temperature(
            s_total,
            cooling_detuning,
            gamma,
            sub_doppler_coefficient=x.get("sub_doppler_coefficient"),
            recoil_temperature=sp.recoil_temperature,
        )
        finite_t = np.where(np.isfinite(temp), temp, 0.0)
        # fraction of the thermal cloud inside the light (1 for an ordinary trap; it goes to 0
        # smoothly as a spring constant vanishes), times a smooth ramp over two decades that is
        # exactly 0 once the weakest pair has less than 1e-3 of its peak light at the field zero
        held = np.ones_like(finite_t)
        for kappa_a in trap["kappas"]:
            sigma_a = mot.temperature_limited_radius(finite_t, kappa_a)
            held = held * special.erf(waist / (math.sqrt(2.0) * sigma_a))
        ramp = np.clip(0.5 * (np.log10(np.maximum(g, 1e-300)) + 3.0), 0.0, 1.0)
        held = held * ramp * ramp * (3.0 - 2.0 * ramp) * cools
        raw, source_loss, extra = self._source(x, loading, flags)
        load = x["loading_prefactor"] * raw * held
        one_body = (
            mot.vapor_loss_rate(density, x["vapor_loss_coefficient"])
            + vapor.background_loss_rate(
                x["background_pressure"], x["background_loss_coefficient"]
            )
            + leak_loss
            + source_loss
        )
        sigma = mot.temperature_limited_radius(finite_t, trap["kappa"])
        n_lim = cloud.limiting_density(
            x["density_limit"],
            trap["kappa"],
            trap["intensity"],
            trap["sigma_l"],
            self._reference_ratio,
        )
        state = cloud.cloud_steady_state(
            load,
            one_body,
            two_body_coefficient=x["two_body_coefficient"],
            sigma=sigma,
            density_limit=n_lim,
        )

        flags[~(peak_saturation > 0)] |= Validity.NO_POWER
        flags[~cools] |= Validity.BLUE_DETUNING
        flags[~(axial > 0)] |= Validity.NO_GRADIENT
        nothing = (flags & int(Validity.NO_VAPOR | Validity.NO_SOURCE)) != 0
        flags[~(raw > 0) & (peak_saturation > 0) & cools & ~nothing] |= Validity.NO_CAPTURE
        flags[(g < 1e-3) & (peak_saturation > 0)] |= Validity.CENTRE_IN_DARK
        no_trap = (flags & int(_NO_TRAP)) != 0
        flags[~no_trap & np.isinf(state.atom_number)] |= Validity.NO_LOSS

        with np.errstate(divide="ignore"):
            empty_time = np.where(one_body > 0, 1.0 / one_body, np.inf)
        atoms = np.where(no_trap, 0.0, state.atom_number)
        n0 = np.where(no_trap, 0.0, state.peak_density)
        nbar = np.where(no_trap, 0.0, state.mean_density)
        # no loss at all: the cloud grows without bound; its limits, never NaN
        unbounded = ~no_trap & np.isinf(state.atom_number)
        radius = np.where(no_trap, 0.0, np.where(unbounded, np.inf, state.cloud_radius))
        nbar = np.where(unbounded, 0.0, np.nan_to_num(nbar, nan=0.0))
        if self.repump == "none":
            extra = {
                **extra,
                "reservoir_atoms": strontium.reservoir_atoms(
                    atoms, rate * bright, axial, one_body - leak_loss, x["reservoir_time"]
                ),
            }
        return {
            "atom_number": atoms,
            "loading_time": np.where(no_trap, empty_time, state.loading_time),
            "temperature": temp,
            "capture_velocity": loading.capture_velocity,
            "loading_rate": np.where(no_trap, 0.0, load),
            "cloud_radius": radius,
            "peak_density": n0,
            "scattering_rate": rate,
            "fluorescence": np.nan_to_num(
                mot.fluorescence(
                    atoms,
                    rate,
                    bright_fraction=bright,
                    solid_angle=x["detector_solid_angle"],
                    efficiency=x["detector_efficiency"],
                ),
                nan=0.0,  # inf atoms seen by a detector of zero solid angle: nothing detected
                posinf=np.inf,
            ),
            "loss_rate": one_body + x["two_body_coefficient"] * nbar,
            "saturation_parameter": s0 * (1.0 + 2.0 * g) / 3.0,
            "bright_fraction": bright,
            **extra,
            "validity": flags,
        }

    def _vapor(self, x: Mapping[str, NDArray], flags: NDArray) -> tuple[NDArray, NDArray]:
        """Vapor density at the trap and its temperature; caps an impossible density."""
        sp = self.species
        t_cell = x["cell_temperature"]
        saturated = None
        if sp.vapor is not None:
            saturated = vapor.saturated_density(sp.vapor, t_cell)
        if self.vapor_source == "fraction":
            density = x["vapor_fraction"] * saturated
            flags[t_cell < ALCOCK_LOWEST] |= Validity.EXTRAPOLATING
        else:
            density = x["vapor_density"]
            if saturated is not None:
                # no cell holds more than the saturated vapor: the excess condenses
                flags[density > saturated * (1.0 + 1e-9)] |= Validity.SUPERSATURATED
                density = np.minimum(density, saturated)
        flags[~(density > 0)] |= Validity.NO_VAPOR
        return density, t_cell

    def _source(
        self, x: Mapping[str, NDArray], loading: capture.CaptureResult, flags: NDArray
    ) -> tuple[NDArray, NDArray | float, dict[str, NDArray]]:
        """Loading rate before holding and prefactor, extra one-body loss, extra outputs."""
        return loading.loading_rate, 0.0, {}


def _repump_scheme(
    model: str, sp: Species, repump: strontium.RepumpScheme | None
) -> strontium.RepumpScheme | None:
    """The repump scheme: Sr-88's 461 nm line needs one (default '707+679'); others none."""
    if sp.leak_probability_floor > 0:
        scheme = repump or "707+679"
        if scheme not in strontium.REPUMP_SCHEMES:
            raise ModelError(
                f"{model}: repump={repump!r} is not valid; use one of "
                + ", ".join(repr(r) for r in strontium.REPUMP_SCHEMES)
            )
        return scheme
    if repump is not None:
        raise ModelError(
            f"{model}: the repump option applies to species with a 1D2-type leak (Sr88), "
            f"not {sp.name!r}; remove it"
        )
    return None
