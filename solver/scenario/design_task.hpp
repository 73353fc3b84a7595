#pragma once
// The design task (`trapwork design`; solver/design.hpp): the scenario's protocol ramp designed
// for the least excitation or dissipated work, and the files that carry the result: the designed
// schedule as table files, a scenario using them, the history of every evaluation, a summary
// and the pictures of the schedule and of the convergence. Like every task (tasks.hpp) it
// prints nothing and writes no file itself.
#include <filesystem>
#include <functional>
#include <ostream>
#include <string>
#include <vector>

#include "solver/design.hpp"
#include "solver/scenario/tasks.hpp"

namespace trapwork {

struct DesignSettings {
  std::string scenario_text;  // the scenario's text as read (with --set applied): designed.toml is made from it
  DesignOptions options;
};

struct DesignTable {
  std::string file;       // "designed_trap_centre.csv"
  std::string address;    // "trap.centre"
  std::string time_unit;  // of the file's first column
  std::string value_unit; // of the second ("" for a plain parameter)
  double time_per_unit = 1, value_per_unit = 1;  // internal value of one unit
  std::vector<double> times, before, after;      // internal
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
};

// Reads the protocol's changes, refuses what the design cannot do (moving walls, [noise],
// natural units: InputError naming the key), calls `checked` (the command line takes its output
// folder there), then searches (stage "design"; progress: evaluations done over the bound;
// hooks.interrupt before every evaluation and inside the spectra) and makes the files' content.
DesignTaskOutcome design_task(const Scenario& scenario, const DesignSettings& settings, const TaskHooks& hooks = {},
                              const std::function<void()>& checked = {});
// designed.toml, the table files (designed_*.csv), design_history.csv, design_summary.json,
// design_schedule.png/.svg, design_convergence.png/.svg.
std::vector<std::string> design_output_names(const Scenario& scenario);

std::vector<NamedTable> task_tables(const DesignTaskOutcome& outcome);
nlohmann::ordered_json task_summary(const DesignTaskOutcome& outcome);
std::vector<NamedText> task_texts(const DesignTaskOutcome& outcome);
std::vector<NamedFigure> task_figures(const DesignTaskOutcome& outcome);
std::vector<std::filesystem::path> write_task_outputs(const std::filesystem::path& folder, const DesignTaskOutcome& outcome);
void print_task_report(std::ostream& out, const DesignTaskOutcome& outcome);

}  // namespace trapwork
