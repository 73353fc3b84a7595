// `trapwork work`, `trapwork sweep` and `trapwork demo` (see commands.hpp).
#include <atomic>
#include <exception>
#include <iostream>
#include <memory>
#include <mutex>
#include <thread>
#include <unistd.h>

#include "solver/errors.hpp"
#include "solver/tool/commands.hpp"
#include "solver/tool/progress.hpp"
#include "solver/tool/work_output.hpp"

namespace trapwork {

namespace {

// Says which scenario (and sweep point) the physics could not handle.
template <class F>
auto naming_scenario(const std::string& where, F&& f) {
  try {
    return f();
  } catch (const PhysicsError& e) {
    throw PhysicsError(where + ": " + e.what());
  }
}

void print_files(std::ostream& out, const std::vector<std::filesystem::path>& files) {
  out << '\n';
  for (const auto& f : files) out << "wrote " << f.string() << '\n';
}

void add_work_options(CLI::App* sub, std::string& output, bool& quiet) {
  sub->add_option("-o,--output", output, "output folder (overrides [output] folder)");
  sub->add_flag("--quiet", quiet, "print nothing but errors (no report, no progress bar)");
}

}  // namespace

void run_work_command(const WorkCommand& command, std::ostream& out, std::ostream& progress) {
  Scenario scenario = load_scenario(command.scenario);
  if (!command.output.empty()) scenario.output_folder = command.output;
  const Protocol protocol = build_protocol(scenario);
  WorkRequest request = work_request(scenario);
  ProgressBar bar("propagating", 1000, progress, command.show_progress);
  request.progress = [&bar](double fraction) { bar.update(std::size_t(fraction * 1000)); };
  const WorkResult result =
      naming_scenario(scenario.file, [&] { return run_work(scenario.potential, protocol, request); });
  bar.finish();
  const WorkRun run{scenario, protocol, request, result};
  const auto files = write_work_outputs(scenario.output_folder, run);
  if (command.quiet) return;
  print_work_report(out, run);
  print_files(out, files);
}

void add_work_command(CLI::App& app) {
  auto command = std::make_shared<WorkCommand>();
  CLI::App* sub = app.add_subcommand(
      "work",
      "Work statistics of the scenario's [protocol] in the two-point energy-measurement scheme, with the "
      "harmonic prediction and the Jarzynski and Crooks checks; writes lines.csv, histogram.csv, density.csv, "
      "transition.csv, characteristic.csv, summary.json and figures");
  sub->add_option("scenario", command->scenario,
                  "scenario file (TOML) with [protocol] and [initial]; \"default\" or nothing: the built-in one")
      ->required();
  add_work_options(sub, command->output, command->quiet);
  sub->callback([command] {
    WorkCommand c = *command;
    c.show_progress = !c.quiet && ProgressBar::terminal_allows();
    run_work_command(c, std::cout, std::cerr);
  });
}

void add_demo_command(CLI::App& app) {
  auto command = std::make_shared<WorkCommand>();
  CLI::App* sub = app.add_subcommand(
      "demo",
      "Runs `trapwork work` on the built-in scenario: a 40 u ion in a 1 MHz trap with a quartic correction "
      "(lowest spacing raised by about 3 kHz), 2 phonons, moved by 160 nm at constant speed in 2.5 us "
      "(about 15 s)");
  add_work_options(sub, command->output, command->quiet);
  sub->callback([command] {
    WorkCommand c = *command;
    c.scenario = "default";
    if (c.output.empty()) c.output = "demo-output";
    c.show_progress = !c.quiet && ProgressBar::terminal_allows();
    run_work_command(c, std::cout, std::cerr);
  });
}

void run_sweep_command(const SweepCommand& command, std::ostream& out, std::ostream& progress) {
  Scenario scenario = load_scenario(command.scenario);
  if (!command.output.empty()) scenario.output_folder = command.output;
  if (!scenario.sweep)
    throw InputError("sweep", "", "a [sweep] table: parameter, and values = [...] or from, to, points", "",
                     scenario.file);
  (void)build_protocol(scenario);  // the errors of a missing [protocol] or [initial] come first
  (void)work_request(scenario);
  const SweepSpec& sweep = *scenario.sweep;
  const std::size_t points = sweep.values.size();
  const unsigned cores = std::max(1u, std::thread::hardware_concurrency());
  const std::size_t jobs = std::min<std::size_t>(points, command.jobs > 0 ? std::size_t(command.jobs) : cores);
  const std::filesystem::path folder = scenario.output_folder;
  std::filesystem::create_directories(folder);

  ProgressBar bar("sweep points", points, progress, command.show_progress);
  bar.update(0);
  std::mutex mutex;  // guards rows, error and the sweep.csv rewrite
  std::vector<SweepRow> rows;
  std::exception_ptr error;
  std::atomic<std::size_t> next{0};
  std::atomic<bool> stop{false};
  auto worker = [&] {
    for (std::size_t i; !stop && (i = next++) < points;) {
      try {
        // Each point has its own potential, protocol and request (one FFTW thread each).
        const Scenario point = at_sweep_point(scenario, i);
        const Protocol protocol = build_protocol(point);
        WorkRequest request = work_request(point);
        request.threads = 1;
        const WorkResult result = naming_scenario(
            scenario.file + ": sweep point " + sweep.parameter + " = " + sweep.given[i],
            [&] { return run_work(point.potential, protocol, request); });
        const SweepRow row = sweep_row(WorkRun{point, protocol, request, result}, sweep.values[i]);
        std::lock_guard lock(mutex);
        rows.push_back(row);
        const CsvTable table = sweep_table(scenario, rows, points);
        write_file_atomically(folder / "sweep.csv", [&](std::ostream& o) { write_csv(o, table); });
        bar.update(rows.size());
      } catch (...) {
        std::lock_guard lock(mutex);
        if (!error) error = std::current_exception();
        stop = true;
      }
    }
  };
  std::vector<std::thread> threads;
  for (std::size_t j = 0; j < jobs; ++j) threads.emplace_back(worker);
  for (auto& t : threads) t.join();
  if (error) std::rethrow_exception(error);
  bar.finish();

  std::vector<std::filesystem::path> files = {folder / "sweep.csv"};
  for (const auto& p : plot_sweep_figure(folder, scenario, rows)) files.push_back(p);
  if (command.quiet) return;

  print_scenario_header(out, "sweep", scenario);
  print_row(out, "sweep", sweep.parameter + ", " + std::to_string(points) + " points, " + std::to_string(jobs) +
                              " at a time");
  std::sort(rows.begin(), rows.end(), [](const SweepRow& a, const SweepRow& b) { return a.value < b.value; });
  const Display d = display(scenario);
  char line[220];
  const std::string e = "[" + d.e + "]";
  std::snprintf(line, sizeof line, "\n  %14s %14s %14s %16s %14s %10s %8s\n",
                (sweep.unit.empty() ? std::string("value") : "[" + sweep.unit + "]").c_str(), ("<W> " + e).c_str(),
                ("sd " + e).c_str(), ("harm. <W> " + e).c_str(), "<W> - harm.", "Jarzynski", "warnings");
  out << line;
  int warned = 0;
  for (const auto& r : rows) {
    std::snprintf(line, sizeof line, "  %14s %14s %14s %16s %14s %10s %8d\n",
                  short_number(r.value / sweep.internal_per_unit, 6).c_str(), short_number(d.energy(r.mean), 7).c_str(),
                  short_number(d.energy(r.sd), 5).c_str(), short_number(d.energy(r.harmonic_mean), 7).c_str(),
                  short_number(d.energy(r.mean - r.harmonic_mean), 4).c_str(),
                  short_number(r.jarzynski_residual, 2).c_str(), r.warnings);
    out << line;
    warned += r.warnings > 0;
  }
  if (warned > 0)
    out << "\n" << warned << " point(s) have warnings: run `trapwork work` on the scenario at that value to read them\n";
  print_files(out, files);
}

void add_sweep_command(CLI::App& app) {
  auto command = std::make_shared<SweepCommand>();
  CLI::App* sub = app.add_subcommand(
      "sweep",
      "Work statistics over the values of the scenario's [sweep] parameter, several points at a time; writes "
      "sweep.csv (rewritten as points finish) and sweep.png/.svg");
  sub->add_option("scenario", command->scenario, "scenario file (TOML) with [protocol], [initial] and [sweep]")
      ->required();
  add_work_options(sub, command->output, command->quiet);
  sub->add_option("--jobs", command->jobs, "points run at the same time (default: the number of cores)")
      ->check(CLI::Range(1, 4096));
  sub->callback([command] {
    SweepCommand c = *command;
    c.show_progress = !c.quiet && ProgressBar::terminal_allows();
    run_sweep_command(c, std::cout, std::cerr);
  });
}

}  // namespace trapwork
