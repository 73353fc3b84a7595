#pragma once
// The design task (`trapwork design`; solver/design.hpp): the scenario's protocol ramp designed
// for the least excitation or dissipated work, and the files that carry the result: the designed
// schedule as table files, a scenario using them, the history of every evaluation, a summary
// and the pictures of the schedule and of the convergence. Like every task (tasks.hpp) it
// prints nothing and writes no file itself.
#include <filesystem>
#include <functional>
#include <limits>
#include <optional>
#include <ostream>
#include <string>
#include <vector>

#include "solver/design.hpp"
#include "solver/scenario/tasks.hpp"

namespace trapwork {

struct DesignSettings {
  std::string scenario_text;  // the scenario's text as read (with --set applied): designed.toml is made from it
  DesignOptions options;  // options.bounds are filled from the texts below
  // Lab-unit bounds, "trap.centre=0.5 m/s" or, with one designed parameter, "0.5 m/s": speed in
  // the parameter's unit per time; overshoot beyond the end values in the parameter's unit.
  std::vector<std::string> max_speed, max_overshoot;
  // The shortest duration whose design meets `target` (design_shortest_duration): a probability
  // or number of quanta as a plain number, a dissipated work with its energy unit ("0.5 h*kHz");
  // `shortest` the lower end of the search ("0.3 us"; default a quarter of the duration).
  std::optional<std::string> target;
  std::string shortest;
  int bisections = 5;
  // Robust design: the objective averaged over the nominal scenario and variants of its
  // potential, equally weighted. Each variant is "ADDRESS=VALUE[;ADDRESS=VALUE...]" in lab units
  // ("trap.quartic=0.012 h*Hz/nm^4"); `robust_fit` a fit_summary.json of `trapwork fit`, from
  // whose coefficients (value, unit, uncertainty) and correlation robust_samples variants are drawn
  // (gaussian_samples, seed options.seed) for the term robust_term (default: the one term having
  // every fitted coefficient).
  std::vector<std::string> robust_variants;
  std::string robust_fit, robust_term;
  int robust_samples = 8;
  // A robust design's members shared among processes (the command line's MPI layer;
  // solver/sharing.hpp): at each evaluation and for the members' final objectives each process
  // runs its own members. Every process runs the whole task and gets the same outcome. A design
  // without members has nothing to share.
  PartSharing member_sharing;
};

// One member of a robust design: its label, its potential (internal units of the scenario) and
// the objective of the smooth ramp and of the design in it.
struct RobustMember {
  std::string label;  // "nominal", the variant as given, "fit sample 3: trap.cubic=..."
  Potential potential;
  double objective_before = 0, objective_after = 0;
};

struct DesignTable {
  std::string file;       // "designed_trap_centre.csv"
  std::string address;    // "trap.centre"
  std::string time_unit;  // of the file's first column
  std::string value_unit; // of the second ("" for a plain parameter)
  double time_per_unit = 1, value_per_unit = 1;  // internal value of one unit
  std::vector<double> times, before, after;      // internal
  // A moving wall (box.left, box.right): the designed ramp as a formula ramp of t/tau, in
  // value_unit (`formula`, as designed.toml writes it) and internal (`internal_formula`, as the
  // scenario reader makes it), because the wall route refuses a table (it needs the wall's
  // acceleration); the table above is then for the pictures and the csv only. Empty otherwise.
  std::string formula, internal_formula;
  // Largest |speed| and excursion beyond the end values (internal), of the smooth ramp and the
  // design, and the limits the search kept (the overshoot band as used: min(overshoot |b - a|,
  // max_overshoot); speed: infinity when not bounded).
  double speed_before = 0, speed_after = 0, overshoot_before = 0, overshoot_after = 0;
  double speed_limit = std::numeric_limits<double>::infinity(), overshoot_limit = 0;
  std::string speed_unit() const { return (value_unit.empty() ? "1" : value_unit) + "/" + time_unit; }
  double speed_per_unit() const { return value_per_unit / time_per_unit; }
};

struct DesignTaskOutcome {
  Scenario scenario;
  DesignSettings settings;
  std::string family;               // DesignFamily::description()
  DesignResult result;
  std::vector<DesignTable> tables;  // one per designed parameter
  std::string designed_text;        // designed.toml
  std::string objective_unit;       // "" (probability) or the energy unit of the report
  double objective_per_unit = 1;    // internal value of one objective unit
  // The final runs, each through the work pipeline with all its checks (work_task): the
  // scenario as given (the smooth ramp) and the designed scenario (designed.toml's content: the
  // designed tables, lab frame for a translation). final_objective is the objective of the
  // designed table run (it differs from objective_after by the table's interpolation).
  std::optional<WorkOutcome> before_run, after_run;
  // With a target: every duration tried; scenario and result are then the shortest that met it
  // (or the scenario's own duration, with a warning, when none did).
  std::optional<ShortestDurationResult> duration_search;
  std::vector<RobustMember> robust;  // empty: designed in the nominal scenario only
  double final_objective = 0;
  std::vector<std::string> final_warnings;  // objective not reproduced, failed checks
};

// Reads the protocol's changes, refuses what the design cannot do ([noise],
// natural units: InputError naming the key), calls `checked` (the command line takes its output
// folder there), then searches (stage "design"; progress: evaluations done over the bound;
// hooks.interrupt before every evaluation and inside the spectra) and makes the files' content.
DesignTaskOutcome design_task(const Scenario& scenario, const DesignSettings& settings, const TaskHooks& hooks = {},
                              const std::function<void()>& checked = {});
// designed.toml, the table files (designed_*.csv), design_history.csv, design_summary.json,
// design_schedule.png/.svg, design_convergence.png/.svg; of the final runs design_work_lines.csv
// (P(m -> n) before and after beside the harmonic prediction), design_work_before/after.png/.svg
// (the work figure of each run) and designed_work_summary.json (the designed run's summary.json).
std::vector<std::string> design_output_names(const Scenario& scenario);

std::vector<NamedTable> task_tables(const DesignTaskOutcome& outcome);
nlohmann::ordered_json task_summary(const DesignTaskOutcome& outcome);
std::vector<NamedText> task_texts(const DesignTaskOutcome& outcome);
std::vector<NamedFigure> task_figures(const DesignTaskOutcome& outcome);
std::vector<std::filesystem::path> write_task_outputs(const std::filesystem::path& folder, const DesignTaskOutcome& outcome);
void print_task_report(std::ostream& out, const DesignTaskOutcome& outcome);

}  // namespace trapwork
