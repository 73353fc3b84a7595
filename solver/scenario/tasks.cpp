// The task layer (see tasks.hpp): the shared writers, spectrum and work.
#include "solver/scenario/tasks.hpp"

#include <cmath>

#include "solver/errors.hpp"
#include "solver/scenario/machine.hpp"

namespace trapwork {

namespace fs = std::filesystem;

std::vector<fs::path> write_figure(const fs::path& folder, const NamedFigure& figure) {
  const fs::path stem = folder / figure.stem;
  return std::visit(
      [&](const auto& f) -> std::vector<fs::path> {
        using F = std::decay_t<decltype(f)>;
        if constexpr (std::is_same_v<F, LevelsFigure>) return plot_levels(stem, f);
        else if constexpr (std::is_same_v<F, WorkFigure>) return plot_work(stem, f);
        else if constexpr (std::is_same_v<F, SweepFigure>) return plot_sweep(stem, f);
        else return plot_comparison(stem, f);
      },
      figure.figure);
}

std::vector<fs::path> write_outputs(const fs::path& folder, const std::vector<NamedTable>& tables,
                                    const std::string& summary_file, const nlohmann::ordered_json& summary,
                                    const std::vector<NamedText>& texts, const std::vector<NamedFigure>& figures) {
  fs::create_directories(folder);
  const std::string summary_text = summary_file.empty() ? std::string() : summary.dump(2) + "\n";
  std::vector<fs::path> files;
  for (const auto& t : tables) {
    write_file_atomically(folder / t.file, [&](std::ostream& out) { write_csv(out, t.table); });
    files.push_back(folder / t.file);
  }
  if (!summary_file.empty()) {
    write_file_atomically(folder / summary_file, [&](std::ostream& out) { out << summary_text; });
    files.push_back(folder / summary_file);
  }
  for (const auto& f : figures)
    for (const auto& p : write_figure(folder, f)) files.push_back(p);
  for (const auto& t : texts) {
    write_file_atomically(folder / t.file, [&](std::ostream& out) { out << t.text; });
    files.push_back(folder / t.file);
  }
  return files;
}

double energy_option(const Scenario& s, const std::string& key, const std::string& text) {
  const Quantity q = parse_quantity(text);
  if (q.plain) throw InputError(key, text, "an energy with its unit, e.g. \"40 h*kHz\"");
  const double v = s.units.to_internal(q, Dimension::energy(), key, text);
  if (!(v >= 0) || !std::isfinite(v)) throw InputError(key, text, "an energy >= 0");
  return v;
}

void watch_work(WorkRequest& request, const TaskHooks& hooks) {
  if (!(request.spectrum.options.memory_limit > 0)) request.spectrum.options.memory_limit = available_memory_bytes();
  request.progress = hooks.progress;
  request.stage = hooks.stage;
  const int threads = request.threads;
  if (hooks.notice)
    request.on_estimate = [notice = hooks.notice, threads](const CostEstimate& e) {
      if (estimated_seconds(e.operations, threads) > long_run_seconds) notice(cost_text(e, threads) + " (" + e.what + ")");
    };
}

namespace {

// Says which scenario the physics could not handle, in its lab units.
template <class F>
auto naming_scenario(const std::string& where, const Scenario& scenario, F&& f) {
  try {
    return f();
  } catch (const NonFinitePotentialError& e) {
    throw PhysicsError(where + ": " + e.describe(scenario.spectrum.message_units));
  } catch (const PhysicsError& e) {
    throw PhysicsError(where + ": " + e.what());
  }
}

// The hooks end with the task: the outcome keeps no callback of its caller.
void drop_hooks(WorkRequest& request) {
  request.progress = nullptr;
  request.stage = nullptr;
  request.on_estimate = nullptr;
}

}  // namespace

ScenarioWork model_work(const Scenario& scenario, const TaskHooks& hooks) {
  WorkRequest request = work_request(scenario);
  request.reverse_run = false;  // only the forward distribution is compared; the reverse run serves Crooks
  if (hooks.stage) hooks.stage("propagating");
  watch_work(request, hooks);
  try {
    ScenarioWork w = compute_work(scenario, request);
    drop_hooks(w.request);
    return w;
  } catch (const PhysicsError& e) {
    throw PhysicsError(scenario.file + ": " + e.what());
  }
}

// ---- spectrum ------------------------------------------------------------------------------

SpectrumOutcome spectrum_task(Scenario scenario, std::optional<int> levels, const TaskHooks& hooks) {
  if (levels) scenario.spectrum.options.levels = *levels;
  scenario.spectrum.options.memory_limit = available_memory_bytes();  // refused before it allocates
  if (hooks.stage) hooks.stage("spectrum");
  SpectrumOutcome outcome{std::move(scenario), {}};
  try {
    outcome.result = compute_spectrum(outcome.scenario.potential, outcome.scenario.spectrum);
  } catch (const PhysicsError& e) {
    throw PhysicsError(outcome.scenario.file + ": " + e.what());  // say which scenario cannot be used
  }
  if (hooks.progress) hooks.progress(1.0);
  return outcome;
}

std::vector<NamedTable> spectrum_tables(const Scenario& scenario, const SpectrumResult& result) {
  return {{"spectrum.csv", spectrum_table(scenario, result)}, {"states.csv", states_table(scenario, result)}};
}

std::vector<NamedTable> task_tables(const SpectrumOutcome& o) { return spectrum_tables(o.scenario, o.result); }
nlohmann::ordered_json task_summary(const SpectrumOutcome& o) { return spectrum_summary(o.scenario, o.result); }
std::vector<NamedText> task_texts(const SpectrumOutcome&) { return {}; }
std::vector<NamedFigure> task_figures(const SpectrumOutcome&) { return {}; }
std::vector<fs::path> write_task_outputs(const fs::path& folder, const SpectrumOutcome& o) {
  return write_outputs(folder, task_tables(o), "summary.json", task_summary(o), task_texts(o), task_figures(o));
}
std::vector<std::string> spectrum_output_names() { return {"spectrum.csv", "states.csv", "summary.json"}; }
void print_task_report(std::ostream& out, const SpectrumOutcome& o) { print_spectrum_report(out, o.scenario, o.result); }

// ---- work ----------------------------------------------------------------------------------

WorkRun WorkOutcome::run() const {
  const Scenario& used = choice ? choice->scenario : scenario;
  WorkRun r = choice ? choice->work->run(used) : direct->run(used);
  r.tolerance = choice ? &*choice : nullptr;
  return r;
}

WorkOutcome work_task(const Scenario& scenario, std::optional<double> tolerance, double search_budget,
                      const TaskHooks& hooks) {
  WorkRequest request = work_request(scenario);
  WorkOutcome outcome{scenario, std::nullopt, std::nullopt};
  if (tolerance) {
    if (!(*tolerance > 0 && *tolerance < 1))
      throw InputError("--tolerance", short_number(*tolerance), "a bound between 0 and 1 (e.g. 1e-4)");
    if (!(search_budget >= 1))
      throw InputError("--search-budget", short_number(search_budget),
                       "a cost bound >= 1 (in units of the search's first run)");
    if (hooks.stage) hooks.stage("--tolerance search (share of its cost bound)");
    request.progress = hooks.progress;
    outcome.choice = naming_scenario(scenario.file, scenario, [&] {
      return compute_work_to_tolerance(scenario, request, *tolerance, search_budget);
    });
    if (outcome.choice->work) drop_hooks(outcome.choice->work->request);
  } else {
    if (hooks.stage) hooks.stage("propagating");
    watch_work(request, hooks);
    outcome.direct = naming_scenario(scenario.file, scenario, [&] { return compute_work(scenario, request); });
    drop_hooks(outcome.direct->request);
  }
  return outcome;
}

std::vector<NamedTable> task_tables(const WorkOutcome& o) { return work_tables(o.run()); }
nlohmann::ordered_json task_summary(const WorkOutcome& o) { return work_summary(o.run()); }
std::vector<NamedText> task_texts(const WorkOutcome&) { return {}; }
std::vector<NamedFigure> task_figures(const WorkOutcome& o) { return work_figures(o.run()); }
std::vector<fs::path> write_task_outputs(const fs::path& folder, const WorkOutcome& o) {
  return write_outputs(folder, task_tables(o), "summary.json", task_summary(o), task_texts(o), task_figures(o));
}
void print_task_report(std::ostream& out, const WorkOutcome& o) { print_work_report(out, o.run()); }

}  // namespace trapwork
