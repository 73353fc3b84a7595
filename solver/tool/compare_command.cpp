// `trapwork compare` (see commands.hpp): the command line of compare_task
// (solver/scenario/compare_task.cpp), and the model run shared with `trapwork plan`.
#include <iostream>
#include <memory>
#include <optional>

#include "solver/tool/commands.hpp"
#include "solver/scenario/progress.hpp"
#include "solver/scenario/tasks.hpp"

namespace trapwork {

ScenarioWork model_work(const Scenario& scenario, std::ostream& progress, bool show_progress) {
  TaskBar bar(progress, show_progress);
  ScenarioWork w = model_work(scenario, bar.hooks(show_progress ? notice_to(progress) : nullptr));
  bar.finish();
  return w;
}

CompareOutcome run_compare_command(const CompareCommand& command, std::ostream& out, std::ostream& progress) {
  Scenario scenario = load_scenario(command.scenario, command.set);
  if (!command.output.empty()) scenario.output_folder = command.output;
  CompareSettings settings;
  settings.data = command.data;
  settings.resolution = command.resolution;
  settings.resamples = command.resamples;
  settings.seed = command.seed;
  settings.confidence = command.confidence;
  for (const auto& file : command.against) settings.models.against.push_back(load_scenario(file));
  settings.models.calibration = command.calibration;
  settings.models.seed = command.seed;
  settings.models.confidence = command.decision_confidence;
  settings.models.fitted_parameters = command.fitted_parameters;
  settings.models.prior = command.prior;
  settings.uncertainty = command.uncertainty;
  if (has_calibration(scenario, settings.uncertainty)) (void)calibration_of(scenario, settings.uncertainty);
  std::optional<OutputRun> output;
  TaskBar bar(progress, command.show_progress);
  const CompareTaskOutcome task =
      compare_task(scenario, settings, bar.hooks(command.show_progress ? notice_to(progress) : nullptr), [&] {
        std::vector<OutputRun::Input> inputs = scenario_inputs(scenario);
        inputs.push_back({command.data, "the data file"});
        for (const auto& other : settings.models.against)
          for (const auto& input : scenario_inputs(other)) inputs.push_back(input);
        output.emplace(scenario.output_folder, compare_output_names(), inputs,
                       "trapwork compare " + scenario.file + " " + command.data);
      });
  bar.finish();
  CompareOutcome outcome{task.comparison, task.verdict, {}, task.choice};
  outcome.files = commit_and_report(*output, task, out, command.quiet);
  return outcome;
}

void add_compare_command(CLI::App& app) {
  auto command = std::make_shared<CompareCommand>();
  CLI::App* sub = app.add_subcommand(
      "compare",
      "Compares measured work data (work samples, level pairs or a histogram) with the work distribution of the "
      "scenario: log-likelihood, chi-square with p-value, total variation and Kolmogorov-Smirnov distances, "
      "moments, the Jarzynski Delta F with a bootstrap interval, and a verdict; writes compare.csv, "
      "compare_summary.json and compare.png/.svg");
  sub->add_option("scenario", command->scenario, "scenario file (TOML) with [protocol] and [initial]")->required();
  sub->add_option("data", command->data,
                  "measured data: columns work_<unit> (one run per row), initial and final (levels per run), or "
                  "lower_<unit>, upper_<unit>, count (a histogram)")
      ->required();
  sub->add_option("--resolution", command->resolution,
                  "resolution sigma of the measured work values, e.g. \"40 h*kHz\" (overrides the data file's "
                  "'# resolution:' line and the scenario's [work] resolution)");
  sub->add_option("--resamples", command->resamples, "bootstrap resamples of the Delta F estimate (0: none)")
      ->capture_default_str()
      ->check(CLI::Range(0, 1000000));
  sub->add_option("--seed", command->seed, "seed of the bootstrap resampling")->capture_default_str();
  sub->add_option("--confidence", command->confidence, "confidence level of the bootstrap interval")
      ->capture_default_str()
      ->check(CLI::Range(0.5, 0.9999));
  sub->add_option("--against", command->against,
                  "another scenario to choose between (repeatable): log-likelihoods, AIC/BIC, posterior odds, the "
                  "likelihood-ratio test calibrated by synthetic data sets, a verdict; writes compare_models.csv "
                  "and compare_models.png/.svg");
  sub->add_option("--calibration", command->calibration,
                  "with --against: synthetic data sets per model for the likelihood-ratio p-values (0: none)")
      ->capture_default_str()
      ->check(CLI::Range(0, 10000000));
  command->uncertainty.samples = 20;
  sub->add_option("--uncertainty", command->uncertainty.calibration,
                  "fold the trap's calibration uncertainty in: the fit_summary.json of `trapwork fit` (or its folder); "
                  "each model that takes its parameters gets a marginal likelihood, L averaged over draws of the "
                  "parameters, and the posterior is computed from those");
  sub->add_option("--uncertainty-samples", command->uncertainty.samples,
                  "draws of the parameters per model for --uncertainty (default 20; each is one work run)");
  sub->add_option("--decision-confidence", command->decision_confidence,
                  "with --against: confidence of the verdict")
      ->capture_default_str()
      ->check(CLI::Range(0.5, 0.999999));
  sub->add_option("--fitted-parameters", command->fitted_parameters,
                  "with --against: parameters of each model fitted to these very data, the scenario first "
                  "(comma-separated; default 0: the models are fixed)")
      ->delimiter(',')
      ->check(CLI::Range(0, 1000));
  sub->add_option("--prior", command->prior,
                  "with --against: prior weights of the models, the scenario first (comma-separated, e.g. 1,3; "
                  "default equal)")
      ->delimiter(',');
  sub->add_option("-o,--output", command->output, "output folder (overrides [output] folder)");
  sub->add_flag("--quiet", command->quiet, "print nothing but errors");
  add_set_option(sub, command->set);
  sub->callback([command] {
    CompareCommand c = *command;
    c.show_progress = !c.quiet && ProgressBar::terminal_allows();
    run_compare_command(c, std::cout, std::cerr);
  });
}

}  // namespace trapwork
