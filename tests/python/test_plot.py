"""trapwork.plot: the command line's figures drawn with matplotlib (issue 15, section D).

The figure dicts are built from the files of real command-line runs (the demo, a double-well
spectrum, compare and plan on the examples, a short sweep), in the layout the module gives
them (the C++ structs' fields, numpy arrays, "kind"); where the compiled module is there, its
own figures are drawn too. The checks read the drawn artists back: their data, the axis ranges
plot.cpp states, the floor of the log panel, and that no peak is cut.
"""
import json
import math
import os
import pathlib
import subprocess

import numpy as np
import pytest

matplotlib = pytest.importorskip("matplotlib")
matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from trapwork import plot as tplot  # noqa: E402

REPO = pathlib.Path(__file__).resolve().parents[2]
EXAMPLES = REPO / "examples"


def _cli():
    """The trapwork command line of this build: TRAPWORK_CLI, else beside the package's
    build/python folder, else build/trapwork in the source tree."""
    candidates = []
    if os.environ.get("TRAPWORK_CLI"):
        candidates.append(pathlib.Path(os.environ["TRAPWORK_CLI"]))
    import trapwork
    for path in getattr(trapwork, "__path__", []):
        candidates.append(pathlib.Path(path).resolve().parents[1] / "trapwork")
    candidates.append(REPO / "build" / "trapwork")
    for c in candidates:
        if c.is_file() and os.access(c, os.X_OK):
            return c
    return None


def _table(path):
    """A trapwork CSV file: header line, '#' comments, numbers."""
    with open(path) as f:
        names = f.readline().strip().split(",")
        rows = [line.strip().split(",") for line in f if line.strip() and not line.startswith("#")]
    data = np.array(rows, dtype=float).reshape(len(rows), len(names))
    return {n: data[:, k] for k, n in enumerate(names)}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    cli = _cli()
    if cli is None:
        pytest.skip("the trapwork command line is not built (set TRAPWORK_CLI)")
    root = tmp_path_factory.mktemp("cli")

    def run(*args):
        subprocess.run([str(cli), *map(str, args)], check=True, cwd=REPO, stdout=subprocess.DEVNULL,
                       stderr=subprocess.PIPE, timeout=600)

    run("demo", "-o", root / "demo")
    run("spectrum", EXAMPLES / "double_well.toml", "-o", root / "dw")
    run("compare", EXAMPLES / "ion_shuttle_model.toml", EXAMPLES / "ion_work_samples.csv", "-o", root / "cmp")
    run("plan", EXAMPLES / "ion_shuttle_model.toml", "--resolution", "40 h*kHz", "--runs", "10,30,100,300",
        "--experiments", "200", "-o", root / "plan")
    sweep = (EXAMPLES / "ion_sweep.toml").read_text()
    sweep = sweep.replace('to = "6 us"', 'to = "2.5 us"').replace("points = 12", "points = 5")
    assert 'points = 5' in sweep and '"2.5 us"' in sweep
    (root / "sweep.toml").write_text(sweep)
    run("sweep", root / "sweep.toml", "-o", root / "sweep")
    return root


# ---- figure dicts from the files (fields as in solver/scenario/plot.hpp) ------------------------

def work_figure(root, axis="linear_and_log", decades=12.0):
    lines = _table(root / "demo" / "lines.csv")
    density = _table(root / "demo" / "density.csv")
    summary = json.loads((root / "demo" / "summary.json").read_text())
    p = lines["probability"]
    keep = p >= 1e-14 * p.max()  # as work_output.cpp keeps them
    return {
        "kind": "work", "title": "work distribution (two-point measurement)",
        "work_label": "work W (h*kHz)", "density_label": "density (1/h*kHz)",
        "result": {"label": "numerical (grid)", "work": lines["work_h_kHz"][keep], "probability": p[keep],
                   "density_work": density["work_h_kHz"], "density": density["density_per_h_kHz"]},
        "reference": {"label": "harmonic prediction", "work": np.zeros(0), "probability": np.zeros(0),
                      "density_work": density["work_h_kHz"], "density": density["harmonic_density_per_h_kHz"]},
        "mean_work": summary["work"]["mean"]["value"],
        "free_energy_change": summary["work"]["free_energy_change"]["value"],
        "probability_axis": axis, "log_decades": decades,
    }


def double_well_potential(x_um):
    # examples/double_well.toml: barrier 1 kB*uK, minima 1 um apart; V = barrier ((x/a)^2 - 1)^2,
    # a = separation / 2 (potentials/potential.hpp). 1 kB*uK / h = 20.8366 kHz (CODATA k_B/h =
    # 2.083661912e10 Hz/K).
    return 20.83661912 * ((x_um / 0.5) ** 2 - 1) ** 2


def levels_figure(root, panels=2):
    spectrum = _table(root / "dw" / "spectrum.csv")
    states = _table(root / "dw" / "states.csv")
    x = states["x_um"]
    densities = np.array([states[f"psi_{n}"] ** 2 for n in range(4)])
    panel = {"title": "start, t = 0", "x": x, "potential": double_well_potential(x),
             "energies": spectrum["energy_h_kHz"], "densities": densities}
    # The second panel: the same trap moved by 0.25 um (a shift keeps the levels).
    moved = dict(panel, title="end, t = 1 us", x=x + 0.25)
    return {"kind": "levels", "title": "potential, levels and |ψ#dn#u|#u2#d",
            "x_label": "position x (um)", "energy_label": "energy E (h*kHz)",
            "panels": [panel, moved][:panels], "density_height": 0.7,
            "x_min": None, "x_max": None, "energy_min": None, "energy_max": None}


def plan_figure(root):
    t = _table(root / "plan" / "plan.csv")
    return {"kind": "sweep", "title": "Jarzynski estimate of #gDF from N runs",
            "x_label": "runs N", "y_label": "estimate - true #gb#gDF (kT)",
            "points": [{"label": "bias +- spread", "x": t["runs"], "y": t["bias_kT"], "spread": t["spread_kT"]}],
            "curves": [{"label": "delta method", "x": t["runs"], "y": t["delta_method_bias_kT"]}],
            "spread_as_band": False, "log_x": True, "departure": "none", "departure_label": ""}


def sweep_figure(root, departure="absolute"):
    t = _table(root / "sweep" / "sweep.csv")
    x = t["protocol_duration_us"]
    return {"kind": "sweep", "title": "mean work over the sweep of protocol.duration",
            "x_label": "protocol.duration (us)", "y_label": "mean work <W> (h*kHz)",
            "points": [{"label": "<W> (numerical)", "x": x, "y": t["mean_work_h_kHz"], "spread": np.zeros(0)}],
            "curves": [{"label": "harmonic reference <W> at each point", "x": x, "y": t["harmonic_mean_work_h_kHz"]}],
            "spread_as_band": False, "log_x": False, "departure": departure,
            "departure_label": "<W> - curve (h*kHz)"}


def comparison_figure(root):
    t = _table(root / "cmp" / "compare.csv")
    summary = json.loads((root / "cmp" / "compare_summary.json").read_text())
    edges = np.append(t["lower_h_kHz"], t["upper_h_kHz"][-1])
    m = summary["comparison"]["moments"]
    return {"kind": "comparison", "title": "measured work against the model", "work_label": "work W (h*kHz)",
            "count_label": "runs per bin", "edges": edges, "observed": t["observed_runs"],
            "expected": t["expected_runs"], "observed_label": "measured", "expected_label": "model",
            "curve_work": np.zeros(0), "curve": np.zeros(0),
            "model_mean": m["model_mean"], "data_mean": m["mean"]}


@pytest.fixture(autouse=True)
def close_figures():
    yield
    plt.close("all")


def by_gid(fig, gid):
    found = [a for ax in fig.axes for a in ax.get_children()
             if a.get_gid() == gid and not gid.startswith(("observed", "points_0_error"))]
    for ax in fig.axes:  # errorbar containers are not children of the axes
        found += [c for c in ax.containers if getattr(c, "trapwork_gid", None) == gid]
    return found


def stems(fig, gid, ax):
    coll = [a for a in ax.get_children() if a.get_gid() == gid]
    assert len(coll) == 1, gid
    segs = coll[0].get_segments()
    return np.array([s[0][0] for s in segs]), np.array([s[0][1] for s in segs]), np.array([s[1][1] for s in segs])


# ---- labels ------------------------------------------------------------------------------------

def test_plplot_escapes_become_matplotlib_text():
    assert tplot.plplot_text("#gDF = 0") == "ΔF = 0"
    assert tplot.plplot_text("estimate - true #gb#gDF (kT)") == "estimate - true βΔF (kT)"
    assert tplot.plplot_text("sin^2(#gw#gt/2)") == "sin^2(ωτ/2)"
    assert tplot.plplot_text("#gs") == "σ"
    assert tplot.plplot_text("E#dn#u") == r"E$_{\mathregular{n}}$"
    assert tplot.plplot_text("|ψ#dn#u|#u2#d") == r"|ψ$_{\mathregular{n}}$|$^{\mathregular{2}}$"
    assert tplot.plplot_text("P#di#u") == r"P$_{\mathregular{i}}$"
    assert tplot.plplot_text("cost in $ ##1") == r"cost in \$ #1"
    # Every label the C++ side writes renders (mathtext parses it).
    fig = plt.figure()
    for text in ["|ψ#dn#u(x)|#u2#d (scaled)", "levels E#dn#u (where V < E#dn#u)", "10#u-3#d",
                 "2 m v^2 sin^2(#gw#gt/2), v = distance/#gt", "x#u a b#d", "cost in $ and $"]:
        fig.text(0.1, 0.5, tplot.plplot_text(text))
    fig.canvas.draw()


# ---- levels ------------------------------------------------------------------------------------

def test_levels_panels_ranges_levels_and_densities(runs):
    f = levels_figure(runs)
    fig = tplot.plot(f)
    axes = [a for a in fig.axes if a.get_gid() != "legend" and a.axison]
    assert len(axes) == 2
    e = f["panels"][0]["energies"]
    for panel, ax in zip(f["panels"], axes):
        x, v = panel["x"], panel["potential"]
        lo, hi = ax.get_xlim()
        # x: the allowed region of the highest level (V < E_max) widened by 30% of its width on
        # each side, within the data (plot.hpp).
        inside = x[v < e.max()]
        width = inside.max() - inside.min()
        assert lo <= inside.min() and hi >= inside.max()
        assert lo == pytest.approx(max(x[0], inside.min() - 0.3 * width), abs=2 * (x[1] - x[0]))
        assert hi == pytest.approx(min(x[-1], inside.max() + 0.3 * width), abs=2 * (x[1] - x[0]))
        # One level segment per allowed interval; both ends on the potential.
        segments = by_gid_in(ax, "levels")[0].get_segments()
        assert sorted({round(s[0][1], 9) for s in segments}) == sorted({round(v, 9) for v in e})
        for s in segments:
            for xe, ye in s:
                assert np.interp(xe, x, v) == pytest.approx(ye, rel=1e-9, abs=1e-9 * e.max())
        # The double well has levels below the barrier: two intervals each.
        centre = x[v < 1].mean()  # between the two minima
        below = e < v[np.argmin(np.abs(x - centre))]
        assert len(segments) == 2 * below.sum() + (~below).sum()
        # Densities: four, each on its level, reaching 0.7 x the gap to the next level that is
        # not its doublet partner, never the next level line.
        mean = (e[-1] - e[0]) / (len(e) - 1)
        for n in range(4):
            line, = by_gid_in(ax, f"density_{n}")
            y = line.get_ydata()
            above = e[e > e[n] + 0.1 * mean]
            gap = min(above[0] - e[n], mean)
            assert y.min() >= e[n] - 1e-12
            assert y.max() - e[n] == pytest.approx(0.7 * gap, rel=1e-12)
            assert y.max() < above[0]
        # Nothing cut: every level and density peak inside the energy range.
        e_lo, e_hi = ax.get_ylim()
        assert e_lo <= v.min() and e_lo < e.min() and e_hi > e.max()
        assert e_hi > max(by_gid_in(ax, "density_3")[0].get_ydata())
    assert axes[0].get_ylim() == axes[1].get_ylim()
    assert "h*kHz" in axes[0].get_ylabel() and "um" in axes[0].get_xlabel()
    assert axes[1].get_xlim()[0] == pytest.approx(axes[0].get_xlim()[0] + 0.25)


def by_gid_in(ax, gid):
    return [a for a in ax.get_children() if a.get_gid() == gid]


def test_levels_explicit_ranges_are_kept(runs):
    f = levels_figure(runs, panels=1)
    f.update(x_min=-1.0, x_max=1.5, energy_min=-5.0, energy_max=50.0)
    fig = tplot.plot(f, legend=False, title=False)
    (ax,) = fig.axes
    assert ax.get_xlim() == (-1.0, 1.5) and ax.get_ylim() == (-5.0, 50.0)
    assert fig._suptitle is None


# ---- work --------------------------------------------------------------------------------------

def test_work_stems_density_markers_and_log_floor(runs):
    f = work_figure(runs)
    fig = tplot.plot(f)
    w, p = f["result"]["work"], f["result"]["probability"]
    panels = [a for a in fig.axes if a.axison and a.get_ylabel() in ("probability P", "P (log scale)")]
    linear, log = panels
    assert log.get_yscale() == "log"
    # Log panel: floor = max P x 10^-12, every line above it drawn, from the floor up.
    floor = log.get_ylim()[0]
    assert floor == pytest.approx(p.max() * 1e-12, rel=1e-9)
    assert log.get_ylim()[1] == pytest.approx(p.max() * 10 ** 0.5, rel=1e-9)
    x, y0, y1 = stems(fig, "result_stems", log)
    assert len(x) == (p > floor).sum() and len(x) > 1000
    assert np.allclose(y0, floor) and np.allclose(np.sort(y1), np.sort(p[p > floor]))
    drawn = w[p > floor]  # the lines below the floor are left out of the log panel's range too
    assert log.get_xlim()[0] < drawn.min() and log.get_xlim()[1] > drawn.max()
    # Linear panel: the bulk of P, peaks not cut (top 1.3 x max P), stems from 0.
    x, y0, y1 = stems(fig, "result_stems", linear)
    assert linear.get_ylim() == pytest.approx((0, 1.3 * p.max()))
    assert y1.max() == pytest.approx(p.max()) and np.all(y0 == 0)
    lo, hi = linear.get_xlim()
    outside = (w < lo) | (w > hi)
    assert p[outside].sum() <= 2e-3 * p.sum()  # only the tails are left to the log panel
    assert hi - lo < log.get_xlim()[1] - log.get_xlim()[0]
    # The broadened densities on a right axis of their own, 0 .. 1.3 x their maximum.
    (curve,) = by_gid(fig, "result_density")
    right = curve.axes
    assert right is not linear and right.get_ylabel() == "density (1/h*kHz)"
    assert np.array_equal(curve.get_ydata(), f["result"]["density"])
    top = max(f["result"]["density"].max(), f["reference"]["density"].max())
    assert right.get_ylim() == pytest.approx((0, 1.3 * top))
    assert len(by_gid(fig, "reference_density")) == 1
    # <W> and Delta F markers in both panels, labelled in the linear one only.
    marks = by_gid(fig, "mean_work")
    assert len(marks) == 2 and all(m.get_xdata()[0] == f["mean_work"] for m in marks)
    assert len(by_gid(fig, "free_energy_change")) == 2
    (label,) = by_gid(fig, "mean_work_label")
    assert label.get_text() == "<W> = %.4g" % f["mean_work"]
    assert by_gid(fig, "free_energy_change_label")[0].get_text().startswith("ΔF = ")
    assert "h*kHz" in log.get_xlabel()
    fig.canvas.draw()


def test_work_log_only_and_linear_only(runs):
    f = work_figure(runs, axis="log", decades=6)
    fig = tplot.plot(f)
    (ax,) = [a for a in fig.axes if a.axison]
    p = f["result"]["probability"]
    assert ax.get_yscale() == "log"
    assert ax.get_ylim()[0] == pytest.approx(p.max() * 1e-6, rel=1e-9)
    assert len(stems(fig, "result_stems", ax)[0]) == (p > p.max() * 1e-6).sum()
    assert len(by_gid(fig, "mean_work_label")) == 1  # a log panel alone carries the labels
    assert not by_gid(fig, "result_density")       # no density axis on a log panel
    f = work_figure(runs, axis="linear")
    fig = tplot.plot(f)
    linear = [a for a in fig.axes if a.get_ylabel() == "probability P"]
    assert len(linear) == 1 and linear[0].get_yscale() == "linear"
    # Without a log panel the linear one shows every line.
    w = f["result"]["work"]
    assert linear[0].get_xlim()[0] < w.min() and linear[0].get_xlim()[1] > w.max()


def test_work_reference_stems_are_offset_and_hollow(runs):
    f = work_figure(runs, axis="linear")
    w, p = f["result"]["work"], f["result"]["probability"]
    top = np.argsort(p)[-20:]
    f["reference"].update(work=w[top], probability=0.9 * p[top])
    fig = tplot.plot(f)
    ax = [a for a in fig.axes if a.get_ylabel() == "probability P"][0]
    x, _, y1 = stems(fig, "reference_stems", ax)
    span = ax.get_xlim()[1] - ax.get_xlim()[0]
    assert np.allclose(np.sort(x), np.sort(w[top]) + 0.004 * span)
    (tops,) = by_gid(fig, "reference_tops")
    assert tops.get_markerfacecolor() == "none"


# ---- sweep -------------------------------------------------------------------------------------

def test_sweep_log_x_error_bars(runs):
    f = plan_figure(runs)
    fig = tplot.plot(f)
    (ax,) = [a for a in fig.axes if a.axison]
    pts = f["points"][0]
    assert ax.get_xscale() == "log"
    lo, hi = math.log10(pts["x"].min()), math.log10(pts["x"].max())
    assert np.log10(ax.get_xlim()) == pytest.approx((lo - 0.03 * (hi - lo), hi + 0.03 * (hi - lo)))
    (marks,) = by_gid(fig, "points_0")
    assert np.array_equal(marks.get_xdata(), pts["x"]) and np.array_equal(marks.get_ydata(), pts["y"])
    (bars,) = by_gid(fig, "points_0_errorbars")
    segments = bars.lines[2][0].get_segments()
    assert np.allclose([s[1][1] - s[0][1] for s in segments], 2 * np.abs(pts["spread"]))
    ylo, yhi = ax.get_ylim()  # error bars and curves inside
    assert ylo < (pts["y"] - pts["spread"]).min() and yhi > (pts["y"] + pts["spread"]).max()
    assert yhi > f["curves"][0]["y"].max()
    assert ax.get_ylabel() == "estimate - true βΔF (kT)"


def test_sweep_departure_panel(runs):
    f = sweep_figure(runs)
    fig = tplot.plot(f)
    main, lower = [a for a in fig.axes if a.axison]
    x, y = f["points"][0]["x"], f["points"][0]["y"]
    c = f["curves"][0]["y"]
    (dep,) = by_gid(fig, "departure_0")
    assert np.allclose(dep.get_ydata(), y - c)
    assert lower.get_ylabel() == "<W> - curve (h*kHz)" and lower.get_ylim()[0] < 0 < lower.get_ylim()[1]
    assert main.get_xlim() == lower.get_xlim()
    assert main.get_xlim()[0] < x.min() and main.get_xlim()[1] > x.max()
    # Relative departure: points where the curve is 0 are left out.
    f2 = sweep_figure(runs, "relative")
    f2["curves"][0]["y"] = np.where(np.arange(len(x)) == 1, 0.0, c)
    fig2 = tplot.plot(f2)
    (dep,) = by_gid(fig2, "departure_0")
    keep = np.arange(len(x)) != 1
    assert np.allclose(dep.get_ydata(), (y[keep] - c[keep]) / c[keep])
    # A band instead of error bars.
    f3 = plan_figure(runs)
    f3["spread_as_band"] = True
    fig3 = tplot.plot(f3)
    assert by_gid(fig3, "points_0_band") and not by_gid(fig3, "points_0_errorbars")


# ---- comparison --------------------------------------------------------------------------------

def test_comparison_bars_expected_steps_and_pulls(runs):
    f = comparison_figure(runs)
    fig = tplot.plot(f)
    main, lower = [a for a in fig.axes if a.axison]
    edges, o, e = f["edges"], f["observed"], f["expected"]
    bars = by_gid(fig, "observed")[0]
    assert len(bars.patches) == (o > 0).sum()
    assert np.array_equal([b.get_height() for b in bars.patches], o[o > 0])
    (steps,) = by_gid(fig, "expected")
    assert np.array_equal(steps.get_data().values, e)
    (pulls,) = by_gid(fig, "pulls")
    t = _table(runs / "cmp" / "compare.csv")
    used = e >= 1
    assert np.allclose(pulls.get_ydata(), t["pull"][used])  # the CLI's own pulls
    assert main.get_ylim()[1] == pytest.approx(1.15 * max((o + np.sqrt(o)).max(), e.max()))
    pad = 0.02 * (edges[-1] - edges[0])
    assert main.get_xlim() == pytest.approx((edges[0] - pad, edges[-1] + pad))
    assert lower.get_ylim()[0] <= -3 and lower.get_ylim()[1] >= 3
    assert by_gid(fig, "model_mean")[0].get_xdata()[0] == f["model_mean"]
    assert "h*kHz" in lower.get_xlabel()


# ---- the entry point ---------------------------------------------------------------------------

class FakeResult:
    def __init__(self, figures):
        self.figures = figures


def test_plot_entry_point(runs):
    result = FakeResult({"work": work_figure(runs), "potential": levels_figure(runs)})
    drawn = tplot.plot(result)
    assert set(drawn) == {"work", "potential"}
    assert all(isinstance(v, matplotlib.figure.Figure) for v in drawn.values())
    assert isinstance(tplot.plot(result, "work"), matplotlib.figure.Figure)
    with pytest.raises(KeyError, match="no figure 'sweep'.*potential, work"):
        tplot.plot(result, "sweep")
    # Into the user's axes: one Axes gets the main panel.
    fig, ax = plt.subplots()
    assert tplot.plot(result, "work", ax=ax) is fig
    assert ax.get_ylabel() == "probability P"
    with pytest.raises(ValueError, match="several figures"):
        tplot.plot(result, ax=ax)
    fig, axes = plt.subplots(2)
    tplot.plot(comparison_figure(runs), ax=axes)
    assert axes[1].get_ylabel().startswith("pull")
    with pytest.raises(TypeError, match="unknown style option.*colour"):
        tplot.plot(result, "work", colour="red")
    red = tplot.plot(result, "work", colors={"blue": "red"})
    tops = by_gid(red, "result_tops")
    assert tops and all(matplotlib.colors.same_color(t.get_markerfacecolor(), "red") for t in tops)


def test_inconsistent_figures_are_refused(runs):
    f = work_figure(runs)
    f["result"]["probability"] = f["result"]["probability"][:-1]
    with pytest.raises(ValueError, match="plot_work: 'numerical \\(grid\\)' work and probability: sizes differ"):
        tplot.plot(f)
    f = comparison_figure(runs)
    f["observed"] = f["observed"][:-1]
    with pytest.raises(ValueError, match="one value per bin"):
        tplot.plot(f)
    f = sweep_figure(runs)
    f["curves"] = []
    with pytest.raises(ValueError, match="departure panel needs an analytic curve"):
        tplot.plot(f)
    with pytest.raises(ValueError, match="unknown figure kind 'histogram'"):
        tplot.plot({"kind": "histogram"})


# ---- the module's own figures (when the compiled module is built) -------------------------------

def test_module_figures_draw():
    import trapwork
    if not hasattr(trapwork, "work"):
        pytest.skip("the compiled module is not built")
    result = trapwork.work(trapwork.Scenario.default())
    if not result.figures:
        pytest.skip("the module's results carry no figure data yet (task layer)")
    drawn = result.plot()
    assert set(drawn) == set(result.figures) and {"work", "potential"} <= set(drawn)
    f = result.figures["work"]
    assert f["kind"] == "work" and f["probability_axis"] == "linear_and_log"
    log = [a for a in drawn["work"].axes if a.get_ylabel() == "P (log scale)"][0]
    p = np.asarray(f["result"]["probability"])
    assert log.get_ylim()[0] == pytest.approx(p.max() * 10.0 ** -f["log_decades"], rel=1e-9)
    x, _, _ = stems(drawn["work"], "reference_stems", log)
    assert len(x) > 0  # the harmonic prediction's lines
    levels = [a for a in drawn["potential"].axes if a.axison]
    assert len(levels) == len(result.figures["potential"]["panels"]) == 2


# ---- backend choice ----------------------------------------------------------------------------

BACKEND_PROBE = """
import numpy as np
from trapwork import plot
f = {"kind": "comparison", "edges": np.array([0.0, 1.0, 2.0]), "observed": np.array([3.0, 4.0]),
     "expected": np.array([3.5, 3.5])}
plot.plot(f)
import matplotlib
print(matplotlib.get_backend().lower())
"""


# Without a display and without MPLBACKEND the picture is drawn with Agg (matplotlib 3.6 would
# fall back to it by itself, so only the other half is checked): a backend the user chose is kept.
@pytest.mark.parametrize("preset, expected", [("svg", "svg")])
def test_a_chosen_backend_is_kept_without_display(preset, expected):
    import subprocess
    import sys
    env = {k: v for k, v in os.environ.items() if k not in ("DISPLAY", "WAYLAND_DISPLAY", "MPLBACKEND")}
    if preset:
        env["MPLBACKEND"] = preset
    package_parent = pathlib.Path(tplot.__file__).resolve().parents[1]
    env["PYTHONPATH"] = os.pathsep.join([str(package_parent)] + env.get("PYTHONPATH", "").split(os.pathsep))
    run = subprocess.run([sys.executable, "-c", BACKEND_PROBE], env=env, capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stderr
    assert run.stdout.strip().splitlines()[-1] == expected


def test_module_sweep_figure_draws():
    import trapwork
    if not hasattr(getattr(trapwork, "_trapwork", None), "sweep"):
        pytest.skip("the compiled module has no sweep yet")
    s = trapwork.Scenario.from_file(EXAMPLES / "ion_sweep.toml").with_values(
        {"sweep.points": 3, "sweep.to": "1.5 us"})
    result = trapwork.sweep(s)
    f = result.figures["sweep"]
    fig = tplot.plot(result, "sweep")
    main, lower, sd, residual = [a for a in fig.axes if a.axison]
    (marks,) = by_gid(fig, "points_0")
    assert np.allclose(marks.get_xdata(), f["points"][0]["x"]) and len(marks.get_xdata()) == 3
    assert len(by_gid(fig, "curve_0")) == 1 and len(by_gid(fig, "curve_1")) == len(f["curves"]) - 1
    (dep,) = by_gid(fig, "departure_0")
    c = f["curves"][0]
    assert np.allclose(dep.get_ydata(), f["points"][0]["y"] - np.interp(f["points"][0]["x"], c["x"], c["y"]))
    # issue 16: the harmonic prediction evaluated at 200 values between the sweep's ends, not
    # the sweep points joined; sd(W) and |Jarzynski residual| in panels of their own.
    (curve,) = by_gid(fig, "curve_0")
    assert len(curve.get_xdata()) == 200 and curve.get_xdata()[0] == pytest.approx(f["points"][0]["x"].min())
    assert "harmonic prediction" in c["label"]
    assert sd.get_ylabel() == "sd(W) (h*kHz)" and len(by_gid(fig, "panel_0_curve_0")) == 1
    assert residual.get_ylabel() == "|Jarzynski residual| (dimensionless)"
    assert all("(" in a.get_ylabel() for a in (main, lower, sd, residual))  # every axis with its unit


def test_module_comparison_figure_draws():
    import trapwork
    if not hasattr(getattr(trapwork, "_trapwork", None), "compare"):
        pytest.skip("the compiled module has no compare yet")
    result = trapwork.compare(trapwork.Scenario.from_file(EXAMPLES / "ion_shuttle_model.toml"),
                              str(EXAMPLES / "ion_work_samples.csv"))
    (stem,) = result.figures
    f = result.figures[stem]
    fig = tplot.plot(result, stem)
    main, lower = [a for a in fig.axes if a.axison]
    table = result.tables["compare"]
    used = np.asarray(table["expected_runs"]) >= 1
    (pulls,) = by_gid(fig, "pulls")
    assert np.allclose(pulls.get_ydata(), np.asarray(table["pull"])[used])
    (curve,) = by_gid(fig, "curve")  # the model's smooth curve, not cut at the top
    assert len(curve.get_ydata()) == len(f["curve"]) > 0
    assert max(curve.get_ydata()) < main.get_ylim()[1]
    assert by_gid(fig, "model_mean")[0].get_xdata()[0] == pytest.approx(f["model_mean"])
    assert by_gid(fig, "data_mean")[0].get_xdata()[0] == pytest.approx(f["data_mean"])


def test_module_plan_figure_draws():
    import trapwork
    if not hasattr(getattr(trapwork, "_trapwork", None), "plan"):
        pytest.skip("the compiled module has no plan yet")
    result = trapwork.plan(trapwork.Scenario.from_file(EXAMPLES / "ion_shuttle_model.toml"), runs=(10, 30, 100),
                           resolutions=["40 h*kHz"], experiments=200)
    (stem,) = result.figures
    fig = tplot.plot(result, stem)
    (ax,) = [a for a in fig.axes if a.axison]
    table = result.tables["plan"]
    # issue 16: the rms error against N on log-log axes.
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    (marks,) = by_gid(fig, "points_0")
    assert np.allclose(marks.get_xdata(), table["runs"]) and np.allclose(marks.get_ydata(), table["rms_error_kT"])
    lo, hi = ax.get_ylim()
    assert lo < np.min(table["rms_error_kT"]) and hi > np.max(table["rms_error_kT"])
    assert ax.get_ylabel() == "rms error of βΔF (kT)"


# ---- issue 16: ranges of the work figure (the data of tests/test_plot.cpp) -----------------------

def _broaden(s, sigma):
    """tests/test_plot.cpp's broaden: the lines broadened on work_output.cpp's grid."""
    w, p = np.asarray(s["work"], float), np.asarray(s["probability"], float)
    keep = p >= 1e-6 * p.max()
    lo, hi = w[keep].min() - 6 * sigma, w[keep].max() + 6 * sigma
    n = min(4001, int(math.ceil((hi - lo) / (sigma / 5))) + 1)
    grid = lo + (hi - lo) * np.arange(n) / (n - 1)
    d = (p[None, :] * np.exp(-0.5 * ((grid[:, None] - w[None, :]) / sigma) ** 2)).sum(axis=1)
    s["density_work"], s["density"] = grid, d / (sigma * math.sqrt(2 * math.pi))


def tweezer_like():
    """Shaped like examples/tweezer_deform.toml's lines.csv: one line carries 1 - 4.4e-7."""
    w = [-19.8938620029266, -17.6054619346631, -15.350895517171, -13.1304788350937, -10.9445406843494]
    p = [0.999999563378004, 4.3661670901728453e-07, 2.847451761827139e-12, 2.598e-16, 5.7e-20]
    w += [-18.75 + k for k in range(20)]
    p += [3e-29] * 20
    s = {"label": "grid", "work": np.array(w), "probability": np.array(p)}
    _broaden(s, 0.04681)
    return {"kind": "work", "work_label": "work W (kB*uK)", "density_label": "density (1/kB*uK)",
            "result": s, "reference": None, "mean_work": float(np.dot(w[:5], p[:5])),
            "free_energy_change": None, "probability_axis": "linear_and_log", "log_decades": 12.0,
            "resolution": 0.04681, "resolution_source": "default: 1/20 of the lowest spacing"}


def ion_translation_like():
    """Shaped like examples/ion_translation.toml's run: W = 0 carries all but 1e-4."""
    w, p = [], []
    for k in range(-2, 4):
        top = 0.9999 if k == 0 else 10.0 ** (-3 - 3 * abs(k))
        for m in range(5):
            w.append(1500.0 * k + 0.01 * m * k)
            p.append(top * 0.1 ** m)
    s = {"label": "grid", "work": np.array(w), "probability": np.array(p)}
    _broaden(s, 75.12)
    return {"kind": "work", "work_label": "work W (h*kHz)", "result": s, "reference": dict(s, label="harmonic"),
            "mean_work": 0.5395, "free_energy_change": 0.0, "probability_axis": "linear_and_log",
            "log_decades": 12.0, "resolution": 75.12, "resolution_source": ""}


def _tick_texts(fig, ax):
    fig.canvas.draw()
    return [t.get_text() for t in ax.get_xticklabels() if t.get_visible() and t.get_text()]


@pytest.mark.parametrize("make, line", [(tweezer_like, -19.8938620029266), (ion_translation_like, 0.0)])
def test_issue16_linear_work_panel_shows_a_dominant_line(make, line):
    f = make()
    r = tplot.work_panel_ranges(f)
    sigma = f["resolution"]
    fig = tplot.plot(f)
    linear = [a for a in fig.axes if a.get_ylabel() == "probability P"][0]
    lo, hi = linear.get_xlim()
    assert (lo, hi) == pytest.approx(r["linear_range"])
    # the rule plot.hpp states (the C++ test checks the same on the same data)
    assert lo < line - 2 * sigma and hi > line + 2 * sigma and hi - lo < 10 * sigma
    d = f["result"]["density"]
    peak = f["result"]["density_work"][np.argmax(d)]
    assert lo < peak < hi
    right = by_gid(fig, "result_density")[0].axes
    assert right.get_ylim() == pytest.approx((0, 1.3 * d.max()))
    assert linear.get_ylim() == pytest.approx((0, 1.3 * f["result"]["probability"].max()))
    texts = _tick_texts(fig, linear)
    assert len(texts) >= 3 and len(set(texts)) == len(texts)
    (caption,) = by_gid(fig, "caption")
    assert "σ = " + "%.4g" % sigma in caption.get_text()
    assert caption.get_text().count("\n") == 1 and "not drawn in the log panel" in caption.get_text()


def test_issue16_offset_ticks_and_crowded_log_panel():
    f = {"kind": "work", "work_label": "work W (h*kHz)", "probability_axis": "linear",
         "result": {"work": np.array([2.5e6, 2.5e6 + 0.002, 2.5e6 + 0.004]), "probability": np.array([0.2, 0.5, 0.3])}}
    r = tplot.work_panel_ranges(f)
    assert r["linear_offset"] != 0 and abs(r["linear_offset"] - 2.5e6) < r["linear_range"][1] - r["linear_range"][0]
    fig = tplot.plot(f)
    (ax,) = [a for a in fig.axes if a.axison]
    texts = _tick_texts(fig, ax)
    assert len(texts) >= 3 and len(set(texts)) == len(texts)
    assert "W#d0#u" not in ax.get_xlabel() and "W$_{\\mathregular{0}}$ = 2500000" in ax.get_xlabel()
    # Crowded: 3000 lines over 30 decades (as the demo's), the floor 1e-12 below the largest.
    g = ion_translation_like()
    g["result"] = dict(g["result"], work=np.arange(3000.0), probability=10.0 ** (-30.0 * np.arange(3000) / 2999))
    g["reference"] = dict(g["reference"], work=40.0 * np.arange(30), probability=np.full(30, 1 / 30))
    r = tplot.work_panel_ranges(g)
    assert r["lines_below_floor"] == 1800 and r["lines_drawn"] == 1230
    assert r["marker_scale"] == [0.0, pytest.approx(0.8)] and r["stem_width"][0] == pytest.approx(0.5)
    fig = tplot.plot(g)
    log = [a for a in fig.axes if a.get_ylabel() == "P (log scale)"][0]
    assert not [a for a in log.get_children() if a.get_gid() == "result_tops"]  # stems only
    assert [a for a in log.get_children() if a.get_gid() == "reference_tops"]
    (caption,) = by_gid(fig, "caption")
    assert caption.get_text().endswith("1800 lines below P = 1e-12 not drawn in the log panel")


def test_issue16_module_work_figure_states_its_resolution():
    import trapwork
    if not hasattr(trapwork, "work"):
        pytest.skip("the compiled module is not built")
    result = trapwork.work(trapwork.Scenario.from_file(EXAMPLES / "tweezer_deform.toml"))
    f = result.figures["work"]
    assert f["resolution"] > 0 and "1/20 of the lowest spacing" in f["resolution_source"]
    r = tplot.work_panel_ranges(f)
    p = np.asarray(f["result"]["probability"])
    line = float(np.asarray(f["result"]["work"])[np.argmax(p)])
    lo, hi = r["linear_range"]
    assert lo < line - 2 * f["resolution"] and hi > line + 2 * f["resolution"]
    assert r["lines_below_floor"] == int((p <= p.max() * 1e-12).sum()) > 0  # all lines reach the figure
    fig = tplot.plot(result, "work")
    linear = [a for a in fig.axes if a.get_ylabel() == "probability P"][0]
    texts = _tick_texts(fig, linear)
    assert len(set(texts)) == len(texts) >= 3


def test_issue16_sweep_log_y_and_further_panels():
    f = {"kind": "sweep", "x_label": "tau (us)", "y_label": "<W> (h*kHz)", "log_y": True,
         "points": [{"label": "numerical", "x": np.array([1.0, 2.0, 3.0]), "y": np.array([1e-2, 1.0, 1e2]),
                     "spread": np.array([0.5, 0.5, 0.5])}],
         "curves": [{"label": "harmonic", "x": np.linspace(1, 3, 200), "y": np.linspace(0, 120, 200)}],
         "panels": [{"y_label": "|residual| (dimensionless)", "log_y": True,
                     "points": [{"label": "numerical", "x": np.array([1.0, 2.0, 3.0]), "y": np.array([1e-3, 1e-9, 1e-14])}],
                     "curves": []}]}
    lay = tplot.sweep_layout(f)
    fig = tplot.plot(f)
    main, residual = [a for a in fig.axes if a.axison]
    assert main.get_yscale() == "log" and residual.get_yscale() == "log"
    # The points and their bars set a log range (the curve's 0 at tau = 1 would stretch it),
    # padded by 6% of log10 y: 1e-2 .. 100.5 (the bar below the first point ends at the floor).
    lo, hi = -2.0, math.log10(100.5)
    assert np.log10(main.get_ylim()) == pytest.approx((lo - 0.06 * (hi - lo), hi + 0.06 * (hi - lo)))
    assert main.get_ylim() == pytest.approx(lay["y_range"])
    # An error bar reaching below 0 ends at the floor.
    assert lay["drawn"][0]["lo"][0] == pytest.approx(lay["y_range"][0])
    assert residual.get_ylim() == pytest.approx(lay["panels"][0]["y_range"])
    assert residual.get_ylabel() == "|residual| (dimensionless)"
    # A log axis over less than two labelled decades is widened to whole decades.
    f["points"][0]["y"] = np.array([0.2, 0.3, 0.5])
    f["points"][0]["spread"] = np.zeros(0)
    assert tplot.sweep_layout(f)["y_range"] == pytest.approx((0.1, 1.0))


# ---- issue 16: spectrum.png, protocol.png, populations.png, traces.png, walls ---------------------

def test_issue16_new_figures_are_in_the_results_and_draw():
    import trapwork
    if not hasattr(trapwork, "work"):
        pytest.skip("the compiled module is not built")
    result = trapwork.work(trapwork.Scenario.default())
    assert {"potential", "work", "protocol", "populations", "traces"} <= set(result.figures)
    drawn = result.plot()
    assert {"protocol", "populations", "traces"} <= set(drawn)
    traces = result.figures["traces"]
    assert traces["kind"] == "stack" and len(traces["stack"]) == 3
    panels = [a for a in drawn["traces"].axes if a.lines]
    assert len(panels) == 3
    # the drawn <x>(t) is the traces.csv column, in the figure's time and length units
    table = result.tables["traces"]
    x_line = [ln for ln in panels[0].lines if ln.get_gid() == "stack_0_curve_0"][0]
    assert len(x_line.get_xdata()) == len(table["time_us"]) > 10
    # in nm; values below 1e-9 of the grid length (< 1e-6 nm here) are drawn as 0 (rounding noise)
    assert np.asarray(x_line.get_ydata()) == pytest.approx(np.asarray(table["position_mean_um"]) * 1000, rel=1e-9,
                                                           abs=1e-6)
    populations = result.figures["populations"]
    assert populations["kind"] == "sweep" and len(populations["points"]) == 3  # numerical, harmonic, initial
    protocol = result.figures["protocol"]
    assert protocol["kind"] == "stack" and protocol["stack"][0]["curves"][0]["label"] == "trap.centre"
    spectrum = trapwork.spectrum(trapwork.Scenario.default())
    assert "spectrum" in spectrum.figures and spectrum.figures["spectrum"]["kind"] == "levels"
    fig = spectrum.plot("spectrum")
    assert any(ln.get_gid() == "potential" for a in fig.axes for ln in a.lines)


def test_issue16_box_walls_are_drawn():
    import trapwork
    if not hasattr(trapwork, "spectrum"):
        pytest.skip("the compiled module is not built")
    spectrum = trapwork.spectrum(trapwork.Scenario.from_file(str(EXAMPLES / "box_expansion.toml")))
    panel = spectrum.figures["spectrum"]["panels"][0]
    assert list(panel["walls"]) == pytest.approx([0.0, 10.0])  # [box] left and right, um
    fig = spectrum.plot("spectrum")
    walls = [ln for a in fig.axes for ln in a.lines if (ln.get_gid() or "").startswith("wall_")]
    assert sorted(w.get_xdata()[0] for w in walls) == pytest.approx([0.0, 10.0])
    lo, hi = [a for a in fig.axes if a.lines][0].get_xlim()
    assert lo < 0.0 and hi > 10.0  # both walls inside the panel
