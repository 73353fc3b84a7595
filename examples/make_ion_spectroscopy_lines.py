#!/usr/bin/env python3
"""Makes examples/ion_spectroscopy_lines.csv: INVENTED demo data for `trapwork fit`.

The "true" trap is the one of examples/ion_shuttle_model.toml (a 40 u ion, 0.9986 MHz, cubic
-0.02 h*Hz/nm^3, quartic 5e-4 h*Hz/nm^4). Its levels are computed by `trapwork spectrum` (Fourier
grid, not the Hermite basis the fit uses) with a static tilt F x added as a formula term, at
three tilts; each transition frequency (E_upper - E_lower)/h gets Gaussian noise of its stated
uncertainty from Python's random.Random(seed 2026).gauss. One extra row, marked keep = 0,
stands for a scan the (imaginary) experiment rejected.

Usage: python3 examples/make_ion_spectroscopy_lines.py BUILD/trapwork [OUTPUT.csv]
Standard library only.
"""
import csv
import pathlib
import random
import subprocess
import sys
import tempfile

FREQUENCY = "0.9986 MHz"
CUBIC = "-0.02 h*Hz/nm^3"
QUARTIC = "5e-4 h*Hz/nm^4"
FORCES_H_HZ_PER_NM = [-4.0e5, 0.0, 4.0e5]  # about -+100 nm of static displacement
PAIRS = [(0, 1, 0.015), (1, 2, 0.020), (2, 3, 0.025), (0, 2, 0.030)]  # lower, upper, sigma (kHz)
SEED = 2026

SCENARIO = """title = "true trap of the spectroscopy demo, tilt {force} h*Hz/nm"
[particle]
mass = "40 u"
[units]
reference_frequency = "1 MHz"
energy = "h*kHz"
[[potential]]
name = "trap"
shape = "polynomial"
frequency = "{frequency}"
cubic = "{cubic}"
quartic = "{quartic}"
[[potential]]
name = "tilt"
shape = "formula"
expression = "f*x"
x_unit = "nm"
energy_unit = "h*Hz"
[potential.parameters]
f = {force}
[spectrum]
levels = 6
"""


def levels_kHz(trapwork, folder, force):
    scenario = folder / f"tilt_{force:+.0f}.toml"
    scenario.write_text(SCENARIO.format(force=force, frequency=FREQUENCY, cubic=CUBIC, quartic=QUARTIC))
    out = folder / f"out_{force:+.0f}"
    subprocess.run([trapwork, "spectrum", str(scenario), "-o", str(out), "--quiet"], check=True)
    with open(out / "spectrum.csv") as f:
        rows = [r for r in csv.reader(f) if r and not r[0].startswith("#")]
    column = rows[0].index("energy_h_kHz")
    return [float(r[column]) for r in rows[1:]]


def main():
    trapwork = sys.argv[1]
    target = pathlib.Path(sys.argv[2] if len(sys.argv) > 2 else pathlib.Path(__file__).parent / "ion_spectroscopy_lines.csv")
    noise = random.Random(SEED)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for force in FORCES_H_HZ_PER_NM:
            e = levels_kHz(trapwork, pathlib.Path(tmp), force)
            for lower, upper, sigma in PAIRS:
                nu = e[upper] - e[lower] + noise.gauss(0.0, sigma)
                rows.append((lower, upper, f"{nu:.5f}", f"{sigma:g}", f"{force:g}", 1))
    rows.append((0, 1, "998.91234", "0.015", "0", 0))  # the rejected scan
    # The column names first, the provenance comments after them: numpy.genfromtxt(names=True)
    # would take a comment line before the names as the names (README's loading recipe).
    comments = f"""# INVENTED DEMO DATA, not a measurement: motional sideband spectroscopy of a 40 u ion.
# Made by examples/make_ion_spectroscopy_lines.py from the trap of ion_shuttle_model.toml:
#   frequency {FREQUENCY}, cubic {CUBIC}, quartic {QUARTIC}, plus a static tilt F x (linear_coefficient = F)
# (levels from `trapwork spectrum`), with Gaussian noise of the stated uncertainty (seed {SEED}).
# lower, upper: levels of the transition; keep = 0 marks a scan the experiment rejected.
"""
    with open(target, "w") as f:
        f.write("lower,upper,frequency_kHz,uncertainty_kHz,linear_coefficient_h_Hz/nm,keep\n")
        f.write(comments)
        for r in rows:
            f.write(",".join(str(x) for x in r) + "\n")


if __name__ == "__main__":
    main()
