"""Generate the invented demo data of the Harrier Lab (calibration files and a week of log).

INVENTED DATA. The Harrier Lab, its Kite-2 source and every number written by
this script are invented for demonstration. The files are computed from
trapbudget's own VaporCellMOT with the "true" constants below, plus noise of a
realistic size; they are not measurements of any apparatus.

Run ``python -m trapbudget.examples.make_demo_data [FOLDER]`` (default: the
folder of this file). The seed is fixed, so the files are reproducible.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

from trapbudget.sensitivity.io import atomic_write_text
from trapbudget.sensitivity.scenario.reader import load_scenario

HERE = Path(__file__).resolve().parent
SCENARIO = HERE / "harrier-rb87.toml"
SEED = 20261123

#: The invented apparatus' "true" constants (what calibration should find).
TRUE_CONSTANTS = {
    "loading_prefactor": 0.45,
    "vapor_loss_coefficient": 4.0e-15,  # m^3/s
    "sub_doppler_coefficient": 0.35,
    "detector_efficiency": 0.35,
}

#: Faults injected into the week log (not visible in any logged channel).
FAULT_DAY = 4  # 0-based: the fifth day
FAULT_BEAM_OFFSET = 2.5e-3  # m: a beam knocked out of alignment that day

BANNER = "# INVENTED DEMO DATA (Harrier Lab, Kite-2 source): computed from the model, not measured"


def _rows(columns: dict[str, np.ndarray], formats: dict[str, str]) -> list[str]:
    names = list(columns)
    n = len(columns[names[0]])
    return [
        ",".join(format(columns[name][i], formats.get(name, ".6g")) for name in names)
        for i in range(n)
    ]


def _csv(meta: list[str], header: str, rows: list[str]) -> str:
    return "\n".join([BANNER, *meta, header, *rows]) + "\n"


def loading_curves(model, nominal, rng) -> str:
    """Fluorescence while the MOT loads from empty, at three detunings."""
    lines: list[str] = []
    for detuning in (-9e6, -12e6, -15e6):
        values = {**nominal, **TRUE_CONSTANTS, "detuning": detuning}
        out = model.evaluate(values)
        steady, tau = float(out["fluorescence"]), float(out["loading_time"])
        t = np.linspace(0.0, 6 * tau, 40)
        signal = steady * (1 - np.exp(-t / tau))
        u = 0.01 * steady + 0.02 * signal  # detector offset noise plus a 2 % gain jitter
        measured = signal + rng.normal(0.0, u)
        lines += _rows(
            {
                "time": t,
                "fluorescence": measured,
                "fluorescence_uncertainty": u,
                "detuning": np.full(t.size, detuning / 1e6),
            },
            {"time": ".5f", "detuning": ".1f"},
        )
    return _csv(
        [
            "# kind = loading-curve",
            "# label = loading curves (invented)",
            "# setting beam_power = 6 mW",
        ],
        "time [s],fluorescence [1/s],fluorescence_uncertainty [1/s],detuning [MHz]",
        lines,
    )


def detuning_scan(model, nominal, rng) -> str:
    """Steady-state atom number from absorption imaging, three shots per detuning."""
    detuning = np.repeat(np.arange(-20.0, -5.0, 2.0) * 1e6, 3)
    out = model.evaluate({**nominal, **TRUE_CONSTANTS, "detuning": detuning})
    measured = out["atom_number"] * (1 + rng.normal(0.0, 0.04, detuning.size))
    return _csv(
        ["# kind = steady-state", "# label = detuning scan, absorption imaging (invented)"],
        "detuning [MHz],atom_number [1]",
        _rows({"detuning": detuning / 1e6, "atom_number": measured}, {"detuning": ".1f"}),
    )


def time_of_flight(model, nominal, mass, rng) -> str:
    """Rms cloud radius after release, at two detunings."""
    import scipy.constants as const

    lines: list[str] = []
    for detuning in (-12e6, -18e6):
        out = model.evaluate({**nominal, **TRUE_CONSTANTS, "detuning": detuning})
        sigma0, temperature = float(out["cloud_radius"]), float(out["temperature"])
        t = np.linspace(1e-3, 15e-3, 12)
        radius = np.sqrt(sigma0**2 + const.k * temperature * t**2 / mass)
        u = np.full(t.size, 15e-6)
        lines += _rows(
            {
                "time": t * 1e3,
                "cloud_radius": (radius + rng.normal(0.0, u)) * 1e3,
                "cloud_radius_uncertainty": u * 1e3,
                "detuning": np.full(t.size, detuning / 1e6),
            },
            {
                "time": ".2f",
                "cloud_radius": ".5f",
                "cloud_radius_uncertainty": ".3f",
                "detuning": ".1f",
            },
        )
    return _csv(
        ["# kind = time-of-flight", "# label = time of flight (invented)"],
        "time [ms],cloud_radius [mm],cloud_radius_uncertainty [mm],detuning [MHz]",
        lines,
    )


def week_log(model, nominal, rng) -> str:
    """A week of monitoring every 30 minutes: drifting room temperature, a slipping lock."""
    per_day, days = 48, 7
    t = np.arange(per_day * days) / per_day  # days since the start
    day = np.floor(t).astype(int)
    room = 22.0 + 0.15 * t + 0.8 * np.sin(2 * np.pi * (t - 0.35)) + rng.normal(0, 0.05, t.size)
    lock = 0.15 * t + rng.normal(0.0, 0.05, t.size)  # MHz: the lock point creeps to the red
    # fibre coupling loses 1.5 % per kelvin of room temperature (seen by the photodiode)
    photodiode = 2.0 * (1 - 0.015 * (room - 22.0)) * (1 + rng.normal(0.0, 0.004, t.size))  # V
    coil = 3.0 * (1 + rng.normal(0.0, 0.001, t.size))  # A; 4 G/cm per A
    pump = 0.5 * (1 + 0.02 * t + rng.normal(0.0, 0.01, t.size))  # uA; 2e-9 mbar/uA
    humidity = 40 + 5 * np.sin(2 * np.pi * t / 3) + rng.normal(0, 0.5, t.size)  # % (unused)
    offset = np.where(day == FAULT_DAY, FAULT_BEAM_OFFSET, nominal["beam_offset"])
    values = {
        **nominal,
        **TRUE_CONSTANTS,
        "cell_temperature": room + 273.15,
        "detuning": nominal["detuning"] - lock * 1e6,
        "beam_power": photodiode * 3e-3,
        "gradient": coil * 4e-2,
        "background_pressure": pump * 2e-9 * 100,
        "beam_offset": offset,
    }
    truth = model.evaluate(values)["atom_number"]
    measured = truth * (1 + rng.normal(0.0, 0.02, t.size))
    start = np.datetime64("2026-11-23T00:00:00")
    stamps = start + np.round(t * 86400).astype("timedelta64[s]")
    columns = {
        "timestamp": stamps.astype(str),
        "room_temperature": room,
        "cooling_photodiode": photodiode,
        "lock_error": -lock,
        "coil_current": coil,
        "ion_pump_current": pump,
        "lab_humidity": humidity,
        "atom_number": measured,
    }
    formats = {
        "timestamp": "s",
        "room_temperature": ".3f",
        "cooling_photodiode": ".5f",
        "lock_error": ".4f",
        "coil_current": ".5f",
        "ion_pump_current": ".5f",
        "lab_humidity": ".1f",
        "atom_number": ".5e",
    }
    rows = [",".join(format(columns[k][i], formats[k]) for k in columns) for i in range(t.size)]
    return _csv(
        ["# label = Kite-2 monitoring log, week 48 (invented)"],
        "timestamp,room_temperature [degC],cooling_photodiode [V],lock_error [MHz],"
        "coil_current [A],ion_pump_current [uA],lab_humidity [%],atom_number [1]",
        rows,
    )


def main(folder: str | Path = HERE) -> list[Path]:
    """Write the demo data files into ``folder`` and return their paths."""
    from trapbudget.models.catalog import species

    folder = Path(folder)
    scenario = load_scenario(SCENARIO)
    model = scenario.model
    nominal = dict(scenario.nominal)
    mass = float(species(scenario.species).mass)
    rng = np.random.default_rng(SEED)
    files = {
        "harrier-loading-curves.csv": loading_curves(model, nominal, rng),
        "harrier-detuning-scan.csv": detuning_scan(model, nominal, rng),
        "harrier-time-of-flight.csv": time_of_flight(model, nominal, mass, rng),
        "harrier-week-log.csv": week_log(model, nominal, rng),
    }
    return [atomic_write_text(folder / name, text) for name, text in files.items()]


if __name__ == "__main__":
    for written in main(*sys.argv[1:2]):
        print(written)
