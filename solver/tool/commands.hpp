#pragma once
// Subcommands of the `trapwork` tool. Each command has one registration function that adds
// its CLI11 subcommand, options and callback to the app (main() calls each once), and one
// run function doing the work, callable from tests. Commands print through the stream given.
#include <CLI/CLI.hpp>
#include <cstdint>
#include <filesystem>
#include <optional>
#include <ostream>
#include <string>
#include <vector>

#include "solver/compare.hpp"
#include "solver/plan.hpp"
#include "solver/scenario/output.hpp"
#include "solver/scenario/progress.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/scenario/tasks.hpp"
#include "solver/scenario/work_output.hpp"

namespace trapwork {

// The end of every command that writes files: the task's files committed into `output` and,
// unless quiet, the task's report and the list of files written. Returns the files.
template <class Outcome>
std::vector<std::filesystem::path> commit_and_report(OutputRun& output, const Outcome& task, std::ostream& out,
                                                     bool quiet) {
  auto files = output.commit(write_task_outputs(output.staging(), task));
  if (quiet) return files;
  print_task_report(out, task);
  out << '\n';
  for (const auto& f : files) out << "wrote " << f.string() << '\n';
  return files;
}

// Parses the command line and runs the chosen command. Exit codes: 0 success; 2 bad input
// (InputError, a command-line error) or unusable physics (PhysicsError); 1 anything else.
// Errors are printed to stderr as "trapwork: error: <message>".
int run_command_line(CLI::App& app, int argc, char** argv);

// The scenario named on a command line: "default" or "" is the built-in one, else a file; with
// the --set assignments ("protocol.duration=1 us", scenario_edit.hpp) applied to its text, so
// the reader checks the changed values as it checks the file's, and recorded in the scenario
// (changed_values) with the command line (invocation) for the summaries.
Scenario load_scenario(const std::string& name, const std::vector<std::string>& set = {});
// The scenario text named on a command line ("default": the built-in one) with `set` applied.
std::string set_scenario_text(const std::string& name, const std::vector<std::string>& set);
// The command line this process was started with, quoted for a POSIX shell (set by
// run_command_line; recorded in every summary.json).
const std::string& command_line();
// Adds the repeatable --set ADDRESS=VALUE option to a command that reads a scenario.
void add_set_option(CLI::App* sub, std::vector<std::string>& set);

// The hooks of a task drawn as a progress bar on `out` when `show`: the first stage makes a bar
// of `total` units with the stage's name, later stages restart it, progress fractions move it.
class TaskBar {
 public:
  TaskBar(std::ostream& out, bool show, std::size_t total = 1000) : out_(out), show_(show), total_(total) {}
  TaskBar(const TaskBar&) = delete;
  TaskBar& operator=(const TaskBar&) = delete;
  // Hooks referring to this bar (keep it alive while they are used); `notice` as given.
  TaskHooks hooks(std::function<void(const std::string&)> notice = {});
  void finish() {
    if (bar_) bar_->finish();
  }

 private:
  std::ostream& out_;
  bool show_;
  std::size_t total_;
  std::optional<ProgressBar> bar_;
};
// A notice hook printing "trapwork: <text>" on its own line of `out`.
std::function<void(const std::string&)> notice_to(std::ostream& out);

// trapwork spectrum [SCENARIO] [-o DIR] [--levels N] [--quiet]
struct SpectrumCommand {
  std::vector<std::string> set;  // --set ADDRESS=VALUE, applied to the scenario (fit: the start scenario)
  std::string scenario;       // file, or "default"/"" for the built-in scenario
  std::string output;         // overrides [output] folder when not empty
  std::optional<int> levels;  // overrides [spectrum] levels
  bool quiet = false;         // print nothing but errors
};
void add_spectrum_command(CLI::App& app);
void run_spectrum(const SpectrumCommand& command, std::ostream& out);

// trapwork work [SCENARIO] [-o DIR] [--quiet] [--tolerance T]: the work statistics of the scenario's protocol
// (run_work), the report on `out`, the files of write_work_outputs. A progress bar goes to
// `progress` when `show_progress` (the command line: stderr is a terminal and not --quiet).
struct WorkCommand {
  std::vector<std::string> set;  // --set ADDRESS=VALUE, applied to the scenario (fit: the start scenario)
  std::string scenario;  // file, or "default"/"" for the built-in scenario
  std::string output;    // overrides [output] folder when not empty
  bool quiet = false;
  bool show_progress = false;
  std::optional<double> tolerance;  // --tolerance: numerics chosen for this bound (work_output.hpp)
  double search_budget = default_search_budget;  // --search-budget: the search's cost bound
  UncertaintySettings uncertainty;  // --uncertainty FILE and its method options (uncertainty_task.hpp)
};
void add_work_command(CLI::App& app);
void run_work_command(const WorkCommand& command, std::ostream& out, std::ostream& progress);

// trapwork demo [-o DIR] [--quiet]: `trapwork work` on the built-in scenario.
void add_demo_command(CLI::App& app);

// trapwork sweep SCENARIO [-o DIR] [--quiet] [--jobs N] [--resume]: one run_work per [sweep]
// value, `jobs` points at a time (each with one FFTW thread), sweep.csv and sweep-points.txt
// rewritten as points finish, then sweep.png/.svg. --resume keeps the points in
// sweep-points.txt when its fingerprint (scenario text and sweep values) matches, else
// throws InputError; the final sweep.csv equals that of an uninterrupted run.
struct SweepCommand {
  std::vector<std::string> set;  // --set ADDRESS=VALUE, applied to the scenario (fit: the start scenario)
  std::string scenario;
  std::string output;
  bool quiet = false;
  bool show_progress = false;
  int jobs = 0;  // 0: std::thread::hardware_concurrency()
  bool resume = false;  // keep the finished points of an earlier run of the same scenario
  bool retry_failed = false;  // --retry-failed: with --resume, compute the failed points again
  std::string shard;          // --shard I/N: only the points p with p = I mod N (1-based), own folder
  UncertaintySettings uncertainty;  // --uncertainty FILE (or [uncertainty]): the calibration's spread per point
};
void add_sweep_command(CLI::App& app);
// Under mpirun (a build with MPI) rank 0 runs this with the points shared among the ranks
// (sweep_points.hpp); the other ranks compute and print nothing.
void run_sweep_command(const SweepCommand& command, std::ostream& out, std::ostream& progress);
class MpiWorld;
void run_sweep_in_world(const SweepCommand& command, const MpiWorld& world, std::ostream& out,
                        std::ostream& progress);

// trapwork merge OUT SHARD_FOLDER...: the shards' points (sweep --shard) joined into OUT's
// sweep.csv and sweep-points.txt (the table of a single run of the sweep, rows in point order)
// and figures. InputError when the shards belong to different scenarios or shard counts, when
// two hold the same point, or when points are missing (listed).
struct MergeCommand {
  std::string output;
  std::vector<std::string> shards;
  bool quiet = false;
};
void add_merge_command(CLI::App& app);
void run_merge_command(const MergeCommand& command, std::ostream& out);

// trapwork keys [TABLE] [--markdown]: the key reference of scenario files (keys_text,
// solver/scenario/keys.hpp); an unknown TABLE is an InputError listing the known ones.
struct KeysCommand {
  std::string table;  // "work", "box.soft_walls", "potential.gaussian", ...; empty: all
  bool markdown = false;
};
void add_keys_command(CLI::App& app);
void run_keys(const KeysCommand& command, std::ostream& out);

// ---- measured data: fit, compare, plan (solver/tool/fit_command.cpp, compare_command.cpp,
// plan_command.cpp; data files in solver/scenario/data_files.hpp) ---------------------------------

// trapwork fit DATA (--start SCENARIO | --mass M --frequency F) [--terms frequency,quartic]
// [-o DIR] [--quiet]: fit_trap on the transition lines of DATA, starting from the scenario's one
// polynomial or harmonic term; writes fitted.toml (the start scenario with the fitted
// coefficients, which `trapwork work` runs when the start had [protocol] and [initial]),
// fit_lines.csv and fit_summary.json. Data the fit cannot determine: PhysicsError (exit 2).
struct FitCommand {
  std::vector<std::string> set;  // --set ADDRESS=VALUE, applied to the scenario (fit: the start scenario)
  std::string data;                           // transition lines file
  std::string start;                          // start scenario file, "default", or "" (then mass, frequency)
  std::string mass, frequency;                // "40 u", "1 MHz" when there is no start scenario
  std::string terms = "frequency,quartic";    // coefficients to fit
  std::string output;                         // default "<data stem>-fit"
  bool quiet = false;
};
struct FitResultFiles {
  std::filesystem::path scenario, lines, summary;
};
void add_fit_command(CLI::App& app);
FitResultFiles run_fit_command(const FitCommand& command, std::ostream& out);

// model_work (solver/scenario/tasks.hpp) with a progress bar on `progress` when `show_progress`.
ScenarioWork model_work(const Scenario& scenario, std::ostream& progress, bool show_progress);

// trapwork compare SCENARIO DATA [--resolution E] [--resamples N] [--seed S] [--confidence C]
// [-o DIR] [--quiet]: the measured work data of DATA (work samples, level pairs or a histogram,
// solver/scenario/data_files.hpp) against the scenario's work distribution; writes compare.csv,
// compare_summary.json and compare.png/.svg. The resolution comes from the option, the data
// file's "# resolution:" line or the scenario's [work] resolution (level pairs need none).
struct CompareCommand {
  std::vector<std::string> set;  // --set ADDRESS=VALUE, applied to the scenario (fit: the start scenario)
  std::string scenario, data, output;
  std::string resolution;  // e.g. "40 h*kHz"; empty: from the data file or the scenario
  int resamples = 2000;
  std::uint64_t seed = 1;
  double confidence = 0.9;
  // --against: other scenarios to choose between, with the options of ModelChoiceSettings
  // (solver/scenario/model_choice_task.hpp).
  std::vector<std::string> against;
  int calibration = 1000;
  double decision_confidence = 0.95;
  std::vector<int> fitted_parameters;
  std::vector<double> prior;
  UncertaintySettings uncertainty;  // --uncertainty FILE: the trap's calibration folded in
  bool quiet = false;
  bool show_progress = false;
};
struct CompareOutcome {
  WorkComparison comparison;
  std::string verdict;
  std::vector<std::filesystem::path> files;
  std::optional<ModelChoiceOutcome> choice;  // with --against
};
void add_compare_command(CLI::App& app);
CompareOutcome run_compare_command(const CompareCommand& command, std::ostream& out, std::ostream& progress);

// trapwork plan SCENARIO [--runs 10,30,...] [--resolution "0 h*kHz,40 h*kHz"] [--target kT]
// [--experiments N] [--seed S] [--correct-resolution] [--synthetic-runs N] [-o DIR] [--quiet]:
// estimator_table and runs_needed (solver/plan.hpp) on the scenario's work lines; writes
// plan.csv, plan_summary.json, plan.png/.svg and, with --synthetic-runs, synthetic_work.csv
// (runs drawn from the model with the first resolution, in the work samples layout).
struct PlanCommand {
  std::vector<std::string> set;  // --set ADDRESS=VALUE, applied to the scenario (fit: the start scenario)
  std::string scenario, output;
  std::vector<int> runs = {10, 30, 100, 300, 1000};
  std::vector<std::string> resolutions;  // e.g. "40 h*kHz"; empty: 0
  std::optional<double> target_kT;       // target rms error of beta Delta F
  int experiments = 1000;
  std::uint64_t seed = 1;
  bool correct_resolution = false;
  int synthetic_runs = 0;
  std::string against;  // --against SCENARIO: runs needed to tell the two apart (PlanSettings::against)
  double power = 0.9, decision_confidence = 0.95;
  bool quiet = false;
  bool show_progress = false;
};
struct PlanOutcome {
  std::vector<EstimatorStatistics> table;
  std::vector<std::optional<RunsNeeded>> needed;  // per resolution, with --target
  std::vector<std::string> refusals;              // why a target is not reachable ("" if it is)
  std::vector<std::filesystem::path> files;
  std::optional<DecisionPlanOutcome> decision;    // with --against
};
void add_plan_command(CLI::App& app);
PlanOutcome run_plan_command(const PlanCommand& command, std::ostream& out, std::ostream& progress);

// trapwork design SCENARIO [--modes K] [--starts S] [--evaluations N] [--objective excitation|
// dissipated_work] [--method bobyqa|...] [--amplitude-bound B] [--overshoot O] [--smoother]
// [--seed S] [--stop-below V] [-o DIR] [--set A=V] [--quiet]: design_task
// (solver/scenario/design_task.hpp); writes designed.toml with its table files, design_history.csv,
// design_summary.json, design_schedule.png/.svg and design_convergence.png/.svg.
struct DesignCommand {
  std::vector<std::string> set;
  std::vector<std::string> max_speed, max_overshoot;  // "trap.centre=0.5 m/s" (DesignSettings)
  std::string target, shortest;                       // shortest duration meeting target ("" : off)
  int bisections = 5;
  std::vector<std::string> robust;                    // variants "trap.quartic=0.012 h*Hz/nm^4;..."
  std::string robust_fit, robust_term;                // fit_summary.json and its term
  int robust_samples = 8;
  std::string scenario, output;
  int modes = 3, starts = 1, evaluations = 80;  // random later starts mostly land where the excitation is ~1
  std::string objective = "excitation", method = "bobyqa";
  double amplitude_bound = 1, overshoot = 0.5, stop_below = 1e-10;
  bool smoother = false;
  std::uint64_t seed = 1;
  bool quiet = false;
  bool show_progress = false;
};
struct DesignCommandOutcome {
  double objective_before = 0, objective_after = 0;  // internal units (probability or energy)
  int evaluations = 0;
  std::vector<std::filesystem::path> files;
};
void add_design_command(CLI::App& app);
DesignCommandOutcome run_design_command(const DesignCommand& command, std::ostream& out, std::ostream& progress);

}  // namespace trapwork
