#pragma once
// Output files, summary and printed report of `trapwork work` and `trapwork sweep`.
//
// Energies are in the scenario's display unit (column suffix "_h_kHz") and, where the
// scenario has a reference frequency, also in units of hbar*omega_ref ("_hbar_omega");
// times in us or ns, temperatures in uK, lengths in nm or um. CSV files follow output.hpp
// (names on line 1, '#' comment lines, then numbers; "nan" where a value does not exist, an
// empty column where it does not apply to the run: the columns never change with the scenario).
//
// Each diagnostic is judged against a tolerance (work_checks): PASS at or below it, WARN above.
#include <filesystem>
#include <nlohmann/json.hpp>
#include <optional>
#include <ostream>
#include <string>
#include <vector>

#include "potentials/protocol.hpp"
#include "solver/scenario/output.hpp"
#include "solver/scenario/plot.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/work.hpp"

namespace trapwork {

// One finished work run with the settings the outputs need.
struct WorkRun {
  const Scenario& scenario;
  const Protocol& protocol;
  const WorkRequest& request;
  const WorkResult& result;
  const WallWorkResult* walls = nullptr;  // moving walls: the exact references (Doescher-Rice, sudden)
  const struct ToleranceChoice* tolerance = nullptr;  // --tolerance: what was chosen
  const SoftWallComparison* soft_walls = nullptr;     // [box.soft_walls]: soft against hard walls
};

// The work calculation of one scenario: run_work, or run_wall_work when the protocol moves a
// wall of the [box] (moves_walls). `request` is work_request(s), possibly adjusted (threads,
// progress).
struct ScenarioWork {
  Protocol protocol;  // build_protocol(s): the potential's schedules
  WorkRequest request;
  std::optional<WallWorkResult> walls;
  std::optional<SoftWallComparison> soft_walls;  // moving walls with [box.soft_walls]
  WorkResult plain;
  const WorkResult& result() const { return walls ? walls->work : plain; }
  WorkResult& result() { return walls ? walls->work : plain; }
  WorkRun run(const Scenario& s) const {
    return {s, protocol, request, result(), walls ? &*walls : nullptr, nullptr, soft_walls ? &*soft_walls : nullptr};
  }
};
ScenarioWork compute_work(const Scenario& s, WorkRequest request);

// `trapwork work --tolerance T`: numerics chosen for a bound T on the distance of P(W) from
// its converged value (line_distance, solver/work.hpp; a total-variation bound over the lines).
// From 1/16 of the automatic step count (the scenario's [work] steps are replaced), the grid
// first, at those steps: refined by 3/2 in points over the same extent until two runs differ by
// at most T/2 (at most 3 refinements; the coarser of the agreeing pair is kept, their distance
// its estimate). Then the steps on that grid by Richardson's rule: twice the steps, then the
// steps predicted for T/4 from the last pair, until a pair's finer run is within T/2 (its
// distance to the coarser run, or its Richardson estimate where the pairs show the error
// falling as N^-p); the finer run is kept. Only the step runs run the reverse protocol. Runs on
// one grid share their spectra (SpectrumMemo). The eigenbasis ODE is then tried within what
// keeps the whole call at 1.5 times the chosen run with its usual checks (below).
struct ToleranceChoice {
  double tolerance = 0;
  Scenario scenario;  // with the chosen [grid] points/extent
  std::optional<ScenarioWork> work;  // the chosen run
  int steps = 0;
  std::size_t points = 0;
  double time_step_part = 0, grid_part = 0;  // the chosen run's estimates (line_distance)
  std::string time_step_rule;                // how time_step_part was obtained
  // Estimated arithmetic of the chosen run alone with its usual checks (the half-step run: 2
  // more forward runs; for an ODE chosen first, the forward run again at 1/100 the tolerances,
  // counted at the forward run's arithmetic), in the units of cost_spent: what the call's cost
  // is measured against.
  double chosen_cost = 0;
  double max_work_shift = 0;                 // of the last grid refinement (internal energy)
  std::vector<std::string> trail;            // one line per run: steps, points, difference
  // Method: after the grid and step search, the eigenbasis ODE is tried on the chosen grid where it applies
  // (tau > 0, walls standing): at ODE tolerances T/50 and, with twice the restart points and 2/3 the basis
  // (ode_check_request), T/500; their distance is its own error (ode_part, NaN if not tried). Its operations
  // are charged at 2.5 times a transform's (measured 2.2 to 4.2). Its two runs together may use what is left
  // of 1.5 times chosen_cost (a third for the first, at most half the split-operator run's time so estimated;
  // the rest, at most 6 times the first's, for the check); with less than a twentieth of the split-operator
  // run's left it is not tried (said in the trail). It is chosen when it finished within its budget (so it
  // takes at most about half the split-operator run's time), its estimate ode_part + grid_part is within T
  // and it agrees with the split-operator run to T.
  // ode_first: the ODE was tried before the search, where it applies (tau > 0, walls standing, a cost bound
  // of at least 4) and won: at T/50 on the automatic grid, its estimated arithmetic per direction limited to
  // a quarter of the coarse split-operator run's (read from run_work's estimate before that run propagates),
  // charged at 2.5 times; checked by one run on 3/2 the points at T/500 with twice the restart points and 2/3
  // the basis, whose distance (ode_part) bounds the grid's, the ODE's and the basis's parts together
  // (grid_part and time_step_part are then NaN), and chosen when that is within T. A slow move then costs its
  // two ODE runs instead of the search (the built-in move at 25 us, T = 1e-8, measured). A try stopped by its
  // budget costs the search most of a coarse run, and the ODE is then not tried again after the search (nor
  // where it missed T on the same grid).
  bool ode_first = false;
  std::string method;                        // of the returned run (WorkResult::method)
  double ode_part = std::numeric_limits<double>::quiet_NaN();
  double split_seconds = 0, eigenbasis_seconds = std::numeric_limits<double>::quiet_NaN();
  // Estimated arithmetic of the ODE's first run over the split-operator run's (NaN: not run
  // to the end); ode_stopped: a run was stopped by its budget.
  double ode_cost_ratio = std::numeric_limits<double>::quiet_NaN();
  bool ode_stopped = false;
  // Cost bound: the runs' estimated arithmetic (steps x substeps x columns x transform cost,
  // the reverse run included), summed in units of the first split-operator run's (of its
  // estimate, before it runs: the eigenbasis ODE's first try); a run that would take the
  // sum past cost_bound is not started, and the search returns what it has verified
  // (bound_reached; the parts not yet measured are NaN, so estimate() is NaN and reached()
  // false). request.progress, if set, is called with the share of the bound used.
  double cost_bound = 0, cost_spent = 0;
  bool bound_reached = false;
  double estimate() const {
    if (ode_first) return ode_part;
    return (method.rfind("eigenbasis", 0) == 0 ? ode_part : time_step_part) + grid_part;
  }
  bool reached() const { return estimate() <= tolerance; }
};
// Estimated arithmetic of a run (a split-operator run: steps x substeps x columns x (two FFTs,
// 5 n log2 n each, and 30 n for the phases); the eigenbasis ODE: its counted operations; the
// reverse run as much again; a sudden switch counts as one step). Deterministic: the unit of
// the --tolerance search's cost bound and of the calibration check's cost (uncertainty_task).
double run_arithmetic(const WorkResult& r);
// The --tolerance search's check of an eigenbasis ODE run `first` made with request e (at ODE
// tolerances T/50): T/500, twice the restart points (so that its steps differ even where the
// coupling is weak enough for every step to pass both tolerances), 2/3 of first's basis, the
// forward run only (the distance compares forward runs). Its distance to first bounds first's
// ODE part, and its basis part wherever the truncation error falls as the basis grows (common
// practice for a truncated eigenbasis): the smaller basis's own, larger truncation error is
// inside the distance (over-estimated, never hidden: test_tolerance). It was 3/2 the basis,
// whose evaluations cost (3/2)^2 as much: on the built-in move at 25 us that check took 2.4
// times the first run, this one 0.85 times (measured, T = 1e-8; both distances 6.5e-13, the
// grid's part).
WorkRequest ode_check_request(WorkRequest e, const WorkResult& first, double tolerance);
constexpr double default_search_budget = 2000;  // about 40 automatic runs with their checks
ToleranceChoice compute_work_to_tolerance(const Scenario& s, WorkRequest request, double tolerance,
                                          double cost_bound = default_search_budget);

// Lowest level spacing E_1 - E_0 of H_A (internal energy; NaN with one level).
double lowest_spacing(const WorkResult& result);
// The energy resolution and histogram bin used: [work] resolution and bin_width, or the
// defaults 1/20 of the lowest spacing and the lowest spacing (at least 1/4000 of the work range,
// so that a tunnelling doublet does not ask for 1e8 bins).
double resolution_of(const WorkRun& run);
double bin_width_of(const WorkRun& run);
// A value's display unit for a run's report and pictures: name and the internal value of one
// unit (energies in the display unit, lengths by the grid, time in us, ordinary frequencies in
// MHz from `largest` = 1 MHz up, else kHz).
struct ShownUnit {
  std::string name;
  double internal_per_unit = 1;
};
ShownUnit shown_unit(const WorkRun& run, const Dimension& dim, double largest);

// Skewness of W, or NaN (not defined) when the variance is rounding noise: below what lines
// of probability 1e-13 (about 500 times the rounding of a probability near 1) could give,
// 1e-13 max_l (W_l - <W>)^2, so that the ratio m3 / var^1.5 would print noise such as 8.5e9.
double defined_skewness(const WorkDistribution& d);
inline constexpr double probability_rounding_floor = 1e-13;

// One diagnostic against its tolerance.
struct WorkCheck {
  std::string name;     // "norm drift"
  double value = 0;     // NaN: not computed
  double tolerance = 0;
  std::string source;   // where the tolerance comes from
  bool pass() const { return !(value > tolerance); }  // NaN counts as not failed
};
std::vector<WorkCheck> work_checks(const WorkRun& run);

// Warnings: the library's (with their diagnostic values) and the tool's checks that failed,
// each saying what to change.
std::vector<std::string> work_warnings(const WorkRun& run);

// lines.csv and reverse_lines.csv leave out the lines whose probability is below this floor
// (the table and every statistic keep them; a comment line and summary.json's
// work.lines_file say how many and their total probability).
constexpr double lines_file_probability_floor = 1e-15;
struct LinesFileFloor {
  double floor = 0;
  std::size_t left_out = 0;         // lines below the floor
  double left_out_probability = 0;  // their total probability
};
LinesFileFloor lines_file_floor(const WorkDistribution& d, double floor = lines_file_probability_floor);

// The CSV tables (see the comments written into each file). Their columns are the same for
// every scenario: one that does not apply is empty (CsvColumn::applies).
CsvTable lines_table(const WorkRun& run, const WorkDistribution& d, const std::string& what);
CsvTable histogram_table(const WorkRun& run);
CsvTable density_table(const WorkRun& run);
CsvTable transition_table(const WorkRun& run);
CsvTable characteristic_table(const WorkRun& run);
nlohmann::ordered_json work_summary(const WorkRun& run);
// potential.png: the initial and final potentials with their levels; work.png: P(W) and its density.
LevelsFigure levels_figure(const WorkRun& run);
// A series of another distribution on the run's axes (energy unit, broadening), e.g. the
// noisy P(W) drawn beside the run's own in work.png.
WorkSeries work_series(const WorkRun& run, const std::string& label, const WorkDistribution& distribution);
WorkFigure work_figure(const WorkRun& run);
// spectrum.png of `trapwork spectrum`: the potential with its levels (up to 12), the densities
// of the lowest four and the hard walls of a [box].
LevelsFigure spectrum_figure(const Scenario& scenario, const SpectrumResult& result);
// protocol.png: each scheduled parameter (potential and walls) against t in lab units, one panel
// per unit, sampled at 401 times; a sudden switch (tau = 0) drawn as a step at t = 0. Nothing
// when no parameter is scheduled.
std::optional<StackedFigure> protocol_figure(const WorkRun& run);
// populations.png: P(n) = sum_m p_m P(m -> n) of the final levels against n, beside the initial
// p_n and the harmonic reference's (its own Gibbs weights and analytic P(m -> n)) where there is one.
SweepFigure populations_figure(const WorkRun& run);
// traces.csv: WorkResult::traces (time_us, position_mean_um, energy_mean_<unit>,
// population_0 .. population_4); without traces the header and a comment saying why.
// traces.png: <x>(t) (with the trap centre for a translation), <H>(t) and the populations;
// nothing without traces.
inline constexpr int trace_columns_levels = 5;  // population columns of traces.csv
CsvTable traces_table(const WorkRun& run);
std::optional<StackedFigure> traces_figure(const WorkRun& run);
// Why a run has no traces (empty when it has them).
std::string traces_absent(const WorkRun& run);

// Writes lines.csv, histogram.csv, density.csv, transition.csv, reverse_lines.csv (reverse
// run only), characteristic.csv, traces.csv, summary.json, potential.png/.svg, work.png/.svg,
// protocol.png/.svg (when scheduled), populations.png/.svg and traces.png/.svg (with traces) into
// `folder` (created if missing); returns their paths: work_tables, work_summary and work_figures
// (solver/scenario/tasks.hpp) written by write_outputs.
std::vector<std::filesystem::path> write_work_outputs(const std::filesystem::path& folder, const WorkRun& run);
// Every name write_work_outputs may write (for OutputRun).
std::vector<std::string> work_output_names();

// The readable report: scenario header, protocol, initial state, grid and method, the work
// statistics, fluctuation relations, harmonic reference, diagnostics, warnings and the
// strongest work lines.
void print_work_report(std::ostream& out, const WorkRun& run);

// ---- sweeps ----------------------------------------------------------------------------------

// One sweep point's numbers (internal units; NaN where they do not exist).
struct SweepRow {
  std::size_t point = 0;       // the point's number in [sweep] (0-based, SweepSpec)
  std::vector<double> values;  // its swept values, one per axis, internal
  double mean = 0, sd = 0, skewness = 0;
  double mean_error = 0, sd_error = 0;  // as the report prints them (NaN: not known)
  double free_energy_change = 0, dissipated_work = 0, jarzynski_residual = 0, crooks_ratio_error = 0;
  double harmonic_mean = 0, harmonic_sd = 0;
  double time_step_error = 0, unresolved_weight = 0;
  int warnings = 0;
  std::string failure;  // a point that could not be computed: its error message (numbers NaN)
  // With a calibration (sweep --uncertainty FILE or [uncertainty]): the standard deviation the
  // calibration gives <W>, sd(W) and Delta F at this point (NaN: not computed), whose method
  // (1 linear, 2 sampling; 0: no calibration), and the linear-against-sampling check when both
  // ran (largest difference in standard errors of the sampled sd; NaN: not run).
  double calibration_mean_sd = 0, calibration_sd_sd = 0, calibration_free_energy_sd = 0;
  int calibration_method = 0;
  double calibration_check = 0;
};
// The row of a point that failed with `message`: every number NaN.
SweepRow failed_sweep_row(const SweepSpec& sweep, std::size_t point, const std::string& message);
SweepRow sweep_row(const WorkRun& run, const SweepSpec& sweep, std::size_t point);
// sweep.csv: one row per finished point; a failed point has NaN numbers, failed = 1 and its
// message in a comment line. With a calibration, five columns after `failed`: the calibration sd
// of <W>, sd(W) and Delta F, the method (1 linear, 2 sampling) and the linear-sampling check. One swept parameter: the rows sorted by value, its column first.
// Several: the rows in point order, a column `point` (1-based) and then one column per axis.
// Each swept column is named parameter_unit ("protocol_duration_us").
CsvTable sweep_table(const Scenario& scenario, std::vector<SweepRow> rows, std::size_t points);
// sweep.png/.svg: <W> against the swept value (with a calibration, a band of +-1 calibration
// sd around it), the harmonic <W> of each point as a
// curve and, for the duration of a constant-speed translation, the closed form
// 2 m v^2 sin^2(omega tau / 2) on a fine grid of tau. Returns the paths written.
SweepFigure sweep_figure(const Scenario& scenario, const std::vector<SweepRow>& rows);
std::vector<std::filesystem::path> plot_sweep_figure(const std::filesystem::path& folder, const Scenario& scenario,
                                                     const std::vector<SweepRow>& rows);
// The maps of a sweep over several parameters: <W>, sd(W) and |Jarzynski residual| (the last
// only where a residual is finite), with the harmonic prediction's <W> and sd(W) as contours
// where it exists (harmonic_moments on a 40 x 40 grid spanning the axes, drawn only when it
// exists at every node).
// - a grid of two parameters: sweep_map_mean/sd/jarzynski, one coloured cell per point (a
//   failed point is a blank cell);
// - a list of points over two parameters: the same files as scatter maps, one coloured marker
//   per computed point (a failed point an open marker);
// - a grid of three: those maps over the first two for each value of the third, in files named
//   by it, sweep_map_mean_<parameter>_<value as written> (file_piece: "trap.quartic_0.01_h_Hz_nm_4").
// Empty for other sweeps (sweep_map_refusal says why) or when no point is computed.
std::vector<SweepMapFigure> sweep_map_figures(const Scenario& scenario, const std::vector<SweepRow>& rows);
// Why a sweep has no maps ("" when it has them): one parameter, four or more, a list over
// three, a value repeated on a grid, two points of a list at the same values, two values of a
// third axis that give one file name.
std::string sweep_map_refusal(const Scenario& scenario);
// Writes the maps (.png/.svg) into `folder`; none for a sweep without maps. Returns the paths written.
std::vector<std::filesystem::path> plot_sweep_maps(const std::filesystem::path& folder, const Scenario& scenario,
                                                   const std::vector<SweepRow>& rows);
// The file names plot_sweep_maps may write for this scenario (for OutputRun's list of outputs).
std::vector<std::string> sweep_map_names(const Scenario& scenario);

}  // namespace trapwork
