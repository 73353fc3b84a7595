"""Issue 16, output hygiene, as a user of the files and of the module sees it: the README's
two-line recipe loads every example data file; lines.csv leaves out the lines below its stated
floor while the module's table keeps them; the level enlargement is a note, not a warning."""
import subprocess
import sys

import numpy as np
import pytest

import trapwork
from conftest import CLI, EXAMPLES, SOURCE

EXAMPLE_DATA = sorted(EXAMPLES.glob("*.csv"))


def readme_recipe(path):
    """The loading recipe of README.md, checked to be still the one written there."""
    readme = (SOURCE / "README.md").read_text()
    assert 'np.genfromtxt("demo-output/lines.csv", delimiter=",", names=True)' in readme
    return np.genfromtxt(path, delimiter=",", names=True)


def check_loads(path):
    text = path.read_text().splitlines()
    assert not text[0].startswith("#"), f"{path.name}: a comment line before the column names"
    header = text[0].split(",")
    rows = [l for l in text[1:] if l.strip() and not l.lstrip().startswith("#")]
    data = readme_recipe(path)
    # numpy drops characters such as '/' and '*' from names; the count and the rows must match
    assert len(data.dtype.names) == len(header), f"{path.name}: names {data.dtype.names} vs {header}"
    assert data.size == len(rows)
    for name in data.dtype.names:
        assert np.isfinite(data[name]).all(), f"{path.name}: column {name} did not read as numbers"


def test_examples_exist():
    assert len(EXAMPLE_DATA) >= 3, EXAMPLE_DATA


@pytest.mark.parametrize("path", EXAMPLE_DATA, ids=lambda p: p.name)
def test_every_example_data_file_loads_with_the_readme_recipe(path):
    check_loads(path)


def test_a_file_with_a_comment_before_the_names_fails_the_check(tmp_path):
    # the check can fail: the layout the examples had before issue 16
    bad = tmp_path / "bad.csv"
    bad.write_text("# INVENTED DEMO DATA\nx_um,V_kB_uK\n0,1\n1,2\n")
    with pytest.raises(AssertionError):
        check_loads(bad)


def test_the_spectroscopy_generator_writes_the_example_file(tmp_path):
    out = tmp_path / "lines.csv"
    subprocess.run([sys.executable, str(EXAMPLES / "make_ion_spectroscopy_lines.py"), CLI, str(out)], check=True)
    check_loads(out)
    assert out.read_text() == (EXAMPLES / "ion_spectroscopy_lines.csv").read_text()


def test_lines_file_leaves_out_the_lines_below_its_floor_the_module_keeps_them():
    r = trapwork.work("default")
    lines = r.lines
    floor = r.summary["work"]["lines_file"]
    assert floor["probability_floor"] == 1e-15
    below = lines["probability"] < 1e-15
    assert floor["left_out"] == int(below.sum()) > 0
    assert floor["left_out_probability"] == pytest.approx(lines["probability"][below].sum(), rel=1e-12)  # summation order
    assert r.summary["work"]["lines"] == len(lines)
    text = r.files()["lines.csv"].decode()
    stated = [c for c in text.splitlines() if c.startswith("# probability floor 1e-15: ")]
    assert len(stated) == 1 and f": {floor['left_out']} lines below it left out" in stated[0]
    data = np.genfromtxt(text.splitlines(), delimiter=",", names=True)
    assert data.size == len(lines) - floor["left_out"]
    assert (data["probability"] >= 1e-15).all()
    # the statistics use every line: the module's probabilities and the unresolved weight sum to 1
    assert abs(lines["probability"].sum() + r.diagnostics["unresolved_weight"] - 1) < 1e-9
    assert np.dot(lines["probability"], lines[lines.columns[0]]) == pytest.approx(
        r.summary["work"]["mean"]["value"], rel=1e-9)


BOX = """title = "box with a growing bump"
[particle]
mass = "87 u"
[units]
energy = "h*kHz"
[box]
left = "-2 um"
right = "2 um"
[[potential]]
name = "bump"
shape = "gaussian"
depth = "0 h*kHz"
waist = "0.6 um"
centre = "0.5 um"
[protocol]
duration = "2 ms"
[[protocol.change]]
parameter = "bump.depth"
to = "-0.2 h*kHz"
[initial]
temperature = "5 nK"
[work]
time_step_check = false
"""


def test_a_column_that_does_not_apply_is_empty_in_the_file_and_nan_in_the_module(tmp_path):
    (tmp_path / "box.toml").write_text(BOX)
    box = trapwork.work(tmp_path / "box.toml")
    ion = trapwork.work("default")
    for stem in ("lines", "histogram", "density", "transition", "characteristic"):
        assert box.tables[stem].columns == ion.tables[stem].columns, stem
    assert np.isnan(box.density["harmonic_density_per_h_kHz"]).all()
    assert np.isfinite(ion.density["harmonic_density_per_h_kHz"]).all()
    text = box.files()["density.csv"].decode().splitlines()
    rows = [l for l in text[1:] if not l.startswith("#")]
    assert rows and all(l.endswith(",") for l in rows)  # the empty last column
    data = np.genfromtxt(text, delimiter=",", names=True)  # the README's recipe reads it as NaN
    assert np.isnan(data["harmonic_density_per_h_kHz"]).all()


def test_levels_enlarged_is_a_note_not_a_warning(tmp_path):
    # as tests/test_cost.cpp: a final margin of 2 levels is too few for |alpha|^2 about 3
    (tmp_path / "enlarged.toml").write_text("""title = "enlarged"
[particle]
mass = "40 u"
[[potential]]
name = "trap"
shape = "harmonic"
frequency = "1 MHz"
[protocol]
duration = "0.3 us"
[[protocol.change]]
parameter = "trap.centre"
to = "40 nm"
[initial]
mean_phonons = 0.2
[work]
final_margin = 2
time_step_check = false
""")
    r = trapwork.work(tmp_path / "enlarged.toml")
    assert len(r.notes) == 1 and r.notes[0].startswith("levels enlarged")
    assert r.notes == r.summary["notes"]
    assert not [w for w in r.warnings if "enlarged" in w]
    assert "\nnotes\n  - levels enlarged" in r.report
