"""Validity flags shared by the trap models: why a sample lies outside a model's validity."""

from __future__ import annotations

import enum

__all__ = ["NO_TRAP", "Validity"]


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
    EXTRAPOLATING = enum.auto()
    OPTICALLY_THICK = enum.auto()
    SUPERSATURATED = enum.auto()
    WEAK_LIGHT_FORCE = enum.auto()
    NO_SOURCE = enum.auto()
    GRAVITY_WINS = enum.auto()
    RECOIL_LIMITED = enum.auto()


_FLAG_DOCS = {
    "OK": "Every condition of validity holds.",
    "NO_POWER": "No cooling light (beam power or saturation is zero): no atoms.",
    "BLUE_DETUNING": "Detuning >= 0 (or within 1e-6 Gamma of 0): no cooling, no atoms, T = inf.",
    "NO_GRADIENT": "Zero gradient: a molasses slows atoms but does not trap them; no atoms.",
    "NO_CAPTURE": "No atom is slowed inside the trap region (no loading): no atoms.",
    "NO_VAPOR": "Zero vapor density: nothing to load; no atoms.",
    "CENTRE_IN_DARK": (
        "The field zero sits where the weakest beam pair has less than 1e-3 of its peak light "
        "(large offset or stray field): no atoms (reached smoothly)."
    ),
    "NO_REPUMP": "The cycling line leaks and there is no repump light: atoms go dark; no atoms.",
    "NO_LOSS": "No loss process at all: the atom number grows without bound (inf).",
    "OUTSIDE_RANGE": "An input lies outside its valid range (the result is extrapolated).",
    "EXTRAPOLATING": (
        "Inside the declared ranges but outside a fitted one (vapor pressure below Alcock's "
        "298 K, or the capture table): outputs computed, less certain."
    ),
    "OPTICALLY_THICK": (
        "The vapor absorbs the beams (optical depth above 1 across the cell at the MOT "
        "detuning): attenuation included, outputs computed."
    ),
    "SUPERSATURATED": (
        "The vapor density asked for exceeds the saturated density of the species at the cell "
        "temperature, which no cell can hold: the density is capped there. Fix: raise "
        "cell_temperature to where the saturated density reaches it (a heated cell, a "
        "dispenser), or lower vapor_density; strontium at room temperature needs an oven and "
        "a slowed beam (BeamLoadedMOT) or a 2D-MOT source."
    ),
    "WEAK_LIGHT_FORCE": (
        "The largest light acceleration a_max s/(1+s) of one beam is under 10 g: gravity and "
        "the photon recoil matter, which this model neglects; use NarrowLineMOT for a "
        "narrow line."
    ),
    "RECOIL_LIMITED": (
        "The photon recoil shift hbar k^2 / 2m exceeds a tenth of the linewidth: the "
        "semiclassical force and temperature of this model fail; use NarrowLineMOT."
    ),
    "NO_SOURCE": "No atoms arrive from the source (cold oven, no flux): nothing to load.",
    "GRAVITY_WINS": (
        "The light cannot hold the atoms against gravity (a_max s/(1+s) below g): no atoms."
    ),
}
for _name, _doc in _FLAG_DOCS.items():
    Validity[_name].__doc__ = _doc

NO_TRAP = (
    Validity.NO_POWER
    | Validity.BLUE_DETUNING
    | Validity.NO_GRADIENT
    | Validity.NO_CAPTURE
    | Validity.NO_VAPOR
    | Validity.CENTRE_IN_DARK
    | Validity.NO_REPUMP
    | Validity.NO_SOURCE
    | Validity.GRAVITY_WINS
)
