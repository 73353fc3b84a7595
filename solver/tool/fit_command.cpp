// `trapwork fit` (see commands.hpp): the command line of fit_task (solver/scenario/fit_task.cpp).
#include <iostream>
#include <memory>
#include <optional>

#include "solver/tool/commands.hpp"
#include "solver/scenario/data_files.hpp"
#include "solver/scenario/output.hpp"
#include "solver/scenario/scenario_edit.hpp"
#include "solver/scenario/tasks.hpp"

namespace trapwork {

namespace fs = std::filesystem;

FitResultFiles run_fit_command(const FitCommand& command, std::ostream& out) {
  (void)read_transition_lines(command.data);  // its errors come before those of the start scenario
  FitSettings settings;
  settings.data = command.data;
  settings.start_name =
      command.start.empty() ? "--mass " + command.mass + " --frequency " + command.frequency : command.start;
  settings.start_text = !command.start.empty() ? set_scenario_text(command.start, command.set)
                        : command.set.empty()
                            ? fit_start_text(command.mass, command.frequency)
                            : scenario_text_with_values(fit_start_text(command.mass, command.frequency),
                                                        settings.start_name, assignments_json(command.set));
  settings.invocation = command_line();
  settings.changed_values = command.set;
  settings.terms = command.terms;
  const fs::path folder =
      command.output.empty() ? fs::path(fs::path(command.data).stem().string() + "-fit") : fs::path(command.output);
  settings.fitted_name = (folder / "fitted.toml").string();
  std::optional<OutputRun> output;
  const FitOutcome outcome = fit_task(settings, [&](const Scenario& start) {
    std::vector<OutputRun::Input> inputs;  // no start file with --mass and --frequency
    if (!command.start.empty()) inputs = scenario_inputs(start);
    inputs.push_back({command.data, "the data file"});
    output.emplace(folder, fit_output_names(), inputs, "trapwork fit " + command.data);
  });
  const auto written = output->commit(write_task_outputs(output->staging(), outcome));
  const FitResultFiles files{written[0], written[1], written[2]};
  if (command.quiet) return files;
  print_task_report(out, outcome);
  out << "\nwrote " << files.scenario.string() << " (run it with `trapwork work` or `trapwork spectrum`)\n"
      << "wrote " << files.lines.string() << "\nwrote " << files.summary.string() << '\n';
  return files;
}

void add_fit_command(CLI::App& app) {
  auto command = std::make_shared<FitCommand>();
  CLI::App* sub = app.add_subcommand(
      "fit",
      "Fits the coefficients of a polynomial trap (frequency, cubic, quartic, ...) to measured transition "
      "frequencies (columns lower, upper, frequency_<unit>, uncertainty_<unit>, optional linear_coefficient_<unit>: F of V + F x); prints "
      "them with uncertainties and correlations, and writes fitted.toml (the start scenario with the fitted "
      "trap), fit_lines.csv and fit_summary.json");
  sub->add_option("data", command->data, "transition lines file (CSV or whitespace columns, '#' comments)")
      ->required();
  auto* start = sub->add_option("--start", command->start,
                                "start scenario (TOML) with one polynomial or harmonic term; its other tables "
                                "(protocol, initial, ...) are kept in fitted.toml; \"default\": the built-in one");
  auto* mass = sub->add_option("--mass", command->mass, "particle mass, e.g. \"40 u\" (instead of --start)");
  auto* frequency = sub->add_option("--frequency", command->frequency,
                                    "start trap frequency, e.g. \"1 MHz\" (instead of --start)");
  mass->excludes(start);
  frequency->excludes(start);
  sub->add_option("--terms", command->terms,
                  "coefficients to fit, comma-separated: frequency (or quadratic), cubic, quartic, quintic, sextic, "
                  "septic, octic; the others stay at their start values")
      ->capture_default_str();
  sub->add_option("-o,--output", command->output, "output folder (default: <data file stem>-fit)");
  sub->add_flag("--quiet", command->quiet, "print nothing but errors");
  add_set_option(sub, command->set);
  sub->callback([command] { run_fit_command(*command, std::cout); });
}

}  // namespace trapwork
