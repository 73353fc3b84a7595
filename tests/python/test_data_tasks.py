"""fit, compare and plan: the module against the command line on the examples that use
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
def test_plan_equals_cli(in_tmp):
    model = EXAMPLES / "ion_shuttle_model.toml"
    args = ["--runs", "10,100", "--resolution", "0 h*kHz,40 h*kHz", "--target", "0.5", "--experiments", "200",
            "--seed", "3", "--synthetic-runs", "50"]
    done = cli_ok("plan", model, *args, "-o", in_tmp / "cli")
    r = trapwork.plan(trapwork.Scenario.from_file(model), runs=(10, 100), resolutions=["0 h*kHz", "40 h*kHz"],
                      target=0.5, experiments=200, seed=3, synthetic_runs=50)
    assert_table_equals_csv(r.tables["plan"], in_tmp / "cli" / "plan.csv")
    assert_table_equals_csv(r.tables["synthetic_work"], in_tmp / "cli" / "synthetic_work.csv")
    assert_summary_equals_json(r.summary, in_tmp / "cli" / "plan_summary.json")
    assert r.runs_needed and r.runs_needed == r.summary["runs_needed"]
    assert_text_close(r.report, report_of(done.stdout), "report", REPORT_RELATIVE)


def test_plan_default_settings_equal_cli(in_tmp):
    model = EXAMPLES / "ion_shuttle_model.toml"
    cli_ok("plan", model, "-o", in_tmp / "cli")
    r = trapwork.plan(model)
    assert_table_equals_csv(r.tables["plan"], in_tmp / "cli" / "plan.csv")
    assert_summary_equals_json(r.summary, in_tmp / "cli" / "plan_summary.json")




@pytest.mark.parametrize("kind", ["fit", "compare", "plan", "spectrum"])
def test_every_result_pickles_and_writes_the_same_files(kind, tmp_path):
    import pathlib
    import pickle
    model = EXAMPLES / "ion_shuttle_model.toml"
    make = {
        "fit": lambda: trapwork.fit(EXAMPLES / "ion_spectroscopy_lines.csv", mass="40 u", frequency="1 MHz"),
        "compare": lambda: trapwork.compare(model, EXAMPLES / "ion_work_samples.csv", resamples=200),
        "plan": lambda: trapwork.plan(model, runs=(10, 30), experiments=100, synthetic_runs=20),
        "spectrum": lambda: trapwork.spectrum(model, levels=5),
    }
    r = make[kind]()
    first = r.write(tmp_path / "a")
    copy = pickle.loads(pickle.dumps(r))
    assert type(copy) is type(r) and copy.summary == r.summary and copy.texts == r.texts
    assert {k: v.columns for k, v in copy.tables.items()} == {k: v.columns for k, v in r.tables.items()}
    second = copy.write(tmp_path / "b")
    assert [pathlib.Path(p).name for p in first] == [pathlib.Path(p).name for p in second]
    for p, q in zip(first, second):
        assert pathlib.Path(p).read_bytes() == pathlib.Path(q).read_bytes(), p
    if kind == "fit":
        assert (tmp_path / "b" / "fitted.toml").read_text() == copy.scenario.text
