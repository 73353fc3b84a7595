// `trapwork plan` as a task (see tasks.hpp): how many runs an experiment needs for the Jarzynski
// estimate of Delta F, from synthetic experiments resampled from the scenario's work model
// (solver/plan.hpp); optionally one synthetic data set to rehearse `trapwork compare` on.
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>
#include <random>
#include <sstream>

#include "solver/errors.hpp"
#include "solver/plan.hpp"
#include "solver/scenario/machine.hpp"
#include "solver/scenario/plot.hpp"
#include "solver/scenario/tasks.hpp"
#include "solver/scenario/work_output.hpp"

namespace trapwork {

namespace {

namespace fs = std::filesystem;

// synthetic_work.csv: the data layout `trapwork compare` reads (solver/scenario/data_files.hpp), in h*kHz.
std::string synthetic_text(const Scenario& s, const std::vector<double>& work, double sigma, std::uint64_t seed) {
  const double per_h_kHz = si::planck_h * 1e3 / s.units.energy_J();  // internal energy of 1 h*kHz
  std::ostringstream o;
  o << "work_h_kHz\n"
    << "# INVENTED synthetic data, not a measurement: " << work.size() << " runs drawn from the work model of "
    << s.file << "\n# by `trapwork plan --synthetic-runs " << work.size() << " --seed " << seed
    << "`: each work value is a line of the model drawn by its probability,\n"
    << "# plus Gaussian noise of standard deviation sigma (the resolution below).\n"
    << "# resolution: " << short_number(sigma / per_h_kHz, 12) << " h*kHz\n";
  // 10 significant digits: far below any resolution worth stating; exact values (resolution 0) are
  // matched to their lines within their written digits by `trapwork compare`
  for (double w : work) o << short_number(w / per_h_kHz, 10) << '\n';
  return o.str();
}

std::string sigma_text(const Display& d, double sigma) {
  return short_number(d.energy(sigma), 4) + " " + d.e;
}

}  // namespace

std::vector<std::string> plan_output_names() {
  return {"plan.csv",          "plan_summary.json", "plan.png", "plan.svg", "synthetic_work.csv",
          "plan_decision.csv", "plan_decision.png", "plan_decision.svg"};
}

PlanTaskOutcome plan_task(const Scenario& scenario, const PlanSettings& settings, const TaskHooks& hooks,
                          const std::function<void()>& checked) {
  std::vector<double> resolutions;
  for (const auto& text : settings.resolutions) resolutions.push_back(energy_option(scenario, "--resolution", text));
  if (resolutions.empty()) resolutions.push_back(0);
  if (settings.against) {  // how many runs tell the scenario from settings.against
    if (resolutions.size() > 1)
      throw InputError("--resolution", std::to_string(resolutions.size()) + " values", "one resolution with --against");
    if (settings.synthetic_runs > 0)
      throw InputError("--synthetic-runs", std::to_string(settings.synthetic_runs), "0 with --against");
    if (checked) checked();
    ScenarioWork work = model_work(scenario, hooks, "plan");
    DecisionPlanSettings d;
    d.against = *settings.against;
    d.runs.assign(settings.runs.begin(), settings.runs.end());
    d.resolution = resolutions.front();
    d.confidence = settings.decision_confidence;
    d.power = settings.power;
    d.experiments = settings.experiments;
    d.seed = settings.seed;
    std::optional<DecisionPlanOutcome> decision = decision_plan(work.run(scenario), d, hooks);
    return {scenario, settings, std::move(resolutions), std::move(work), {}, {}, {}, {}, {}, false,
            std::move(decision)};
  }
  if (settings.runs.empty()) throw InputError("--runs", "", "at least one number of runs");
  for (int n : settings.runs)
    if (n < 1) throw InputError("--runs", std::to_string(n), "numbers of runs >= 1");
  if (settings.target_kT && !(*settings.target_kT > 0 && std::isfinite(*settings.target_kT)))
    throw InputError("--target", std::to_string(*settings.target_kT), "a target precision > 0 (kT)");

  // Cost before commitment (solver/cost.hpp): one experiment's samples in memory at a time,
  // experiments x runs x resolutions draws (the --target search is not counted: it stops at
  // 2^20 runs).
  double largest_runs = settings.synthetic_runs, draws = 0;
  for (int n : settings.runs) {
    largest_runs = std::max(largest_runs, double(n));
    draws += double(n) * double(settings.experiments) * double(resolutions.size());
  }
  const CostEstimate cost = plan_cost(largest_runs, draws, 1000);
  check_memory(cost, available_memory_bytes(), "--runs");
  const bool long_plan = estimated_seconds(cost.operations) > long_run_seconds;
  if (long_plan && hooks.notice)
    hooks.notice("plan " + cost_text(cost) + " (" + short_number(draws, 3) +
                 " synthetic runs; lower --runs or --experiments for less)");

  const std::string thermal = "a thermal initial state ([initial] temperature or mean_phonons): the Jarzynski "
                              "estimate needs beta = 1/kT";
  if (!scenario.work || !scenario.work->request.initial.is_gibbs())
    throw InputError("initial", scenario.work ? scenario.work->initial_given : "", thermal, "", scenario.file);
  if (checked) checked();
  ScenarioWork work = model_work(scenario, hooks, "plan");
  const WorkDistribution& dist = work.result().distribution;
  if (!std::isfinite(dist.beta))
    throw InputError("initial", scenario.work ? scenario.work->initial_given : "", thermal, "", scenario.file);
  PlanOptions options;
  options.beta = dist.beta;
  options.experiments = settings.experiments;
  options.seed = settings.seed;
  options.correct_resolution = settings.correct_resolution;
  options.model_free_energy = dist.free_energy_change;

  std::vector<EstimatorStatistics> table = estimator_table(dist.lines, settings.runs, resolutions, options);
  std::vector<std::optional<RunsNeeded>> needed;
  std::vector<std::string> refusals;
  if (settings.target_kT)
    for (double sigma : resolutions) {
      try {
        needed.push_back(runs_needed(dist.lines, *settings.target_kT, sigma, options));
        refusals.emplace_back();
      } catch (const PhysicsError& e) {
        needed.push_back(std::nullopt);
        refusals.emplace_back(e.what());
      }
    }
  std::vector<double> synthetic;
  if (settings.synthetic_runs > 0) {
    std::mt19937_64 engine(settings.seed);
    synthetic = sample_work(dist.lines, settings.synthetic_runs, resolutions.front(), engine);
  }
  return {scenario,        settings,         std::move(resolutions), std::move(work), std::move(table),
          std::move(needed), std::move(refusals), std::move(synthetic), cost,        long_plan, std::nullopt};
}

std::vector<NamedTable> task_tables(const PlanTaskOutcome& o) {
  if (o.decision) return {{"plan_decision.csv", decision_plan_table(*o.decision)}};
  const Display d = display(o.scenario);
  const WorkDistribution& dist = o.work.result().distribution;
  CsvTable table;
  table.columns = {{"resolution" + d.e_col, {}}, {"runs", {}},          {"experiments", {}},
                   {"true_kT", {}},              {"mean_kT", {}},       {"bias_kT", {}},
                   {"bias_error_kT", {}},        {"spread_kT", {}},     {"rms_error_kT", {}},
                   {"resolution_bias_kT", {}},   {"delta_method_bias_kT", {}}};
  for (const auto& e : o.table) {
    const std::vector<double> v = {d.energy(e.resolution), double(e.runs),   double(e.experiments),
                                   e.true_kT,              e.mean_kT,        e.bias_kT,
                                   e.bias_error_kT,        e.spread_kT,      e.rms_error_kT,
                                   e.resolution_bias_kT,   e.delta_method_bias_kT};
    for (std::size_t c = 0; c < v.size(); ++c) table.columns[c].values.push_back(v[c]);
  }
  table.comments = {"Jarzynski estimate beta Delta F = -ln mean exp(-beta W) from N runs, over synthetic experiments "
                    "resampled from the model of " + o.scenario.file + " (`trapwork plan`, seed " +
                        std::to_string(o.settings.seed) + ")",
                    "free energies in kT (kT = " + short_number(d.energy(1 / dist.beta), 5) + " " + d.e +
                        "); bias = mean - true; spread = standard deviation of the estimate",
                    "delta_method_bias: var(X)/(2 N <X>^2) + resolution_bias, X = exp(-beta (W + noise))" +
                        std::string(o.settings.correct_resolution ? "; the resolution bias is corrected" : "")};
  return {{"plan.csv", table}};
}

nlohmann::ordered_json task_summary(const PlanTaskOutcome& o) {
  using json = nlohmann::ordered_json;
  if (o.decision)
    return with_provenance({{"command", "plan"}, {"scenario", o.scenario.file}, {"decision", decision_plan_json(*o.decision)}},
                           o.scenario);
  const Display d = display(o.scenario);
  const WorkDistribution& dist = o.work.result().distribution;
  json needed = json::array();
  for (std::size_t i = 0; i < o.needed.size(); ++i) {
    json row = {{"resolution", d.energy(o.resolutions[i])}};
    if (o.needed[i]) {
      row["runs"] = o.needed[i]->runs;
      row["rms_error_kT"] = o.needed[i]->at.rms_error_kT;
      row["evaluations"] = o.needed[i]->evaluations;
    } else {
      row["runs"] = nullptr;
      row["reason"] = o.refusals[i];
    }
    needed.push_back(row);
  }
  return with_provenance({{"command", "plan"},
          {"scenario", o.scenario.file},
          {"energy_unit", d.e},
          {"kT", d.energy(1 / dist.beta)},
          {"true_beta_delta_f", o.table.front().true_kT},
          {"experiments", o.settings.experiments},
          {"seed", o.settings.seed},
          {"correct_resolution", o.settings.correct_resolution},
          {"target_kT", o.settings.target_kT ? json(*o.settings.target_kT) : json(nullptr)},
          {"runs_needed", needed}}, o.scenario);
}

std::vector<NamedText> task_texts(const PlanTaskOutcome& o) {
  if (o.settings.synthetic_runs <= 0) return {};
  return {{"synthetic_work.csv", synthetic_text(o.scenario, o.synthetic, o.resolutions.front(), o.settings.seed)}};
}

// plan.png: the rms error of the estimate against N on log-log axes, from the synthetic
// experiments (points) and the delta method (curve), the target as a horizontal line and the N
// found for it marked, all inside the axis range.
std::vector<NamedFigure> task_figures(const PlanTaskOutcome& o) {
  if (o.decision) return {{"plan_decision", decision_plan_figure(*o.decision)}};
  const Display d = display(o.scenario);
  const WorkDistribution& dist = o.work.result().distribution;
  const PlanSettings& settings = o.settings;
  SweepFigure figure;
  figure.title = "rms error of the Jarzynski #gDF from N runs (" + std::to_string(settings.experiments) +
                 " synthetic experiments each)";
  figure.x_label = "runs N";
  figure.y_label = "rms error of #gb#gDF (kT)";
  figure.log_x = true;
  figure.log_y = true;
  double n_lo = *std::min_element(settings.runs.begin(), settings.runs.end());
  double n_hi = *std::max_element(settings.runs.begin(), settings.runs.end());
  for (const auto& n : o.needed)
    if (n) {
      n_lo = std::min(n_lo, double(n->runs));
      n_hi = std::max(n_hi, double(n->runs));
    }
  double y_lo = std::numeric_limits<double>::infinity(), y_hi = 0;  // positive values drawn
  for (double sigma : o.resolutions) {
    SweepPoints p{"rms error of the synthetic experiments, resolution " + sigma_text(d, sigma), {}, {}, {}};
    for (const auto& e : o.table)
      if (e.resolution == sigma) {
        p.x.push_back(e.runs);
        p.y.push_back(e.rms_error_kT);
        if (e.rms_error_kT > 0) y_lo = std::min(y_lo, e.rms_error_kT), y_hi = std::max(y_hi, e.rms_error_kT);
      }
    figure.points.push_back(p);
    SweepCurve c{"delta method, resolution " + sigma_text(d, sigma), {}, {}};
    for (int i = 0; i <= 60; ++i) {
      const int runs = std::max(1, int(std::lround(n_lo * std::pow(n_hi / n_lo, i / 60.0))));
      if (!c.x.empty() && runs == c.x.back()) continue;
      c.x.push_back(runs);
      c.y.push_back(delta_method_rms_kT(dist.lines, runs, dist.beta, sigma, settings.correct_resolution));
      if (c.y.back() > 0) y_lo = std::min(y_lo, c.y.back()), y_hi = std::max(y_hi, c.y.back());
    }
    figure.curves.push_back(c);
  }
  if (settings.target_kT) {  // the rms error must come down to this line
    figure.curves.push_back({"target rms error " + short_number(*settings.target_kT, 3) + " kT",
                             {n_lo, n_hi}, {*settings.target_kT, *settings.target_kT}});
    y_lo = std::min(y_lo, *settings.target_kT);
    y_hi = std::max(y_hi, *settings.target_kT);
    for (std::size_t i = 0; i < o.needed.size(); ++i) {
      if (!o.needed[i]) continue;
      const double n = o.needed[i]->runs;
      figure.points.push_back({"needed: N = " + std::to_string(o.needed[i]->runs) + ", resolution " +
                                   sigma_text(d, o.resolutions[i]),
                               {n}, {o.needed[i]->at.rms_error_kT}, {}});
      figure.curves.push_back({"", {n, n}, {y_lo, y_hi}});  // a vertical line at N across the data
    }
  }
  return {{"plan", figure}};
}

std::vector<fs::path> write_task_outputs(const fs::path& folder, const PlanTaskOutcome& o) {
  return write_outputs(folder, task_tables(o), "plan_summary.json", task_summary(o), task_texts(o), task_figures(o));
}

void print_task_report(std::ostream& out, const PlanTaskOutcome& o) {
  const Display d = display(o.scenario);
  const WorkDistribution& dist = o.work.result().distribution;
  const PlanSettings& settings = o.settings;
  print_scenario_header(out, "plan", o.scenario);
  if (o.decision) {
    for (const auto& w : work_warnings(o.work.run(o.scenario))) out << "  warning: model: " << w << '\n';
    print_decision_plan(out, *o.decision);
    return;
  }
  print_row(out, "model", "beta Delta F = " + short_number(o.table.front().true_kT, 6) + " kT, kT = " +
                              short_number(d.energy(1 / dist.beta), 5) + " " + d.e + ", " +
                              std::to_string(dist.lines.size()) + " work lines");
  print_row(out, "method", std::to_string(settings.experiments) + " synthetic experiments per N (seed " +
                               std::to_string(settings.seed) + ")" +
                               (settings.correct_resolution ? ", resolution bias corrected" : ""));
  if (o.long_plan) print_row(out, "cost", cost_text(o.cost) + " (estimated before the experiments)");
  char line[240];
  std::snprintf(line, sizeof line, "\n  %14s %8s %11s %11s %11s %11s %13s\n", ("sigma [" + d.e + "]").c_str(), "N",
                "bias [kT]", "+- [kT]", "spread [kT]", "rms [kT]", "delta m. [kT]");
  out << line;
  for (const auto& e : o.table) {
    std::snprintf(line, sizeof line, "  %14s %8d %11s %11s %11s %11s %13s\n", short_number(d.energy(e.resolution), 4).c_str(),
                  e.runs, short_number(e.bias_kT, 3).c_str(), short_number(e.bias_error_kT, 2).c_str(),
                  short_number(e.spread_kT, 3).c_str(), short_number(e.rms_error_kT, 3).c_str(),
                  short_number(e.delta_method_bias_kT, 3).c_str());
    out << line;
  }
  if (settings.target_kT) {
    out << "\n  runs needed for an rms error of " << short_number(*settings.target_kT, 3) << " kT\n";
    for (std::size_t i = 0; i < o.needed.size(); ++i)
      print_row(out, sigma_text(d, o.resolutions[i]),
                o.needed[i] ? "N = " + std::to_string(o.needed[i]->runs) + " (rms " +
                                  short_number(o.needed[i]->at.rms_error_kT, 3) + " kT, to about " +
                                  short_number(100 / std::sqrt(2.0 * settings.experiments), 2) + "%)"
                            : "not reachable: " + o.refusals[i]);
  }
}

}  // namespace trapwork
