"""fit and compare: the module against the command line on the examples that use
them (issue 15), plus their result classes' named values."""
import json

import numpy as np
import pytest

import trapwork
from conftest import (REPORT_RELATIVE, EXAMPLES, assert_summary_equals_json, assert_table_equals_csv, assert_text_close, cli_ok,
                      read_csv)


def report_of(stdout):
    return stdout[:stdout.index("\nwrote ")] if "\nwrote " in stdout else stdout


def test_fit_equals_cli(in_tmp):
    data = EXAMPLES / "ion_spectroscopy_lines.csv"
    start = EXAMPLES / "ion_spectroscopy_start.toml"
    done = cli_ok("fit", data, "--start", start, "-o", in_tmp / "cli")
    r = trapwork.fit(data, start=trapwork.Scenario.from_file(start))
    assert_table_equals_csv(r.tables["fit_lines"], in_tmp / "cli" / "fit_lines.csv")
    assert_summary_equals_json(r.summary, in_tmp / "cli" / "fit_summary.json")
    assert r.texts["fitted.toml"] == (in_tmp / "cli" / "fitted.toml").read_text()
    assert isinstance(r.scenario, trapwork.Scenario) and r.scenario.text == r.texts["fitted.toml"]
    assert r.coefficients
    assert_text_close(r.report, report_of(done.stdout), "report", REPORT_RELATIVE)


def test_fit_from_mass_and_frequency(in_tmp):
    data = EXAMPLES / "ion_spectroscopy_lines.csv"
    cli_ok("fit", data, "--mass", "40 u", "--frequency", "1 MHz", "-o", in_tmp / "cli")
    r = trapwork.fit(data, mass="40 u", frequency="1 MHz")
    assert_summary_equals_json(r.summary, in_tmp / "cli" / "fit_summary.json")


def test_fit_bad_data_is_input_error(tmp_path):
    bad = tmp_path / "lines.csv"
    bad.write_text("this is not, a lines file\n1,2\n")
    with pytest.raises(trapwork.InputError) as caught:
        trapwork.fit(bad, mass="40 u", frequency="1 MHz")
    assert str(bad) in str(caught.value)


def test_compare_equals_cli(in_tmp):
    model = EXAMPLES / "ion_shuttle_model.toml"
    data = EXAMPLES / "ion_work_samples.csv"
    done = cli_ok("compare", model, data, "-o", in_tmp / "cli")
    r = trapwork.compare(trapwork.Scenario.from_file(model), data)
    assert_table_equals_csv(r.tables["compare"], in_tmp / "cli" / "compare.csv")
    assert_summary_equals_json(r.summary, in_tmp / "cli" / "compare_summary.json")
    assert r.verdict == json.loads((in_tmp / "cli" / "compare_summary.json").read_text())["verdict"]
    assert r.figures["compare"]["kind"] == "comparison"
    assert_text_close(r.report, report_of(done.stdout), "report", REPORT_RELATIVE)


def test_fitted_scenario_runs_as_the_cli_runs_fitted_toml(in_tmp):
    # the notebook path: fit, then the work of the fitted trap, as `trapwork work fitted.toml`
    data = EXAMPLES / "ion_spectroscopy_lines.csv"
    r = trapwork.fit(data, start=EXAMPLES / "ion_spectroscopy_start.toml")
    cli_ok("fit", data, "--start", EXAMPLES / "ion_spectroscopy_start.toml", "-o", in_tmp / "fit")
    cli_ok("work", in_tmp / "fit" / "fitted.toml", "-o", in_tmp / "cli")
    w = trapwork.work(r.scenario)
    assert_table_equals_csv(w.lines, in_tmp / "cli" / "lines.csv")


def test_compare_with_options_equals_cli(in_tmp):
    model = EXAMPLES / "ion_shuttle_model.toml"
    data = EXAMPLES / "ion_work_samples.csv"
    cli_ok("compare", model, data, "--resolution", "30 h*kHz", "--resamples", "300", "--seed", "7",
           "--confidence", "0.8", "-o", in_tmp / "cli")
    r = trapwork.compare(model, data, resolution="30 h*kHz", resamples=300, seed=7, confidence=0.8)
    assert_table_equals_csv(r.tables["compare"], in_tmp / "cli" / "compare.csv")
    assert_summary_equals_json(r.summary, in_tmp / "cli" / "compare_summary.json")
    with pytest.raises(trapwork.InputError, match="resolution"):
        trapwork.compare(model, data, resolution="30")
