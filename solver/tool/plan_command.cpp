// `trapwork plan` (see commands.hpp): how many runs an experiment needs for the Jarzynski
// estimate of Delta F, from synthetic experiments resampled from the scenario's work model
// (solver/plan.hpp); optionally one synthetic data set to rehearse `trapwork compare` on.
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <iostream>
#include <memory>

#include "solver/errors.hpp"
#include "solver/plan.hpp"
#include "solver/tool/commands.hpp"
#include "solver/scenario/plot.hpp"
#include "solver/scenario/machine.hpp"
#include "solver/scenario/progress.hpp"
#include "solver/scenario/work_output.hpp"

namespace trapwork {

namespace {

namespace fs = std::filesystem;

// synthetic_work.csv: the data layout `trapwork compare` reads (solver/scenario/data_files.hpp), in h*kHz.
void write_synthetic(const fs::path& file, const Scenario& s, const std::vector<double>& work, double sigma,
                     std::uint64_t seed) {
  const double per_h_kHz = si::planck_h * 1e3 / s.units.energy_J();  // internal energy of 1 h*kHz
  write_file_atomically(file, [&](std::ostream& o) {
    o << "work_h_kHz\n"
      << "# INVENTED synthetic data, not a measurement: " << work.size() << " runs drawn from the work model of "
      << s.file << "\n# by `trapwork plan --synthetic-runs " << work.size() << " --seed " << seed
      << "`: each work value is a line of the model drawn by its probability,\n"
      << "# plus Gaussian noise of standard deviation sigma (the resolution below).\n"
      << "# resolution: " << short_number(sigma / per_h_kHz, 12) << " h*kHz\n";
    // 10 significant digits: far below any resolution worth stating
    for (double w : work) o << short_number(w / per_h_kHz, 10) << '\n';
  });
}

std::string sigma_text(const Display& d, double sigma) {
  return short_number(d.energy(sigma), 4) + " " + d.e;
}

}  // namespace

PlanOutcome run_plan_command(const PlanCommand& command, std::ostream& out, std::ostream& progress) {
  Scenario scenario = load_scenario(command.scenario);
  if (!command.output.empty()) scenario.output_folder = command.output;
  std::vector<double> resolutions;
  for (const auto& text : command.resolutions) resolutions.push_back(energy_option(scenario, "--resolution", text));
  if (resolutions.empty()) resolutions.push_back(0);
  if (command.runs.empty()) throw InputError("--runs", "", "at least one number of runs");
  for (int n : command.runs)
    if (n < 1) throw InputError("--runs", std::to_string(n), "numbers of runs >= 1");
  if (command.target_kT && !(*command.target_kT > 0 && std::isfinite(*command.target_kT)))
    throw InputError("--target", std::to_string(*command.target_kT), "a target precision > 0 (kT)");

  // Cost before commitment (solver/cost.hpp): one experiment's samples in memory at a time,
  // experiments x runs x resolutions draws (the --target search is not counted: it stops at
  // 2^20 runs).
  double largest_runs = command.synthetic_runs, draws = 0;
  for (int n : command.runs) {
    largest_runs = std::max(largest_runs, double(n));
    draws += double(n) * double(command.experiments) * double(resolutions.size());
  }
  const CostEstimate cost = plan_cost(largest_runs, draws, 1000);
  check_memory(cost, available_memory_bytes(), "--runs");
  const bool long_plan = estimated_seconds(cost.operations) > long_run_seconds;
  if (long_plan && !command.quiet)
    progress << "trapwork: plan " << cost_text(cost) << " (" << short_number(draws, 3)
             << " synthetic runs; lower --runs or --experiments for less)\n"
             << std::flush;

  if (!scenario.work || !scenario.work->request.initial.is_gibbs())
    throw InputError("initial", scenario.work ? scenario.work->initial_given : "",
                     "a thermal initial state ([initial] temperature or mean_phonons): the Jarzynski estimate "
                     "needs beta = 1/kT",
                     "", scenario.file);
  OutputRun output(scenario.output_folder,
                   {"plan.csv", "plan_summary.json", "plan.png", "plan.svg", "synthetic_work.csv"},
                   scenario_inputs(scenario), "trapwork plan " + scenario.file);
  const ScenarioWork work = model_work(scenario, progress, command.show_progress);
  const WorkRun run = work.run(scenario);
  const WorkDistribution& dist = run.result.distribution;
  if (!std::isfinite(dist.beta))
    throw InputError("initial", scenario.work ? scenario.work->initial_given : "",
                     "a thermal initial state ([initial] temperature or mean_phonons): the Jarzynski estimate "
                     "needs beta = 1/kT",
                     "", scenario.file);
  PlanOptions options;
  options.beta = dist.beta;
  options.experiments = command.experiments;
  options.seed = command.seed;
  options.correct_resolution = command.correct_resolution;
  options.model_free_energy = dist.free_energy_change;

  PlanOutcome outcome;
  outcome.table = estimator_table(dist.lines, command.runs, resolutions, options);
  if (command.target_kT)
    for (double sigma : resolutions) {
      try {
        outcome.needed.push_back(runs_needed(dist.lines, *command.target_kT, sigma, options));
        outcome.refusals.emplace_back();
      } catch (const PhysicsError& e) {
        outcome.needed.push_back(std::nullopt);
        outcome.refusals.emplace_back(e.what());
      }
    }

  // Files, everything assembled first.
  const Display d = display(scenario);
  CsvTable table;
  table.columns = {{"resolution" + d.e_col, {}}, {"runs", {}},          {"experiments", {}},
                   {"true_kT", {}},              {"mean_kT", {}},       {"bias_kT", {}},
                   {"bias_error_kT", {}},        {"spread_kT", {}},     {"rms_error_kT", {}},
                   {"resolution_bias_kT", {}},   {"delta_method_bias_kT", {}}};
  for (const auto& e : outcome.table) {
    const std::vector<double> v = {d.energy(e.resolution), double(e.runs),   double(e.experiments),
                                   e.true_kT,              e.mean_kT,        e.bias_kT,
                                   e.bias_error_kT,        e.spread_kT,      e.rms_error_kT,
                                   e.resolution_bias_kT,   e.delta_method_bias_kT};
    for (std::size_t c = 0; c < v.size(); ++c) table.columns[c].values.push_back(v[c]);
  }
  table.comments = {"Jarzynski estimate beta Delta F = -ln mean exp(-beta W) from N runs, over synthetic experiments "
                    "resampled from the model of " + scenario.file + " (`trapwork plan`, seed " +
                        std::to_string(command.seed) + ")",
                    "free energies in kT (kT = " + short_number(d.energy(1 / dist.beta), 5) + " " + d.e +
                        "); bias = mean - true; spread = standard deviation of the estimate",
                    "delta_method_bias: var(X)/(2 N <X>^2) + resolution_bias, X = exp(-beta (W + noise))" +
                        std::string(command.correct_resolution ? "; the resolution bias is corrected" : "")};

  SweepFigure figure;
  figure.title = "Jarzynski estimate of #gDF from N runs (" + std::to_string(command.experiments) +
                 " synthetic experiments per N)";
  figure.x_label = "runs N";
  figure.y_label = "estimate - true #gb#gDF (kT)";
  figure.log_x = true;
  const int n_lo = *std::min_element(command.runs.begin(), command.runs.end());
  const int n_hi = *std::max_element(command.runs.begin(), command.runs.end());
  for (double sigma : resolutions) {
    SweepPoints p{"bias +- spread, resolution " + sigma_text(d, sigma), {}, {}, {}};
    for (const auto& e : outcome.table)
      if (e.resolution == sigma) {
        p.x.push_back(e.runs);
        p.y.push_back(e.bias_kT);
        p.spread.push_back(e.spread_kT);
      }
    figure.points.push_back(p);
    SweepCurve c{"delta method, resolution " + sigma_text(d, sigma), {}, {}};
    for (int i = 0; i <= 60; ++i) {
      const double n = n_lo * std::pow(double(n_hi) / n_lo, i / 60.0);
      const int runs = std::max(1, int(std::lround(n)));
      if (!c.x.empty() && runs == c.x.back()) continue;
      c.x.push_back(runs);
      c.y.push_back(delta_method_bias_kT(dist.lines, runs, dist.beta, sigma, command.correct_resolution));
    }
    figure.curves.push_back(c);
  }
  if (command.target_kT)  // the spread (and the rms error) must come down to this line
    figure.curves.push_back({"target rms error " + short_number(*command.target_kT, 3) + " kT",
                             {double(n_lo), double(n_hi)},
                             {*command.target_kT, *command.target_kT}});

  using json = nlohmann::ordered_json;
  json needed = json::array();
  for (std::size_t i = 0; i < outcome.needed.size(); ++i) {
    json row = {{"resolution", d.energy(resolutions[i])}};
    if (outcome.needed[i]) {
      row["runs"] = outcome.needed[i]->runs;
      row["rms_error_kT"] = outcome.needed[i]->at.rms_error_kT;
      row["evaluations"] = outcome.needed[i]->evaluations;
    } else {
      row["runs"] = nullptr;
      row["reason"] = outcome.refusals[i];
    }
    needed.push_back(row);
  }
  const json summary = {{"command", "plan"},
                        {"scenario", scenario.file},
                        {"energy_unit", d.e},
                        {"kT", d.energy(1 / dist.beta)},
                        {"true_beta_delta_f", outcome.table.front().true_kT},
                        {"experiments", command.experiments},
                        {"seed", command.seed},
                        {"correct_resolution", command.correct_resolution},
                        {"target_kT", command.target_kT ? json(*command.target_kT) : json(nullptr)},
                        {"runs_needed", needed}};

  const fs::path folder = output.staging();
  write_file_atomically(folder / "plan.csv", [&](std::ostream& o) { write_csv(o, table); });
  write_file_atomically(folder / "plan_summary.json", [&](std::ostream& o) { o << summary.dump(2) << '\n'; });
  outcome.files = {folder / "plan.csv", folder / "plan_summary.json"};
  for (const auto& p : plot_sweep(folder / "plan", figure)) outcome.files.push_back(p);
  if (command.synthetic_runs > 0) {
    std::mt19937_64 engine(command.seed);
    const auto samples = sample_work(dist.lines, command.synthetic_runs, resolutions.front(), engine);
    write_synthetic(folder / "synthetic_work.csv", scenario, samples, resolutions.front(), command.seed);
    outcome.files.push_back(folder / "synthetic_work.csv");
  }
  outcome.files = output.commit(outcome.files);
  if (command.quiet) return outcome;

  print_scenario_header(out, "plan", scenario);
  print_row(out, "model", "beta Delta F = " + short_number(outcome.table.front().true_kT, 6) + " kT, kT = " +
                              short_number(d.energy(1 / dist.beta), 5) + " " + d.e + ", " +
                              std::to_string(dist.lines.size()) + " work lines");
  print_row(out, "method", std::to_string(command.experiments) + " synthetic experiments per N (seed " +
                               std::to_string(command.seed) + ")" +
                               (command.correct_resolution ? ", resolution bias corrected" : ""));
  if (long_plan) print_row(out, "cost", cost_text(cost) + " (estimated before the experiments)");
  char line[240];
  std::snprintf(line, sizeof line, "\n  %14s %8s %11s %11s %11s %11s %13s\n", ("sigma [" + d.e + "]").c_str(), "N",
                "bias [kT]", "+- [kT]", "spread [kT]", "rms [kT]", "delta m. [kT]");
  out << line;
  for (const auto& e : outcome.table) {
    std::snprintf(line, sizeof line, "  %14s %8d %11s %11s %11s %11s %13s\n", short_number(d.energy(e.resolution), 4).c_str(),
                  e.runs, short_number(e.bias_kT, 3).c_str(), short_number(e.bias_error_kT, 2).c_str(),
                  short_number(e.spread_kT, 3).c_str(), short_number(e.rms_error_kT, 3).c_str(),
                  short_number(e.delta_method_bias_kT, 3).c_str());
    out << line;
  }
  if (command.target_kT) {
    out << "\n  runs needed for an rms error of " << short_number(*command.target_kT, 3) << " kT\n";
    for (std::size_t i = 0; i < outcome.needed.size(); ++i)
      print_row(out, sigma_text(d, resolutions[i]),
                outcome.needed[i] ? "N = " + std::to_string(outcome.needed[i]->runs) + " (rms " +
                                        short_number(outcome.needed[i]->at.rms_error_kT, 3) + " kT, to about " +
                                        short_number(100 / std::sqrt(2.0 * command.experiments), 2) + "%)"
                                  : "not reachable: " + outcome.refusals[i]);
  }
  out << '\n';
  for (const auto& f : outcome.files) out << "wrote " << f.string() << '\n';
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
  sub->add_option("-o,--output", command->output, "output folder (overrides [output] folder)");
  sub->add_flag("--quiet", command->quiet, "print nothing but errors");
  sub->callback([command] {
    PlanCommand c = *command;
    c.show_progress = !c.quiet && ProgressBar::terminal_allows();
    run_plan_command(c, std::cout, std::cerr);
  });
}

}  // namespace trapwork
