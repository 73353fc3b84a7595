"""Issue 19: trapwork.work(..., uncertainty=FIT) carries the fit's covariance forward, equal to
``trapwork work --uncertainty``; spreads that were not computed are None, never 0. The same from a
scenario's [uncertainty] table; compare's and plan's --against and compare's --uncertainty as
keyword arguments, each against the command line's files."""
import math

import numpy as np
import pytest

import trapwork
from conftest import (EXAMPLES, assert_summary_equals_json, assert_table_equals_csv, assert_table_equals_csv_columns,
                      cli_ok, read_csv)


def test_work_uncertainty_equals_cli(in_tmp):
    data = EXAMPLES / "ion_spectroscopy_lines.csv"
    start = EXAMPLES / "ion_spectroscopy_start.toml"
    fit = trapwork.fit(data, start=trapwork.Scenario.from_file(start), terms="frequency,cubic,quartic")
    fit.write(in_tmp / "fit")
    fitted = in_tmp / "fit" / "fitted.toml"
    cli_ok("work", fitted, "--uncertainty", in_tmp / "fit", "--uncertainty-method", "linear", "-o", in_tmp / "cli")
    r = trapwork.work(trapwork.Scenario.from_file(fitted), uncertainty=in_tmp / "fit", uncertainty_method="linear")
    spread = r.spread
    assert spread["method"] == "linear"
    assert spread["samples"] is None  # sampling not run: None, not 0
    mean = spread["results"][0]
    assert mean["name"] == "<W>" and mean["sd"] > 0 and mean["sd_sampled"] is None
    # The sd is a central difference of two runs: FFTW_MEASURE plans differ between processes by
    # rounding (1e-12 of P), which the difference quotient lifts to ~1e-10 of the sd; so the
    # module and the command line agree to 1e-6 relative here, not bit for bit.
    cli_table = np.genfromtxt(in_tmp / "cli" / "lines_uncertainty.csv", delimiter=",", names=True, comments="#")
    for name in ("probability", "probability_sd", "initial", "final"):
        np.testing.assert_allclose(np.asarray(r.tables["lines_uncertainty"][name]), cli_table[name], rtol=1e-6)
    import json
    cli = json.loads((in_tmp / "cli" / "summary.json").read_text())["calibration_uncertainty"]
    for a, b in zip(spread["results"], cli["results"]):
        assert a["name"] == b["name"]
        assert (a["sd"] is None and b["sd"] is None) or math.isclose(a["sd"], b["sd"], rel_tol=1e-6)
    assert "spread due to the trap's calibration" in r.report
    assert trapwork.work(trapwork.Scenario.from_file(fitted)).spread is None


def test_work_uncertainty_bad_file_is_input_error(in_tmp):
    with pytest.raises(trapwork.InputError) as caught:
        trapwork.work(trapwork.Scenario.from_file(EXAMPLES / "ion_spectroscopy_start.toml"),
                      uncertainty=in_tmp / "nothing.json")
    assert "nothing.json" in str(caught.value)


# The harmonic shuttle of tests/test_uncertainty.cpp with its frequency known to 1 kHz, written in
# the scenario itself ([uncertainty]); invented values.
TABLE_SCENARIO = """title = "calibrated shuttle"
[particle]
mass = "40 u"
[[potential]]
name = "trap"
shape = "harmonic"
frequency = "1 MHz"
[protocol]
duration = "1.3 us"
[[protocol.change]]
parameter = "trap.centre"
to = "30 nm"
[initial]
mean_phonons = 0.5
[work]
time_step_check = false
[uncertainty.sd]
"trap.frequency" = "1 kHz"
"""


def test_scenario_uncertainty_table_equals_cli(in_tmp):
    path = in_tmp / "calibrated.toml"
    path.write_text(TABLE_SCENARIO)
    cli_ok("work", path, "--uncertainty-method", "linear", "-o", in_tmp / "cli")
    r = trapwork.work(trapwork.Scenario.from_file(path), uncertainty_method="linear")
    import json
    cli = json.loads((in_tmp / "cli" / "summary.json").read_text())["calibration_uncertainty"]
    assert r.spread["method"] == cli["method"] == "linear"
    assert r.spread["file"].endswith("calibrated.toml [uncertainty]")
    assert r.spread["parameters"] == cli["parameters"]
    # tolerance: the FFTW plans of two processes, as in test_work_uncertainty_equals_cli above
    for a, b in zip(r.spread["results"], cli["results"]):
        assert a["name"] == b["name"]
        assert (a["sd"] is None and b["sd"] is None) or math.isclose(a["sd"], b["sd"], rel_tol=1e-6)
    assert r.spread["results"][0]["sd"] > 0
    # "none" leaves the table out; a fit file beside the table is refused
    assert trapwork.work(trapwork.Scenario.from_file(path), uncertainty="none").spread is None
    with pytest.raises(trapwork.InputError) as caught:
        trapwork.work(trapwork.Scenario.from_file(path), uncertainty=in_tmp / "fit_summary.json")
    assert "[uncertainty] table" in str(caught.value)


def test_sweep_uncertainty_keywords(in_tmp):
    """trapwork.sweep takes the calibration as work does: the scenario's table by default, "none"
    to leave it out, and a fit's file beside the table is refused."""
    path = in_tmp / "calibrated_sweep.toml"
    path.write_text(TABLE_SCENARIO + '[sweep]\nparameter = "protocol.duration"\nvalues = ["1.2 us"]\n')
    scenario = trapwork.Scenario.from_file(path)
    cli_ok("sweep", path, "--uncertainty-method", "linear", "-o", in_tmp / "cli")
    with_table = trapwork.sweep(scenario, uncertainty_method="linear")
    # the columns (the command line's file has one more comment line, on sweep-points.txt)
    names, _, columns = read_csv(in_tmp / "cli" / "sweep.csv")
    assert with_table.table.columns == names
    assert_table_equals_csv_columns(with_table.table, columns)
    assert with_table.table["mean_work_calibration_sd_h_kHz"][0] > 0
    without = trapwork.sweep(scenario, uncertainty="none")
    assert "mean_work_calibration_sd_h_kHz" not in without.table.columns
    with pytest.raises(trapwork.InputError) as caught:
        trapwork.sweep(scenario, uncertainty=in_tmp / "fit_summary.json")
    assert "[uncertainty] table" in str(caught.value)


def test_compare_against_equals_cli(in_tmp):
    model, other = EXAMPLES / "ion_shuttle_model.toml", EXAMPLES / "ion_shuttle_harmonic.toml"
    data = EXAMPLES / "ion_work_samples_fine.csv"
    cli_ok("compare", model, data, "--against", other, "--calibration", "50", "--prior", "1,3",
           "--decision-confidence", "0.99", "-o", in_tmp / "cli")
    r = trapwork.compare(model, data, against=[trapwork.Scenario.from_file(other)], calibration=50, prior=[1, 3],
                         decision_confidence=0.99)
    assert_table_equals_csv(r.tables["compare_models"], in_tmp / "cli" / "compare_models.csv")
    assert_summary_equals_json(r.summary, in_tmp / "cli" / "compare_summary.json")
    assert "compare_models" in r.figures


def test_plan_against_equals_cli(in_tmp):
    model, other = EXAMPLES / "ion_shuttle_model.toml", EXAMPLES / "ion_shuttle_harmonic.toml"
    cli_ok("plan", model, "--against", other, "--resolution", "1 h*kHz", "--power", "0.8", "--runs", "30,100",
           "--experiments", "200", "-o", in_tmp / "cli")
    r = trapwork.plan(model, against=other, resolutions=["1 h*kHz"], power=0.8, runs=(30, 100), experiments=200)
    assert_table_equals_csv(r.tables["plan_decision"], in_tmp / "cli" / "plan_decision.csv")
    assert_summary_equals_json(r.summary, in_tmp / "cli" / "plan_summary.json")


def test_compare_uncertainty_equals_cli(in_tmp):
    data = EXAMPLES / "ion_spectroscopy_lines.csv"
    start = EXAMPLES / "ion_spectroscopy_start.toml"
    cli_ok("fit", data, "--start", start, "--terms", "frequency,cubic,quartic", "-o", in_tmp / "fit")
    fitted = in_tmp / "fit" / "fitted.toml"
    samples = EXAMPLES / "ion_work_samples_fine.csv"
    cli_ok("compare", fitted, samples, "--uncertainty", in_tmp / "fit", "--uncertainty-samples", "4",
           "-o", in_tmp / "cli")
    r = trapwork.compare(fitted, samples, uncertainty=in_tmp / "fit", uncertainty_samples=4)
    assert_summary_equals_json(r.summary, in_tmp / "cli" / "compare_summary.json")
    assert r.summary["calibration_uncertainty"]["draws"] == 4
