"""trapwork.Scenario: from_file, from_text, default, from_dict, with_values, pickling (issue 15)."""
import pickle

import numpy as np
import pytest

import trapwork
from conftest import EXAMPLES, assert_table_equals_csv, cli_ok


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
