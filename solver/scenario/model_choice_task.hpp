#pragma once
// Choosing between scenarios with one measured data set: `trapwork compare A DATA --against B`
// (solver/model_choice.hpp on the data of solver/scenario/data_files.hpp), and `trapwork plan A
// --against B`: how many runs tell A from B. Part of the task layer (tasks.hpp): no printing,
// no files; the report, table, summary and figure are returned as values.
#include <cstdint>
#include <functional>
#include <nlohmann/json.hpp>
#include <optional>
#include <ostream>
#include <string>
#include <vector>

#include "solver/model_choice.hpp"
#include "solver/scenario/data_files.hpp"
#include "solver/scenario/output.hpp"
#include "solver/scenario/plot.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/scenario/work_output.hpp"

namespace trapwork {

struct TaskHooks;

struct ModelChoiceSettings {
  std::vector<Scenario> against;          // the other models (the first is the compared scenario)
  int calibration = 1000;                 // synthetic data sets per model for the p-values (0: none)
  std::uint64_t seed = 1;
  double confidence = 0.95;               // of the verdict
  std::vector<int> fitted_parameters;     // per model, all models in order (empty: 0 each)
  std::vector<double> prior;              // prior weights, all models in order (empty: equal)
};

struct ModelChoiceOutcome {
  std::vector<std::string> files, names;  // scenario files as given, and their stems
  std::string form;                       // "work values with resolution 40 h*kHz", "level pairs", ...
  ModelChoice choice;
  std::vector<std::string> verdicts;      // per test (the first model against each other one)
  double display_shift = 0;               // ln L + runs * display_shift: densities per display unit
  std::vector<std::vector<std::string>> warnings;  // per model: its work run's warnings
};

// The models of `others` computed (model_work), the data put in the models' form (work values
// with resolution sigma > 0; categories for exact work values, level pairs and histograms),
// then choose_model. `main_run` is the compared scenario's model. InputError: a --against
// scenario without [protocol]/[initial], --calibration too costly (more than 2e8 synthetic runs),
// option lists of the wrong length; PhysicsError naming the files when a run is impossible
// under two models.
ModelChoiceOutcome choose_between(const WorkRun& main_run, const WorkData& data, double sigma,
                                  const ModelChoiceSettings& settings, const TaskHooks& hooks);

// compare_models.csv (one row per model), the summary's "model_choice" object, the figure
// (T of the synthetic sets under each model, the data's T marked) and the report section.
CsvTable model_choice_table(const ModelChoiceOutcome& o);
nlohmann::ordered_json model_choice_json(const ModelChoiceOutcome& o);
SweepFigure model_choice_figure(const ModelChoiceOutcome& o);
void print_model_choice(std::ostream& out, const ModelChoiceOutcome& o);

// ---- plan --against ---------------------------------------------------------------------------
struct DecisionPlanSettings {
  Scenario against;
  std::vector<std::int64_t> runs = {10, 30, 100, 300, 1000};
  double resolution = 0;  // internal energy of the main scenario; 0: level pairs are measured
  double confidence = 0.95, power = 0.9;
  int experiments = 1000;
  std::uint64_t seed = 1;
  bool find_runs = true;  // also search the N where both tests reach `power`
};
struct DecisionPlanOutcome {
  std::vector<std::string> files, names;
  std::string form;
  double resolution = 0;
  DecisionPlanSettings settings;  // without the scenario's copy
  std::vector<DecisionPoint> table;
  std::optional<RunsToDecide> needed;
  double normal_runs = 0;  // the normal approximation of N
};
DecisionPlanOutcome decision_plan(const WorkRun& main_run, const DecisionPlanSettings& settings,
                                  const TaskHooks& hooks);
CsvTable decision_plan_table(const DecisionPlanOutcome& o);
nlohmann::ordered_json decision_plan_json(const DecisionPlanOutcome& o);
SweepFigure decision_plan_figure(const DecisionPlanOutcome& o);
void print_decision_plan(std::ostream& out, const DecisionPlanOutcome& o);

}  // namespace trapwork
