"""trapwork in Python: work statistics of a quantum particle in a 1D trap, for notebooks.

The same library and scenario layer as the ``trapwork`` command line: a scenario is the same
TOML file, every function returns a result whose tables hold the same numbers as the command
line's CSV files (numpy arrays, one per column, units in the column names: ``energy_h_kHz``,
``x_um``), whose ``summary`` is the same dict as its JSON file, and whose ``write(folder)``
writes the same files.

    >>> import trapwork
    >>> s = trapwork.Scenario.from_file("examples/ion_translation.toml")
    >>> r = trapwork.work(s, progress=True)
    >>> r.lines["work_h_kHz"], r.lines["probability"]
    >>> r.summary["work"]
    >>> r.write("ion_translation-output")

Functions: :func:`spectrum`, :func:`work`, :func:`sweep`, :func:`fit`, :func:`compare`,
:func:`plan`. Each computes with the GIL released; Ctrl-C (KeyboardInterrupt) stops a long run
(at its next progress point, normally within a fraction of a second) and writes nothing.
Errors: :class:`InputError` (bad input: the message names file, line and key, as the command
line's) and :class:`PhysicsError` (valid input that cannot be computed: the message says what
to change); a run that does not fit in memory raises MemoryError.
"""

import io
import json
import os
import pathlib
import sys

import numpy as np

from . import _trapwork

__all__ = [
    "InputError", "PhysicsError", "Scenario", "Table", "Result", "SpectrumResult", "WorkResult",
    "SweepResult", "FitResult", "CompareResult", "PlanResult", "DesignResult",
    "spectrum", "work", "sweep", "fit", "compare", "plan", "design",
]

__version__ = _trapwork.version()

InputError = _trapwork.InputError
InputError.__doc__ = """Bad input: a scenario value, a unit, a formula, a data row or an argument.

A subclass of ValueError. The message is the command line's: it names the file, line, column
and key where they are known, e.g.
``ion.toml:7:13: potential[1].frequency = "-1 MHz": a frequency > 0``."""
PhysicsError = _trapwork.PhysicsError
PhysicsError.__doc__ = """Valid input that cannot be computed: a potential that does not confine the
levels asked for, a grid that cannot hold them, a run estimated above the memory available.

A subclass of RuntimeError; the message names the scenario and says what to change."""


# ---- scenarios -----------------------------------------------------------------------------------

class Scenario:
    """A scenario: the TOML text of a scenario file and its name.

    Build one with :meth:`from_file`, :meth:`from_text`, :meth:`from_dict` or :meth:`default`;
    :meth:`with_values` returns a changed copy. The text is checked when the Scenario is made
    (an :class:`InputError` names file, line, column and key) and read again by each
    computation. The name is used in messages and to find the files the scenario names (table
    potentials, ramp tables) relative to its folder. Scenarios are immutable and picklable
    (text and name).

    Attributes: ``text`` (str), ``name`` (str), ``title`` (str), ``has_protocol``,
    ``has_initial``, ``has_sweep`` (bool: what :func:`work` and :func:`sweep` need).
    """

    __slots__ = ("_text", "_name", "_info", "_changed")

    def __init__(self, text, name="scenario"):
        """Same as :meth:`from_text`."""
        if not isinstance(text, str):
            raise TypeError(f"Scenario text must be a str, not {type(text).__name__}")
        self._text = text
        self._name = str(name)
        self._info = _trapwork.scenario_info(self._text, self._name)
        self._changed = ()  # "address=value" of each with_values change, for the summaries

    @classmethod
    def from_file(cls, path):
        """Reads a scenario file (TOML), as ``trapwork work PATH`` does.

        ``path``: str or os.PathLike. Its folder is where the files it names are found.
        Raises InputError (file, line, column, key) for a file that cannot be read or is not a
        valid scenario."""
        path = os.fspath(path)
        return cls(_trapwork.scenario_file_text(path), path)

    @classmethod
    def from_text(cls, text, name="scenario"):
        """A scenario from TOML text. ``name`` stands for the file in messages; files the
        scenario names are found relative to its folder (give a path such as
        ``"examples/mine.toml"`` to use tables beside the examples). Raises InputError."""
        return cls(text, name)

    @classmethod
    def from_dict(cls, values, name="scenario"):
        """A scenario from Python values with the same keys as the TOML file: nested dicts are
        tables, a list of dicts is an array of tables (``"potential": [{...}, ...]`` is
        ``[[potential]]``). Values with units are strings (``"40 u"``, ``"1 MHz"``).

        Example: ``Scenario.from_dict({"particle": {"mass": "40 u"}, "potential":
        [{"name": "trap", "shape": "harmonic", "frequency": "1 MHz"}]})``.
        Raises InputError naming the key."""
        return cls(_trapwork.scenario_text_from_json(json.dumps(values, allow_nan=False), str(name)), name)

    @classmethod
    def default(cls):
        """The built-in scenario of ``trapwork demo``: a 40 u ion in a 1 MHz trap with a quartic
        correction, 2 phonons, moved by 160 nm at constant speed in 2.5 us."""
        return cls(_trapwork.default_scenario_text(), "default")

    def with_values(self, values):
        """A copy with values changed, as a protocol or sweep addresses them; the text is edited
        in place, so messages keep their line numbers.

        ``values``: dict address -> value; addresses ``"table.key"`` (``"protocol.duration"``,
        ``"work.steps"``, ``"initial.temperature"``), ``"<term>.<parameter>"``
        (``"trap.quartic"``), ``"potential[2].frequency"``, ``"change[1].to"``; values are
        strings with units (``"2 us"``), numbers, booleans or lists. Setting one of
        [initial]'s keys removes the others. Raises InputError for an unknown address (naming
        the closest known one) or a value the scenario reader refuses."""
        changed = Scenario(_trapwork.scenario_text_with_values(self._text, self._name,
                                                               json.dumps(values, allow_nan=False)), self._name)
        changed._changed = self._changed + tuple(f"{k}={v}" for k, v in values.items())
        return changed

    @property
    def changed_values(self):
        """The changes :meth:`with_values` made, "address=value" each, in order (recorded in every
        result's summary, as the command line records its --set values)."""
        return list(self._changed)

    @property
    def text(self):
        """The scenario's TOML text."""
        return self._text

    @property
    def name(self):
        """The scenario's name: its file path, "default", or the name given."""
        return self._name

    @property
    def title(self):
        """The scenario's title (empty when it has none)."""
        return self._info["title"]

    @property
    def has_protocol(self):
        """True when the scenario has a [protocol] (needed by work, sweep, compare, plan)."""
        return bool(self._info["has_protocol"])

    @property
    def has_initial(self):
        """True when the scenario has an [initial] state (needed by work, sweep, compare, plan)."""
        return bool(self._info["has_initial"])

    @property
    def has_sweep(self):
        """True when the scenario has a [sweep] (needed by sweep)."""
        return bool(self._info["has_sweep"])

    def write(self, path):
        """Writes the scenario's text to a file (for the command line: ``trapwork work PATH``)."""
        pathlib.Path(path).write_text(self._text)

    def __getstate__(self):
        return {"text": self._text, "name": self._name, "changed": self._changed}

    def __setstate__(self, state):
        self._text = state["text"]
        self._name = state["name"]
        self._info = _trapwork.scenario_info(self._text, self._name)
        self._changed = tuple(state.get("changed", ()))

    def __eq__(self, other):
        return isinstance(other, Scenario) and (self._text, self._name) == (other._text, other._name)

    def __hash__(self):
        return hash((self._text, self._name))

    def __repr__(self):
        title = f" ({self.title})" if self.title else ""
        return f"<trapwork.Scenario {self._name}{title}>"


def _scenario(s):
    if isinstance(s, Scenario):
        return s
    if isinstance(s, (str, os.PathLike)):
        return Scenario.default() if os.fspath(s) == "default" else Scenario.from_file(s)
    raise TypeError(f"expected a trapwork.Scenario or a scenario file path, not {type(s).__name__}")


# ---- tables and results --------------------------------------------------------------------------

# spectrum.csv's energies in the internal unit hbar^2/(m L0^2) (output.hpp's internal_energy_column)
_INTERNAL_ENERGY = "energy_hbar2_per_m_L0sq"


class Table:
    """One CSV file of a result: its columns as numpy float64 arrays, in file order.

    ``table["energy_h_kHz"]`` is a column (units in the name, as in the file), ``table.columns``
    the names, ``table.comments`` the file's '#' lines (without '# '), ``len(table)`` the number
    of rows; ``table.to_pandas()`` a pandas DataFrame (pandas is optional). NaN marks a value
    that does not exist, as "nan" does in the file, and fills a column that does not apply to
    the run (empty cells in the file: the columns are the same for every scenario)."""

    __slots__ = ("file", "columns", "comments", "_data")

    def __init__(self, file, columns, comments):
        self.file = file
        self.columns = [name for name, _ in columns]
        self.comments = list(comments)
        self._data = {name: np.asarray(values, dtype=float) for name, values in columns}
        for a in self._data.values():
            a.setflags(write=False)

    def __getitem__(self, name):
        try:
            return self._data[name]
        except KeyError:
            raise KeyError(f"{self.file} has no column {name!r}; its columns: {', '.join(self.columns)}") from None

    def __contains__(self, name):
        return name in self._data

    def __iter__(self):
        return iter(self.columns)

    def keys(self):
        """The column names, in file order."""
        return list(self.columns)

    def items(self):
        """(name, numpy array) pairs, in file order."""
        return [(c, self._data[c]) for c in self.columns]

    def __len__(self):
        return len(self._data[self.columns[0]]) if self.columns else 0

    def to_numpy(self):
        """The table as a 2-D array [row, column] (columns in file order)."""
        return np.column_stack([self._data[c] for c in self.columns]) if self.columns else np.empty((0, 0))

    def to_pandas(self):
        """The table as a pandas DataFrame (needs pandas: python3-pandas)."""
        import pandas
        frame = pandas.DataFrame({c: self._data[c] for c in self.columns})
        frame.attrs["file"] = self.file
        frame.attrs["comments"] = list(self.comments)
        return frame

    def __repr__(self):
        return f"<trapwork.Table {self.file}: {len(self)} rows, columns {', '.join(self.columns)}>"


def _table_of_csv(file, text):
    """A CSV file's text in the command line's layout (names, '#' lines, rows) as a Table."""
    lines = text.splitlines()
    names = lines[0].split(",") if lines else []
    comments = [l[2:] if l.startswith("# ") else l[1:] for l in lines[1:] if l.startswith("#")]
    rows = [l.split(",") for l in lines[1:] if l and not l.startswith("#")]
    values = np.array([[float(x) if x else np.nan for x in r] for r in rows], dtype=float).reshape(len(rows), len(names))
    return Table(file, [(n, values[:, i]) for i, n in enumerate(names)], comments)


def _figure_value(v):
    if isinstance(v, dict):
        return {k: _figure_value(x) for k, x in v.items()}
    if isinstance(v, list) and v and all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v):
        return np.asarray(v, dtype=float)
    if isinstance(v, list):
        return [_figure_value(x) for x in v]
    return v


class Result:
    """What a computation returned: plain Python values, picklable.

    - ``tables``: dict file stem -> :class:`Table` (``"lines"`` for lines.csv), the columns of
      the command line's CSV files;
    - ``summary``: dict equal to the command line's summary JSON file (json.load of it);
    - ``diagnostics``: dict, the summary's diagnostics (accuracy of the run);
    - ``warnings``: list of str, what the run warns about (each with its diagnostic value);
    - ``figures``: dict stem -> dict of the figure data (numpy arrays, ``"kind"``: "levels",
      "work", "sweep", "comparison" or "stack"), what :meth:`plot` draws;
    - ``report``: str, the command line's printed report;
    - :meth:`write` (the command line's files), :meth:`to_pandas`, :meth:`plot`.
    """

    _command = ""

    def __init__(self, native, scenario=None):
        self._native = native
        self.kind = native.kind
        self.scenario_used = scenario
        self.tables = {}
        for file, columns, comments in native.tables():
            self.tables[file.rsplit(".", 1)[0]] = Table(file, columns, comments)
        self.summary = json.loads(native.summary_json())
        # other files (fitted.toml, synthetic_work.csv): their text; a CSV one is a table too
        self.texts = {name: text for name, text in native.texts()}
        for name, text in self.texts.items():
            if name.endswith(".csv"):
                self.tables[name[:-4]] = _table_of_csv(name, text)
        self.figures = {stem: _figure_value(dict(data)) for stem, data in native.figures}
        self.report = native.report
        self._inputs = [tuple(i) for i in native.inputs()]
        self._files = None

    @property
    def warnings(self):
        """The run's warnings (list of str), as in the summary file."""
        w = self.summary.get("warnings", [])
        return [x if isinstance(x, str) else json.dumps(x) for x in w]

    @property
    def notes(self):
        """What the run did on its own that is worth knowing but is not a warning (list of str;
        e.g. levels enlarged to bound the escape probability), as in the summary file."""
        return list(self.summary.get("notes", []))

    @property
    def diagnostics(self):
        """The accuracy of the run: the summary's "diagnostics" (dict)."""
        return self.summary.get("diagnostics", {})

    def files(self):
        """The command line's files of this result: dict file name -> bytes (rendered once)."""
        if self._files is None:
            if self._native is None:
                raise RuntimeError("this result has neither its files nor its native handle")
            self._files = dict(self._native.render_files())
        return self._files

    def write(self, folder):
        """Writes the files the command line writes for this run into ``folder`` (created if
        missing) and returns their paths (list of str).

        Same files, byte for byte, and the same rules: the folder is locked during the write,
        files are staged and renamed into place together (a Ctrl-C during the write leaves the
        previous run's files, then raises KeyboardInterrupt), a previous run's outputs that this
        run does not write again are removed, and an output that would replace an input of the
        run (the scenario file, a data file) is refused with InputError."""
        files = self.files()
        names = sorted(files)
        return _trapwork.write_files(os.fspath(folder), [(n, files[n]) for n in names], self._inputs,
                                     f"trapwork {self._command} (Python module)")

    def to_pandas(self, table=None):
        """A table as a pandas DataFrame: ``table`` is its stem ("lines") or file name
        ("lines.csv"); None: the result's main table. Needs pandas (python3-pandas)."""
        name = self._main_table if table is None else str(table)
        name = name[:-4] if name.endswith(".csv") else name
        if name not in self.tables:
            raise KeyError(f"no table {name!r}; tables: {', '.join(self.tables)}")
        return self.tables[name].to_pandas()

    _main_table = ""

    def plot(self, name=None, ax=None, **style):
        """Draws ``figures[name]`` with matplotlib, as the command line's pictures, and returns the
        matplotlib Figure; with ``name=None``, every figure, as a dict name -> Figure. ``ax``: an
        Axes to draw into (or one per panel); ``style``: figsize, dpi, title, legend, colors (see
        :func:`trapwork.plot.plot`). Needs python3-matplotlib."""
        from . import plot as _plot
        return _plot.plot(self, name=name, ax=ax, **style)

    def __getstate__(self):
        state = dict(self.__dict__)
        state["_files"] = self.files()  # the files travel as bytes: no C++ state is pickled
        state["_native"] = None
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)

    def __repr__(self):
        return f"<trapwork.{type(self).__name__}: tables {', '.join(self.tables)}; {len(self.warnings)} warning(s)>"


class SpectrumResult(Result):
    """Result of :func:`spectrum`: tables ``spectrum`` (one row per level) and ``states``
    (wavefunctions on the grid); named arrays ``energies`` (in ``energy_unit``), ``x_um``,
    ``states`` (2-D: [level, x], in 1/sqrt(um))."""

    _command = "spectrum"
    _main_table = "spectrum"

    @property
    def energy_unit(self):
        """Display unit of the energies ("h*kHz"): that of the spectrum table's energy column."""
        col = next(c for c in self.tables["spectrum"].columns if c.startswith("energy_") and c != _INTERNAL_ENERGY)
        return col[len("energy_"):].replace("_", "*", 1)

    @property
    def energies(self):
        """Level energies in ``energy_unit`` (the spectrum table's ``energy_<unit>`` column)."""
        t = self.tables["spectrum"]
        return t[next(c for c in t.columns if c.startswith("energy_") and c != _INTERNAL_ENERGY)]

    @property
    def x_um(self):
        """Grid positions of the states, um."""
        return self.tables["states"]["x_um"]

    @property
    def states(self):
        """Wavefunctions psi_n(x) as a 2-D array [level n, position], in 1/sqrt(um)."""
        t = self.tables["states"]
        return np.vstack([t[c] for c in t.columns if c.startswith("psi_")])

    @property
    def diagnostics(self):
        """Convergence of the spectrum: residual tolerance, converged count, grid convergence."""
        keys = ("method", "iterations", "levels_requested", "converged", "residual_tolerance", "convergence",
                "finite_depth")
        return {k: self.summary[k] for k in keys if k in self.summary}


class WorkResult(Result):
    """Result of :func:`work`: tables ``lines`` (work values, probabilities, level indices),
    ``histogram``, ``density``, ``transition``, ``reverse_lines`` (when the reverse run is
    made), ``characteristic``; named arrays ``lines``, ``histogram``, ``density``,
    ``characteristic`` (Tables) and ``transitions`` (2-D numpy array P[m, n])."""

    _command = "work"
    _main_table = "lines"

    @property
    def lines(self):
        """The work lines (Table): work in the display unit, probability, initial and final level.
        Every line: the file lines.csv leaves out those below a probability floor (the
        summary's ``work.lines_file`` says which floor, how many and their total probability)."""
        return self.tables["lines"]

    @property
    def spread(self):
        """The calibration's spread (summary.json's ``calibration_uncertainty``: method, reason,
        and per result its value, sd, sd_linear, sd_sampled; None where not computed), or None
        when :func:`work` was called without ``uncertainty``."""
        return self.summary.get("calibration_uncertainty")

    @property
    def histogram(self):
        """P(W) on bins (Table): bin_start, bin_end, probability."""
        return self.tables["histogram"]

    @property
    def density(self):
        """P(W) seen through the energy resolution (Table), with the harmonic reference's."""
        return self.tables["density"]

    @property
    def characteristic(self):
        """The characteristic function G(u) = <exp(i u W)> (Table: conjugate_variable_per_<unit>
        u, characteristic_function_real, characteristic_function_imaginary)."""
        return self.tables["characteristic"]

    @property
    def transitions(self):
        """Transition probabilities P(m -> n) as a 2-D array [initial level m, final level n]."""
        t = self.tables["transition"]
        m = t["initial"].astype(int)
        n = t["final"].astype(int)
        p = np.zeros((m.max() + 1 if len(m) else 0, n.max() + 1 if len(n) else 0))
        p[m, n] = t["probability"]
        return p


class SweepResult(Result):
    """Result of :func:`sweep`: the table ``sweep`` (one row per point, sorted by the swept
    value; with several swept parameters in point order, with columns ``point`` and one per
    parameter); named array ``table``."""

    _command = "sweep"
    _main_table = "sweep"

    @property
    def table(self):
        """sweep.csv as a Table."""
        return self.tables["sweep"]


class FitResult(Result):
    """Result of :func:`fit`: tables ``fit_lines``; ``summary`` is fit_summary.json;
    ``scenario`` the fitted Scenario (fitted.toml), ``coefficients`` the fitted values."""

    _command = "fit"
    _main_table = "fit_lines"

    @property
    def scenario(self):
        """The start scenario with the fitted coefficients (the text of fitted.toml), a Scenario
        named "fitted.toml"; ``trapwork.work(result.scenario)`` runs it when the start scenario
        had [protocol] and [initial]."""
        return Scenario.from_text(self.texts["fitted.toml"], "fitted.toml")

    @property
    def coefficients(self):
        """The fitted coefficients: dict name -> dict (value, unit, uncertainty, scaled_uncertainty,
        value_internal, uncertainty_internal), as in fit_summary.json."""
        return {c["name"]: c for c in self.summary.get("coefficients", [])}


class CompareResult(Result):
    """Result of :func:`compare`: the table ``compare``; ``summary`` is compare_summary.json;
    ``verdict`` the comparison's verdict."""

    _command = "compare"
    _main_table = "compare"

    @property
    def verdict(self):
        """The verdict of the comparison (str), as in compare_summary.json."""
        return self.summary.get("verdict")


class PlanResult(Result):
    """Result of :func:`plan`: the table ``plan`` (and ``synthetic_work`` with synthetic runs);
    ``summary`` is plan_summary.json; ``runs_needed`` the runs needed per resolution for the
    target (with ``target``)."""

    _command = "plan"
    _main_table = "plan"

    @property
    def runs_needed(self):
        """Runs needed for the target, one dict per resolution (resolution, runs, rms_error_kT,
        ...), as in plan_summary.json; empty without a target."""
        return self.summary.get("runs_needed", [])


# ---- progress ------------------------------------------------------------------------------------

class _TextProgress:
    """A one-line progress bar on stderr, redrawn with a carriage return (works in a terminal
    and in a notebook's output area); tqdm's bar when tqdm is installed."""

    def __init__(self):
        self._stage = None
        self._bar = None
        try:
            import tqdm.auto
            self._tqdm = tqdm.auto.tqdm
        except ImportError:
            self._tqdm = None

    def __call__(self, stage, fraction):
        if stage != self._stage:
            self.close()
            self._stage = stage
            if self._tqdm is not None:
                self._bar = self._tqdm(total=1000, desc=stage, leave=True)
        done = int(max(0.0, min(1.0, fraction)) * 1000)
        if self._bar is not None:
            self._bar.update(done - self._bar.n)
        else:
            width = 30
            filled = done * width // 1000
            sys.stderr.write(f"\r{stage} [{'#' * filled}{'-' * (width - filled)}] {done / 10:5.1f}%")
            sys.stderr.flush()

    def close(self):
        if self._bar is not None:
            self._bar.close()
            self._bar = None
        elif self._stage is not None:
            sys.stderr.write("\n")
            sys.stderr.flush()


def _provenance(call, scenario, **arguments):
    """(invocation, changed values) for the summaries: the Python call as written, e.g.
    "trapwork.work('ion.toml', tolerance=0.0001) (Python, trapwork 0.1.0)"."""
    words = [repr(scenario.name if isinstance(scenario, Scenario) else scenario)]
    words += [f"{k}={v!r}" for k, v in arguments.items() if v is not None]
    changed = list(scenario._changed) if isinstance(scenario, Scenario) else []
    return (f"trapwork.{call}({', '.join(words)}) (Python, trapwork {_trapwork.version()})", changed)


def _run(function, *args, progress=None, provenance=("", []), **keywords):
    """Calls a compiled function with the progress callback and notices it takes (and the
    function's further keyword arguments)."""
    bar = None
    if progress is True:
        bar = _TextProgress()
        callback = bar
    elif progress is None or progress is False:
        callback = None
    elif callable(progress):
        callback = progress
    else:
        raise TypeError("progress must be None, True or a callable progress(stage, fraction)")
    def notice(line):  # the cost estimate of a long run, said before it starts (as the command line does)
        print(line, file=sys.stderr, flush=True)

    try:
        return function(*args, callback, notice, provenance, **keywords)
    finally:
        if bar is not None:
            bar.close()


_PROGRESS_DOC = """progress: None (default: nothing shown), True (a text bar on stderr, or tqdm's when installed,
        which works in a notebook) or a callable ``progress(stage, fraction)`` called on the
        calling thread about 20 times a second while the run advances (stage: str, the stage's
        name; fraction: float in [0, 1], the share of that stage done). An exception it raises
        stops the run and is raised. A run estimated to take over 30 s says its estimated
        memory and time on stderr before it starts, whatever ``progress`` is."""


# ---- the computations ----------------------------------------------------------------------------

def spectrum(scenario, levels=None, progress=None):
    """Lowest energy levels and eigenstates of the scenario's potential (``trapwork spectrum``).

    scenario: a :class:`Scenario` (or a scenario file path, or "default").
    levels: number of levels (int, 1..100000); None: the scenario's [spectrum] levels.
    {progress}

    Returns a :class:`SpectrumResult`: ``energies`` (in ``energy_unit``, e.g. h*kHz), ``x_um``,
    ``states`` [level, x] in 1/sqrt(um), tables ``spectrum`` and ``states`` equal to
    spectrum.csv and states.csv, ``summary`` equal to summary.json.

    Raises InputError (bad scenario or levels), PhysicsError (a potential that does not hold the
    levels, a grid that cannot), MemoryError; KeyboardInterrupt after Ctrl-C (at the sparse
    eigensolver's next step; a dense solve, on at most 1024 grid points or in the Hermite basis,
    runs to its end first).
    """
    s = _scenario(scenario)
    if levels is not None:
        levels = int(levels)
    return SpectrumResult(_run(_trapwork.spectrum, s.text, s.name, levels, progress=progress,
                               provenance=_provenance("spectrum", s, levels=levels)), s)


def work(scenario, tolerance=None, search_budget=2000, progress=None, uncertainty=None,
         uncertainty_method="auto", uncertainty_samples=100, uncertainty_seed=1):
    """Work statistics of the scenario's [protocol] in the two-point energy-measurement scheme
    (``trapwork work``), with the harmonic prediction and the Jarzynski and Crooks checks.

    scenario: a :class:`Scenario` with [protocol] and [initial] (or a file path, or "default").
    tolerance: None (the scenario's numerics), or a bound on the distance of P(W) from its
        converged value (a total-variation bound over the work lines, between 0 and 1, e.g.
        1e-4): time step and grid are searched until two runs agree to half of it, as
        ``trapwork work --tolerance``.
    search_budget: cost bound of that search, in units of its first split-operator run's estimated arithmetic
        (default 2000, as ``--search-budget``); at the bound the search returns what it verified.
    uncertainty: None, or the fit_summary.json of :func:`fit` / ``trapwork fit`` (or its folder):
        the trap's calibration uncertainty carried forward, as ``trapwork work --uncertainty``;
        ``result.spread`` then holds <W>, sd(W), Delta F and the strong lines' probabilities
        with their standard deviations (None where not computed), and the table
        ``lines_uncertainty`` the lines with theirs. None with a scenario that has an
        [uncertainty] table: that table is carried forward the same way; "none": no spread.
    uncertainty_method: "auto", "linear", "sampling" or "both" (``--uncertainty-method``).
    uncertainty_samples, uncertainty_seed: parameter sets drawn for sampling, and their seed.
    {progress}

    Returns a :class:`WorkResult`: ``lines`` (work in the scenario's energy unit and in
    hbar*omega_ref, probability, initial and final level), ``histogram``, ``density``,
    ``transitions`` (P[m, n]), ``characteristic``; ``summary`` equal to summary.json (work
    moments with their errors, Jarzynski, Crooks, harmonic reference, ``diagnostics``),
    ``warnings``, ``figures`` ("potential", "work", "protocol", "populations", "traces"), ``report``.

    Raises InputError (no [protocol] or [initial], bad values), PhysicsError (what the physics
    or the memory cannot hold, naming the scenario), MemoryError; KeyboardInterrupt after
    Ctrl-C, within a fraction of a second during the propagation.
    """
    s = _scenario(scenario)
    if tolerance is not None:
        tolerance = float(tolerance)
    extra = _uncertainty_keywords(uncertainty, uncertainty_method, uncertainty_samples, uncertainty_seed)
    return WorkResult(_run(_trapwork.work, s.text, s.name, tolerance, float(search_budget), progress=progress,
                           provenance=_provenance("work", s, tolerance=tolerance,
                                                  search_budget=None if search_budget == 2000 else search_budget,
                                                  **extra), **extra), s)


def _uncertainty_keywords(uncertainty, method, samples, seed):
    """The calibration keywords of work and sweep as the native module takes them: the fit's file
    when given, and the method, samples and seed when given or not the defaults (they apply to a
    scenario's [uncertainty] table too)."""
    extra = {} if uncertainty is None else dict(uncertainty=os.fspath(uncertainty))
    chosen = dict(uncertainty_method=str(method), uncertainty_samples=int(samples), uncertainty_seed=int(seed))
    defaults = dict(uncertainty_method="auto", uncertainty_samples=100, uncertainty_seed=1)
    for key, value in chosen.items():
        if uncertainty is not None or value != defaults[key]:
            extra[key] = value
    return extra


def sweep(scenario, jobs=None, progress=None, uncertainty=None, uncertainty_method="auto", uncertainty_samples=100,
          uncertainty_seed=1):
    """Work statistics over the points of the scenario's [sweep]: one parameter's values, a grid
    of [[sweep.axis]] tables, or a list of points (``trapwork sweep``).

    scenario: a :class:`Scenario` with [protocol], [initial] and [sweep].
    jobs: points computed at the same time (threads; None: the number of cores).
    {progress}

    Returns a :class:`SweepResult` whose ``table`` equals sweep.csv (one row per point: swept
    value, <W>, sd, harmonic <W>, Jarzynski residual, ..., failed = 1 for a point that could not
    be computed, with its message in ``table.comments``).

    uncertainty: None, or a fit's fit_summary.json (or its folder): each point gets the calibration's
        sd of <W>, sd(W) and Delta F as columns, as ``trapwork sweep --uncertainty``; None with a
        scenario that has an [uncertainty] table: that table; "none": no spread.
    uncertainty_method, uncertainty_samples, uncertainty_seed: as for :func:`work`.

    Raises InputError (no [sweep], bad values), MemoryError; KeyboardInterrupt after Ctrl-C (the
    workers are stopped and joined first).
    """
    s = _scenario(scenario)
    extra = _uncertainty_keywords(uncertainty, uncertainty_method, uncertainty_samples, uncertainty_seed)
    return SweepResult(_run(_trapwork.sweep, s.text, s.name, 0 if jobs is None else int(jobs), progress=progress,
                            provenance=_provenance("sweep", s, jobs=jobs, **extra), **extra), s)


def fit(data, start=None, mass=None, frequency=None, terms="frequency,quartic", progress=None):
    """Fits trap coefficients to measured transition lines (``trapwork fit``).

    data: path of the transition lines file (CSV, as examples/ion_spectroscopy_lines.csv).
    start: the start Scenario (or file path, or "default") whose polynomial or harmonic term is
        fitted; or None with ``mass`` ("40 u") and ``frequency`` ("1 MHz").
    terms: the coefficients to fit, comma-separated ("frequency,quartic").
    {progress}

    Returns a :class:`FitResult`: ``coefficients``, ``scenario`` (the fitted scenario, the text
    of fitted.toml), table ``fit_lines``, ``summary`` equal to fit_summary.json.

    Raises InputError (bad data file with file and line, bad arguments), PhysicsError (data
    that cannot determine the coefficients).
    """
    if start is not None:
        s = _scenario(start)
        start_text, start_name = s.text, s.name
    elif mass is None or frequency is None:
        raise InputError("fit: give start (a Scenario or scenario file), or mass and frequency (\"40 u\", \"1 MHz\")")
    else:
        start_text, start_name = "", ""
    changed = list(start._changed) if isinstance(start, Scenario) else []
    invocation = _provenance("fit", os.fspath(data), start=None if start is None else start_name,
                             mass=mass, frequency=frequency, terms=terms)[0]
    return FitResult(_run(_trapwork.fit, os.fspath(data), start_text, start_name, "" if mass is None else str(mass),
                          "" if frequency is None else str(frequency), str(terms), progress=progress,
                          provenance=(invocation, changed)))


def compare(scenario, data, resolution=None, resamples=2000, seed=1, confidence=0.9, progress=None, against=(),
            calibration=1000, decision_confidence=0.95, fitted_parameters=None, prior=None, uncertainty=None,
            uncertainty_samples=20, uncertainty_seed=1):
    """Measured work data against the scenario's work distribution (``trapwork compare``).

    scenario: a :class:`Scenario` with [protocol] and [initial].
    data: path of the measured data (work samples, level pairs or a histogram, CSV).
    resolution: energy-measurement resolution with its unit ("40 h*kHz"); None: from the data
        file's "# resolution:" line or the scenario's [work] resolution.
    resamples, seed, confidence: the bootstrap's resamples (int), seed (int) and confidence
        level (0..1).
    against: other models to decide between (``--against``, repeatable): Scenarios or scenario
        files; then also table ``compare_models`` and figure "compare_models".
    calibration: synthetic data sets per model for the likelihood-ratio p-values
        (``--calibration``, 0: none); decision_confidence: confidence of the verdict;
        fitted_parameters: parameters of each model fitted to these data, the scenario first
        (``--fitted-parameters``); prior: prior weights of the models, the scenario first.
    uncertainty: None, or the fit_summary.json of :func:`fit` (or its folder): the calibration
        folded into each model's likelihood (``--uncertainty``), with uncertainty_samples draws
        per model (default 20) and uncertainty_seed.
    {progress}

    Returns a :class:`CompareResult`: ``verdict``, table ``compare``, ``summary`` equal to
    compare_summary.json, figure "compare".

    Raises InputError, PhysicsError; KeyboardInterrupt after Ctrl-C.
    """
    s = _scenario(scenario)
    if isinstance(against, (str, os.PathLike, Scenario)):
        against = [against]
    others = [_scenario(a) for a in against]
    return CompareResult(_run(_trapwork.compare, s.text, s.name, os.fspath(data),
                              "" if resolution is None else str(resolution), int(resamples), int(seed),
                              float(confidence), progress=progress,
                              provenance=_provenance("compare", s, data=os.fspath(data), resolution=resolution,
                                                     against=[o.name for o in others] or None,
                                                     uncertainty=None if uncertainty is None else os.fspath(uncertainty)),
                              against=[(o.text, o.name) for o in others], calibration=int(calibration),
                              decision_confidence=float(decision_confidence),
                              fitted_parameters=[int(k) for k in (fitted_parameters or [])],
                              prior=[float(p) for p in (prior or [])],
                              uncertainty="" if uncertainty is None else os.fspath(uncertainty),
                              uncertainty_samples=int(uncertainty_samples), uncertainty_seed=int(uncertainty_seed)), s)


def plan(scenario, runs=(10, 30, 100, 300, 1000), resolutions=None, target=None, experiments=1000, seed=1,
         correct_resolution=False, synthetic_runs=0, progress=None, against=None, power=0.9,
         decision_confidence=0.95):
    """How many repetitions an experiment needs for the Jarzynski estimate (``trapwork plan``).

    scenario: a :class:`Scenario` with [protocol] and [initial].
    runs: numbers of runs per experiment to tabulate (ints).
    resolutions: energy-measurement resolutions with units (["0 h*kHz", "40 h*kHz"]); None: 0.
    target: target rms error of beta*Delta F (in kT), or None.
    experiments, seed: simulated experiments per cell and the seed.
    correct_resolution: correct the estimator for the resolution (bool).
    synthetic_runs: > 0: also draw that many runs from the model (table ``synthetic_work``).
    against: None, or another model (a Scenario or scenario file; ``--against``): instead of the
        Jarzynski plan, how many runs tell the two models apart (table ``plan_decision``), with
        power (``--power``) and decision_confidence (``--decision-confidence``); one resolution.
    {progress}

    Returns a :class:`PlanResult`: table ``plan``, ``runs_needed`` (with ``target``), ``summary``
    equal to plan_summary.json.

    Raises InputError, PhysicsError; KeyboardInterrupt after Ctrl-C.
    """
    s = _scenario(scenario)
    other = None if against is None else _scenario(against)
    return PlanResult(_run(_trapwork.plan, s.text, s.name, [int(r) for r in runs],
                           [str(r) for r in (resolutions or [])], None if target is None else float(target),
                           int(experiments), int(seed), bool(correct_resolution), int(synthetic_runs),
                           progress=progress, provenance=_provenance("plan", s, runs=tuple(runs),
                                                                     resolutions=resolutions, target=target,
                                                                     against=None if other is None else other.name),
                           against=[] if other is None else [(other.text, other.name)], power=float(power),
                           decision_confidence=float(decision_confidence)), s)


class DesignResult(Result):
    """Result of :func:`design`: tables ``design_history`` (every evaluation) and
    ``design_work_lines`` (P(m -> n) of the smooth and the designed ramp beside the harmonic
    prediction), the designed tables (``designed_trap_centre``, ...); ``summary`` is
    design_summary.json; ``objective_before``/``objective_after``; ``designed_text`` the text of
    designed.toml (it reads its table files from its folder: :meth:`write` the result, then
    ``Scenario.from_file(folder / "designed.toml")``)."""

    _command = "design"
    _main_table = "design_history"

    @property
    def objective_before(self):
        """The objective of the smooth ramp (float, in the summary's objective_unit)."""
        return self.summary["objective_before"]

    @property
    def objective_after(self):
        """The objective of the design (float, in the summary's objective_unit)."""
        return self.summary["objective_after"]

    @property
    def designed_text(self):
        """The text of designed.toml (str)."""
        return self.texts["designed.toml"]


def design(scenario, objective="excitation", modes=3, starts=1, evaluations=80, method="bobyqa",
           amplitude_bound=1.0, overshoot=0.5, stop_below=1e-10, smoother=False, seed=1, max_speed=(),
           max_overshoot=(), target=None, shortest=None, bisections=5, robust=(), robust_fit=None,
           robust_samples=8, robust_term=None, progress=None):
    """Designs the protocol's ramp (``trapwork design``; the options are the command line's).

    scenario: a :class:`Scenario` with [protocol] and [initial].
    objective: "excitation", "dissipated_work" or "quanta"; modes, starts, evaluations, method,
    amplitude_bound, overshoot, stop_below, smoother, seed: the search (``--help`` of the command).
    max_speed, max_overshoot: lab-unit bounds, e.g. ["trap.centre=0.5 m/s"], ["20 nm"].
    target, shortest, bisections: the shortest duration whose design meets ``target`` (str, e.g.
    "1e-3", or "0.1 h*kHz" for the dissipated work).
    robust, robust_fit, robust_samples, robust_term: robust design over variants
    (["trap.quartic=0.012 h*Hz/nm^4"]) or samples of a fit_summary.json.
    {progress}

    Returns a :class:`DesignResult`. Raises InputError, PhysicsError; KeyboardInterrupt after Ctrl-C.
    """
    s = _scenario(scenario)
    options = dict(objective=str(objective), modes=int(modes), starts=int(starts), evaluations=int(evaluations),
                   method=str(method), amplitude_bound=float(amplitude_bound), overshoot=float(overshoot),
                   stop_below=float(stop_below), smoother=bool(smoother), seed=int(seed),
                   max_speed=[str(x) for x in max_speed], max_overshoot=[str(x) for x in max_overshoot],
                   target=None if target is None else str(target), shortest="" if shortest is None else str(shortest),
                   bisections=int(bisections), robust=[str(x) for x in robust],
                   robust_fit="" if robust_fit is None else os.fspath(robust_fit),
                   robust_term="" if robust_term is None else str(robust_term), robust_samples=int(robust_samples))
    return DesignResult(_run(_trapwork.design, s.text, s.name, options, progress=progress,
                             provenance=_provenance("design", s, objective=objective, evaluations=evaluations)), s)


for _f in (spectrum, work, sweep, fit, compare, plan, design):
    _f.__doc__ = _f.__doc__.replace("{progress}", _PROGRESS_DOC)
del _f
