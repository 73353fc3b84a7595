"""sweep: the module against the command line (issue 15), and Ctrl-C during a sweep."""
import json
import pathlib

import numpy as np
import pytest

import trapwork
from conftest import (REPORT_RELATIVE, EXAMPLES, assert_summary_equals_json, assert_table_equals_csv,
                      assert_table_equals_csv_columns, assert_text_close, cli_ok,
                      read_csv)


def report_of(stdout):
    return stdout[:stdout.index("\nwrote ")] if "\nwrote " in stdout else stdout


def test_sweep_equals_cli(in_tmp):
    # ion_sweep.toml has 12 points from 0.5 to 6 us (about 30 s); the same scenario with 3 points
    # from 0.5 to 2 us, through a scenario edit that the command line reads as a file
    s = trapwork.Scenario.from_file(EXAMPLES / "ion_sweep.toml").with_values({"sweep.to": "2 us", "sweep.points": 3})
    path = in_tmp / "ion_sweep_short.toml"
    s.write(path)
    done = cli_ok("sweep", path, "--jobs", "2", "-o", in_tmp / "cli")
    r = trapwork.sweep(trapwork.Scenario.from_file(path), jobs=2)
    names, comments, columns = read_csv(in_tmp / "cli" / "sweep.csv")
    t = r.table
    assert t.columns == names and len(t) == 3
    assert_table_equals_csv_columns(t, columns)
    np.testing.assert_allclose(t["protocol_duration_us"], [0.5, 1.25, 2.0], rtol=1e-15)
    assert_text_close(r.report, report_of(done.stdout), "report", REPORT_RELATIVE)
    # the module's small summary (sweep_summary.json when written; the command line keeps
    # sweep-points.txt for --resume instead)
    assert r.summary["points"] == 3 and r.summary["computed"] == 3 and r.summary["failed"] == 0
    names = sorted(pathlib.Path(p).name for p in r.write(in_tmp / "module"))
    assert names == ["sweep.csv", "sweep.png", "sweep.svg", "sweep_summary.json"]
    assert "sweep" in r.figures and r.figures["sweep"]["kind"] == "sweep"


GRID = """title = "grid sweep"
[particle]
mass = "40 u"
[[potential]]
name = "trap"
shape = "harmonic"
frequency = "1 MHz"
[protocol]
duration = "1.5 us"
[[protocol.change]]
parameter = "trap.centre"
to = "30 nm"
[initial]
mean_phonons = 0.3
[work]
time_step_check = false
[[sweep.axis]]
parameter = "protocol.duration"
values = ["1.3 us", "0.7 us"]
[[sweep.axis]]
parameter = "initial.mean_phonons"
values = [0.1, 0.5]
"""


def test_grid_sweep_equals_cli(in_tmp):
    # issue 20: a two-parameter grid (the same scenario layer as the command line): the table
    # in point order with a column per swept parameter, equal to sweep.csv; the maps are written
    path = in_tmp / "grid.toml"
    path.write_text(GRID)
    cli_ok("sweep", path, "--jobs", "2", "-o", in_tmp / "cli")
    r = trapwork.sweep(trapwork.Scenario.from_file(path), jobs=2)
    names, comments, columns = read_csv(in_tmp / "cli" / "sweep.csv")
    t = r.table
    assert t.columns == names and len(t) == 4
    assert names[:3] == ["point", "protocol_duration_us", "initial_mean_phonons_internal"]
    np.testing.assert_array_equal(t["point"], [1, 2, 3, 4])
    np.testing.assert_array_equal(t["protocol_duration_us"], [1.3, 1.3, 0.7, 0.7])
    np.testing.assert_array_equal(t["initial_mean_phonons_internal"], [0.1, 0.5, 0.1, 0.5])
    assert_table_equals_csv_columns(t, columns)
    assert r.summary["parameter"] == ["protocol.duration", "initial.mean_phonons"] and r.summary["points"] == 4
    names = sorted(pathlib.Path(p).name for p in r.write(in_tmp / "module"))
    assert "sweep_map_mean.png" in names and "sweep.csv" in names




def test_ctrl_c_stops_a_sweep_and_its_workers(tmp_path):
    import signal
    import subprocess
    import sys
    import time
    folder = tmp_path / "out"
    here = __import__("pathlib").Path(__file__).resolve().parent
    child = subprocess.Popen([sys.executable, str(here / "interrupt_driver.py"), str(folder), "sweep",
                              str(EXAMPLES / "ion_sweep.toml")], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        assert child.stdout.readline().strip() == "started", child.stderr.read()
        time.sleep(1)
        assert child.poll() is None
        sent = time.monotonic()
        child.send_signal(signal.SIGINT)
        out, err = child.communicate(timeout=60)
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
    assert child.returncode == 0, f"exit {child.returncode}: {out}\n{err}"
    word, when = out.split()
    assert word == "interrupted"
    # a behaviour, not a speed target (see test_behaviour.py): both point threads stop at their
    # next progress point; 5 s so that a loaded machine does not fail it
    assert float(when) - sent < 5.0
    assert not folder.exists()
