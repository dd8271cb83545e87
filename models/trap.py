"""The composed vapor-cell MOT model: inputs, outputs and vectorized evaluation.

``VaporCellMOT`` follows the model protocol (``inputs``, ``outputs``,
``evaluate``). It wires the kernels of the sibling modules together:

1. light at the trap centre (``light``) -> saturation, scattering rate,
   bright fraction with the repumper (``mot``);
2. capture velocity from the full force along a radial path through the trap
   (``capture``), with the radial gradient (the weaker one);
3. vapor density and speed (``vapor``) -> loading rate (``mot``);
4. Doppler / sub-Doppler temperature, damping and spring constant (``cooling``)
   -> temperature-limited cloud radius;
5. one-body losses plus light-assisted two-body loss -> closed-form steady state,
   loading time, peak density and cloud radius (``mot``);
6. fluorescence on a detector.

Outside its region of validity the model returns the honest limit and sets
a bit of the ``validity`` output (:class:`Validity`).
"""

from __future__ import annotations

import enum
import math
from collections.abc import Mapping
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from trapbudget.models import capture, cooling, field, light, mot, vapor
from trapbudget.models.catalog import species as lookup_species
from trapbudget.models.protocol import InputSpec, ModelError, OutputSpec, values_in_si
from trapbudget.models.species import Species

__all__ = ["Validity", "VaporCellMOT"]

_CHUNK = 1 << 14


class Validity(enum.IntFlag):
    """Reasons why a sample lies outside the model's region of validity (bit mask).

    Each member carries its own one-line ``__doc__`` (set from ``_FLAG_DOCS``).

    0 (``OK``) means every condition holds. Where a flag says there is no
    trap, the model returns zero atoms, zero fluorescence, zero loading rate,
    zero peak density and cloud radius, and the loss-limited loading time.
    """

    OK = 0
    NO_POWER = enum.auto()
    BLUE_DETUNING = enum.auto()
    NO_GRADIENT = enum.auto()
    NO_CAPTURE = enum.auto()
    NO_VAPOR = enum.auto()
    CENTRE_IN_DARK = enum.auto()
    NO_REPUMP = enum.auto()
    NO_LOSS = enum.auto()
    OUTSIDE_RANGE = enum.auto()


_FLAG_DOCS = {
    "OK": "Every condition of validity holds.",
    "NO_POWER": "No cooling light (beam power or saturation is zero): no atoms.",
    "BLUE_DETUNING": "Detuning >= 0 (or within 1e-6 Gamma of 0): no cooling, no atoms, T = inf.",
    "NO_GRADIENT": "Zero gradient: a molasses slows atoms but does not trap them; no atoms.",
    "NO_CAPTURE": "The force stops no atom inside the light (capture velocity 0): no atoms.",
    "NO_VAPOR": "Zero vapor density: nothing to load; no atoms.",
    "CENTRE_IN_DARK": "The field zero lies outside the light (large offset or bias): no atoms.",
    "NO_REPUMP": "The cycling line leaks and there is no repump light: atoms go dark; no atoms.",
    "NO_LOSS": "No loss process at all: the atom number grows without bound (inf).",
    "OUTSIDE_RANGE": "An input lies outside its valid range (the result is extrapolated).",
}
for _name, _doc in _FLAG_DOCS.items():
    Validity[_name].__doc__ = _doc

_NO_TRAP = (
    Validity.NO_POWER
    | Validity.BLUE_DETUNING
    | Validity.NO_GRADIENT
    | Validity.NO_CAPTURE
    | Validity.NO_VAPOR
    | Validity.CENTRE_IN_DARK
    | Validity.NO_REPUMP
)


def _inputs(
    sp: Species, gradient_source: str, vapor_source: str, cooling_model: str
) -> dict[str, InputSpec]:
    # default detuning -2 Gamma (2 significant digits): -12 MHz for Rb
    detuning = float(f"{-2.0 * sp.linewidth_hz:.2g}")
    specs = [
        InputSpec("beam_power", "W", 3e-3, 0.0, 0.5, "power of each incoming beam at the cell"),
        InputSpec("beam_waist", "m", 5e-3, 2e-4, 0.05, "1/e^2 intensity radius of each beam"),
        InputSpec(
            "aperture_radius", "m", 12.7e-3, 2e-4, 0.1, "clear radius of the limiting optic"
        ),
        InputSpec(
            "beam_offset",
            "m",
            0.0,
            -0.02,
            0.02,
            "pointing offset of the beam axes from the trap centre",
        ),
        InputSpec(
            "beam_imbalance", "", 0.05, 0.0, 0.9, "fractional intensity lost on the returning pass"
        ),
        InputSpec(
            "detuning",
            "Hz",
            detuning,
            -200e6,
            50e6,
            "cooling-light detuning from the cycling line",
        ),
    ]
    if gradient_source == "direct":
        specs.append(
            InputSpec("gradient", "T/m", 0.10, 0.0, 1.0, "axial quadrupole field gradient")
        )
    else:
        specs += [
            InputSpec("coil_current", "A", 2.32, 0.0, 100.0, "current in each MOT coil"),
            InputSpec("coil_turns", "", 100.0, 1.0, 1e4, "turns per coil"),
            InputSpec("coil_radius", "m", 0.05, 1e-3, 1.0, "coil radius"),
            InputSpec("coil_separation", "m", 0.05, 1e-3, 2.0, "distance between the two coils"),
        ]
    specs += [
        InputSpec(
            "bias_field", "T", 0.0, -1e-3, 1e-3, "stray uniform field (moves the trap centre)"
        ),
        InputSpec("repump_power", "W", 1e-3, 0.0, 0.5, "repumper power at the cell (total)"),
        InputSpec(
            "cell_temperature", "K", 295.15, 250.0, 450.0, "cell wall and vapor temperature"
        ),
    ]
    if vapor_source == "fraction":
        specs.append(
            InputSpec("vapor_fraction", "", 0.1, 0.0, 1.0, "vapor density over saturated density")
        )
    else:
        specs.append(
            InputSpec("vapor_density", "1/m**3", 1e15, 0.0, 1e20, "vapor density of the species")
        )
    specs += [
        InputSpec(
            "background_pressure",
            "Pa",
            1e-7,
            0.0,
            1e-2,
            "pressure of the non-alkali background gas",
        ),
        InputSpec(
            "loading_prefactor",
            "",
            1.0,
            0.0,
            100.0,
            "multiplies the kinetic-theory loading rate",
            constant=True,
        ),
        InputSpec(
            "vapor_loss_coefficient",
            "m**3/s",
            3e-15,
            0.0,
            1e-12,
            "<sigma v> for collisions with the hot vapor",
            constant=True,
        ),
        InputSpec(
            "background_loss_coefficient",
            "1/(Pa*s)",
            float(vapor.ARPORNTHIP_COEFFICIENT),
            0.0,
            1e8,
            "loss rate per background pressure",
            constant=True,
        ),
        InputSpec(
            "two_body_coefficient",
            "m**3/s",
            1e-17,
            0.0,
            1e-13,
            "light-assisted two-body loss coefficient beta",
            constant=True,
        ),
        InputSpec(
            "saturation_scale",
            "",
            1.0,
            0.1,
            10.0,
            "effective over cycling saturation intensity",
            constant=True,
        ),
        InputSpec(
            "density_limit",
            "1/m**3",
            1e17,
            1e13,
            1e21,
            "reradiation-limited peak density",
            constant=True,
        ),
        InputSpec(
            "detector_solid_angle",
            "sr",
            0.02,
            0.0,
            4 * math.pi,
            "collection solid angle",
            constant=True,
        ),
        InputSpec(
            "detector_efficiency",
            "",
            0.5,
            0.0,
            1.0,
            "optics transmission x quantum efficiency",
            constant=True,
        ),
    ]
    if cooling_model == "sub-doppler":
        specs.append(
            InputSpec(
                "sub_doppler_coefficient",
                "",
                0.3,
                0.0,
                1e3,
                "sub-Doppler temperature coefficient (order one; calibrate it)",
                constant=True,
            )
        )
    return {s.name: s for s in specs}


_OUTPUTS = [
    OutputSpec("atom_number", "", "steady-state number of trapped atoms"),
    OutputSpec("loading_time", "s", "time from empty to 1 - 1/e of the steady state"),
    OutputSpec("temperature", "K", "cloud temperature (inf: no cooling)"),
    OutputSpec("capture_velocity", "m/s", "largest entry speed that is still captured"),
    OutputSpec("loading_rate", "1/s", "atoms captured per second from the vapor"),
    OutputSpec("cloud_radius", "m", "rms radius of the cloud (geometric mean of the axes)"),
    OutputSpec("peak_density", "1/m**3", "peak density of the cloud"),
    OutputSpec("scattering_rate", "1/s", "photons scattered per second by a bright atom"),
    OutputSpec("fluorescence", "1/s", "photons per second reaching the detector"),
    OutputSpec("loss_rate", "1/s", "per-atom loss rate at steady state (one- and two-body)"),
    OutputSpec("saturation_parameter", "", "I/I_sat of one incoming beam at the cloud"),
    OutputSpec("bright_fraction", "", "fraction of atoms in the cycling states"),
    OutputSpec("validity", "", "bit mask of Validity flags (0 = valid)"),
]


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
    cooling : {"doppler", "sub-doppler"}
        ``"doppler"`` (default): Doppler theory alone (Lett et al. 1989), floored
        at the recoil temperature. ``"sub-doppler"``: adds the input
        ``sub_doppler_coefficient`` (a calibratable constant) and takes the lower
        of the Doppler and sub-Doppler temperatures (Dalibard & Cohen-Tannoudji
        1989), continuous in the coefficient.

    Notes
    -----
    Model choices (see the module docstrings of the kernels for formulas):

    * beams: Gaussian, ``beam_waist`` the 1/e^2 intensity radius, all six of
      equal waist; the returning beam weaker by ``beam_imbalance``;
    * saturation at the cloud: s = I / (saturation_scale x I_sat) of the
      incoming beam at the field zero, which the offset and the bias field
      (along a radial axis, ``x0 = -B / A_radial``) move off the beam axis;
      total saturation of all six beams 3 s (2 - imbalance);
    * capture: :func:`trapbudget.models.capture.capture_velocity` along a
      radial beam axis with the radial gradient (half the axial), for atoms
      entering from either end (slowed by the returning or by the incoming
      beam); the loading rate is the mean of the two directions' rates and
      ``capture_velocity`` the mean of the two speeds; capture area the sphere
      of the capture radius, 4 pi R^2;
    * repumper: its total power in one Gaussian of the cooling-beam waist,
      resonant, with the cycling I_sat (approximation);
    * cloud: spring constants kappa_z (axial gradient) and kappa_r = kappa_z/2;
      the rms radius is that of the geometric mean (kappa_z kappa_r^2)^(1/3),
      which gives the peak density of the anisotropic Gaussian exactly.
    * default vapor-loss coefficient 3e-15 m^3/s: sigma of order 1e-13 cm^2
      times a thermal speed of 300 m/s (from memory; Monroe et al. 1990 quote
      cross-sections of this order); a calibratable constant.
    * default two-body coefficient 1e-17 m^3/s (1e-11 cm^3/s, from memory;
      the upper end of published Rb values), density limit 1e17 m^-3
      (Walker, Sesko & Wieman 1990).
    """

    validity_flags = Validity

    #: The physics assumptions and limits of the model, one plain sentence each
    #: (the reports print them beside every result).
    assumptions: tuple[str, ...] = (
        "Three retro-reflected Gaussian beam pairs; each beam's scattering force is that of a "
        "two-level atom on the cycling transition, saturation shared between beams (no "
        "interference, no polarisation gradients in the force).",
        "Capture velocity from the critical trajectory through the beam overlap region in one "
        "dimension; atoms faster than it are lost, slower ones are captured.",
        "Loading rate from the kinetic theory of a thermal vapor at the cell temperature; its "
        "prefactor is a calibratable constant, so absolute atom numbers are only as good as "
        "its calibration.",
        "Losses: hot-alkali and background-gas collisions (rates proportional to density and "
        "pressure) and light-assisted two-body loss; steady state of the rate equation.",
        "Cloud size temperature-limited or, above the density limit, density-limited "
        "(reradiation); temperature from Doppler theory or the calibrated sub-Doppler term.",
        "Repumping as a bright fraction from repump and leak rates; fluorescence from the "
        "detected solid angle and efficiency.",
        "Outside its validity (no power, blue detuning, no gradient, no capture) the model "
        "returns its honest limit (no atoms) and flags the sample.",
    )

    def __init__(
        self,
        species: str | Species = "Rb87",
        *,
        gradient_source: Literal["direct", "coils"] = "direct",
        vapor_source: Literal["fraction", "density"] = "fraction",
        cooling: Literal["doppler", "sub-doppler"] = "doppler",
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
        if cooling not in ("doppler", "sub-doppler"):
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
        self.cooling = cooling
        self.inputs: Mapping[str, InputSpec] = _inputs(
            self.species, gradient_source, vapor_source, cooling
        )
        self.outputs: Mapping[str, OutputSpec] = {o.name: o for o in _OUTPUTS}

    def __repr__(self) -> str:
        return (
            f"VaporCellMOT({self.species.name!r}, gradient_source={self.gradient_source!r}, "
            f"vapor_source={self.vapor_source!r}, cooling={self.cooling!r})"
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
        unknown = [name for name in values if name not in self.inputs]
        if unknown:
            raise ModelError(
                f"VaporCellMOT: unknown input {unknown[0]!r}; valid inputs: "
                + ", ".join(self.inputs)
            )
        values = values_in_si(values, self.inputs)
        arrays = {
            name: np.asarray(values.get(name, spec.default), dtype=float)
            for name, spec in self.inputs.items()
        }
        shape = np.broadcast_shapes(*(a.shape for a in arrays.values()))
        n = math.prod(shape)
        flat = {k: np.broadcast_to(a, shape).reshape(-1) for k, a in arrays.items()}
        out = {o.name: np.empty(n, dtype=float) for o in _OUTPUTS if o.name != "validity"}
        out["validity"] = np.empty(n, dtype=np.int64)
        for start in range(0, n, _CHUNK):
            stop = min(n, start + _CHUNK)
            # extreme but valid inputs may overflow to inf (e.g. a vanishing gradient moves the
            # trap centre to infinity); every such inf is then handled as a limit below
            with np.errstate(over="ignore", under="ignore"):
                part = self._evaluate_flat({k: a[start:stop] for k, a in flat.items()})
            for key, value in part.items():
                out[key][start:stop] = value
        return {key: value.reshape(shape) for key, value in out.items()}

    def _evaluate_flat(self, x: Mapping[str, NDArray]) -> dict[str, NDArray]:
        sp = self.species
        k, gamma, mass = sp.wavenumber, sp.linewidth, sp.mass
        zeeman = abs(sp.zeeman_coefficient)
        flags = np.zeros(x["beam_power"].shape, dtype=np.int64)

        outside = np.zeros(flags.shape, dtype=bool)
        for name, spec in self.inputs.items():
            v = x[name]
            outside |= ~((v >= spec.low) & (v <= spec.high))
        flags[outside] |= Validity.OUTSIDE_RANGE

        if self.gradient_source == "direct":
            axial = x["gradient"]
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
        # red of resonance by more than 1e-6 linewidths: otherwise no cooling (honest limit)
        cools = detuning < -1e-6 * sp.linewidth_hz
        cooling_detuning = np.where(cools, detuning, 0.0)
        aperture, imbalance = x["aperture_radius"], x["beam_imbalance"]
        i_sat = sp.saturation_intensity * x["saturation_scale"]
        peak_saturation = light.peak_intensity(power, waist) / i_sat

        # position of the field zero (trap centre) relative to the beam axes
        with np.errstate(divide="ignore", invalid="ignore"):
            centre = np.where(radial > 0, -x["bias_field"] / radial, np.inf)
        distance = np.abs(centre - x["beam_offset"])
        forward, _ = light.cloud_intensities(
            power, waist, offset=distance, aperture_radius=aperture, imbalance=imbalance
        )
        s_beam = forward / i_sat
        s_total = 3.0 * s_beam * (2.0 - imbalance)
        rate = light.scattering_rate(s_total, detuning, gamma)
        repump_saturation = (
            light.beam_intensity(x["repump_power"], waist, distance, aperture_radius=aperture)
            / i_sat
        )
        leak = sp.leak_probability(detuning, saturation=s_total)
        bright = mot.bright_fraction(rate, leak, mot.repump_rate(repump_saturation, gamma))

        radius = capture.capture_radius(waist, aperture)
        path = {
            "waist": waist,
            "capture_radius": radius,
            "gradient": radial,
            "wavenumber": k,
            "linewidth": gamma,
            "mass": mass,
            "zeeman_coefficient": zeeman,
            "beam_offset": x["beam_offset"],
            "imbalance": imbalance,
            "bias_field": x["bias_field"],
            "bright_fraction": bright,
        }
        # atoms enter from both ends of the path: slowed by the returning or the incoming beam
        v_in = [
            capture.capture_velocity(peak_saturation, cooling_detuning, direction=d, **path)  # type: ignore[arg-type]
            for d in (1, -1)
        ]
        v_capture = 0.5 * (v_in[0] + v_in[1])

        t_cell = x["cell_temperature"]
        if self.vapor_source == "fraction":
            density = x["vapor_fraction"] * vapor.saturated_density(sp.vapor, t_cell)  # type: ignore[arg-type]
        else:
            density = x["vapor_density"]
        speed = vapor.most_probable_speed(mass, t_cell)
        area = 4.0 * np.pi * radius**2
        load = 0.5 * sum(
            mot.loading_rate(density, area, v, speed, prefactor=x["loading_prefactor"])
            for v in v_in
        )
        one_body = mot.vapor_loss_rate(
            density, x["vapor_loss_coefficient"]
        ) + vapor.background_loss_rate(x["background_pressure"], x["background_loss_coefficient"])

        temp = cooling.temperature(
            s_total,
            cooling_detuning,
            gamma,
            sub_doppler_coefficient=x.get("sub_doppler_coefficient"),
            recoil_temperature=sp.recoil_temperature,
        )
        s_pair = s_beam * (1.0 - 0.5 * imbalance)
        damping = cooling.damping_coefficient(s_pair, detuning, gamma, k)
        kappa_axial = cooling.spring_constant(damping, zeeman, axial, k)
        kappa = kappa_axial * 2.0 ** (-2.0 / 3.0)  # geometric mean of kz and kz/2, kz/2
        sigma = mot.temperature_limited_radius(np.where(np.isfinite(temp), temp, 0.0), kappa)

        state = mot.steady_state(
            load,
            one_body,
            two_body_coefficient=x["two_body_coefficient"],
            cloud_radius=sigma,
            density_limit=x["density_limit"],
        )

        flags[~(peak_saturation > 0)] |= Validity.NO_POWER
        flags[~cools] |= Validity.BLUE_DETUNING
        flags[~(axial > 0)] |= Validity.NO_GRADIENT
        flags[~(density > 0)] |= Validity.NO_VAPOR
        flags[(v_capture <= 0) & (peak_saturation > 0) & cools] |= Validity.NO_CAPTURE
        flags[~(s_beam > 0) & (peak_saturation > 0)] |= Validity.CENTRE_IN_DARK
        flags[(leak > 0) & ~(x["repump_power"] > 0)] |= Validity.NO_REPUMP
        no_trap = (flags & int(_NO_TRAP)) != 0
        flags[~no_trap & np.isinf(state.atom_number)] |= Validity.NO_LOSS

        with np.errstate(divide="ignore"):
            empty_time = np.where(one_body > 0, 1.0 / one_body, np.inf)
        atoms = np.where(no_trap, 0.0, state.atom_number)
        n0 = np.where(no_trap, 0.0, state.peak_density)
        return {
            "atom_number": atoms,
            "loading_time": np.where(no_trap, empty_time, state.loading_time),
            "temperature": temp,
            "capture_velocity": v_capture,
            "loading_rate": np.where(no_trap, 0.0, load),
            "cloud_radius": np.where(no_trap, 0.0, state.cloud_radius),
            "peak_density": n0,
            "scattering_rate": rate,
            "fluorescence": mot.fluorescence(
                atoms,
                rate,
                bright_fraction=bright,
                solid_angle=x["detector_solid_angle"],
                efficiency=x["detector_efficiency"],
            ),
            "loss_rate": one_body + mot.two_body_loss_rate(x["two_body_coefficient"], n0),
            "saturation_parameter": s_beam,
            "bright_fraction": bright,
            "validity": flags,
        }
