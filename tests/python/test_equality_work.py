"""The module's work results equal the command line's files on every example with a [protocol]
and an [initial] (issue 15); the helpers and the tolerance are test_equality.py's and
conftest.py's (kept in two files so that ctest runs them side by side)."""
import pytest

import trapwork
from conftest import EXAMPLES, cli_ok, example_scenarios, has_tables
from test_equality import assert_result_equals_cli


WORK_EXAMPLES = [n for n in example_scenarios() if has_tables(n, "protocol", "initial")]


def test_work_examples_found():
    # the examples with a [protocol] and an [initial] (what `trapwork work` runs) are found
    assert "ion_translation.toml" in WORK_EXAMPLES and len(WORK_EXAMPLES) >= 5


@pytest.mark.parametrize("name", WORK_EXAMPLES)
def test_work_equals_cli(name, in_tmp):
    done = cli_ok("work", EXAMPLES / name, "-o", in_tmp / "cli")
    result = trapwork.work(trapwork.Scenario.from_file(EXAMPLES / name))
    assert_result_equals_cli(result, in_tmp / "cli", done.stdout)
    p = result.transitions
    t = result.tables["transition"]
    assert p[int(t["initial"][-1]), int(t["final"][-1])] == t["probability"][-1]
