"""The module's results equal the command line's files on every example (issue 15): each CSV
column against the module's Table, summary.json against result.summary, the printed report
against result.report. Tolerance: conftest.RELATIVE (why it is not 0 is said there)."""
import json
import pathlib
import re

import pytest

import trapwork
from conftest import (REPORT_RELATIVE, EXAMPLES, assert_json_close, assert_summary_equals_json, assert_table_equals_csv, assert_text_close, cli_ok,
                      example_scenarios, has_tables)


def report_of(stdout):
    """The CLI's printed report without its "wrote ..." lines (the module writes no files then)."""
    return stdout[:stdout.index("\nwrote ")] if "\nwrote " in stdout else stdout


def assert_result_equals_cli(result, folder, stdout, summary_file="summary.json"):
    for stem, table in result.tables.items():
        assert_table_equals_csv(table, folder / table.file)
    written = sorted(p.name for p in folder.glob("*.csv"))
    assert sorted(t.file for t in result.tables.values()) == written
    assert_summary_equals_json(result.summary, folder / summary_file)
    assert_text_close(result.report, report_of(stdout), "report", REPORT_RELATIVE)


@pytest.mark.parametrize("name", example_scenarios())
def test_spectrum_equals_cli(name, in_tmp):
    done = cli_ok("spectrum", EXAMPLES / name, "-o", in_tmp / "cli")
    result = trapwork.spectrum(trapwork.Scenario.from_file(EXAMPLES / name))
    assert_result_equals_cli(result, in_tmp / "cli", done.stdout)
    assert result.energies.shape == (len(result.tables["spectrum"]),)
    assert result.states.shape == (len(result.energies), len(result.x_um))


def test_default_scenario_equals_demo(in_tmp):
    done = cli_ok("demo", "-o", in_tmp / "cli")
    result = trapwork.work(trapwork.Scenario.default())
    assert_result_equals_cli(result, in_tmp / "cli", done.stdout)


def test_work_tolerance_equals_cli(in_tmp):
    # `trapwork work --tolerance 1e-3 --search-budget 500` and work(tolerance=1e-3, search_budget=500)
    name = EXAMPLES / "ion_translation.toml"
    cli_ok("work", name, "--tolerance", "1e-3", "--search-budget", "500", "-o", in_tmp / "cli")
    result = trapwork.work(trapwork.Scenario.from_file(name), tolerance=1e-3, search_budget=500)
    for table in result.tables.values():
        assert_table_equals_csv(table, in_tmp / "cli" / table.file)
    assert_summary_equals_json(result.summary, in_tmp / "cli" / "summary.json", ignore=("tolerance",))
    # the search's own record: its wall times (split_seconds, "(0.18 s)" in each run's line) are
    # measured, so they differ; the choices and distances do not
    expected = dict(json.loads((in_tmp / "cli" / "summary.json").read_text())["tolerance"])
    got = dict(result.summary["tolerance"])
    assert got["cost_bound"] == 500 and got["requested"] == 1e-3
    for k in ("split_seconds", "eigenbasis_seconds"):
        assert (got.pop(k) is None) == (expected.pop(k) is None), k
    untimed = lambda runs: [re.sub(r" \([0-9.e+-]+ s\)", "", r) for r in runs]
    got["runs"], expected["runs"] = untimed(got["runs"]), untimed(expected["runs"])
    assert_json_close(got, expected, "summary.json:tolerance")
