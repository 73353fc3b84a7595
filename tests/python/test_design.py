"""trapwork.design (issue 18): the module against the command line on examples/ion_design.toml
with a small budget, and the designed scenario run by trapwork.work."""
import pytest

import trapwork
from conftest import EXAMPLES, assert_summary_equals_json, assert_table_equals_csv, cli_ok


def test_design_equals_cli(in_tmp):
    example = EXAMPLES / "ion_design.toml"
    cli_ok("design", example, "--evaluations", "6", "--objective", "quanta", "--max-overshoot", "20 nm",
           "-o", in_tmp / "cli")
    r = trapwork.design(trapwork.Scenario.from_file(example), evaluations=6, objective="quanta",
                        max_overshoot=["20 nm"])
    assert isinstance(r, trapwork.DesignResult)
    for table in ("design_history", "design_work_lines"):
        assert_table_equals_csv(r.tables[table], in_tmp / "cli" / f"{table}.csv")
    assert_summary_equals_json(r.summary, in_tmp / "cli" / "design_summary.json")
    assert r.summary["objective"] == "quanta" and len(r.tables["design_history"]) > 0
    assert r.objective_after < r.objective_before
    assert r.summary["parameters"][0]["max_overshoot"]["limit"] == pytest.approx(20)
    assert {"design_schedule", "design_convergence", "design_work_before", "design_work_after"} <= set(r.figures)
    # The written folder holds a designed.toml that trapwork.work runs: its objective is the
    # final run's (mean levels climbed from the ground state, sum_n n P(0 -> n)).
    r.write(in_tmp / "py")
    w = trapwork.work(trapwork.Scenario.from_file(in_tmp / "py" / "designed.toml"))
    t = w.tables["transition"]
    quanta = sum(p * n for m, n, p in zip(t["initial"], t["final"], t["probability"]) if m == 0)
    assert quanta == pytest.approx(r.summary["final_run"]["objective_designed"], rel=1e-6)


def test_design_bad_objective_is_input_error():
    with pytest.raises(trapwork.InputError):
        trapwork.design(trapwork.Scenario.from_file(EXAMPLES / "ion_design.toml"), objective="speed")
