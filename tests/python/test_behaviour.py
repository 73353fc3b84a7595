"""What a notebook user expects of the module (issue 15): errors as Python exceptions with the
command line's located messages, Ctrl-C, the GIL released, progress, pickling, write()."""
import os
import pathlib
import pickle
import signal
import subprocess
import sys
import threading
import time

import numpy as np
import pytest

import trapwork
from conftest import EXAMPLES, assert_text_close, cli_ok, run_cli

HERE = pathlib.Path(__file__).resolve().parent


@pytest.fixture(scope="module")
def default_work():
    """One work run of the built-in scenario, shared by the tests that only read it."""
    return trapwork.work(trapwork.Scenario.default())


# ---- errors -----------------------------------------------------------------------------------

def test_bad_scenario_file_is_input_error_with_file_and_line(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text('[particle]\nmass = "40 u"\n\n[[potential]]\nname = "trap"\nshape = "harmonic"\nfrequency = "-1 MHz"\n')
    with pytest.raises(trapwork.InputError) as caught:
        trapwork.Scenario.from_file(bad)
    message = str(caught.value)
    assert message.startswith(f"{bad}:7:"), message
    assert "frequency" in message
    assert isinstance(caught.value, ValueError)
    # the same message as the command line's
    done = run_cli("spectrum", bad, "-o", tmp_path / "out")
    assert done.returncode == 2
    assert done.stderr.strip() == f"trapwork: error: {message}"


def test_missing_file_is_input_error(tmp_path):
    with pytest.raises(trapwork.InputError, match="cannot open"):
        trapwork.Scenario.from_file(tmp_path / "missing.toml")


def test_work_without_protocol_is_input_error(tmp_path):
    s = trapwork.Scenario.from_file(EXAMPLES / "ion_quartic.toml")
    assert not s.has_protocol
    with pytest.raises(trapwork.InputError, match="protocol") as caught:
        trapwork.work(s)
    done = run_cli("work", EXAMPLES / "ion_quartic.toml", "-o", tmp_path / "out")
    assert done.returncode == 2 and done.stderr.strip() == f"trapwork: error: {caught.value}"


def test_bad_arguments_are_input_errors():
    s = trapwork.Scenario.default()
    with pytest.raises(trapwork.InputError, match="levels"):
        trapwork.spectrum(s, levels=0)
    with pytest.raises(trapwork.InputError, match="tolerance"):
        trapwork.work(s, tolerance=2)
    with pytest.raises(TypeError):
        trapwork.work(s, progress="yes")


def test_unphysical_scenario_is_physics_error(tmp_path):
    # an inverted harmonic "trap" (negative quartic, no confinement) holds no bound levels
    text = ('[particle]\nmass = "40 u"\n\n[[potential]]\nname = "trap"\nshape = "polynomial"\n'
            'frequency = "1 MHz"\nquartic = "-0.0157 h*Hz/nm^4"\n')
    path = tmp_path / "unbound.toml"
    path.write_text(text)
    with pytest.raises(trapwork.PhysicsError) as caught:
        trapwork.spectrum(trapwork.Scenario.from_file(path))
    assert isinstance(caught.value, RuntimeError)
    assert str(caught.value).startswith(f"{path}: ")
    done = run_cli("spectrum", path, "-o", tmp_path / "out")
    assert done.returncode == 2 and done.stderr.strip() == f"trapwork: error: {caught.value}"


# ---- Ctrl-C -----------------------------------------------------------------------------------

@pytest.mark.parametrize("command", ["work", "spectrum"])
def test_ctrl_c_raises_keyboard_interrupt_and_writes_nothing(tmp_path, command):
    folder = tmp_path / "out"
    env = dict(os.environ)
    child = subprocess.Popen([sys.executable, str(HERE / "interrupt_driver.py"), str(folder), command],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    try:
        assert child.stdout.readline().strip() == "started", child.stderr.read()
        time.sleep(1)
        assert child.poll() is None, "the long run ended before it could be interrupted"
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
    # A behaviour, not a speed target: the run must stop at its next progress point instead of
    # propagating to its end (about a minute here); the issue asks for "within a second", the
    # bound is 5 s so that a loaded test machine does not fail it.
    assert float(when) - sent < 5.0
    assert not folder.exists()


def test_ctrl_c_during_write_leaves_one_whole_run(tmp_path):
    # The child writes two different spectra into one folder in turn until SIGINT: wherever the
    # signal lands (inside OutputRun's write phase, its commit, or between writes), the folder
    # must then hold exactly the files of one of the two runs, and KeyboardInterrupt is raised.
    folder = tmp_path / "out"
    runs = tmp_path / "runs.pickle"
    child = subprocess.Popen([sys.executable, str(HERE / "write_driver.py"), str(folder), str(runs)],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        assert child.stdout.readline().strip() == "ready", child.stderr.read()
        time.sleep(0.5)
        child.send_signal(signal.SIGINT)
        out, err = child.communicate(timeout=60)
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
    assert child.returncode == 0 and out.strip() == "interrupted", f"exit {child.returncode}: {out}\n{err}"
    expected = pickle.loads(runs.read_bytes())
    found = {p.name: p.read_bytes() for p in folder.iterdir() if not p.name.startswith(".trapwork-")}
    leftovers = [p.name for p in folder.iterdir() if p.name.startswith(".trapwork-new") or ".tmp-" in p.name]
    assert not leftovers
    assert found in expected, "the folder mixes the two runs"


# ---- the GIL and progress ---------------------------------------------------------------------

def test_gil_is_released_during_a_computation():
    # A second Python thread counts while the main thread computes: with the GIL held by the
    # computation it could not run at all until the computation ends.
    counts = []
    running = threading.Event()
    stop = threading.Event()

    def count():
        n = 0
        running.set()
        while not stop.is_set():
            n += 1
            if n % 1000 == 0:
                counts.append(n)
                time.sleep(0)

    seen_during = []
    thread = threading.Thread(target=count)
    thread.start()
    running.wait()

    def progress(stage, fraction):
        seen_during.append(len(counts))

    trapwork.work(trapwork.Scenario.default(), progress=progress)
    stop.set()
    thread.join()
    # the counter advanced between two progress calls of the computation
    assert len(seen_during) >= 3
    assert seen_during[-1] > seen_during[0]


def test_progress_callback_gets_stage_and_fraction():
    calls = []
    trapwork.work(trapwork.Scenario.default(), progress=lambda stage, fraction: calls.append((stage, fraction)))
    assert calls, "progress was never called"
    assert all(isinstance(s, str) and 0.0 <= f <= 1.0 for s, f in calls)
    assert calls[-1][1] == 1.0
    assert calls[0][0] == "propagating"


def test_exception_in_progress_callback_stops_the_run():
    class Stop(Exception):
        pass

    def progress(stage, fraction):
        raise Stop()

    with pytest.raises(Stop):
        trapwork.work(trapwork.Scenario.default(), progress=progress)


def test_progress_true_draws_a_text_bar(capsys):
    trapwork.spectrum(trapwork.Scenario.default(), levels=3, progress=True)
    err = capsys.readouterr().err
    assert "100.0%" in err or "100%" in err


def test_computations_in_threads_give_equal_results():
    # several work runs at once from Python threads (each its own worker thread): same numbers
    s = trapwork.Scenario.from_file(EXAMPLES / "ion_translation.toml")
    results = [None, None]

    def run(i):
        results[i] = trapwork.work(s)

    threads = [threading.Thread(target=run, args=(i,)) for i in range(2)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    a, b = results
    np.testing.assert_allclose(a.lines["probability"], b.lines["probability"], rtol=1e-12, atol=1e-15)


# ---- results: pickling, write, pandas ---------------------------------------------------------

def test_pickled_result_has_equal_arrays_and_writes_the_same_files(default_work, tmp_path):
    first = default_work.write(tmp_path / "a")
    copy = pickle.loads(pickle.dumps(default_work))
    assert copy.summary == default_work.summary
    assert copy.report == default_work.report
    for stem, table in default_work.tables.items():
        assert copy.tables[stem].columns == table.columns
        for c in table.columns:
            np.testing.assert_array_equal(copy.tables[stem][c], table[c])
    np.testing.assert_array_equal(copy.transitions, default_work.transitions)
    second = copy.write(tmp_path / "b")
    assert [pathlib.Path(p).name for p in first] == [pathlib.Path(p).name for p in second]
    for p, q in zip(first, second):
        assert pathlib.Path(p).read_bytes() == pathlib.Path(q).read_bytes(), p


def test_written_files_hold_the_tables_and_summary(default_work, tmp_path):
    import json
    from conftest import read_csv, rows_in_file
    paths = [pathlib.Path(p) for p in default_work.write(tmp_path / "out")]
    names = {p.name for p in paths}
    assert {"lines.csv", "histogram.csv", "density.csv", "transition.csv", "characteristic.csv", "summary.json",
            "work.png", "work.svg", "potential.png", "potential.svg"} <= names
    for table in default_work.tables.values():
        cols, comments, values = read_csv(tmp_path / "out" / table.file)
        assert cols == table.columns and comments == table.comments
        keep = rows_in_file(table, comments)  # lines.csv leaves out the lines below its floor
        for c in cols:
            np.testing.assert_array_equal(values[c], table[c][keep])  # shortest round-trip text: exact
    assert json.loads((tmp_path / "out" / "summary.json").read_text()) == default_work.summary
    # no staging folder or temporary file is left
    assert not [p for p in (tmp_path / "out").iterdir() if ".tmp-" in p.name or p.name.startswith(".trapwork-new")]


def test_write_refuses_to_replace_the_scenario(tmp_path):
    path = tmp_path / "summary.json"  # a scenario file named like an output
    path.write_text((EXAMPLES / "ion_quartic.toml").read_text())
    r = trapwork.spectrum(trapwork.Scenario.from_file(path), levels=3)
    with pytest.raises(trapwork.InputError, match="does not replace its own input"):
        r.write(tmp_path)


def test_to_pandas(default_work):
    pandas = pytest.importorskip("pandas")
    frame = default_work.to_pandas()
    assert list(frame.columns) == default_work.lines.columns
    np.testing.assert_array_equal(frame["probability"].to_numpy(), default_work.lines["probability"])
    frame = default_work.to_pandas("histogram.csv")
    assert isinstance(frame, pandas.DataFrame) and len(frame) == len(default_work.histogram)


def test_result_fields(default_work):
    r = default_work
    assert r.diagnostics == r.summary["diagnostics"]
    assert r.warnings == r.summary["warnings"]
    assert r.report.startswith("trapwork work: ")
    assert abs(r.lines["probability"].sum() + r.diagnostics["unresolved_weight"] - 1) < 1e-9
    assert r.transitions.shape == (int(r.tables["transition"]["initial"].max()) + 1,
                                   int(r.tables["transition"]["final"].max()) + 1)


def test_docstrings():
    for f in (trapwork.spectrum, trapwork.work, trapwork.sweep, trapwork.fit, trapwork.compare, trapwork.plan):
        assert "Returns" in f.__doc__ and "Raises" in f.__doc__ and "progress" in f.__doc__, f.__name__
    for c in (trapwork.Scenario, trapwork.Table, trapwork.Result, trapwork.WorkResult, trapwork.InputError,
              trapwork.PhysicsError):
        assert c.__doc__ and len(c.__doc__) > 40, c.__name__


def test_work_figures_are_plain_data(default_work):
    # the figure data the command line draws work.png and potential.png from, as dicts of numpy arrays
    r = default_work
    assert set(r.figures) == {"potential", "work", "protocol", "populations", "traces"}  # issue 16: three more
    work = r.figures["work"]
    assert work["kind"] == "work" and isinstance(work["result"]["work"], np.ndarray)
    assert abs(work["result"]["probability"].sum() - r.lines["probability"].sum()) < 1e-12
    assert work["mean_work"] == r.summary["work"]["mean"]["value"]
    levels = r.figures["potential"]
    assert levels["kind"] == "levels" and len(levels["panels"]) == 2
    start = levels["panels"][0]
    assert start["x"].shape == start["potential"].shape
    np.testing.assert_allclose(start["energies"][:3], trapwork.spectrum("default", levels=3).energies, rtol=1e-9)
    copy = pickle.loads(pickle.dumps(r))
    np.testing.assert_array_equal(copy.figures["work"]["result"]["work"], work["result"]["work"])


def test_run_too_large_for_memory_is_refused_as_the_cli_does(tmp_path):
    # refused before it allocates (PhysicsError, the CLI's message), not a MemoryError midway
    with pytest.raises(trapwork.PhysicsError) as caught:
        trapwork.spectrum(trapwork.Scenario.default(), levels=100000)
    assert "refused before computing" in str(caught.value)
    done = run_cli("spectrum", "default", "--levels", "100000", "-o", tmp_path / "out")
    assert done.returncode == 2
    # the memory available is read again by each run: same words, numbers within 5%
    assert_text_close(f"trapwork: error: {caught.value}", done.stderr.strip(), "message", relative=0.05)
