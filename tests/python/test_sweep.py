"""sweep: the module against the command line (issue 15), and Ctrl-C during a sweep."""
import json
import pathlib

import numpy as np
import pytest

import trapwork
from conftest import (REPORT_RELATIVE, EXAMPLES, assert_summary_equals_json, assert_table_equals_csv, assert_text_close, cli_ok,
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


def assert_table_equals_csv_columns(table, columns):
    from conftest import assert_close, column_scale
    for n, v in columns.items():
        assert_close(table[n], v, column_scale(n, v), n)



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
