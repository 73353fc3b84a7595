"""Shared helpers of the Python module's tests: where the command line and the examples are,
running the command line, reading its CSV files, and comparing numbers.

Run by ctest (tests/python/CMakeLists.txt), which sets PYTHONPATH to build/python and
TRAPWORK_CLI, TRAPWORK_SOURCE_DIR; by hand:
    PYTHONPATH=build/python TRAPWORK_CLI=build/trapwork python3 -m pytest tests/python
"""
import difflib
import json
import math
import os
import pathlib
import re
import subprocess

import numpy as np
import pytest

SOURCE = pathlib.Path(os.environ.get("TRAPWORK_SOURCE_DIR", pathlib.Path(__file__).resolve().parents[2]))
EXAMPLES = SOURCE / "examples"
CLI = os.environ.get("TRAPWORK_CLI", str(SOURCE / "build" / "trapwork"))

# Reports print numbers to 4-10 digits, and the numbers themselves are compared in the tables and
# summary; in a report a number is compared to REPORT_RELATIVE besides its last digit: sd(W) of
# tweezer_deform.toml (var W = 5.8e-9 <W>^2, a difference of large sums) printed to 10 digits
# differed by 1.1e-7 relative between two command line runs.
REPORT_RELATIVE = 1e-6
# Tolerance of module against command line. Both run the same code on the same input, but the
# command line is not bitwise repeatable itself: FFTW_MEASURE (long runs) picks transform
# algorithms by timing, so two runs of one scenario differ at rounding level. Measured, command
# line against command line: <W> of `trapwork demo` by 2.6e-13 relative; the transition
# probabilities of ion_translation.toml at 3 us by 3.6e-12 of the column's largest value; an
# error estimate that is a difference of two O(1) sums (sd_error) by 3e-5 of itself, being
# rounding noise. So each number a (module) is compared with b (command line) as
#     |a - b| <= RELATIVE |b| + SCALE_RELATIVE * scale,
# scale: the largest magnitude in its CSV column, or in its top-level section of the summary
# (same run, same units). RELATIVE is the 1e-12 the issue asks for; SCALE_RELATIVE is looser
# than it because of the measured 3.6e-12 above (about 3 times that).
RELATIVE = 1e-12
SCALE_RELATIVE = 1e-11
# Accuracy measures in the summary (error estimates, drifts, residuals, the parts of a moment's
# error) are rounding noise when small, computed from differences of large sums: in
# tweezer_deform.toml (<W> = -3568, sd(W) = 0.27 internal) sd_error.internal was 1.4e-7 in one
# command line run and 3.0e-8 in another (4.3e-8 apart: 1.2e-11 of the section's scale 3568). They
# are compared to NOISE_SCALE_RELATIVE of their section's scale instead.
NOISE_SCALE_RELATIVE = 1e-9
# A change of line probabilities between two runs (walls.grid_line_change, max |dP| with twice
# the points) is one too, and absolute: box_expansion.toml's 2.7e-7 differed by 6e-15 between the
# module and the command line (the rounding of probabilities of order 1), so in the JSON these
# keys also get NOISE_ABSOLUTE.
NOISE_ABSOLUTE = 1e-12
_NOISE_KEY = re.compile(r"error|drift|residual|_part|unresolved|convergence|edge_amplitude|line_change")
_NOISE_TEXT = re.compile(r"error|drift|residual|escape now|unresolved|parts:|final levels|thermal cut|basis|\+-")


def run_cli(*args, cwd=None):
    """Runs the command line; returns the CompletedProcess (stdout, stderr as text)."""
    return subprocess.run([CLI, *map(str, args)], capture_output=True, text=True, cwd=cwd, timeout=600)


def cli_ok(*args, cwd=None):
    """Runs the command line and requires success."""
    done = run_cli(*args, cwd=cwd)
    assert done.returncode == 0, f"trapwork {' '.join(map(str, args))} failed:\n{done.stderr}"
    return done


def read_csv(path):
    """A CSV file of the command line: (column names, comment lines, {name: float array}); an
    empty cell (a column that does not apply to the run) reads as NaN."""
    lines = pathlib.Path(path).read_text().splitlines()
    names = lines[0].split(",")
    comments = [l[2:] if l.startswith("# ") else l[1:] for l in lines[1:] if l.startswith("#")]
    rows = [l.split(",") for l in lines[1:] if l and not l.startswith("#")]
    values = np.array([[float(x) if x else np.nan for x in r] for r in rows], dtype=float).reshape(len(rows), len(names))
    return names, comments, {n: values[:, i] for i, n in enumerate(names)}


_FLOOR = re.compile(r"^probability floor ([^:]+): (\d+) lines below it left out")


def rows_in_file(table, comments):
    """The rows of a module Table that its CSV file holds: every row, except in lines.csv and
    reverse_lines.csv, which leave out the lines below the probability floor their comment
    states (the module's table keeps them)."""
    for c in comments:
        m = _FLOOR.match(c)
        if m:
            keep = table["probability"] >= float(m.group(1))
            assert int((~keep).sum()) == int(m.group(2)), f"{table.file}: the floor comment counts {m.group(2)} lines"
            return keep
    return np.ones(len(table), dtype=bool)


def column_scale(name, values):
    """The scale term of a column's tolerance: SCALE_RELATIVE of its largest magnitude, or for an
    accuracy measure (a residual, an error estimate) NOISE_SCALE_RELATIVE of it plus 1e-10 (as
    in assert_text_close): such a column is rounding noise where small (between two command line
    runs of a sweep: a Jarzynski residual of -2.4e-12 moved by 2e-13, a Crooks ratio error went
    from 5.3e-12 to 7.2e-12)."""
    finite = np.abs(values[np.isfinite(values)])
    scale = finite.max() if finite.size else 0.0
    if name.startswith("position_mean"):
        # <x>(t) of a state centred by symmetry is rounding noise (traces.csv of ion_squeeze.toml:
        # 3e-17 um in the module against 7e-17 um on the command line, a grid about 1 um long);
        # 1e-12 of a micrometre is far below any position the tool resolves
        return SCALE_RELATIVE * scale + 1e-12
    if name.startswith("population_"):
        # the population of a level that symmetry leaves empty is rounding noise of a normalised
        # state (traces.csv of tweezer_deform.toml, a parity-preserving deformation from level 0:
        # population_1 was 1.30e-27 in the module against 2.34e-27 on the command line when
        # FFTW_MEASURE picked different transforms under load); 1e-14 is far below any population
        # the tool resolves (the lines floor is 1e-15 of a total of 1, rounding about 1e-16 per step)
        return SCALE_RELATIVE * scale + 1e-14
    if name.endswith("_sd") or "_sd_" in name:
        # a spread due to the calibration (lines_uncertainty.csv probability_sd and
        # probability_sd_linear, the sweep's *_calibration_sd): a difference of runs at the
        # parameters +- h over 2h, which amplifies the runs' rounding by about 1/h; probability_sd
        # of ion_sweep_calibrated.toml differed by 3e-11 of itself (8.822909508562674e-05 vs
        # 8.82290950829371e-05) between the module and the command line when FFTW_MEASURE picked
        # different transforms under load, and probability_sd_linear by 2.6e-11
        # (8.822909509007295e-05 vs 8.822909508776166e-05)
        return NOISE_SCALE_RELATIVE * scale
    if name.startswith("characteristic_function"):
        # G(u) = <exp(i u W)> has |G| <= 1 and G(0) = 1, so 1 is its scale, not the column's
        # largest value: for a hold (W = 0 to rounding) Im G is rounding noise of 1e-22 that
        # differed by 6e-6 of itself between the module and the command line when FFTW_MEASURE
        # picked different transforms under load (tweezer_intensity_noise.toml, CI)
        return SCALE_RELATIVE * max(scale, 1.0)
    return NOISE_SCALE_RELATIVE * scale + 1e-10 if _NOISE_KEY.search(name) else SCALE_RELATIVE * scale


def assert_close(a, b, scale, what):
    """a against b to RELATIVE of b plus `scale` (absolute)."""
    a = np.atleast_1d(np.asarray(a, dtype=float))
    b = np.atleast_1d(np.asarray(b, dtype=float))
    assert a.shape == b.shape, f"{what}: shapes {a.shape} and {b.shape}"
    same_nan = np.isnan(a) == np.isnan(b)
    assert same_nan.all(), f"{what}: NaN in one and not the other at {np.flatnonzero(~same_nan)[:5]}"
    ok = np.isnan(a) | (a == b) | (np.abs(a - b) <= RELATIVE * np.abs(b) + scale)
    bad = np.flatnonzero(~ok)
    assert bad.size == 0, f"{what}: {bad.size} values differ, first at row {bad[0]}: {a[bad[0]]!r} vs {b[bad[0]]!r}"


def assert_table_equals_csv_columns(table, columns):
    """Module Table against the columns of a CSV file (read_csv), each equal to RELATIVE."""
    for n, v in columns.items():
        assert_close(table[n], v, column_scale(n, v), n)


def assert_table_equals_csv(table, path):
    """Module Table against the command line's CSV file: same columns in the same order, the
    same comment lines (assert_text_close), each column equal to RELATIVE (see above)."""
    names, comments, columns = read_csv(path)
    assert table.columns == names, f"{path.name}: columns {table.columns} vs {names}"
    assert len(table.comments) == len(comments), f"{path.name}: comment lines differ"
    for a, b in zip(table.comments, comments):
        assert_text_close(a, b, f"{path.name} comment")
    keep = rows_in_file(table, comments)
    for n in names:
        assert_close(table[n][keep], columns[n], column_scale(n, columns[n]), f"{path.name} column {n}")


def _largest(value):
    if isinstance(value, bool):
        return 0.0
    if isinstance(value, (int, float)):
        return abs(value) if math.isfinite(value) else 0.0
    if isinstance(value, dict):
        return max((_largest(v) for v in value.values()), default=0.0)
    if isinstance(value, list):
        return max((_largest(v) for v in value), default=0.0)
    return 0.0


def _compare_json(a, b, scale, where):
    if isinstance(b, dict):
        assert isinstance(a, dict) and list(a) == list(b), f"{where}: keys {list(a)} vs {list(b)}"
        for k in b:
            _compare_json(a[k], b[k], scale, f"{where}.{k}")
    elif isinstance(b, list):
        assert isinstance(a, list) and len(a) == len(b), f"{where}: lists of different length"
        for i, (x, y) in enumerate(zip(a, b)):
            _compare_json(x, y, scale, f"{where}[{i}]")
    elif isinstance(b, (int, float)) and not isinstance(b, bool) and b is not None:
        assert isinstance(a, (int, float)) and not isinstance(a, bool), f"{where}: {a!r} vs {b!r}"
        keys = [k for k in re.split(r"[.:\[]", where) if k and not k[0].isdigit()]
        named = keys[-2] if keys and keys[-1] in ("value", "internal", "hbar_omega") and len(keys) > 1 else keys[-1]
        noise = bool(_NOISE_KEY.search(named))
        assert_close(a, b, scale * NOISE_SCALE_RELATIVE + NOISE_ABSOLUTE if noise else scale * SCALE_RELATIVE, where)
    elif isinstance(b, str):
        assert isinstance(a, str), f"{where}: {a!r} vs {b!r}"
        assert_text_close(a, b, where)
    else:
        assert a == b, f"{where}: {a!r} vs {b!r}"


def assert_json_close(a, b, where):
    """Two JSON values: same keys, strings and flags; numbers to RELATIVE of their scale (the
    largest magnitude in b)."""
    _compare_json(a, b, _largest(b), where)


def assert_summary_equals_json(summary, path, ignore=()):
    """Module summary dict against the command line's JSON file: same keys in the same order,
    flags, strings (assert_text_close: warnings quote diagnostic values), numbers to RELATIVE of their top-level section's scale."""
    expected = json.loads(pathlib.Path(path).read_text())
    assert list(summary) == list(expected), f"{path.name}: keys differ"
    # "invocation" records how the run was asked for: the command line there, the Python call
    # here (test_scenario.py checks the module's); everything else must agree.
    assert summary["invocation"].startswith("trapwork.") and "(Python, trapwork " in summary["invocation"]
    assert expected["invocation"].startswith("trapwork ")
    for k in expected:
        if k in ignore or k == "invocation":
            continue
        scale = _largest(expected[k])
        _compare_json(summary[k], expected[k], scale, f"{path.name}:{k}")


def example_scenarios():
    return sorted(p.name for p in EXAMPLES.glob("*.toml"))


def has_tables(name, *tables):
    text = (EXAMPLES / name).read_text()
    return all(any(line.strip() == f"[{t}]" for line in text.splitlines()) for t in tables)


@pytest.fixture
def in_tmp(tmp_path, monkeypatch):
    """Runs the test in a fresh folder (the command line's default output folders land there)."""
    monkeypatch.chdir(tmp_path)
    return tmp_path


_SECONDS = re.compile(r" s(?=[\s;,)]|$)")  # right after a number: seconds of wall-clock time
_NUMBER = re.compile(r"(?<![\w.])[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?(?![\w.])")


def _last_place(text):
    """One unit in the last printed digit of a number's text (0.001 for "805.071")."""
    mantissa, _, exponent = text.lower().partition("e")
    decimals = len(mantissa.partition(".")[2])
    return 10.0 ** (-decimals + (int(exponent) if exponent else 0))


def assert_text_close(a, b, where, relative=RELATIVE):
    """Text with numbers in it (a report, a CSV comment line): the words equal, each number equal
    to one unit of its last printed digit (rounding noise can flip it) plus RELATIVE of itself plus
    1e-10 absolute: rounding-noise diagnostics such as "unresolved -3.2e-13" differ between two
    runs of the command line itself by up to about 2e-13 (measured), so they are compared to that
    floor, not relatively. Runs of white space count as one (report columns are padded to the
    numbers' widths)."""
    words_a = re.sub(r"\s+", " ", _NUMBER.sub("#", a))  # column padding follows the numbers' widths
    words_b = re.sub(r"\s+", " ", _NUMBER.sub("#", b))
    if words_a != words_b:
        diff = difflib.unified_diff(a.splitlines(), b.splitlines(), "module", "command line", lineterm="", n=1)
        raise AssertionError(f"{where}: the text differs:\n" + "\n".join(diff))
    previous_end = 0
    for mx, my in zip(_NUMBER.finditer(a), _NUMBER.finditer(b)):
        x, y = mx.group(), my.group()
        fx, fy = float(x), float(y)
        before, previous_end = a[max(previous_end, mx.start() - 40):mx.start()], mx.end()
        if _NOISE_TEXT.search(before):
            # an accuracy measure quoted in a sentence ("var W error 2.98e-07", "escape now
            # 7.7e-13", "sd(W) 0.00151212 kB*uK  +- 1.7e-10"): rounding noise where small (see NOISE_SCALE_RELATIVE: 3.9e-8 in one run,
            # 1.7e-7 in another); the same order of magnitude, or both below 1e-6
            assert (abs(fx) <= 1e-6 and abs(fy) <= 1e-6) or (fx * fy > 0 and 0.1 <= fx / fy <= 10), \
                f"{where}: {x} vs {y}"
            continue
        if _SECONDS.match(a, mx.end()):
            # a wall-clock time or estimate in seconds ("5 work runs ..., 1.45 s", "about 43 s for
            # 100 runs"; physical times are given in ms, us or ns): it depends on the machine's
            # load, so only its sign is compared
            assert fx > 0 and fy > 0, f"{where}: {x} vs {y}"
            continue
        bound = max(_last_place(x), _last_place(y)) + relative * (abs(fx) + abs(fy)) + 1e-10
        assert abs(fx - fy) <= bound, f"{where}: {x} vs {y}"
