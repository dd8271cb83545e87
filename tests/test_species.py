"""Atomic data checked against arc, Steck's closed forms and published tables."""

from __future__ import annotations

import math
import pickle

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import constants

from trapbudget.models import ModelError
from trapbudget.models.catalog import species, species_table
from trapbudget.models.species import SPECIES, Species, VaporPressure

HBAR, C, KB = constants.hbar, constants.c, constants.k
MU_B = constants.physical_constants["Bohr magneton"][0]
U = constants.physical_constants["atomic mass constant"][0]
TORR = constants.torr

ALKALIS = ["Rb87", "Rb85", "Cs133", "K39", "Na23", "Li7"]
# arc class, principal quantum number of the ground state, cycling F' (for the HFS check)
ARC_ATOMS = {
    "Rb87": ("Rubidium87", 5, 3),
    "Rb85": ("Rubidium85", 5, 4),
    "Cs133": ("Caesium", 6, 5),
    "K39": ("Potassium39", 4, 3),
    "Na23": ("Sodium", 3, 3),
    "Li7": ("Lithium7", 2, 3),
}


@pytest.fixture(scope="module")
def arc_atoms():
    arc = pytest.importorskip("arc")
    return {name: getattr(arc, cls)() for name, (cls, _, _) in ARC_ATOMS.items()}


@pytest.fixture(scope="module")
def arc_strontium():
    arc = pytest.importorskip("arc")
    return arc.Strontium88()


# --- against arc (arc-alkali-rydberg-calculator, alkali atom-data library) ---------------


@pytest.mark.parametrize("name", ALKALIS)
def test_wavelength_against_arc(arc_atoms, name):
    atom = arc_atoms[name]
    n = ARC_ATOMS[name][1]
    # arc: D2 line from its level energies (Steck/Tiecke/NIST data inside arc)
    expected = atom.getTransitionWavelength(n, 0, 0.5, n, 1, 1.5)
    assert SPECIES[name].wavelength == pytest.approx(expected, rel=1e-5)


# arc's lifetimes come from other measurements than Steck's/Tiecke's/Gehm's compilations:
# Rb/Cs agree to 1e-4, K and Na to 0.6 %, Li-7 (arc 26.4 ns vs Gehm's 5.87 MHz) to 3 %.
LIFETIME_REL = {"Rb87": 2e-4, "Rb85": 2e-4, "Cs133": 2e-4, "K39": 6e-3, "Na23": 6e-3, "Li7": 0.03}


@pytest.mark.parametrize("name", ALKALIS)
def test_lifetime_against_arc(arc_atoms, name):
    n = ARC_ATOMS[name][1]
    tau = arc_atoms[name].getStateLifetime(n, 1, 1.5)  # arc: nP3/2 radiative lifetime
    assert 1.0 / SPECIES[name].linewidth == pytest.approx(tau, rel=LIFETIME_REL[name])


@pytest.mark.parametrize("name", ALKALIS)
def test_mass_against_arc(arc_atoms, name):
    assert SPECIES[name].mass == pytest.approx(arc_atoms[name].mass, rel=1e-7)  # arc: NIST


@pytest.mark.parametrize("name", ALKALIS)
def test_lande_factors_against_arc(arc_atoms, name):
    f_upper = ARC_ATOMS[name][2]
    s = SPECIES[name]
    atom = arc_atoms[name]
    # arc: getLandegf(l, j, f)
    assert s.g_lower == pytest.approx(atom.getLandegf(0, 0.5, f_upper - 1), rel=1e-9)
    assert s.g_upper == pytest.approx(atom.getLandegf(1, 1.5, f_upper), rel=1e-9)
    assert (s.m_lower, s.m_upper) == (f_upper - 1, f_upper)


@pytest.mark.parametrize("name", ALKALIS)
def test_upper_hyperfine_splitting_against_arc(arc_atoms, name):
    atom = arc_atoms[name]
    n, f_upper = ARC_ATOMS[name][1], ARC_ATOMS[name][2]
    a, b = atom.getHFSCoefficients(n, 1, 1.5)[:2]  # arc: A, B of nP3/2 in Hz
    expected = atom.getHFSEnergyShift(1.5, f_upper - 1, a, b) - atom.getHFSEnergyShift(
        1.5, f_upper, a, b
    )
    # arc's A, B differ slightly from Steck's/Tiecke's (Na by 1.1 %); sign and size must agree
    assert SPECIES[name].upper_hyperfine_splitting == pytest.approx(expected, rel=0.015)


# Alcock et al. 1984 equations are quoted to +-5 %; arc uses Alcock's full equations. The
# two-term Table 2 form drifts past 5 % above ~550 K for Rb (6.5 % at 600 K), beyond
# vapor-cell temperatures, so the check stops at 500 K.
TEMPERATURES = [298.15, 320.0, 350.0, 400.0, 450.0, 500.0]


@pytest.mark.parametrize("name", ALKALIS)
def test_vapor_pressure_against_arc(arc_atoms, name):
    vapor = SPECIES[name].vapor
    for t in TEMPERATURES:
        expected = arc_atoms[name].getPressure(t)  # arc: Pa
        assert vapor.pressure(t) == pytest.approx(expected, rel=0.05), t


def test_strontium_against_arc(arc_strontium):
    sr = arc_strontium
    # arc (divalent atom data): 5s2 1S0 -> 5s5p 1P1 and 3P1
    assert SPECIES["Sr88"].wavelength == pytest.approx(
        sr.getTransitionWavelength(5, 0, 0, 5, 1, 1, s=0, s2=0), rel=1e-6
    )
    assert SPECIES["Sr88-689"].wavelength == pytest.approx(
        sr.getTransitionWavelength(5, 0, 0, 5, 1, 1, s=0, s2=1), rel=1e-6
    )
    assert SPECIES["Sr88"].mass == pytest.approx(sr.mass, rel=1e-6)


# --- Steck's closed forms, recomputed here with scipy.constants --------------------------


@pytest.mark.parametrize("name", list(SPECIES))
def test_closed_forms(name):
    s = SPECIES[name]
    omega = 2 * math.pi * C / s.wavelength
    k = 2 * math.pi / s.wavelength
    # Steck, D Line Data: I_sat = hbar w0^3 Gamma / (12 pi c^2), T_D = hbar Gamma / 2 k_B,
    # v_r = hbar k / m, T_r = hbar^2 k^2 / (m k_B)
    assert s.saturation_intensity == pytest.approx(
        HBAR * omega**3 * s.linewidth / (12 * math.pi * C**2), rel=1e-12
    )
    assert s.doppler_temperature == pytest.approx(HBAR * s.linewidth / (2 * KB), rel=1e-12)
    assert s.recoil_velocity == pytest.approx(HBAR * k / s.mass, rel=1e-12)
    assert s.recoil_temperature == pytest.approx((HBAR * k) ** 2 / (s.mass * KB), rel=1e-12)
    assert s.angular_frequency == pytest.approx(omega, rel=1e-12)
    assert s.linewidth_hz == pytest.approx(s.linewidth / (2 * math.pi), rel=1e-12)
    # Metcalf & van der Straten 1999, ch. 2: F_max = hbar k Gamma / 2
    assert s.max_acceleration * s.mass == pytest.approx(HBAR * k * s.linewidth / 2, rel=1e-12)


# Pinned values: references.md table rows (Steck D Line Data for Rb, Cs, Na; Tiecke for K;
# Gehm for the Li-7 linewidth; Puljic et al. 2025 for Sr 1P1). Columns: wavelength (nm),
# Gamma/2pi (MHz), I_sat (mW/cm^2), mass (u), T_D (uK), T_r (nK).
PINNED = {
    "Rb87": (780.241209686, 6.0666, 1.66933, 86.909180531, 145.57, 361.96),  # Steck Rb-87
    "Rb85": (780.24136827, 6.0666, 1.6693, 84.911789738, 145.57, 370.47),  # Steck Rb-85
    "Cs133": (852.34727582, 5.2227, 1.1023, 132.905451961, 125.3, 198.34),  # Steck Cs
    "Na23": (589.1583264, 9.7946, 6.2600, 22.989769282, 235.0, 2400.0),  # Steck Na (memory)
    "K39": (766.700921822, 6.035, 1.750, 38.963706486, 144.8, 836.0),  # Tiecke K
    "Li7": (670.961, 5.87, 2.54, 7.016003437, 140.9, 6060.0),  # Gehm, NIST
    "Sr88": (460.862, 30.5, 40.7, 87.9056125, 730.0, 1030.0),  # Puljic 2025 (tau 5.216 ns)
}


@pytest.mark.parametrize("name", list(PINNED))
def test_pinned_table(name):
    lam, gamma_mhz, isat, mass_u, t_d, t_r = PINNED[name]
    s = SPECIES[name]
    assert s.wavelength * 1e9 == pytest.approx(lam, rel=2e-6)
    assert s.linewidth_hz * 1e-6 == pytest.approx(gamma_mhz, rel=2e-3)
    assert s.saturation_intensity * 0.1 == pytest.approx(isat, rel=2e-3)  # W/m^2 -> mW/cm^2
    assert s.mass / U == pytest.approx(mass_u, rel=1e-9)
    assert s.doppler_temperature * 1e6 == pytest.approx(t_d, rel=5e-3)
    assert s.recoil_temperature * 1e9 == pytest.approx(t_r, rel=5e-3)


def test_strontium_intercombination_line():
    s = SPECIES["Sr88-689"]
    # references.md: Sr 689 nm, Gamma/2pi = 7.5 kHz, T_D = 179 nK [P], I_sat ~ 3 uW/cm^2 [F]
    assert s.linewidth_hz == pytest.approx(7.5e3, rel=1e-9)
    assert s.doppler_temperature == pytest.approx(179e-9, rel=0.01)
    assert s.saturation_intensity * 0.1 == pytest.approx(3e-3, rel=0.01)
    # 3P1 g_J = 3/2, so the stretched 1S0 -> 3P1 m=1 line shifts by 1.5 mu_B (common practice)
    assert s.zeeman_coefficient == pytest.approx(1.5 * MU_B)
    assert s.leak_probability(-100e3) == 0.0


@pytest.mark.parametrize("name", ALKALIS)
def test_alkali_zeeman_coefficient(name):
    # references.md: stretched D2 cycling line mu' ~ 1.0 mu_B, 1.40 MHz/G [F]
    mu = SPECIES[name].zeeman_coefficient
    assert mu == pytest.approx(MU_B, rel=1e-12)
    assert mu * 1e-4 / constants.h * 1e-6 == pytest.approx(1.40, abs=0.005)  # MHz per gauss


# Alcock, Itkin & Horrigan 1984, Table 2 form, as recomputed in references.md [F]
@pytest.mark.parametrize(
    ("name", "torr"),
    [("Rb87", 3.99e-7), ("Cs133", 1.51e-6), ("K39", 1.82e-8), ("Na23", 2.43e-11)],
)
def test_alcock_room_temperature(name, torr):
    assert SPECIES[name].vapor.pressure(298.15) / TORR == pytest.approx(torr, rel=0.005)


def test_alcock_both_branches():
    vapor = SPECIES["Rb87"].vapor
    # Alcock 1984 Table 2, Rb: solid 4.857 - 4215/T, liquid 4.312 - 4040/T (log10 atm),
    # exact outside the +-3 K blend around the melting point (312.46 K)
    for t in (280.0, 300.0, 309.0):
        assert vapor.pressure(t) == pytest.approx(101325 * 10 ** (4.857 - 4215 / t), rel=1e-12)
    for t in (316.0, 350.0, 450.0):
        assert vapor.pressure(t) == pytest.approx(101325 * 10 ** (4.312 - 4040 / t), rel=1e-12)
    assert vapor.pressure(np.array([[300.0, 350.0]])).shape == (1, 2)
    assert vapor.pressure(0.0) == 0.0


@pytest.mark.parametrize("name", ["Rb87", "Cs133", "K39", "Na23"])
def test_vapor_pressure_is_continuous_through_the_melting_point(name):
    # Alcock 1984 quote +-5 %: within the blend the pressure stays between (and within 5 % of)
    # the two branches, and its logarithmic slope stays finite and between theirs
    vapor = SPECIES[name].vapor
    tm = vapor.melting_point
    t = np.linspace(tm - 6, tm + 6, 12001)
    p = vapor.pressure(t)
    solid = 101325 * 10 ** (vapor.solid_a + vapor.solid_b / t)
    liquid = 101325 * 10 ** (vapor.liquid_a + vapor.liquid_b / t)
    assert np.all(p >= np.minimum(solid, liquid) * (1 - 1e-12))
    assert np.all(p <= np.maximum(solid, liquid) * (1 + 1e-12))
    assert np.all(np.abs(p / solid - 1) < 0.05) or np.all(np.abs(p / liquid - 1) < 0.05)
    slope = np.diff(np.log(p)) / np.diff(t)
    # Clausius-Clapeyron slopes -B ln10 / T^2 of the two branches bound the blend's slope
    # up to the blending term, which is the branch difference (< 5 %) over the 6 K blend
    bound = np.log(10) * max(-vapor.solid_b, -vapor.liquid_b) / (tm - 6) ** 2 + 0.05 / 3
    assert np.all(slope > 0) and np.all(slope < bound)
    assert np.max(np.abs(np.diff(slope))) < 1e-3 * bound  # no kink steps at this resolution


@settings(derandomize=True, deadline=None)  # fixed examples, no timing
@given(
    st.sampled_from(ALKALIS),
    st.floats(200.0, 800.0),
    st.floats(0.01, 50.0),
)
def test_vapor_pressure_increases_with_temperature(name, t, dt):
    vapor = SPECIES[name].vapor
    # Clausius-Clapeyron: B < 0 in both phases (common practice); the blend keeps it rising
    assert vapor.pressure(t + dt) > vapor.pressure(t)


# --- dark-state leak -------------------------------------------------------------------


@pytest.mark.parametrize(
    ("name", "spin"), [("Rb87", 1.5), ("Rb85", 2.5), ("Cs133", 3.5), ("Na23", 1.5)]
)
def test_leak_factors_from_6j_symbols(name, spin):
    wigner_6j = pytest.importorskip("sympy.physics.wigner").wigner_6j
    # Steck, D Line Data: S_FF' = (2F'+1)(2J+1) {J J' 1; F' F I}^2; decay branching of F'
    # to F = (2J'+1)(2F+1) {J' F' I; F J 1}^2 (computed here with sympy)
    j, jp = 0.5, 1.5
    f, fp = spin + 0.5, spin + 1.5

    def strength(f_, fp_):
        return float((2 * fp_ + 1) * (2 * j + 1) * wigner_6j(j, jp, 1, fp_, f_, spin) ** 2)

    branch = float(
        (2 * jp + 1) * (2 * (f - 1) + 1) * wigner_6j(jp, fp - 1, spin, f - 1, j, 1) ** 2
    )
    s = SPECIES[name]
    assert s.leak_relative_strength == pytest.approx(strength(f, fp - 1) / strength(f, fp))
    assert s.leak_branching == pytest.approx(branch)


def test_rb87_leak_is_about_one_in_ten_thousand():
    rb = species("Rb87")
    gamma_hz = rb.linewidth_hz
    # common practice: "about one decay in 10,000 leaves the cycling transition" near the
    # usual MOT detunings (-1 to -2 Gamma)
    p = rb.leak_probability(np.array([-1.0, -1.5, -2.0]) * gamma_hz)
    assert np.all((p > 5e-5) & (p < 5e-4))
    # without a repumper, at ~6e6 photons/s the atoms go dark within ms to tens of ms
    # (common practice)
    dark_time = 1.0 / (6e6 * p)
    assert np.all((dark_time > 3e-4) & (dark_time < 3e-2))


def test_leak_formula_and_trends():
    rb = species("Rb87")
    gamma = rb.linewidth
    det = -12e6
    on = 1 + (4 * math.pi * det / gamma) ** 2
    off = 1 + (4 * math.pi * (det + 266.65e6) / gamma) ** 2
    r = (5 / 14) * on / off  # Steck S22/S23 = (1/4)/(7/10); F'=2 is 266.65 MHz below F'=3
    assert rb.leak_probability(det) == pytest.approx(0.5 * r / (1 + r), rel=1e-12)
    # red detuning moves the laser towards F'=2: the leak grows
    assert rb.leak_probability(-20e6) > rb.leak_probability(-5e6) > rb.leak_probability(0.0)
    # saturating the cycling line (not the far-detuned one) raises the leak per photon
    assert rb.leak_probability(-10e6, saturation=10.0) > rb.leak_probability(-10e6)
    # the leak can never exceed the branching ratio
    assert float(rb.leak_probability(-266.65e6)) <= rb.leak_branching
    assert rb.leak_probability(np.zeros((3, 2))).shape == (3, 2)


def test_strontium_leak_floor():
    sr = species("Sr88")
    # 1P1 -> 1D2 decay rate 5.3(5)e3 /s (Okamoto, Aoki & Torii, arXiv:2510.22184) times the
    # 1P1 lifetime 5.216 ns (Puljic et al. 2025), independent of detuning; the window is the
    # rate's own 10 %, which the older "1 in 50 000" (from memory, 28 % lower) would fail
    p = sr.leak_probability(np.array([0.0, -30e6]))
    assert p == pytest.approx(5.3e3 * 5.216e-9, rel=1e-12)
    assert np.all(np.abs(p / 2.76e-5 - 1) < 0.1)
    assert math.isnan(sr.upper_hyperfine_splitting)
    assert sr.vapor is not None


# --- look-up and table -----------------------------------------------------------------


@pytest.mark.parametrize(
    ("spelling", "key"),
    [
        ("Rb87", "Rb87"),
        ("Rb-87", "Rb87"),
        ("87Rb", "Rb87"),
        ("rb87", "Rb87"),
        ("rubidium-87", "Rb87"),
        ("RB_85", "Rb85"),
        ("Cs", "Cs133"),
        ("caesium 133", "Cs133"),
        ("133Cs", "Cs133"),
        ("k-39", "K39"),
        ("Na", "Na23"),
        ("7Li", "Li7"),
        ("Sr88", "Sr88"),
        ("Sr-88 461", "Sr88"),
        ("Sr88-689", "Sr88-689"),
        ("88Sr 689", "Sr88-689"),
    ],
)
def test_species_spellings(spelling, key):
    assert species(spelling) is SPECIES[key]


@pytest.mark.parametrize("bad", ["Rb", "Rb86", "Fr223", "", "hydrogen", "Sr88-555"])
def test_unknown_species(bad):
    with pytest.raises(ModelError, match=r"not known; use one of: Rb87, Rb85, Cs133"):
        species(bad)


def test_species_passthrough_and_pickle():
    rb = SPECIES["Rb87"]
    assert species(rb) is rb
    assert isinstance(rb, Species)
    assert isinstance(rb.vapor, VaporPressure)
    with pytest.raises(AttributeError, match="cannot assign"):
        rb.mass = 1.0
    assert set(SPECIES) == {"Rb87", "Rb85", "Cs133", "K39", "Na23", "Li7", "Sr88", "Sr88-689"}
    assert pickle.loads(pickle.dumps(rb.vapor)) == rb.vapor
    for s in SPECIES.values():
        again = pickle.loads(pickle.dumps(s))
        assert repr(again) == repr(s)  # repr: NaN splittings compare unequal
        assert isinstance(hash(again), int)  # hashable (frozen, usable as a cache key)
    assert dict(rb.sources) == dict(pickle.loads(pickle.dumps(rb.sources)))


def test_every_value_has_a_source():
    needed = {"wavelength", "linewidth", "mass", "saturation_intensity"}
    for s in SPECIES.values():
        assert needed <= set(s.sources), s.name
        assert all(isinstance(v, str) and v for v in s.sources.values())


def test_species_table_rows():
    rows = species_table()
    assert [r["name"] for r in rows] == list(SPECIES)
    rb = rows[0]
    # Steck Rb-87 D Line Data: 780.241 nm, 6.0666 MHz, 1.669 mW/cm^2, 145.57 uK, 361.96 nK
    assert rb["wavelength_nm"] == pytest.approx(780.241209686)
    assert rb["linewidth_mhz"] == pytest.approx(6.0666)
    assert rb["saturation_intensity_mw_cm2"] == pytest.approx(1.66933, rel=1e-4)
    assert rb["mass_u"] == pytest.approx(86.909180531)
    assert rb["doppler_temperature_uk"] == pytest.approx(145.57, rel=1e-4)
    assert rb["recoil_temperature_nk"] == pytest.approx(361.96, rel=1e-4)
    assert rb["sources"]["wavelength"].startswith("D. A. Steck")
