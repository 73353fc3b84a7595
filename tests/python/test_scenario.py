"""trapwork.Scenario: from_file, from_text, default, from_dict, with_values, pickling (issue 15)."""
import pickle

import numpy as np
import pytest

import trapwork
from conftest import EXAMPLES, assert_summary_equals_json, assert_table_equals_csv, cli_ok


def test_from_file_keeps_text_and_name():
    path = EXAMPLES / "ion_translation.toml"
    s = trapwork.Scenario.from_file(path)
    assert s.text == path.read_text()
    assert s.name == str(path)
    assert s.has_protocol and s.has_initial and not s.has_sweep
    assert s.title


def test_from_text_checks_the_text_with_its_name():
    with pytest.raises(trapwork.InputError) as caught:
        trapwork.Scenario.from_text('[particle]\nmass = "40"\n', name="mine.toml")
    assert str(caught.value).startswith("mine.toml:2:"), str(caught.value)
    with pytest.raises(trapwork.InputError, match="massx"):
        trapwork.Scenario.from_text('[particle]\nmassx = "40 u"\n')


def test_default_is_the_demo_scenario():
    s = trapwork.Scenario.default()
    assert s.name == "default" and s.has_protocol and s.has_initial
    assert trapwork.spectrum("default", levels=2).summary["scenario"] == trapwork.spectrum(s, levels=2).summary["scenario"]


def test_table_files_are_found_beside_the_scenario():
    # tabulated_trap.toml names tabulated_trap.csv: from_text with the file's path finds it
    path = EXAMPLES / "tabulated_trap.toml"
    s = trapwork.Scenario.from_text(path.read_text(), str(path))
    assert trapwork.spectrum(s, levels=2).energies.shape == (2,)


def test_scenario_pickles_as_text_and_name():
    s = trapwork.Scenario.from_file(EXAMPLES / "ion_quartic.toml")
    copy = pickle.loads(pickle.dumps(s))
    assert copy == s and copy.text == s.text and copy.name == s.name and hash(copy) == hash(s)


def test_levels_argument_changes_the_spectrum():
    r = trapwork.spectrum(trapwork.Scenario.default(), levels=4)
    assert len(r.energies) == 4 and r.summary["levels_requested"] == 4
    assert np.all(np.diff(r.energies) > 0)


def test_with_values_equals_the_cli_on_the_edited_file(in_tmp):
    s = trapwork.Scenario.from_file(EXAMPLES / "ion_translation.toml")
    changed = s.with_values({"protocol.duration": "1.4 us", "initial.temperature": "10 uK"})
    assert changed.name == s.name and changed.text != s.text
    assert changed.changed_values == ["protocol.duration=1.4 us", "initial.temperature=10 uK"]
    edited = in_tmp / "edited.toml"
    edited.write_text(changed.text)
    cli_ok("work", edited, "-o", in_tmp / "cli")
    module = trapwork.work(changed)
    original = trapwork.work(s)
    assert module.summary["work"]["mean"]["value"] != original.summary["work"]["mean"]["value"]
    for table in module.tables.values():
        assert_table_equals_csv(table, in_tmp / "cli" / table.file)
    # the summary names the file the CLI read (edited.toml) and the changes; everything else is equal
    assert_summary_equals_json(module.summary, in_tmp / "cli" / "summary.json", ignore=("scenario", "changed_values"))
    assert module.summary["protocol"]["duration_given"] == "1.4 us"
    assert module.summary["scenario"]["file"] == s.name


def test_with_values_equals_the_cli_with_set_and_both_record_the_changes(in_tmp):
    s = trapwork.Scenario.from_file(EXAMPLES / "ion_translation.toml")
    changed = s.with_values({"protocol.duration": "1.4 us"}).with_values({"initial.temperature": "10 uK"})
    cli_ok("work", s.name, "--set", "protocol.duration=1.4 us", "--set", "initial.temperature=10 uK",
           "-o", in_tmp / "cli")
    module = trapwork.work(changed, search_budget=2000)
    assert_summary_equals_json(module.summary, in_tmp / "cli" / "summary.json")
    assert module.summary["changed_values"] == ["protocol.duration=1.4 us", "initial.temperature=10 uK"]
    assert module.summary["invocation"] == f"trapwork.work({s.name!r}) (Python, trapwork {trapwork.__version__})"
    # the changes survive pickling of the scenario
    assert pickle.loads(pickle.dumps(changed)).changed_values == changed.changed_values


def test_with_values_unknown_address_is_input_error():
    with pytest.raises(trapwork.InputError, match="duratio"):
        trapwork.Scenario.default().with_values({"protocol.duratio": "3 us"})
    with pytest.raises(trapwork.InputError, match="frequencyy"):
        trapwork.Scenario.default().with_values({"trap.frequencyy": "1 MHz"})


def test_with_values_bad_value_names_the_line():
    with pytest.raises(trapwork.InputError) as caught:
        trapwork.Scenario.default().with_values({"protocol.duration": "-3 us"})
    assert str(caught.value).startswith("default:"), str(caught.value)
    assert "protocol.duration" in str(caught.value)


def test_from_dict_builds_the_same_scenario_as_its_toml(in_tmp):
    values = {"particle": {"mass": "40 u"},
              "potential": [{"name": "trap", "shape": "polynomial", "frequency": "1 MHz",
                             "quartic": "0.0157 h*Hz/nm^4"}],
              "spectrum": {"levels": 5}}
    s = trapwork.Scenario.from_dict(values, name="mine.toml")
    (in_tmp / "mine.toml").write_text(s.text)
    cli_ok("spectrum", "mine.toml", "-o", "cli")
    r = trapwork.spectrum(s)
    assert len(r.energies) == 5
    assert_table_equals_csv(r.tables["spectrum"], in_tmp / "cli" / "spectrum.csv")
    with pytest.raises(trapwork.InputError, match="mass"):
        trapwork.Scenario.from_dict({"particle": {"mass": 40}, "potential": values["potential"]})
