"""Scans of VaporCellMOT atom number beside the published shapes, drawn as PNG figures.

Run by hand::

    python benchmarks/validation_scans.py [--out benchmarks]

Writes ``scan_detuning.png``, ``scan_intensity.png``, ``scan_gradient.png`` and
``scan_beam_size.png`` and prints the figures of merit. Shaded bands and guide lines
are the published shapes (windows from memory of the figures unless stated):

* detuning, intensity, gradient: Cs, 1 cm beams (5 mm waist), as in Lindquist,
  Stephens & Wieman, PRA 46, 4082 (1992) and Gibble, Kasapi & Chu, Opt. Lett. 17, 526
  (1992): a broad maximum at -1.5 to -3 Gamma, saturation with intensity, a gradient
  optimum near 10 G/cm (5-20 G/cm band);
* beam size: Rb, fixed intensity, best detuning, no two-body loss: N ~ d^3.6 above
  about 2 mm (Monroe, Swann, Robinson & Wieman, PRL 65, 1571 (1990)) and toward d^6
  below d = 2.3 mm, d the diameter where I = I_sat (Hoth, Donley & Kitching, Opt. Lett.
  38, 661 (2013)).
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
import numpy as np

from trapbudget.models import VaporCellMOT, species

CS, RB = species("Cs133"), species("Rb87")


def _power(sp, s0, waist):
    return s0 * sp.saturation_intensity * math.pi * waist**2 / 2


def detuning_scan(model, out: Path) -> None:
    det = -np.linspace(0.3, 6.0, 115)
    fig, ax = plt.subplots(figsize=(6, 4))
    ax.axvspan(-3.0, -1.5, color="0.85", label="published maximum (Lindquist 1992, Gibble 1992)")
    for s0 in (2.0, 5.0, 15.0):
        n = model.evaluate(
            {
                "beam_power": _power(CS, s0, 5e-3),
                "detuning": det * CS.linewidth_hz,
                "aperture_radius": 0.05,
            }
        )["atom_number"]
        ax.plot(det, n / n.max(), label=f"model, s0 = {s0:g}")
        print(f"detuning: s0 = {s0:4g}: best {det[np.argmax(n)]:+.2f} Gamma")
    ax.set(xlabel="detuning (Gamma)", ylabel="N / max", title="Cs, 1 cm beams, 10 G/cm")
    ax.legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(out / "scan_detuning.png", dpi=120)
    plt.close(fig)


def intensity_scan(model, out: Path) -> None:
    s0 = np.geomspace(0.3, 300, 25)
    det = -np.linspace(0.3, 8.0, 78)[:, None] * CS.linewidth_hz
    n = model.evaluate(
        {"beam_power": _power(CS, s0, 5e-3), "detuning": det, "aperture_radius": 0.05}
    )["atom_number"].max(axis=0)
    ref = np.interp(math.log(15), np.log(s0), n)
    fig, ax = plt.subplots(figsize=(6, 4))
    ax.fill_between(
        [15, 150],
        [ref, ref],
        [1.5 * ref, 1.5 * ref],
        color="0.85",
        label="published saturation: N(150) within 1.5x of N(15)",
    )
    ax.loglog(s0, n, "o-", ms=3, label="model, best detuning")
    ax.set(xlabel="s0 per beam (I / I_sat)", ylabel="N", title="Cs, 1 cm beams, 10 G/cm")
    ax.legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(out / "scan_intensity.png", dpi=120)
    plt.close(fig)
    n150 = np.interp(math.log(150), np.log(s0), n)
    print(f"intensity: N(s0=150)/N(s0=15) = {n150 / ref:.2f}")


def gradient_scan(model, out: Path) -> None:
    g = np.geomspace(1, 80, 30)
    det = -np.linspace(0.3, 6.0, 58)[:, None] * CS.linewidth_hz
    n = model.evaluate(
        {
            "gradient": g * 1e-2,
            "detuning": det,
            "beam_power": _power(CS, 5.0, 5e-3),
            "aperture_radius": 0.05,
        }
    )["atom_number"].max(axis=0)
    fig, ax = plt.subplots(figsize=(6, 4))
    ax.axvspan(5, 20, color="0.85", label="published optimum (Lindquist 1992)")
    ax.semilogx(g, n / n.max(), "o-", ms=3, label="model, s0 = 5, best detuning")
    ax.set(xlabel="axial gradient (G/cm)", ylabel="N / max", title="Cs, 1 cm beams")
    ax.legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(out / "scan_gradient.png", dpi=120)
    plt.close(fig)
    print(f"gradient: best {g[np.argmax(n)]:.1f} G/cm")


def size_scan(model, out: Path) -> None:
    s0 = 4.6
    waist = np.geomspace(0.4e-3, 12.5e-3, 22)
    det = -np.linspace(0.3, 6.0, 58)[:, None] * RB.linewidth_hz
    n = model.evaluate(
        {
            "beam_waist": waist,
            "beam_power": _power(RB, s0, waist),
            "detuning": det,
            "aperture_radius": 0.1,
            "two_body_coefficient": 0.0,
        }
    )["atom_number"].max(axis=0)
    d_sat = waist * math.sqrt(2 * math.log(s0)) * 1e3  # mm, diameter where I = I_sat
    big = d_sat > 3.5
    small = d_sat < 2.3
    p_big = np.polyfit(np.log(d_sat[big]), np.log(n[big]), 1)[0]
    p_small = np.polyfit(np.log(d_sat[small]), np.log(n[small]), 1)[0]
    fig, ax = plt.subplots(figsize=(6, 4))
    ax.loglog(d_sat, n, "o", ms=3, label="model")
    anchor = np.interp(math.log(2.3), np.log(d_sat), n)
    d1 = np.geomspace(2.3, d_sat.max(), 10)
    d2 = np.geomspace(d_sat.min(), 2.3, 10)
    ax.loglog(d1, anchor * (d1 / 2.3) ** 3.6, "k--", label="d^3.6 (Monroe 1990, Hoth 2013)")
    ax.loglog(d2, anchor * (d2 / 2.3) ** 6, "k:", label="d^6 below 2.3 mm (Hoth 2013)")
    ax.set(xlabel="d at I = I_sat (mm)", ylabel="N", title="Rb, s0 = 4.6, best detuning")
    ax.legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(out / "scan_beam_size.png", dpi=120)
    plt.close(fig)
    print(f"beam size: exponent {p_big:.2f} above 3.5 mm, {p_small:.2f} below 2.3 mm")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parent)
    args = parser.parse_args()
    args.out.mkdir(parents=True, exist_ok=True)
    cs, rb = VaporCellMOT("Cs133"), VaporCellMOT("Rb87")
    detuning_scan(cs, args.out)
    intensity_scan(cs, args.out)
    gradient_scan(cs, args.out)
    size_scan(rb, args.out)


if __name__ == "__main__":
    main()
