// The task layer (see tasks.hpp): the shared writers, spectrum and work.
#include "solver/scenario/tasks.hpp"
#include "solver/scenario/noise_output.hpp"

#include <algorithm>
#include <atomic>
#include <cmath>
#include <cstdio>
#include <exception>
#include <memory>
#include <mutex>
#include <system_error>
#include <thread>

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
        else if constexpr (std::is_same_v<F, StackedFigure>) return plot_stack(stem, f);
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
  request.on_estimate = long_run_notice(hooks.notice, request.threads);
  request.on_spectrum_estimate = long_run_notice(hooks.notice);  // one thread per spectrum
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
  request.spectrum.options.interrupt = nullptr;
  request.progress = nullptr;
  request.stage = nullptr;
  request.on_estimate = nullptr;
  request.on_spectrum_estimate = nullptr;
}

// [noise] is applied by `work` alone so far: another command would give the noiseless answer
// under a scenario that asks for noise.
void refuse_noise(const Scenario& scenario, const std::string& command) {
  if (!scenario.noise) return;
  const std::string t = scenario.noise->table();
  throw InputError(t, "a [" + t + "] table",
                   "no [" + t + "] for `trapwork " + command + "`: only `trapwork work` adds noise and damping so far",
                   "run `trapwork work` per point, or remove [" + t + "] for the closed-system " + command, scenario.file);
}

}  // namespace

ScenarioWork model_work(const Scenario& scenario, const TaskHooks& hooks, const std::string& command) {
  refuse_noise(scenario, command);
  WorkRequest request = work_request(scenario);
  request.reverse_run = false;  // only the forward distribution is compared; the reverse run serves Crooks
  request.spectrum.options.interrupt = hooks.interrupt;
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
  scenario.spectrum.options.interrupt = hooks.interrupt;
  scenario.spectrum.options.on_estimate = long_run_notice(hooks.notice);
  if (hooks.stage) hooks.stage("spectrum");
  SpectrumOutcome outcome{std::move(scenario), {}};
  try {
    outcome.result = compute_spectrum(outcome.scenario.potential, outcome.scenario.spectrum);
  } catch (const PhysicsError& e) {
    throw PhysicsError(outcome.scenario.file + ": " + e.what());  // say which scenario cannot be used
  }
  outcome.scenario.spectrum.options.interrupt = nullptr;  // the hooks end with the task
  outcome.scenario.spectrum.options.on_estimate = nullptr;
  if (hooks.progress) hooks.progress(1.0);
  return outcome;
}

std::vector<NamedTable> spectrum_tables(const Scenario& scenario, const SpectrumResult& result) {
  return {{"spectrum.csv", spectrum_table(scenario, result)}, {"states.csv", states_table(scenario, result)}};
}

std::vector<NamedTable> task_tables(const SpectrumOutcome& o) { return spectrum_tables(o.scenario, o.result); }
nlohmann::ordered_json task_summary(const SpectrumOutcome& o) {
  return with_provenance(spectrum_summary(o.scenario, o.result), o.scenario);
}
std::vector<NamedText> task_texts(const SpectrumOutcome&) { return {}; }
std::vector<NamedFigure> task_figures(const SpectrumOutcome& o) {
  return {{"spectrum", spectrum_figure(o.scenario, o.result)}};
}
std::vector<fs::path> write_task_outputs(const fs::path& folder, const SpectrumOutcome& o) {
  return write_outputs(folder, task_tables(o), "summary.json", task_summary(o), task_texts(o), task_figures(o));
}
std::vector<std::string> spectrum_output_names() {
  return {"spectrum.csv", "states.csv", "summary.json", "spectrum.png", "spectrum.svg"};
}
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
  request.spectrum.options.interrupt = hooks.interrupt;
  // With noise, the same transforms in every run (FFTW_ESTIMATE, as sweeps): the noiseless run
  // and each realisation are then the same to the last digit wherever they run (another thread,
  // another MPI rank: NoiseRequest::sharing), and so is a repeated run.
  if (scenario.noise) request.repeatable_transforms = true;
  WorkOutcome outcome{scenario, std::nullopt, std::nullopt, std::nullopt, std::nullopt};
  if (tolerance) {
    if (!(*tolerance > 0 && *tolerance < 1))
      throw InputError("--tolerance", short_number(*tolerance), "a bound between 0 and 1 (e.g. 1e-4)");
    if (!(search_budget >= 1))
      throw InputError("--search-budget", short_number(search_budget),
                       "a cost bound >= 1 (in units of the search's first split-operator run)");
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
  if (scenario.noise) {  // [noise]: its route on the chosen run's grid, frame and steps
    const WorkRun run = outcome.run();
    if (run.walls)
      throw InputError("noise", "", "noise on a trap inside fixed walls; moving walls do not take noise yet", "",
                       scenario.file);
    if (hooks.stage) hooks.stage("noise (Lindblad or realisations)");
    NoiseRequest noise = scenario.noise->request;
    if (tolerance) {  // the statistical (or Lindblad truncation) error of the lines within it too
      noise.line_error_target = *tolerance;
      noise.max_realisations = std::max(noise.max_realisations, noise.realisations);
    }
    outcome.noise = naming_scenario(scenario.file, scenario, [&] {
      return run_noisy_work(run.scenario.potential, run.protocol, run.request, noise, &run.result);
    });
    // A heating rate is applied as white noise of the trap's centre, which heats as f^3; the
    // electric-field noise that heats ions would heat as 1/f (flat spectrum). Where the trap's
    // frequency in the protocol is not the one the rate was measured at, the two differ: say by how much.
    auto frequency_text = [&](double omega) {  // an internal frequency value is angular (units.hpp)
      const ShownUnit u = shown_unit(run, Dimension::frequency(), omega);
      return short_number(omega / u.internal_per_unit, 5) + " " + u.name;
    };
    for (std::size_t k = 0; k < scenario.noise->heating_rate.size(); ++k) {
      if (!scenario.noise->heating_rate[k]) continue;
      const auto [rate, at] = *scenario.noise->heating_rate[k];
      double farthest = at;
      const double tau = run.protocol.duration();
      for (int i = 0; i <= 16; ++i)
        if (const auto h = run.protocol.at(run.scenario.potential, tau * i / 16).harmonic_part())
          if (std::abs(std::log(h->first / at)) > std::abs(std::log(farthest / at))) farthest = h->first;
      if (std::abs(farthest / at - 1) <= 0.01) continue;
      const double per_s = 1 / scenario.units.time_s();
      outcome.noise->warnings.push_back(
          "noise.source[" + std::to_string(k + 1) + "]: the heating rate " + short_number(rate * per_s, 4) +
          " quanta/s measured at " + frequency_text(at) + " is applied as white noise of the centre, which heats as f^3: " +
          short_number(rate * per_s * std::pow(farthest / at, 3), 4) + " quanta/s at the protocol's " +
          frequency_text(farthest) + "; electric-field noise of flat spectrum (the usual source for ions) would give " +
          short_number(rate * per_s * at / farthest, 4) +
          " quanta/s (as 1/f): where that is the source, give its force spectrum (white or psd_file) on a linear "
          "term, e.g. a polynomial term of frequency 0 and parameter = \"push.linear\"");
    }
  }
  return outcome;
}

std::vector<NamedTable> task_tables(const WorkOutcome& o) {
  std::vector<NamedTable> tables = work_tables(o.run());
  if (o.noise) tables.push_back({"noise_lines.csv", noise_lines_table(o.scenario, *o.noise)});
  if (o.uncertainty) tables.push_back({"lines_uncertainty.csv", uncertainty_lines_table(o.scenario, *o.uncertainty)});
  return tables;
}
nlohmann::ordered_json task_summary(const WorkOutcome& o) {
  nlohmann::ordered_json summary = work_summary(o.run());
  if (o.noise) summary["noise"] = noise_summary(o.scenario, *o.noise);
  if (o.uncertainty) summary["calibration_uncertainty"] = uncertainty_summary(o.scenario, *o.uncertainty);
  return with_provenance(summary, o.scenario);
}
std::vector<NamedText> task_texts(const WorkOutcome&) { return {}; }
std::vector<NamedFigure> task_figures(const WorkOutcome& o) {
  const WorkRun run = o.run();
  std::vector<NamedFigure> figures = work_figures(run);
  if (o.noise)  // work.png: the noisy P(W) beside the noiseless one
    for (auto& f : figures)
      if (f.stem == "work") f.figure = noisy_work_figure(run, *o.noise);
  if (o.uncertainty)  // work.png: +-1 sd bars on the strong lines
    for (auto& f : figures)
      if (auto* w = std::get_if<WorkFigure>(&f.figure); w && f.stem == "work")
        add_uncertainty_bars(*w, o.scenario, run.result.distribution, *o.uncertainty);
  return figures;
}
std::vector<fs::path> write_task_outputs(const fs::path& folder, const WorkOutcome& o) {
  return write_outputs(folder, task_tables(o), "summary.json", task_summary(o), task_texts(o), task_figures(o));
}
void print_task_report(std::ostream& out, const WorkOutcome& o) {
  print_work_report(out, o.run());
  if (o.noise) print_noise_report(out, o.scenario, *o.noise);
  if (o.uncertainty) print_uncertainty_report(out, o.scenario, *o.uncertainty);
}

// ---- sweep ---------------------------------------------------------------------------------

SweepOutcome sweep_task(const Scenario& scenario, const SweepOptions& options, const TaskHooks& hooks) {
  if (!scenario.sweep)
    throw InputError("sweep", "", "a [sweep] table: parameter, and values = [...] or from, to, points", "",
                     scenario.file);
  (void)build_protocol(scenario);  // the errors of a missing [protocol] or [initial] come first
  (void)work_request(scenario);
  refuse_noise(scenario, "sweep");
  // The calibration's spread: its errors (file, table, settings) before the first point.
  const bool calibrated = has_calibration(scenario, options.uncertainty);
  UncertaintySettings uncertainty = options.uncertainty;
  if (calibrated) {
    check_uncertainty_settings(uncertainty);
    if (moves_walls(scenario))
      throw InputError("--uncertainty", scenario.file, "a trap without moving walls (not supported yet)");
    (void)calibration_of(scenario, uncertainty);
    uncertainty.check_operations = 0;  // no automatic check against sampling per point (see SweepOptions)
  }
  const SweepSpec& sweep = *scenario.sweep;
  const std::size_t points = sweep.points();
  std::vector<std::size_t> todo;
  if (options.todo) {
    todo = *options.todo;
    std::vector<bool> seen(points, false);
    for (std::size_t i : todo) {
      TRAPWORK_EXPECT(i < points && !seen[i], "sweep_task: each index of SweepOptions::todo once, below the points");
      seen[i] = true;
    }
  } else {
    for (std::size_t i = 0; i < points; ++i) todo.push_back(i);
  }
  const unsigned cores = std::max(1u, std::thread::hardware_concurrency());
  SweepOutcome outcome;
  outcome.scenario = scenario;
  outcome.jobs = std::min<std::size_t>(points, options.jobs > 0 ? std::size_t(options.jobs) : cores);
  const std::size_t jobs = outcome.jobs;
  if (hooks.stage) hooks.stage("sweep points");

  std::mutex mutex;  // guards outcome.rows, error and on_point
  std::exception_ptr error;
  std::atomic<std::size_t> next{0};
  std::atomic<bool> stop{false}, interrupted{false};
  // Progress: finished points plus the running points' shares, over the points to compute.
  std::mutex hook_mutex;  // one progress call at a time; taken after `mutex` where both are held
  std::vector<double> partial(todo.size(), 0.0);
  double partial_sum = 0;
  std::size_t finished = 0;
  auto report = [&](std::size_t k, double fraction, bool done) {
    std::lock_guard lock(hook_mutex);
    partial_sum += (done ? 0.0 : fraction) - partial[k];
    partial[k] = done ? 0.0 : fraction;
    finished += done;
    // partial_sum is a running sum of differences, exact only to rounding: the end is 1 exactly
    const double f = finished == todo.size() ? 1.0 : (double(finished) + partial_sum) / double(todo.size());
    if (hooks.progress) hooks.progress(std::clamp(f, 0.0, 1.0));
  };
  // Each of the points run at once may use its share of the memory available now.
  const double memory_per_point = available_memory_bytes() / double(std::max<std::size_t>(1, jobs));
  // Points share their spectra where they have the same H_A or H_B (a duration sweep: all).
  const auto memo = std::make_shared<SpectrumMemo>();
  std::mutex source_mutex;  // one call of options.next at a time
  // The next point to compute: (position in todo, point), or nothing when all are taken.
  auto take = [&]() -> std::optional<std::pair<std::size_t, std::size_t>> {
    if (stop) return std::nullopt;
    if (options.next) {
      std::lock_guard lock(source_mutex);
      const std::optional<std::size_t> i = options.next();
      if (!i) return std::nullopt;
      TRAPWORK_EXPECT(*i < points, "sweep_task: SweepOptions::next gave a point beyond the sweep");
      return std::pair{std::size_t(0), *i};
    }
    const std::size_t k = next++;
    if (k >= todo.size()) return std::nullopt;
    return std::pair{k, todo[k]};
  };
  const bool show_progress = hooks.progress && !options.next;  // progress over `todo` only
  auto worker = [&] {
    for (;;) {
      try {
        const auto taken = take();
        if (!taken) break;
        const std::size_t k = taken->first, i = taken->second;  // named: clang 14 cannot capture a structured binding
        // Each point has its own potential, protocol and request (one FFTW thread each). A
        // point that cannot be computed (bad value for that point, physics refused, a bug
        // caught by a contract check) is recorded as failed and the sweep goes on; an
        // interruption is no failure of the point.
        SweepRow row;
        try {
          const Scenario point = at_sweep_point(scenario, i);
          WorkRequest request = work_request(point);
          request.threads = 1;
          request.repeatable_transforms = true;  // the table must not depend on how the points ran
          request.spectrum.options.memo = memo;
          request.spectrum.options.interrupt = hooks.interrupt;
          request.spectrum.options.memory_limit = memory_per_point;
          if (show_progress)
            request.progress = [&, k](double fraction) {
              if (interrupted) throw Interrupted("sweep interrupted");  // another point was interrupted
              report(k, fraction, false);
            };
          const ScenarioWork work = naming_scenario(scenario.file + ": sweep point " + sweep.point_text(i), point,
                                                    [&] { return compute_work(point, request); });
          row = sweep_row(work.run(point), sweep, i);
          if (calibrated) {
            TaskHooks point_hooks;  // the perturbed runs stop when another point was interrupted
            point_hooks.interrupt = hooks.interrupt;
            point_hooks.progress = [&](double) {
              if (interrupted) throw Interrupted("sweep interrupted");
            };
            const WorkUncertainty u = naming_scenario(scenario.file + ": sweep point " + sweep.point_text(i), point, [&] {
              return work_uncertainty(point, work, uncertainty, point_hooks);
            });
            row.calibration_mean_sd = u.results[0].sd;
            row.calibration_sd_sd = u.results[1].sd;
            row.calibration_free_energy_sd = u.results[2].sd;
            row.calibration_method = u.method == "linear" ? 1 : 2;
            row.calibration_check = u.agreement ? u.agreement->largest_in_standard_errors : std::nan("");
            row.warnings += int(u.warnings.size());
          }
        } catch (const std::bad_alloc&) {
          throw;
        } catch (const Interrupted&) {
          throw;
        } catch (const std::exception& e) {
          row = failed_sweep_row(sweep, i, e.what());
        }
        std::lock_guard lock(mutex);
        outcome.rows.push_back({i, row});
        if (options.on_point) options.on_point(i, row);
        if (show_progress) report(k, 1.0, true);
      } catch (const Interrupted&) {
        std::lock_guard lock(mutex);
        if (!error) error = std::current_exception();
        interrupted = true;
        stop = true;
        break;
      } catch (...) {
        std::lock_guard lock(mutex);
        if (!error) error = std::current_exception();
        stop = true;
        break;
      }
    }
  };
  // Points run on the threads the system lets us start; with none, on this one (said in the
  // report: the sweep is slower, its results the same).
  std::vector<std::thread> threads;
  for (std::size_t j = 0; j < (options.next ? jobs : std::min(jobs, todo.size())); ++j) {
    try {
      threads.emplace_back(worker);
    } catch (const std::system_error& e) {
      outcome.refusal = e.what();
      break;
    }
  }
  if (threads.empty() && (!todo.empty() || options.next)) worker();
  for (auto& t : threads) t.join();
  if (error) std::rethrow_exception(error);
  outcome.started_threads = threads.size();
  return outcome;
}

namespace {
std::vector<SweepRow> rows_of(const SweepOutcome& o) {
  std::vector<SweepRow> rows;
  for (const auto& r : o.rows) rows.push_back(r.second);
  return rows;
}
}  // namespace

std::vector<std::string> sweep_output_names() { return {"sweep.csv", "sweep_summary.json", "sweep.png", "sweep.svg"}; }

std::vector<NamedTable> task_tables(const SweepOutcome& o) {
  return {{"sweep.csv", sweep_table(o.scenario, rows_of(o), o.scenario.sweep->points())}};
}

nlohmann::ordered_json task_summary(const SweepOutcome& o) {
  const SweepSpec& w = *o.scenario.sweep;
  const auto failed = std::count_if(o.rows.begin(), o.rows.end(), [](const auto& r) { return !r.second.failure.empty(); });
  std::vector<std::string> parameters, units;  // several swept parameters: lists
  for (const auto& a : w.axes) {
    parameters.push_back(a.parameter);
    units.push_back(a.unit);
  }
  return with_provenance({{"command", "sweep"},
          {"scenario", o.scenario.file},
          {"parameter", w.axes.size() == 1 ? nlohmann::ordered_json(w.axes[0].parameter) : nlohmann::ordered_json(parameters)},
          {"unit", w.axes.size() == 1 ? nlohmann::ordered_json(w.axes[0].unit) : nlohmann::ordered_json(units)},
          {"points", w.points()},
          {"computed", o.rows.size()},
          {"failed", failed},
          {"jobs", o.jobs},
          {"threads", o.started_threads}}, o.scenario);
}

std::vector<NamedText> task_texts(const SweepOutcome&) { return {}; }
// Several swept parameters: no sweep figure (a grid of two has the maps of sweep_map_figures,
// which write_task_outputs draws).
std::vector<NamedFigure> task_figures(const SweepOutcome& o) {
  if (o.scenario.sweep->axes.size() != 1) return {};
  return {{"sweep", sweep_figure(o.scenario, rows_of(o))}};
}
std::vector<fs::path> write_task_outputs(const fs::path& folder, const SweepOutcome& o) {
  auto files = write_outputs(folder, task_tables(o), "sweep_summary.json", task_summary(o), task_texts(o), task_figures(o));
  for (const auto& p : plot_sweep_maps(folder, o.scenario, rows_of(o))) files.push_back(p);
  return files;
}

void print_sweep_report(std::ostream& out, const SweepOutcome& run, std::vector<SweepRow> rows,
                        const std::string& resumed) {
  const Scenario& scenario = run.scenario;
  const SweepSpec& sweep = *scenario.sweep;
  const std::size_t points = sweep.points(), jobs = run.jobs, computed = run.rows.size();
  print_scenario_header(out, "sweep", scenario);
  const std::size_t started = run.refusal.empty() ? jobs : std::max<std::size_t>(1, run.started_threads);
  std::string parameters;
  for (const auto& a : sweep.axes) parameters += (parameters.empty() ? "" : " x ") + a.parameter;
  if (sweep.axes.size() > 1) parameters += sweep.grid ? " (a grid)" : " (a list)";
  print_row(out, "sweep", parameters + ", " + std::to_string(points) + " points, " + std::to_string(started) +
                              " at a time" +
                              (run.refusal.empty() ? std::string()
                                                   : " (of " + std::to_string(std::min(jobs, computed)) +
                                                         " asked for: the system refused to start more threads: " +
                                                         run.refusal + ")"));
  if (!resumed.empty()) print_row(out, "resumed", resumed);
  if (sweep.axes.size() > 1) {
    const std::string refusal = sweep_map_refusal(scenario);
    print_row(out, "maps", !refusal.empty() ? "no map: " + refusal
                           : !sweep.grid       ? "scatter maps at the listed points (sweep_map_*)"
                           : sweep.axes.size() == 3 ? "one map per value of " + sweep.axes[2].parameter +
                                                          " (sweep_map_*_<parameter>_<value>)"
                                                    : "grid maps (sweep_map_*)");
  }
  if (sweep.axes.size() == 1)
    std::sort(rows.begin(), rows.end(), [](const SweepRow& a, const SweepRow& b) { return a.values[0] < b.values[0]; });
  else
    std::sort(rows.begin(), rows.end(), [](const SweepRow& a, const SweepRow& b) { return a.point < b.point; });
  const Display d = display(scenario);
  auto swept = [&](const SweepRow& r) {
    std::string text;
    for (std::size_t k = 0; k < sweep.axes.size(); ++k) {
      char cell[40];
      std::snprintf(cell, sizeof cell, " %14s", short_number(r.values[k] / sweep.axes[k].internal_per_unit, 6).c_str());
      text += cell;
    }
    return text;
  };
  char line[220];
  const std::string e = "[" + d.e + "]";
  out << "\n ";
  for (const auto& a : sweep.axes) {
    std::snprintf(line, sizeof line, " %14s",
                  (sweep.axes.size() == 1 ? (a.unit.empty() ? std::string("value") : "[" + a.unit + "]")
                                          : a.parameter.substr(a.parameter.rfind('.') + 1) +
                                                (a.unit.empty() ? std::string() : " [" + a.unit + "]"))
                      .c_str());
    out << line;
  }
  // With a calibration: its sd of <W> per point, the method, and the check where both ran.
  const bool calibrated = std::any_of(rows.begin(), rows.end(), [](const SweepRow& r) { return r.calibration_method != 0; });
  std::snprintf(line, sizeof line, " %14s %9s %14s %16s %14s %10s %8s%s\n", ("<W> " + e).c_str(), "+-",
                ("sd " + e).c_str(), ("harm. <W> " + e).c_str(), "<W> - harm.", "Jarzynski", "warnings",
                calibrated ? ("   calibration sd of <W> " + e).c_str() : "");
  out << line;
  int warned = 0;
  for (const auto& r : rows) {
    if (!r.failure.empty()) {
      out << " " << swept(r) << ": failed: " << r.failure << '\n';
      continue;
    }
    const std::string spread =
        !calibrated ? std::string()
                    : "   " + (std::isfinite(r.calibration_mean_sd) ? short_number(d.energy(r.calibration_mean_sd), 3)
                                                                      : std::string("not computed")) +
                          (r.calibration_method == 1 ? " (linear)" : r.calibration_method == 2 ? " (sampling)" : "") +
                          (std::isfinite(r.calibration_check)
                               ? ", linear-sampled " + short_number(r.calibration_check, 2) + " se"
                               : std::string());
    std::snprintf(line, sizeof line, " %14s %9s %14s %16s %14s %10s %8d%s\n",
                  short_number(d.energy(r.mean), 7).c_str(),
                  std::isfinite(r.mean_error) ? short_number(d.energy(r.mean_error), 2).c_str() : "?",
                  short_number(d.energy(r.sd), 5).c_str(), short_number(d.energy(r.harmonic_mean), 7).c_str(),
                  short_number(d.energy(r.mean - r.harmonic_mean), 4).c_str(),
                  short_number(r.jarzynski_residual, 2).c_str(), r.warnings, spread.c_str());
    out << " " << swept(r) << line;
    warned += r.warnings > 0;
  }
  if (warned > 0) {
    out << "\n" << warned << " point(s) have warnings; to read them, run the point alone:\n";
    // The command that reruns a point: the sweep's scenario, its own changed values, the point's values.
    std::string base = "trapwork work " + scenario.file;
    for (const auto& c : scenario.changed_values)
      if (c.rfind("sweep.", 0) != 0) base += " --set '" + c + "'";  // [sweep] plays no part in `work`
    for (const auto& r : rows)
      if (r.failure.empty() && r.warnings > 0) {
        out << "  " << base;
        for (std::size_t k = 0; k < sweep.axes.size(); ++k)
          out << " --set '" << sweep.axes[k].parameter << "=" << sweep.axes[k].given[sweep.value_index(r.point, k)]
              << "'";
        out << '\n';
      }
  }
}

void print_task_report(std::ostream& out, const SweepOutcome& o) { print_sweep_report(out, o, rows_of(o), ""); }

}  // namespace trapwork
