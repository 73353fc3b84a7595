# %% [markdown]
# # Shuttling an ion: calibrate the trap, predict P(W), compare with data
#
# A notebook-style script (cells marked `# %%`: VS Code, Spyder and Jupytext open it as a
# notebook; `python3 examples/notebook_shuttle.py [output folder]` runs it top to bottom and
# saves the figures as PNG files there, default `notebook-output/`). Everything in it is an
# invented lab setting: the demo data in `examples/` say so in their headers.
#
# 1. fit the trap (frequency, cubic and quartic terms) to measured transition frequencies;
# 2. with the fitted trap, predict the work distribution of a 60 nm shuttle for several
#    durations in a plain Python loop, collecting <W> and sd(W) with their error estimates;
# 3. compare the prediction at 0.8 us with 400 measured work values;
# 4. plot <W>(tau), P(W) and the comparison with matplotlib.
#
# Needs the trapwork module (after the Quick start: `PYTHONPATH=build/python`) and
# python3-matplotlib.

# %%
import csv
import math
import pathlib
import sys

import matplotlib

if __name__ == "__main__" and not hasattr(sys, "ps1") and "ipykernel" not in sys.modules:
    matplotlib.use("Agg")  # run as a script: files only, no window
import matplotlib.pyplot as plt
import numpy as np

import trapwork
import trapwork.plot

here = pathlib.Path(__file__).resolve().parent if "__file__" in globals() else pathlib.Path("examples")
arguments = [a for a in sys.argv[1:] if not a.startswith("-")] if "ipykernel" not in sys.modules else []
output = pathlib.Path(arguments[0] if arguments else "notebook-output")
output.mkdir(parents=True, exist_ok=True)

# %% [markdown]
# ## 1. Calibrate the trap
# Sideband spectroscopy at three static tilts gives transition frequencies between the lowest
# levels; `trapwork.fit` adjusts the polynomial trap of the start scenario (nominal 1 MHz,
# purely harmonic) to them. The fitted scenario keeps the start's shuttle protocol.

# %%
start = trapwork.Scenario.from_file(here / "ion_spectroscopy_start.toml")
calibration = trapwork.fit(str(here / "ion_spectroscopy_lines.csv"), start=start,
                           terms="frequency,cubic,quartic")
coefficients = {c["name"]: c for c in calibration.summary["coefficients"]}
print("fitted trap (chi^2 = %.3g for %d degrees of freedom, p = %.3g):"
      % (calibration.summary["chi_square"], calibration.summary["degrees_of_freedom"],
         calibration.summary["p_value"]))
for c in coefficients.values():
    print(f"  {c['name']:<10} {c['value']:.7g} +- {c['uncertainty']:.2g} {c['unit']}")
model = calibration.scenario

# %% [markdown]
# The fit residuals, in units of each line's stated uncertainty (plain matplotlib on the
# result's table, the same numbers as fit_lines.csv).

# %%
lines = calibration.tables["fit_lines"]
fig, ax = plt.subplots(figsize=(7, 3.5), layout="constrained")
ax.axhline(0, color="0.5", linewidth=1)
ax.plot(lines["line"], lines["residual_sigma"], "o")
ax.set_xlabel("transition (line of the data file)")
ax.set_ylabel("residual (measured - model) / uncertainty")
ax.set_title("trap calibration: residuals of the fit")
fig.savefig(output / "fit_residuals.png", dpi=120)

# %% [markdown]
# ## 2. P(W) over the shuttle duration, in a Python loop
# `with_values` changes one key of the scenario (the same addresses as sweeps use); each
# `trapwork.work` call returns numpy tables and the summary with <W>, sd(W) and their
# truncation errors in the scenario's energy unit.

# %%
durations_us = [0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0, 1.2, 1.4, 1.6, 1.8, 2.0]
rows = []
results = {}
for tau in durations_us:
    result = trapwork.work(model.with_values({"protocol.duration": f"{tau:g} us"}))
    w = result.summary["work"]
    rows.append({"duration_us": tau,
                 "mean_work": w["mean"]["value"], "mean_work_error": w["mean_error"]["value"],
                 "sd_work": w["sd"]["value"], "sd_work_error": w["sd_error"]["value"],
                 # the module's own harmonic reference (displaced oscillator), for the check below
                 "harmonic_reference_mean_work": (result.summary.get("harmonic") or {})
                 .get("mean_work", {}).get("value", math.nan)})
    results[tau] = result
    print(f"tau = {tau:4.2f} us: <W> = {rows[-1]['mean_work']:9.3f} +- {rows[-1]['mean_work_error']:.1e}, "
          f"sd(W) = {rows[-1]['sd_work']:8.3f} +- {rows[-1]['sd_work_error']:.1e}  "
          f"({len(result.warnings)} warning(s))")
energy_unit = results[durations_us[0]].summary["units"]["energy"]

# %% [markdown]
# For comparison: a harmonic trap moved at constant speed v = d / tau receives
# <W> = 2 m v^2 sin^2(omega tau / 2) (the classical energy given by the two velocity jumps,
# common practice; the sweep figure of the command line draws the same curve), here with the
# fitted frequency. The cubic and quartic terms move the numerical <W> away from it.

# %%
mass_kg = 40 * 1.66053906660e-27            # 40 u (CODATA 2018 atomic mass constant)
planck = 6.62607015e-34                      # J s (exact, SI 2019)
frequency_hz = coefficients["frequency"]["value"] * 1e6
distance_m = 60e-9
assert energy_unit == "h*kHz", energy_unit   # the scenario's [units] energy


def harmonic_mean_work(tau_us):
    tau = np.asarray(tau_us) * 1e-6
    v = distance_m / tau
    return 2 * mass_kg * v**2 * np.sin(math.pi * frequency_hz * tau) ** 2 / (planck * 1e3)


for row in rows:
    row["harmonic_mean_work"] = float(harmonic_mean_work(row["duration_us"]))
    # The closed form and the module's harmonic reference describe the same harmonic trap.
    print(f"tau = {row['duration_us']:4.2f} us: harmonic <W> closed form {row['harmonic_mean_work']:9.3f}, "
          f"module's harmonic reference {row['harmonic_reference_mean_work']:9.3f}")
with open(output / "shuttle_durations.csv", "w", newline="") as f:
    writer = csv.DictWriter(f, fieldnames=list(rows[0]))
    writer.writeheader()
    writer.writerows(rows)

# %% [markdown]
# ## 3. The prediction at 0.8 us against the measured work values
# `trapwork.compare` reads the data file (its resolution from the `# resolution:` line) and
# returns the verdict, the statistics and the figure of the command line.

# %%
at = 0.8
comparison = trapwork.compare(model.with_values({"protocol.duration": f"{at:g} us"}),
                              str(here / "ion_work_samples.csv"))
moments = comparison.summary["comparison"]["moments"]
chi2 = comparison.summary["comparison"]["chi_square"]
print(f"compare at {at} us: {comparison.verdict}")
print(f"  measured <W> = {moments['mean']:.1f} +- {moments['mean_error']:.1f} {energy_unit}, "
      f"model <W> = {moments['model_mean']:.1f}; chi^2 p-value = {chi2['p_value']:.3g}")

# %% [markdown]
# ## 4. Pictures
# <W>(tau) and sd(W) as a band, with the harmonic closed form and the measured mean.

# %%
tau = np.array([r["duration_us"] for r in rows])
mean = np.array([r["mean_work"] for r in rows])
mean_error = np.array([r["mean_work_error"] for r in rows])
sd = np.array([r["sd_work"] for r in rows])
fig, ax = plt.subplots(figsize=(8, 5), layout="constrained")
ax.fill_between(tau, mean - sd, mean + sd, color="C0", alpha=0.2, label="<W> ± sd(W)")
ax.errorbar(tau, mean, yerr=mean_error, fmt="o", color="C0", capsize=3,
            label="<W>, fitted trap (error bars: truncation error)")
fine = np.linspace(tau.min(), tau.max(), 400)
ax.plot(fine, harmonic_mean_work(fine), color="C1", label="harmonic, 2 m v² sin²(ωτ/2)")
ax.errorbar([at], [moments["mean"]], yerr=[moments["mean_error"]], fmt="s", color="C3", capsize=4,
            label="measured <W> (400 runs)")
ax.set_xlabel("shuttle duration τ (us)")
ax.set_ylabel(f"work W ({energy_unit})")
ax.set_title("60 nm shuttle of a 40 u ion: mean work against duration")
ax.legend()
fig.savefig(output / "mean_work_vs_duration.png", dpi=120)

# %% [markdown]
# The command line's pictures, drawn with matplotlib by `trapwork.plot` (a result's
# `.plot()` does the same); the returned Figures can be restyled like any other.

# %%
work_figures = trapwork.plot.plot(results[at])
for stem, figure in work_figures.items():
    figure.savefig(output / f"{stem}_{at:g}us.png", dpi=100)
for stem, figure in trapwork.plot.plot(comparison).items():
    figure.savefig(output / f"{stem}.png", dpi=100)
print("figures and numbers in", output)
for path in sorted(output.glob("*")):
    print("  ", path.name)
