// `trapwork plan` (see commands.hpp): the command line of plan_task (solver/scenario/plan_task.cpp).
#include <cmath>
#include <cstdlib>
#include <iostream>
#include <memory>
#include <optional>

#include "solver/tool/commands.hpp"
#include "solver/scenario/progress.hpp"
#include "solver/scenario/tasks.hpp"

namespace trapwork {

PlanOutcome run_plan_command(const PlanCommand& command, std::ostream& out, std::ostream& progress) {
  Scenario scenario = load_scenario(command.scenario, command.set);
  if (!command.output.empty()) scenario.output_folder = command.output;
  PlanSettings settings;
  settings.runs = command.runs;
  settings.resolutions = command.resolutions;
  settings.target_kT = command.target_kT;
  settings.experiments = command.experiments;
  settings.seed = command.seed;
  settings.correct_resolution = command.correct_resolution;
  settings.synthetic_runs = command.synthetic_runs;
  if (!command.against.empty()) settings.against = load_scenario(command.against);
  settings.power = command.power;
  settings.decision_confidence = command.decision_confidence;
  std::optional<OutputRun> output;
  TaskBar bar(progress, command.show_progress);
  // The plan's cost estimate is said unless --quiet, the model run's only with the progress bar.
  bool model_started = false;
  TaskHooks hooks = bar.hooks([&](const std::string& text) {
    if (model_started ? command.show_progress : !command.quiet) notice_to(progress)(text);
  });
  hooks.stage = [&, stage = hooks.stage](const std::string& name) {
    model_started = true;
    stage(name);
  };
  const PlanTaskOutcome task = plan_task(scenario, settings, hooks, [&] {
    std::vector<OutputRun::Input> inputs = scenario_inputs(scenario);
    if (settings.against)
      for (const auto& input : scenario_inputs(*settings.against)) inputs.push_back(input);
    output.emplace(scenario.output_folder, plan_output_names(), inputs, "trapwork plan " + scenario.file);
  });
  bar.finish();
  PlanOutcome outcome{task.table, task.needed, task.refusals, {}, task.decision};
  outcome.files = commit_and_report(*output, task, out, command.quiet);
  return outcome;
}

void add_plan_command(CLI::App& app) {
  auto command = std::make_shared<PlanCommand>();
  CLI::App* sub = app.add_subcommand(
      "plan",
      "Plans an experiment: bias, spread and rms error of the Jarzynski estimate of Delta F from N runs with a "
      "given resolution, by synthetic experiments drawn from the scenario's work distribution, and the N needed "
      "for a target precision; writes plan.csv, plan_summary.json, plan.png/.svg and optionally "
      "synthetic_work.csv");
  sub->add_option("scenario", command->scenario, "scenario file (TOML) with [protocol] and a thermal [initial]")
      ->required();
  sub->add_option("--runs", command->runs, "numbers of runs N per experiment (comma-separated)")
      ->delimiter(',')
      ->transform([](const std::string& text) {  // "2e9" is a whole number of runs too
        char* end = nullptr;
        const double v = std::strtod(text.c_str(), &end);
        if (end == text.c_str() || *end != '\0' || v != std::floor(v)) return text;  // CLI11 reports it
        if (!(std::abs(v) <= 2147483647.0))
          throw CLI::ValidationError(text + ": at most 2147483647 runs per experiment");
        return std::to_string(static_cast<long long>(v));
      })
      ->capture_default_str();
  sub->add_option("--resolution", command->resolutions,
                  "resolutions sigma of the measured work, e.g. \"0 h*kHz,40 h*kHz\" (default 0)")
      ->delimiter(',');
  sub->add_option("--target", command->target_kT, "target rms error of beta Delta F, in kT (e.g. 0.05)");
  sub->add_option("--experiments", command->experiments, "synthetic experiments per N")
      ->capture_default_str()
      ->check(CLI::Range(2, 10000000));
  sub->add_option("--seed", command->seed, "seed of the synthetic experiments")->capture_default_str();
  sub->add_flag("--correct-resolution", command->correct_resolution,
                "add the known resolution bias beta^2 sigma^2 / 2 back to each estimate");
  sub->add_option("--synthetic-runs", command->synthetic_runs,
                  "also write synthetic_work.csv: this many runs drawn from the model with the first resolution, "
                  "in the layout `trapwork compare` reads")
      ->check(CLI::Range(0, 100000000));
  sub->add_option("--against", command->against,
                  "another scenario: instead of the Delta F plan, how many runs N tell the two apart (likelihood-ratio "
                  "test, synthetic experiments from each; one --resolution, 0 meaning level pairs are measured); "
                  "writes plan_decision.csv, plan_summary.json and plan_decision.png/.svg");
  sub->add_option("--power", command->power, "with --against: probability of rejecting the wrong model asked for")
      ->capture_default_str()
      ->check(CLI::Range(0.5, 0.9999));
  sub->add_option("--decision-confidence", command->decision_confidence, "with --against: confidence of the test")
      ->capture_default_str()
      ->check(CLI::Range(0.5, 0.999999));
  sub->add_option("-o,--output", command->output, "output folder (overrides [output] folder)");
  sub->add_flag("--quiet", command->quiet, "print nothing but errors");
  add_set_option(sub, command->set);
  sub->callback([command] {
    PlanCommand c = *command;
    c.show_progress = !c.quiet && ProgressBar::terminal_allows();
    run_plan_command(c, std::cout, std::cerr);
  });
}

}  // namespace trapwork
