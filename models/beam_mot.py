"""A MOT in ultra-high vacuum loaded by a slow atomic flux: oven beam, Zeeman slower or 2D-MOT.

``BeamLoadedMOT`` is the vapor-cell model with its loading replaced: the light at the
trap, the capture velocity of the six beams (the same shipped capture table), the
cooling, the cloud, the losses and the fluorescence are those of
:class:`~trapbudget.models.trap.VaporCellMOT`; only the atoms arriving and the extra
losses of the source differ (kernels in :mod:`trapbudget.models.sources`).

The chamber holds no alkali vapor of its own: its background gas is the input
``background_pressure``; a 2D-MOT source adds its vapor through the differential
pumping (``differential_pumping``: density ratio of the chamber to the source cell),
an oven beam adds the fast atoms that cross the trap.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray
from scipy import constants, special

from trapbudget.models import capture, light, sources, strontium, vapor
from trapbudget.models.protocol import InputSpec, ModelError, OutputSpec
from trapbudget.models.species import Species
from trapbudget.models.trap import ASSUMPTIONS as _VAPOR_ASSUMPTIONS
from trapbudget.models.trap import VaporCellMOT
from trapbudget.models.validity import Validity
from trapbudget.models.vapor_pressure import ALCOCK_LOWEST

__all__ = ["SOURCES", "BeamLoadedMOT", "oven_temperature_for"]

Source = Literal["oven", "zeeman-slower", "2d-mot"]
SOURCES: tuple[str, ...] = ("oven", "zeeman-slower", "2d-mot")
_ROOM = 293.15
_CELL_INPUTS = ("cell_temperature", "cell_length", "vapor_fraction", "vapor_density")

SOURCE_OUTPUTS = [
    OutputSpec("source_flux", "1/s", "atoms per second the source delivers towards the trap"),
    OutputSpec("captured_flux", "1/s", "part of that flux slow enough for the trap to capture"),
    OutputSpec("source_velocity", "m/s", "mean speed of the atoms the source delivers"),
]

_SOURCE_ASSUMPTIONS = {
    "oven": (
        "An effusive oven (Alcock vapor pressure, Knudsen flux through a tube nozzle of "
        "Clausing factor W) sends a Gaussian cone of half-width sqrt(W) rad with the cosine-law "
        "forward intensity; the trap captures the v^3 exp(-v^2/vp^2) beam below its capture "
        "velocity inside the disk of one waist.",
    ),
    "zeeman-slower": (
        "A Zeeman slower of design deceleration eta a_max captures the beam below "
        "soft_min(sqrt(v_f^2 + 2 eta a_max L), v_f + mu' B_peak / hbar k) where the slower light "
        "gives a_max s/(1+s) >= eta a_max, averaged over a Gaussian atomic beam; slowed atoms "
        "leave at v_f with the velocity width Gamma sqrt(1+s)/2k, spread by the recoil heating "
        "and their divergence on the way to the trap.",
    ),
    "2d-mot": (
        "A 2D-MOT source captures vapor atoms through the side of its beams below the "
        "transverse capture velocity of the same six-beam capture treatment, slow enough "
        "along the axis to be cooled within the cooling length; collisions with the vapor "
        "saturate the flux with density and length; a push beam (rate-equation force with "
        "its Doppler shift) accelerates the cooled atoms over its path and turns round the "
        "backward ones it can stop; the beam leaves at that speed (rms spread half of it), "
        "spreads at the Doppler temperature and falls under gravity.",
    ),
}


def oven_temperature_for(sp: Species, pressure: float = 0.1) -> float:
    """Temperature (K, to 5 K) at which the element's vapor pressure reaches ``pressure`` (Pa).

    The default oven temperature of a species: 0.1 Pa (1e-3 mbar) is a usual oven load
    (common practice): about 390 K for Rb, 725 K for Sr.
    """
    if sp.vapor is None:
        raise ModelError(f"BeamLoadedMOT: species {sp.name!r} has no vapor-pressure data")
    low, high = 250.0, 2000.0
    for _ in range(60):
        mid = 0.5 * (low + high)
        low, high = (mid, high) if float(sp.vapor.pressure(mid)) < pressure else (low, mid)
    return 5.0 * round(0.5 * (low + high) / 5.0)


class BeamLoadedMOT(VaporCellMOT):
    """A six-beam MOT in ultra-high vacuum loaded from a slow atomic flux.

    Parameters
    ----------
    species : str or Species
        Default ``"Rb87"``; the element needs vapor-pressure data (the alkalis, Sr).
    source : {"oven", "zeeman-slower", "2d-mot"}
        ``"oven"``: an effusive beam straight at the trap; ``"zeeman-slower"``: the oven beam
        through a Zeeman slower; ``"2d-mot"``: a 2D-MOT source cell.
    gradient_source, cooling, repump
        As for :class:`~trapbudget.models.trap.VaporCellMOT`.

    Notes
    -----
    Outputs: those of VaporCellMOT plus ``source_flux`` and ``captured_flux``; the loading
    rate is the captured flux times the held fraction and ``loading_prefactor``.
    The beam-induced loss of an oven beam is the flux density of its fast atoms through
    the capture disk times ``vapor_loss_coefficient / vbar``.

    References
    ----------
    N. F. Ramsey, "Molecular Beams" (OUP, 1956); W. D. Phillips and H. Metcalf, Phys. Rev.
    Lett. 48, 596 (1982); K. Dieckmann et al., Phys. Rev. A 58, 3891 (1998); J. Schoser et
    al., Phys. Rev. A 66, 023410 (2002).
    """

    def __init__(
        self,
        species: str | Species = "Rb87",
        *,
        source: Source = "zeeman-slower",
        gradient_source: Literal["direct", "coils"] = "direct",
        cooling: Literal["doppler", "sub-doppler"] | None = None,
        repump: strontium.RepumpScheme | None = None,
    ) -> None:
        if source not in SOURCES:
            raise ModelError(
                f"BeamLoadedMOT: source={source!r} is not valid; use one of "
                + ", ".join(repr(s) for s in SOURCES)
            )
        self.source = source
        super().__init__(
            species,
            gradient_source=gradient_source,
            vapor_source="fraction",
            cooling=cooling,
            repump=repump,
        )
        self.assumptions = (*_VAPOR_ASSUMPTIONS[:3], *_SOURCE_ASSUMPTIONS[source])
        self.assumptions += _VAPOR_ASSUMPTIONS[3:]

    def __repr__(self) -> str:
        repump = "" if self.repump is None else f", repump={self.repump!r}"
        return (
            f"BeamLoadedMOT({self.species.name!r}, source={self.source!r}, "
            f"gradient_source={self.gradient_source!r}, cooling={self.cooling!r}{repump})"
        )

    def _output_specs(self) -> list[OutputSpec]:
        base = super()._output_specs()
        return [*base[:-1], *SOURCE_OUTPUTS, base[-1]]

    def _build_inputs(self) -> dict[str, InputSpec]:
        base = super()._build_inputs()
        specs = {k: v for k, v in base.items() if k not in _CELL_INPUTS}
        specs["background_pressure"] = dataclasses.replace(
            specs["background_pressure"], default=1e-8, description="UHV chamber background gas"
        )
        # an ultra-high-vacuum MOT usually has larger beams than a small cell (common practice)
        for name, value in (
            ("beam_waist", 1e-2),
            ("beam_power", 1.2e-2),
            ("aperture_radius", 0.0254),
        ):
            specs[name] = dataclasses.replace(specs[name], default=value)
        out = {}
        for name, spec in specs.items():
            out[name] = spec
            if name == "background_pressure":
                out.update({s.name: s for s in self._source_inputs()})
        return out

    def _source_inputs(self) -> list[InputSpec]:
        sp = self.species
        if self.source == "2d-mot":
            return _two_d_inputs(sp)
        t_oven = oven_temperature_for(sp)
        slower = self.source == "zeeman-slower"
        specs = [
            InputSpec(
                "oven_temperature", "K", t_oven, 250.0, 1300.0, "oven reservoir temperature"
            ),
            InputSpec("nozzle_radius", "m", 1.5e-3, 1e-5, 0.02, "radius of the oven nozzle tube"),
            InputSpec("nozzle_length", "m", 1e-2, 0.0, 0.2, "length of the nozzle tube"),
            InputSpec(
                "oven_distance", "m", 0.9 if slower else 0.3, 0.01, 5.0, "nozzle to trap centre"
            ),
        ]
        if slower:
            v_f = 20.0  # m/s, a usual exit velocity (common practice)
            specs += [
                InputSpec("slower_length", "m", 0.5, 0.01, 3.0, "length of the slowing field"),
                InputSpec(
                    "slower_peak_field", "T", 0.025, 0.0, 0.2, "field at the slower entrance"
                ),
                InputSpec(
                    "slower_final_velocity", "m/s", v_f, 0.0, 200.0, "exit velocity of the slower"
                ),
                InputSpec(
                    "slower_design_fraction", "", 0.5, 0.01, 0.99, "design deceleration / a_max"
                ),
                InputSpec("slower_beam_power", "W", 0.03, 0.0, 1.0, "slowing-beam power"),
                InputSpec("slower_beam_waist", "m", 5e-3, 2e-4, 0.05, "slowing-beam 1/e^2 radius"),
                InputSpec(
                    "slower_aperture_radius", "m", 4e-3, 1e-4, 0.05, "slower tube clear radius"
                ),
                InputSpec(
                    "slower_to_trap_distance", "m", 0.2, 0.0, 2.0, "slower exit to trap centre"
                ),
            ]
        return specs

    def _vapor(self, x: Mapping[str, NDArray], flags: NDArray) -> tuple[NDArray, NDArray]:
        room = np.full(x["beam_power"].shape, _ROOM)
        if self.source != "2d-mot":
            return np.zeros_like(room), room
        return self._source_density(x) * x["differential_pumping"], room

    def _source_density(self, x: Mapping[str, NDArray]) -> NDArray:
        sat = vapor.saturated_density(self.species.vapor, x["source_temperature"])  # type: ignore[arg-type]
        return x["source_vapor_fraction"] * sat

    def _source(
        self, x: Mapping[str, NDArray], loading: capture.CaptureResult, flags: NDArray
    ) -> tuple[NDArray, NDArray | float, dict[str, NDArray]]:
        vc = loading.capture_velocity
        if self.source == "2d-mot":
            flux, captured, loss, speed = self._two_d(x, vc, flags)
        else:
            flux, captured, loss = self._oven_beam(x, vc, flags)
            if self.source == "oven":  # the flux-weighted mean speed of the effusive beam
                speed = sources.beam_mean_speed(
                    vapor.most_probable_speed(self.species.mass, x["oven_temperature"])
                )
            else:
                speed = x["slower_final_velocity"]
        flags[~(flux > 0) & ~(captured > 0)] |= Validity.NO_SOURCE
        speed = np.broadcast_to(speed, np.shape(flux)).astype(float)
        outputs = {"source_flux": flux, "captured_flux": captured, "source_velocity": speed}
        return captured, loss, outputs

    def _oven_beam(
        self, x: Mapping[str, NDArray], vc: NDArray, flags: NDArray
    ) -> tuple[NDArray, ...]:
        sp = self.species
        t_oven, radius = x["oven_temperature"], x["nozzle_radius"]
        melting = sp.vapor.melting_point  # type: ignore[union-attr]
        extrapolated = (t_oven < ALCOCK_LOWEST) | ((sp.element == "Sr") & (t_oven > melting))
        flags[extrapolated] |= Validity.EXTRAPOLATING
        density = vapor.saturated_density(sp.vapor, t_oven)  # type: ignore[arg-type]
        vp = vapor.most_probable_speed(sp.mass, t_oven)
        w = sources.clausing_factor(x["nozzle_length"], radius)
        total = sources.effusive_flux(density, t_oven, sp.mass, math.pi * radius**2, w)
        capture_radius = x["beam_waist"]
        at_trap = total * sources.beam_fraction_into(w, capture_radius, x["oven_distance"])
        # fast atoms crossing the trap knock trapped ones out: flux density x <sigma v> / vbar
        loss = (
            at_trap
            / (math.pi * capture_radius**2)
            * x["vapor_loss_coefficient"]
            / sources.beam_mean_speed(vp)
        )
        direct = at_trap * vapor.flux_fraction_slower(vc, vp)
        if self.source == "oven":
            return at_trap, direct, loss
        return (*self._slower(x, total, w, vp, vc, direct), loss)

    def _slower(
        self,
        x: Mapping[str, NDArray],
        total: NDArray,
        w: NDArray,
        vp: NDArray,
        vc: NDArray,
        direct: NDArray,
    ) -> tuple[NDArray, NDArray]:
        """Slowed flux at the slower exit, and the part the trap captures."""
        sp = self.species
        k, a_max = sp.wavenumber, sp.max_acceleration
        exit_distance = x["slower_to_trap_distance"]
        aperture = x["slower_aperture_radius"]
        to_exit = np.maximum(x["oven_distance"] - exit_distance, 1e-3)
        entering = total * sources.beam_fraction_into(w, aperture, to_exit)
        v_f = x["slower_final_velocity"]
        eta = x["slower_design_fraction"]
        field_velocity = v_f + abs(sp.zeeman_coefficient) * x["slower_peak_field"] / (_HBAR * k)
        v_cap = sources.slower_capture_velocity(
            length=x["slower_length"],
            design_fraction=eta,
            final_velocity=v_f,
            max_acceleration=a_max,
            field_velocity=field_velocity,
        )
        s0 = light.peak_intensity(x["slower_beam_power"], x["slower_beam_waist"]) / (
            sp.saturation_intensity * x["saturation_scale"]
        )
        # the atomic beam inside the slower: the aperture over the oven's divergence
        atom_radius = 0.5 * aperture
        followed = sources.slower_light_fraction(s0, eta, x["slower_beam_waist"], atom_radius)
        slowed = entering * np.maximum(
            vapor.flux_fraction_slower(v_cap, vp) - vapor.flux_fraction_slower(v_f, vp), 0.0
        )
        flux = slowed * followed
        # transverse spread on the way: collimation by the aperture, recoil heating (one
        # spontaneous kick of v_r per photon, a third of its square per transverse axis),
        # then the drift at v_f to the trap
        v_r = sp.recoil_velocity
        photons = np.maximum(v_cap - v_f, 0.0) / v_r
        sigma_v = np.sqrt(
            (aperture / to_exit * 0.5 * (v_cap + v_f)) ** 2 / 2 + photons * v_r**2 / 3
        )
        with np.errstate(divide="ignore", invalid="ignore"):
            flight = (
                x["slower_length"] / np.maximum(0.5 * (v_cap + v_f), 1e-9) + exit_distance / v_f
            )
        spread2 = atom_radius**2 + (sigma_v * flight) ** 2
        inside = -np.expm1(
            -(x["beam_waist"] ** 2) / (2.0 * np.where(np.isfinite(spread2), spread2, np.inf))
        )
        # exit velocities spread over the resonant class Gamma sqrt(1 + s) / 2k
        width = sp.linewidth * np.sqrt(1.0 + s0) / (2.0 * k)
        slow_enough = _gaussian_cdf((vc - v_f) / width)
        return flux, flux * inside * slow_enough + direct

    def _two_d(
        self, x: Mapping[str, NDArray], vc: NDArray, flags: NDArray
    ) -> tuple[NDArray, NDArray, NDArray, NDArray]:
        """2D-MOT flux, captured flux and the chamber's extra loss (in the vapor term)."""
        sp = self.species
        t_src = x["source_temperature"]
        density = self._source_density(x)
        flags[t_src < ALCOCK_LOWEST] |= Validity.EXTRAPOLATING
        vp = vapor.most_probable_speed(sp.mass, t_src)
        waist = x["source_beam_waist"]
        s0 = light.peak_intensity(x["source_beam_power"], waist) / (
            sp.saturation_intensity * x["saturation_scale"]
        )
        detuning = np.where(x["source_detuning"] < 0, x["source_detuning"], 0.0)
        # the transverse capture of the 2D-MOT: the same capture treatment as the trap's
        transverse = capture.capture(
            s0,
            detuning,
            waist=waist,
            gradient=x["source_gradient"],
            density=1.0,
            most_probable_speed=vp,
            wavenumber=sp.wavenumber,
            linewidth=sp.linewidth,
            mass=sp.mass,
            zeeman_coefficient=sp.zeeman_coefficient,
            curved_paths=False,  # the six-beam trap's factor; nothing stops in a trap here
        )
        flags[transverse.extrapolating] |= Validity.EXTRAPOLATING
        s_all = 4.0 * s0
        accel = 0.5 * sp.max_acceleration * s_all / (1.0 + s_all)
        v_out, turned = self._push(x, vp, transverse.capture_velocity, accel, s_all, detuning)
        flux, _ = sources.transverse_source_flux(
            density,
            most_probable_speed=vp,
            capture_velocity=transverse.capture_velocity,
            waist=waist,
            cooling_length=x["cooling_length"],
            output_velocity=v_out,
            loss_coefficient=x["source_loss_coefficient"],
            transverse_acceleration=accel,
            turned_fraction=turned,
        )
        # transfer: Doppler-temperature divergence from the exit hole, gravity on the way
        flight = x["source_distance"] / v_out
        sigma_v = np.sqrt(constants.k * sp.doppler_temperature / sp.mass)
        spread2 = x["exit_radius"] ** 2 / 4.0 + (sigma_v * flight) ** 2
        drop = 0.5 * constants.g * flight**2
        r2 = x["beam_waist"] ** 2
        inside = -np.expm1(-r2 / (2.0 * spread2)) * np.exp(-(drop**2) / (2.0 * spread2 + r2))
        slow_enough = _gaussian_cdf((vc - v_out) / (0.5 * v_out))
        return flux, flux * inside * slow_enough, np.zeros_like(flux), v_out

    def _push(
        self,
        x: Mapping[str, NDArray],
        vp: NDArray,
        vc: NDArray,
        accel: NDArray,
        s_all: NDArray,
        detuning: NDArray,
    ) -> tuple[NDArray, NDArray]:
        """Exit velocity of the 2D-MOT beam and the share of backward atoms turned round.

        The cooled atoms leave with the mean forward axial speed of the class the 2D-MOT
        cools, ``v0 = vp (1 - exp(-x^2)) / (sqrt(pi) erf(x))`` with ``x = v_max / vp``
        (``v_max = L a / v_c``, slow enough to be cooled within the length); the push
        beam accelerates them over ``push_length`` (:func:`sources.push_exit_velocity`)
        and turns round the backward ones it can stop there.
        """
        sp = self.species
        with np.errstate(divide="ignore", invalid="ignore"):
            v_max = np.where(vc > 0, x["cooling_length"] * accel / vc, 0.0)
            ratio = v_max / vp
            v0 = np.where(
                ratio > 0,
                vp * -np.expm1(-(ratio**2)) / (math.sqrt(math.pi) * special.erf(ratio)),
                0.0,
            )
        s_push = light.peak_intensity(x["push_power"], x["push_waist"]) / (
            sp.saturation_intensity * x["saturation_scale"]
        )
        lorentz = 1.0 / (1.0 + 4.0 * (2.0 * math.pi * detuning) ** 2 / sp.linewidth**2)
        common: dict[str, Any] = {
            "saturation": s_push,
            "detuning": x["push_detuning"],
            "other_saturation": s_all * lorentz,
            "max_acceleration": sp.max_acceleration,
            "wavenumber": sp.wavenumber,
            "linewidth": sp.linewidth,
            # 16 steps: within 0.1 % of 200 steps from rest, 1e-8 from the thermal start
            "n_steps": 16,
        }
        v_out = sources.push_exit_velocity(x["push_length"], start_velocity=v0, **common)
        # a backward atom is stopped if the push removes its speed over the path: the speed
        # the push gives an atom starting at rest over the same path
        v_stop = sources.push_exit_velocity(x["push_length"], **common)
        turned = sources.push_stopped_fraction(v_stop, v_max, vp)
        return np.maximum(v_out, 1e-3), turned


def _two_d_inputs(sp: Species) -> list[InputSpec]:
    detuning = float(f"{-1.5 * sp.linewidth_hz:.2g}")
    t_source = 300.0 if sp.element != "Sr" else oven_temperature_for(sp, 1e-5)
    return [
        InputSpec("source_temperature", "K", t_source, 250.0, 1300.0, "2D-MOT cell temperature"),
        InputSpec(
            "source_vapor_fraction", "", 0.03, 0.0, 1.0, "source vapor over saturated density"
        ),
        InputSpec("source_beam_power", "W", 0.03, 0.0, 1.0, "power of each transverse beam"),
        InputSpec("source_beam_waist", "m", 5e-3, 2e-4, 0.05, "transverse beam 1/e^2 radius"),
        InputSpec("cooling_length", "m", 0.03, 1e-3, 0.3, "length of the 2D cooling region"),
        InputSpec("source_detuning", "Hz", detuning, -200e6, 50e6, "2D-MOT light detuning"),
        InputSpec("source_gradient", "T/m", 0.15, 0.0, 1.0, "2D quadrupole gradient"),
        InputSpec("push_power", "W", 5e-4, 0.0, 0.1, "push-beam power (0: no push beam)"),
        InputSpec("push_waist", "m", 1e-3, 1e-4, 0.02, "push-beam 1/e^2 radius"),
        InputSpec("push_detuning", "Hz", 0.0, -100e6, 100e6, "push-beam detuning"),
        InputSpec("push_length", "m", 0.015, 0.0, 0.3, "path on which the push beam acts alone"),
        InputSpec("source_distance", "m", 0.3, 0.01, 3.0, "2D-MOT exit to trap centre"),
        InputSpec("exit_radius", "m", 5e-4, 1e-5, 0.01, "radius of the differential-pumping hole"),
        InputSpec("differential_pumping", "", 1e-3, 0.0, 1.0, "chamber over source vapor density"),
        # a slow, untrapped beam atom is lost by any deflection: the total cross-section, of
        # order 1e-12 cm^2 for Rb-Rb at thermal energies (from memory), times ~300 m/s
        InputSpec(
            "source_loss_coefficient",
            "m**3/s",
            3e-14,
            0.0,
            1e-11,
            "<sigma v> removing a slow beam atom (any deflection: the total cross-section)",
            constant=True,
        ),
    ]


def _gaussian_cdf(z: NDArray) -> NDArray:
    return 0.5 * special.erfc(-z / math.sqrt(2.0))


_HBAR = constants.hbar
