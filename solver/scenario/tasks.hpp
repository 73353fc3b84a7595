#pragma once
// The task layer: every command of the tool (spectrum, work, sweep, fit, compare, plan) as a
// computation returning an outcome, shared by the command line (solver/tool/) and the Python
// module (solver/python/). A task prints nothing and writes no file; its outcome gives the
// tables, the summary JSON and the figure data exactly as the files hold them, writes those
// files into a folder (the caller holds the OutputRun) and prints the command's report.
//
// Interruption: a hook may throw trapwork::Interrupted (solver/errors.hpp) to stop a run; every
// task lets it through and leaves no thread running (the sweep stops its workers and joins them).
#include <cstdint>
#include <filesystem>
#include <functional>
#include <nlohmann/json.hpp>
#include <optional>
#include <ostream>
#include <string>
#include <utility>
#include <variant>
#include <vector>

#include "solver/compare.hpp"
#include "solver/fit.hpp"
#include "solver/plan.hpp"
#include "solver/scenario/data_files.hpp"
#include "solver/scenario/model_choice_task.hpp"
#include "solver/scenario/output.hpp"
#include "solver/scenario/plot.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/scenario/uncertainty_task.hpp"
#include "solver/scenario/work_output.hpp"

namespace trapwork {

// What a task tells its caller while it runs; every member is optional.
struct TaskHooks {
  std::function<void(double)> progress;           // share of the current stage done, 0..1
  std::function<void(const std::string&)> stage;  // a new stage starts (its name); progress restarts at 0
  std::function<void(const std::string&)> notice;  // a line for the user (the cost estimate of a long run)
  // Called often where no progress is reported (the sparse eigensolver's steps); may throw
  // Interrupted to stop the run there (SpectrumOptions::interrupt).
  std::function<void()> interrupt;
};

struct NamedTable {
  std::string file;  // "lines.csv"
  CsvTable table;
};
using FigureData = std::variant<LevelsFigure, WorkFigure, SweepFigure, ComparisonFigure, StackedFigure>;
struct NamedFigure {
  std::string stem;  // "work": work.png and work.svg
  FigureData figure;
};
// A file that is neither a table nor the summary, written as this text (fitted.toml, synthetic_work.csv).
struct NamedText {
  std::string file;
  std::string text;
};

// Writes the tables (write_csv), the summary (when summary_file is not empty), the figures and
// then the texts into `folder` (created if missing), each file atomically; returns the paths
// in that order. The caller assembles everything before: no computation happens here.
std::vector<std::filesystem::path> write_outputs(const std::filesystem::path& folder,
                                                 const std::vector<NamedTable>& tables,
                                                 const std::string& summary_file,
                                                 const nlohmann::ordered_json& summary,
                                                 const std::vector<NamedText>& texts,
                                                 const std::vector<NamedFigure>& figures);
// Draws a figure into <folder>/<stem>.png and .svg (plot.hpp); returns the paths.
std::vector<std::filesystem::path> write_figure(const std::filesystem::path& folder, const NamedFigure& figure);

// An energy option with its unit ("40 h*kHz") in internal units, >= 0; InputError naming `key`.
double energy_option(const Scenario& scenario, const std::string& key, const std::string& text);

// Connects a work request to the hooks: progress and stage passed on, the estimate of a run
// longer than long_run_seconds (machine.hpp) to notice, before its propagation starts. Sets the
// memory limit to available_memory_bytes() unless one is set.
void watch_work(WorkRequest& request, const TaskHooks& hooks);

// The work model of a scenario as `trapwork work` computes it (compute_work), without the
// reverse run (compare and plan use the forward distribution only); stage "propagating".
// PhysicsError names the scenario; InputError for a [noise] table (`command` names the caller
// in that message). The returned request holds no hooks.
ScenarioWork model_work(const Scenario& scenario, const TaskHooks& hooks = {}, const std::string& command = "compare");

// ---- spectrum ------------------------------------------------------------------------------
struct SpectrumOutcome {
  Scenario scenario;  // with the levels used
  SpectrumResult result;
};
// compute_spectrum of the scenario's potential (levels overrides [spectrum] levels), refused
// before it allocates more than the memory available; PhysicsError names the scenario.
SpectrumOutcome spectrum_task(Scenario scenario, std::optional<int> levels, const TaskHooks& hooks = {});
// spectrum.csv and states.csv (output.hpp's spectrum_table, states_table).
std::vector<NamedTable> spectrum_tables(const Scenario& scenario, const SpectrumResult& result);

// ---- work ----------------------------------------------------------------------------------
struct WorkOutcome {
  Scenario scenario;
  std::optional<ToleranceChoice> choice;  // with a tolerance: what the search chose
  std::optional<ScenarioWork> direct;     // without
  std::optional<NoisyWorkResult> noise;   // [noise]: the noisy run beside the noiseless one
  std::optional<WorkUncertainty> uncertainty;  // --uncertainty: the calibration's spread (add_work_uncertainty)
  // References into *this: keep the outcome in place while the run is used.
  WorkRun run() const;
};
// The work statistics of the scenario's protocol (compute_work), or with `tolerance` the
// numerics chosen for that bound (compute_work_to_tolerance, cost bound `search_budget`).
// Stages: "propagating" (the work run may add "more levels ..."), or "--tolerance search (share
// of its cost bound)". InputError for a tolerance outside (0, 1) or a budget below 1.
WorkOutcome work_task(const Scenario& scenario, std::optional<double> tolerance,
                      double search_budget = default_search_budget, const TaskHooks& hooks = {});

// The tables, summary and figures of one work run (task_tables(WorkOutcome) etc. use these).
std::vector<NamedTable> work_tables(const WorkRun& run);
std::vector<NamedFigure> work_figures(const WorkRun& run);

// ---- sweep ---------------------------------------------------------------------------------
struct SweepOptions {
  int jobs = 0;  // points at a time; 0: std::thread::hardware_concurrency()
  // Points of [sweep] (SweepSpec numbering) to compute, each once; not set: every point.
  std::optional<std::vector<std::size_t>> todo;
  // When set, the points come from it instead (called from the point threads, one call at a
  // time) until it returns nothing: a source shared with other processes (MPI). todo and the
  // progress hook are then unused; `jobs` threads are started.
  std::function<std::optional<std::size_t>()> next;
  // Called (under a lock, one call at a time, from the point threads) as each point finishes,
  // with its index and row; an exception from it stops the sweep like a failed worker.
  std::function<void(std::size_t index, const SweepRow&)> on_point;
  // The calibration's spread at every point (--uncertainty FILE or the scenario's [uncertainty]):
  // work_uncertainty after each point's run, its sd of <W>, sd(W) and Delta F in the row. In a
  // sweep, auto does not add the check against sampling (it would cost `samples` runs per
  // point): check_operations is set to 0 unless the method is "both".
  UncertaintySettings uncertainty;
};
struct SweepOutcome {
  Scenario scenario;
  std::vector<std::pair<std::size_t, SweepRow>> rows;  // the points computed, in finishing order
  std::size_t jobs = 0;             // points at a time asked for (at most the number of points)
  std::size_t started_threads = 0;  // point threads the system started (0: points ran on the caller)
  std::string refusal;              // why the system started fewer threads ("" if it did not)
};
// One work run (compute_work, one FFTW thread each, spectra shared between points with the same
// H_A or H_B, each point its share of the memory) per [sweep] value, `jobs` at a time. A point
// that cannot be computed is a failed row (failed_sweep_row) and the sweep goes on; an
// Interrupted (or std::bad_alloc) stops the workers, joins them and passes on. Stage "sweep
// points"; progress: the share of the points to compute done, including the running points'
// progress (called from the point threads, one call at a time).
SweepOutcome sweep_task(const Scenario& scenario, const SweepOptions& options = {}, const TaskHooks& hooks = {});
std::vector<std::string> sweep_output_names();  // sweep.csv, sweep_summary.json, sweep.png, sweep.svg
// The sweep report: header, the points and threads of `run` (its rows are the points computed
// now), the `resumed` line if not empty (--resume), then `rows` in table order (sweep_table).
void print_sweep_report(std::ostream& out, const SweepOutcome& run, std::vector<SweepRow> rows,
                        const std::string& resumed);

// ---- fit -----------------------------------------------------------------------------------
struct FitSettings {  // (FitOptions is solver/fit.hpp's)
  std::string data;                         // transition lines file
  std::string start_text, start_name;       // start scenario text and its name (a file, or "default")
  std::string terms = "frequency,quartic";  // coefficients to fit
  std::string fitted_name = "fitted.toml";  // the fitted scenario's name in messages
  std::string invocation;                   // recorded in fit_summary.json (Scenario::invocation)
  std::vector<std::string> changed_values;  // the values start_text changed (Scenario::changed_values)
};
// The start scenario made from --mass and --frequency (one harmonic polynomial term).
std::string fit_start_text(const std::string& mass, const std::string& frequency);
struct FitOutcome {
  Scenario start;
  std::string start_text;
  TransitionLinesData data;
  TrapFit fit;
  std::string fitted_text;  // fitted.toml: the start scenario with the fitted coefficients
};
// Reads the data and the start scenario (its one polynomial or harmonic term) and the terms,
// calls `checked` with the start scenario (if set; the command line takes its output folder
// there), fits (PhysicsError when the data cannot determine the terms) and writes the fitted
// scenario's text, which must read back.
FitOutcome fit_task(const FitSettings& settings, const std::function<void(const Scenario& start)>& checked = {});
std::vector<std::string> fit_output_names();  // fitted.toml, fit_lines.csv, fit_summary.json

// ---- compare -------------------------------------------------------------------------------
struct CompareSettings {
  std::string data;        // measured work data file
  std::string resolution;  // e.g. "40 h*kHz"; empty: from the data file or the scenario
  int resamples = 2000;
  std::uint64_t seed = 1;
  double confidence = 0.9;
  ModelChoiceSettings models;  // --against: other scenarios to choose between (model_choice_task.hpp)
  UncertaintySettings uncertainty;  // --uncertainty: the trap's calibration folded in (calibrated_likelihood)
};
struct CompareTaskOutcome {
  Scenario scenario;
  ScenarioWork work;  // the model (model_work)
  WorkData data;
  double sigma = 0;          // resolution used (internal energy)
  std::string sigma_source;  // "--resolution", the data file, "<scenario> [work] resolution", "none"
  WorkComparison comparison;
  std::string verdict;
  std::vector<double> edges, observed, expected;  // the table's and figure's bins (internal energy), runs
  std::optional<ModelChoiceOutcome> choice;       // with --against
  std::optional<CalibratedLikelihood> calibrated;  // with --uncertainty
  // References into *this: keep the outcome in place while the run is used.
  WorkRun run() const { return work.run(scenario); }
};
// Reads settings.data, chooses the resolution (InputError when none is given and the data need
// one), then calls `checked` (if set; the command line takes its output folder there) and
// computes the model and the comparison.
CompareTaskOutcome compare_task(const Scenario& scenario, const CompareSettings& settings,
                                const TaskHooks& hooks = {}, const std::function<void()>& checked = {});
// compare.csv, compare_summary.json, compare.png, compare.svg; with --against also compare_models.csv
// and compare_models.png/.svg.
std::vector<std::string> compare_output_names();

// ---- plan ----------------------------------------------------------------------------------
struct PlanSettings {
  std::vector<int> runs = {10, 30, 100, 300, 1000};
  std::vector<std::string> resolutions;  // e.g. "40 h*kHz"; empty: 0
  std::optional<double> target_kT;       // target rms error of beta Delta F
  int experiments = 1000;
  std::uint64_t seed = 1;
  bool correct_resolution = false;
  int synthetic_runs = 0;
  // --against: how many runs tell the scenario from this one (model_choice_task.hpp), instead of
  // the Jarzynski plan; one resolution (0: level pairs are measured).
  std::optional<Scenario> against;
  double power = 0.9, decision_confidence = 0.95;
};
struct PlanTaskOutcome {
  Scenario scenario;
  PlanSettings settings;
  std::vector<double> resolutions;  // internal energy
  ScenarioWork work;                // the model (model_work)
  std::vector<EstimatorStatistics> table;
  std::vector<std::optional<RunsNeeded>> needed;  // per resolution, with a target
  std::vector<std::string> refusals;              // why a target is not reachable ("" if it is)
  std::vector<double> synthetic;                  // synthetic runs' work (internal energy)
  CostEstimate cost;                              // of the synthetic experiments
  bool long_plan = false;                         // estimated above long_run_seconds (said in a notice)
  std::optional<DecisionPlanOutcome> decision;    // with --against (then table, needed are empty)
};
// Checks the settings and the thermal initial state, says the cost of a long plan (notice),
// calls `checked` (if set), then computes the model, the estimator table and runs_needed.
PlanTaskOutcome plan_task(const Scenario& scenario, const PlanSettings& settings, const TaskHooks& hooks = {},
                          const std::function<void()>& checked = {});
// plan.csv, plan_summary.json, plan.png/.svg, synthetic_work.csv; with --against plan_decision.csv,
// plan_summary.json and plan_decision.png/.svg instead.
std::vector<std::string> plan_output_names();

// ---- outputs of every outcome ----------------------------------------------------------------
// task_tables: the CSV files' tables, in file order; task_summary: the summary JSON file's
// content (summary.json, fit_summary.json, compare_summary.json, plan_summary.json; the sweep's:
// sweep_summary.json, a small summary the command line does not write); task_texts: other files; task_figures: the
// figures' data (none for fit). write_task_outputs writes exactly these into
// `folder` (created if missing; everything assembled before the first file is opened, each file
// written atomically) and returns the paths in the order the command line reports them;
// <command>_output_names(): every name it may write (for OutputRun). print_task_report: the
// command line's report without the "wrote" lines.
std::vector<std::string> spectrum_output_names();  // work: work_output_names() (work_output.hpp)

std::vector<NamedTable> task_tables(const SpectrumOutcome& outcome);
nlohmann::ordered_json task_summary(const SpectrumOutcome& outcome);
std::vector<NamedText> task_texts(const SpectrumOutcome& outcome);
std::vector<NamedFigure> task_figures(const SpectrumOutcome& outcome);
std::vector<std::filesystem::path> write_task_outputs(const std::filesystem::path& folder,
                                                      const SpectrumOutcome& outcome);
void print_task_report(std::ostream& out, const SpectrumOutcome& outcome);

std::vector<NamedTable> task_tables(const WorkOutcome& outcome);
nlohmann::ordered_json task_summary(const WorkOutcome& outcome);
std::vector<NamedText> task_texts(const WorkOutcome& outcome);
std::vector<NamedFigure> task_figures(const WorkOutcome& outcome);
std::vector<std::filesystem::path> write_task_outputs(const std::filesystem::path& folder, const WorkOutcome& outcome);
void print_task_report(std::ostream& out, const WorkOutcome& outcome);

// The sweep's write_task_outputs writes sweep.csv, sweep_summary.json and sweep.png/.svg; the
// command line writes sweep.csv itself as points finish (with its --resume record).
std::vector<NamedTable> task_tables(const SweepOutcome& outcome);
nlohmann::ordered_json task_summary(const SweepOutcome& outcome);
std::vector<NamedText> task_texts(const SweepOutcome& outcome);
std::vector<NamedFigure> task_figures(const SweepOutcome& outcome);
std::vector<std::filesystem::path> write_task_outputs(const std::filesystem::path& folder, const SweepOutcome& outcome);
void print_task_report(std::ostream& out, const SweepOutcome& outcome);

// fit: fitted.toml (a text), fit_lines.csv, fit_summary.json; no figure.
std::vector<NamedTable> task_tables(const FitOutcome& outcome);
nlohmann::ordered_json task_summary(const FitOutcome& outcome);
std::vector<NamedText> task_texts(const FitOutcome& outcome);
std::vector<NamedFigure> task_figures(const FitOutcome& outcome);
std::vector<std::filesystem::path> write_task_outputs(const std::filesystem::path& folder, const FitOutcome& outcome);
void print_task_report(std::ostream& out, const FitOutcome& outcome);

// compare: compare.csv, compare_summary.json, compare.png/.svg.
std::vector<NamedTable> task_tables(const CompareTaskOutcome& outcome);
nlohmann::ordered_json task_summary(const CompareTaskOutcome& outcome);
std::vector<NamedText> task_texts(const CompareTaskOutcome& outcome);
std::vector<NamedFigure> task_figures(const CompareTaskOutcome& outcome);
std::vector<std::filesystem::path> write_task_outputs(const std::filesystem::path& folder,
                                                      const CompareTaskOutcome& outcome);
void print_task_report(std::ostream& out, const CompareTaskOutcome& outcome);

// plan: plan.csv, plan_summary.json, plan.png/.svg, then synthetic_work.csv (a text) with synthetic runs.
std::vector<NamedTable> task_tables(const PlanTaskOutcome& outcome);
nlohmann::ordered_json task_summary(const PlanTaskOutcome& outcome);
std::vector<NamedText> task_texts(const PlanTaskOutcome& outcome);
std::vector<NamedFigure> task_figures(const PlanTaskOutcome& outcome);
std::vector<std::filesystem::path> write_task_outputs(const std::filesystem::path& folder, const PlanTaskOutcome& outcome);
void print_task_report(std::ostream& out, const PlanTaskOutcome& outcome);

}  // namespace trapwork
