"""Inputs and outputs of the composed VaporCellMOT (the model protocol's records)."""

from __future__ import annotations

import math

from trapbudget.models import cooling, strontium, vapor
from trapbudget.models.protocol import InputSpec, OutputSpec
from trapbudget.models.species import Species

__all__ = ["BACKGROUND_LOSS_INPUT", "OUTPUTS", "inputs"]

BACKGROUND_LOSS_INPUT = InputSpec(
    "background_loss_coefficient",
    "1/(Pa*s)",
    float(vapor.ARPORNTHIP_COEFFICIENT),
    0.0,
    1e8,
    "loss rate per background pressure",
    constant=True,
)


def inputs(
    sp: Species,
    gradient_source: str,
    vapor_source: str,
    cooling_model: str,
    repump: str | None = None,
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
    ]
    specs += _repump_inputs(repump)
    specs += [
        InputSpec(
            "cell_temperature", "K", 298.15, 250.0, 450.0, "cell wall and vapor temperature"
        ),
        InputSpec("cell_length", "m", 0.025, 1e-3, 0.5, "path of each beam through the vapor"),
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
        BACKGROUND_LOSS_INPUT,
        InputSpec(
            "two_body_coefficient",
            "m**3/s",
            # 1e-11 cm^3/s for the alkalis; 1e-10 cm^3/s for a Sr blue MOT (the order of
            # Dinneen et al., PRA 59, 1216 (1999); from memory)
            1e-16 if sp.element == "Sr" else 1e-17,
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
            "reradiation-limited peak density of the reference trap (scales as kappa/I)",
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
                cooling.SUB_DOPPLER_COEFFICIENT,
                0.0,
                1e3,
                "C of T = T_min + C hbar Omega^2 / (k_B |delta|) (calibrate it)",
                constant=True,
            )
        )
    return {s.name: s for s in specs}


def _repump_detuning(name: str, line: str) -> InputSpec:
    # the repump line's width is taken as the cooling line's (as for the alkali repumper)
    return InputSpec(name, "Hz", 0.0, -1e9, 1e9, f"{line} repumper detuning from its line")


def _repump_inputs(repump: str | None) -> list[InputSpec]:
    if repump is None:
        return [
            InputSpec("repump_power", "W", 1e-3, 0.0, 0.5, "repumper power at the cell (total)")
        ]
    specs = []
    if repump == "707+679":
        specs += [
            InputSpec("repump_power", "W", 2e-3, 0.0, 0.5, "707 nm (3P2 -> 3S1) repumper power"),
            InputSpec(
                "repump_679_power", "W", 2e-3, 0.0, 0.5, "679 nm (3P0 -> 3S1) repumper power"
            ),
            _repump_detuning("repump_detuning", "707 nm"),
            _repump_detuning("repump_679_detuning", "679 nm"),
        ]
    elif repump == "481":
        specs.append(
            InputSpec(
                "repump_power", "W", 2e-3, 0.0, 0.5, "481 nm (3P2 -> 5p2 3P2) repumper power"
            )
        )
        specs.append(_repump_detuning("repump_detuning", "481 nm"))
    else:
        specs.append(
            InputSpec("reservoir_time", "s", 1.0, 0.0, 1e3, "time the MOT fills the 3P2 reservoir")
        )
    specs.append(
        InputSpec(
            "shelved_escape_rate",
            "1/s",
            strontium.SHELVED_ESCAPE_RATE,
            0.0,
            1e6,
            "rate at which an atom shelved in 3P2 or 3P0 leaves the MOT region",
            constant=True,
        )
    )
    return specs


OUTPUTS = [
    OutputSpec("atom_number", "", "steady-state number of trapped atoms"),
    OutputSpec("loading_time", "s", "time from empty to 1 - 1/e of the steady state"),
    OutputSpec("temperature", "K", "cloud temperature (inf: no cooling)"),
    OutputSpec(
        "capture_velocity", "m/s", "effective capture velocity (kinetic formula, area 4 pi w^2)"
    ),
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
