// `trapwork work`, `trapwork sweep` and `trapwork demo` (see commands.hpp).
#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <fstream>
#include <iostream>
#include <memory>
#include <sstream>
#include <unistd.h>

#include "solver/errors.hpp"
#include "solver/tool/commands.hpp"
#include "solver/scenario/machine.hpp"
#include "solver/scenario/progress.hpp"
#include "solver/scenario/work_output.hpp"

namespace trapwork {

namespace {

void print_files(std::ostream& out, const std::vector<std::filesystem::path>& files) {
  out << '\n';
  for (const auto& f : files) out << "wrote " << f.string() << '\n';
}

void add_work_options(CLI::App* sub, std::string& output, bool& quiet, std::vector<std::string>& set) {
  add_set_option(sub, set);
  sub->add_option("-o,--output", output, "output folder (overrides [output] folder)");
  sub->add_flag("--quiet", quiet, "print nothing but errors (no report, no progress bar)");
}

// ---- sweep points kept for --resume ------------------------------------------------------
// sweep-points.txt beside sweep.csv holds every finished point in internal units, each number
// in the shortest text that reads back to the same double, so a resumed sweep writes the same
// sweep.csv as an uninterrupted one. Line 1: "trapwork sweep points <fingerprint>"; then one
// line per point: its index in [sweep], the swept value and the other SweepRow numbers; or, for
// a point that failed, its index, the value, the word "failed" and the message (one line).

// FNV-1a, 64 bit (Fowler, Noll and Vo; common practice for a non-cryptographic fingerprint)
// of the scenario file's text and of the sweep values as read.
std::string sweep_fingerprint(const Scenario& scenario) {
  std::ifstream in(scenario.file, std::ios::binary);
  std::ostringstream file_text;
  file_text << in.rdbuf();
  std::string text = file_text.str();
  for (double v : scenario.sweep->values) text += "\n" + number_text(v);
  std::uint64_t h = 14695981039346656037ull;
  for (unsigned char c : text) h = (h ^ c) * 1099511628211ull;
  char hex[17];
  std::snprintf(hex, sizeof hex, "%016llx", static_cast<unsigned long long>(h));
  return hex;
}

constexpr const char* points_header = "trapwork sweep points ";

void write_sweep_points(std::ostream& out, const std::string& fingerprint,
                        const std::vector<std::pair<std::size_t, SweepRow>>& done) {
  out << points_header << fingerprint << '\n';
  for (const auto& [i, r] : done) {
    out << i;
    if (!r.failure.empty()) {
      out << ' ' << number_text(r.value) << " failed " << r.failure << '\n';
      continue;
    }
    for (double v : {r.value, r.mean, r.sd, r.skewness, r.free_energy_change, r.dissipated_work,
                     r.jarzynski_residual, r.crooks_ratio_error, r.harmonic_mean, r.harmonic_sd, r.time_step_error,
                     r.unresolved_weight, double(r.warnings)})
      out << ' ' << number_text(v);
    out << '\n';
  }
}

// The finished points of an earlier run of the same scenario. Throws InputError naming the file
// when it belongs to another scenario or is damaged.
std::vector<std::pair<std::size_t, SweepRow>> read_sweep_points(const std::filesystem::path& file,
                                                                const std::string& fingerprint,
                                                                const SweepSpec& sweep) {
  std::ifstream in(file);
  std::string line;
  std::getline(in, line);
  if (line.rfind(points_header, 0) != 0)
    throw InputError("", "", "not a list of sweep points written by trapwork sweep: remove it, or run without --resume",
                     "", file.string(), 1);
  const std::string found = line.substr(std::string(points_header).size());
  if (found != fingerprint)
    throw InputError("", "", "these sweep points belong to another scenario or another list of values (fingerprint " +
                     found + ", this scenario " + fingerprint + "): use another output folder, or run without --resume",
                     "", file.string(), 1);
  std::vector<std::pair<std::size_t, SweepRow>> done;
  std::vector<bool> seen(sweep.values.size(), false);
  for (int number = 2; std::getline(in, line); ++number) {
    std::istringstream fields(line);
    std::size_t i = 0;
    std::string v[13];
    bool ok = bool(fields >> i);
    {  // a failed point: index, value, "failed", message
      std::istringstream probe(line);
      std::string index, value, word;
      if (probe >> index >> value >> word && word == "failed") {
        std::string message;
        std::getline(probe >> std::ws, message);
        char* end = nullptr;
        const double x = std::strtod(value.c_str(), &end);
        if (!ok || *end != '\0' || i >= sweep.values.size() || seen[i] || !(x == sweep.values[i]))
          throw InputError("", line, "a failed sweep point (index, value, failed, message) of this scenario: remove "
                           "the file, or run without --resume", "", file.string(), number);
        seen[i] = true;
        done.push_back({i, failed_sweep_row(x, message)});
        continue;
      }
    }
    for (auto& f : v) ok = ok && bool(fields >> f);
    double x[13];
    for (int k = 0; ok && k < 13; ++k) {
      char* end = nullptr;
      x[k] = std::strtod(v[k].c_str(), &end);  // reads nan and inf as number_text writes them
      ok = *end == '\0';
    }
    // the value must be the one of that index, bit for bit (it was written as its exact text);
    // the warning count a whole number (converting nan or a huge double to int is undefined)
    ok = ok && x[12] >= 0 && x[12] <= 1e6 && x[12] == std::floor(x[12]);
    if (!ok || i >= sweep.values.size() || seen[i] || !(x[0] == sweep.values[i]))
      throw InputError("", line, "a finished sweep point (index, value and 12 numbers) of this scenario: remove the "
                       "file, or run without --resume", "", file.string(), number);
    seen[i] = true;
    done.push_back({i, SweepRow{x[0], x[1], x[2], x[3], x[4], x[5], x[6], x[7], x[8], x[9], x[10], x[11],
                                int(x[12]), {}}});
  }
  return done;
}

}  // namespace

void run_work_command(const WorkCommand& command, std::ostream& out, std::ostream& progress) {
  Scenario scenario = load_scenario(command.scenario, command.set);
  if (!command.output.empty()) scenario.output_folder = command.output;
  (void)build_protocol(scenario);  // a missing [protocol] is reported before a missing [initial]
  (void)work_request(scenario);
  OutputRun output(scenario.output_folder, work_output_names(), scenario_inputs(scenario),
                   "trapwork work " + scenario.file);
  TaskBar bar(progress, command.show_progress);
  const TaskHooks hooks = bar.hooks(command.quiet ? nullptr : notice_to(progress));
  if (!command.uncertainty.calibration.empty()) (void)read_calibration(command.uncertainty.calibration, scenario);
  WorkOutcome outcome = work_task(scenario, command.tolerance, command.search_budget, hooks);
  add_work_uncertainty(outcome, command.uncertainty, hooks);
  bar.finish();
  const auto files = output.commit(write_task_outputs(output.staging(), outcome));
  if (command.quiet) return;
  print_task_report(out, outcome);
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
                  "scenario file (TOML) with [protocol] and [initial], or \"default\" for the built-in one")
      ->required();
  add_work_options(sub, command->output, command->quiet, command->set);
  sub->add_option("--tolerance", command->tolerance,
                  "choose the time step and grid for this bound on the distance of P(W) from its converged value "
                  "(a total-variation bound over the work lines, e.g. 1e-4): steps are doubled and the grid refined "
                  "until two runs agree to half of it, and the eigenbasis ODE is tried where its estimated cost is "
                  "lower; the report says what was chosen, why, and the error estimate");
  sub->add_option("--search-budget", command->search_budget,
                  "cost bound of the --tolerance search: its runs' estimated arithmetic, summed, in units of its "
                  "first run's (default " + short_number(default_search_budget) + "); at the bound it stops and "
                  "reports the accuracy it verified");
  sub->add_option("--uncertainty", command->uncertainty.calibration,
                  "carry the trap's calibration uncertainty forward: the fit_summary.json of `trapwork fit` (or its "
                  "folder), whose coefficients name parameters of the scenario's potential; <W>, sd(W), Delta F and "
                  "the strong lines' probabilities get the standard deviation it gives them (lines_uncertainty.csv, "
                  "summary.json, bars in work.png)");
  sub->add_option("--uncertainty-method", command->uncertainty.method,
                  "auto (linear propagation by central differences where its second-order terms are below 0.1 of "
                  "the sd, else sampling; a small case is also checked against sampling), linear, sampling, or both "
                  "(each, with their disagreement)");
  sub->add_option("--uncertainty-samples", command->uncertainty.samples,
                  "parameter sets drawn from the covariance for sampling (default 100)");
  sub->add_option("--uncertainty-seed", command->uncertainty.seed, "seed of the parameter draws (default 1)");
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
      "(about 5 s)");
  add_work_options(sub, command->output, command->quiet, command->set);
  sub->callback([command] {
    WorkCommand c = *command;
    c.scenario = "default";
    if (c.output.empty()) c.output = "demo-output";
    c.show_progress = !c.quiet && ProgressBar::terminal_allows();
    run_work_command(c, std::cout, std::cerr);
  });
}

void run_sweep_command(const SweepCommand& command, std::ostream& out, std::ostream& progress) {
  Scenario scenario = load_scenario(command.scenario, command.set);
  if (!command.output.empty()) scenario.output_folder = command.output;
  if (!scenario.sweep)
    throw InputError("sweep", "", "a [sweep] table: parameter, and values = [...] or from, to, points", "",
                     scenario.file);
  if (command.retry_failed && !command.resume)
    throw InputError("--retry-failed", "without --resume", "--resume --retry-failed (it retries the failed points "
                     "of the earlier run kept in sweep-points.txt)");
  (void)build_protocol(scenario);  // the errors of a missing [protocol] or [initial] come first
  (void)work_request(scenario);
  const SweepSpec& sweep = *scenario.sweep;
  const std::size_t points = sweep.values.size();
  // sweep.csv and sweep-points.txt are written in the folder itself as points finish (the
  // record --resume reads); the figures go through the staging folder.
  OutputRun output(scenario.output_folder, {"sweep.csv", "sweep-points.txt", "sweep.png", "sweep.svg"},
                   scenario_inputs(scenario), "trapwork sweep " + scenario.file);
  const std::filesystem::path folder = scenario.output_folder;

  // --resume: the points an earlier run of the same scenario finished are kept, the rest run.
  const std::string fingerprint = sweep_fingerprint(scenario);
  const std::filesystem::path points_file = folder / "sweep-points.txt";
  std::vector<std::pair<std::size_t, SweepRow>> done;  // (index in [sweep], row), guarded by sweep_task's lock
  if (command.resume && std::filesystem::exists(points_file)) done = read_sweep_points(points_file, fingerprint, sweep);
  // Failed points are kept as failed (not tried again on every --resume) unless asked.
  const std::size_t retried = command.retry_failed ? std::size_t(std::count_if(done.begin(), done.end(), [](const auto& d) {
    return !d.second.failure.empty();
  })) : 0;
  if (command.retry_failed)
    std::erase_if(done, [](const auto& d) { return !d.second.failure.empty(); });
  const std::size_t resumed = done.size();
  std::vector<std::size_t> todo;  // unfinished indices, in [sweep] order
  {
    std::vector<bool> finished(points, false);
    for (const auto& d : done) finished[d.first] = true;
    for (std::size_t i = 0; i < points; ++i)
      if (!finished[i]) todo.push_back(i);
  }
  // The points first (the record --resume reads), then sweep.csv made from them: a kill
  // between the two leaves sweep.csv one point behind, which the resumed run rewrites.
  auto write_done = [&] {
    write_file_atomically(points_file, [&](std::ostream& o) { write_sweep_points(o, fingerprint, done); });
    std::vector<SweepRow> finished_rows;
    for (const auto& d : done) finished_rows.push_back(d.second);
    CsvTable table = sweep_table(scenario, finished_rows, points);
    table.comments.push_back("scenario fingerprint " + fingerprint +
                             " (FNV-1a of the scenario file and the sweep values); sweep-points.txt keeps the "
                             "finished points for trapwork sweep --resume");
    write_file_atomically(folder / "sweep.csv", [&](std::ostream& o) { write_csv(o, table); });
  };
  if (resumed > 0) write_done();

  ProgressBar bar("sweep points", points, progress, command.show_progress);
  bar.update(resumed);
  SweepOptions options;
  options.jobs = command.jobs;
  options.todo = todo;
  options.on_point = [&](std::size_t i, const SweepRow& row) {
    done.push_back({i, row});
    write_done();
    bar.update(done.size());
  };
  const SweepOutcome run = sweep_task(scenario, options);
  bar.finish();
  std::vector<SweepRow> rows;
  for (const auto& d : done) rows.push_back(d.second);
  const auto failed = std::count_if(rows.begin(), rows.end(), [](const SweepRow& r) { return !r.failure.empty(); });
  if (failed > 0)  // an error, so printed even with --quiet
    progress << "trapwork sweep: " << failed << " of " << points << " point(s) failed (failed = 1 in "
             << (folder / "sweep.csv").string() << ", each with its message; --resume --retry-failed computes them "
             << "again)\n";

  std::vector<std::filesystem::path> files = {folder / "sweep.csv", points_file};
  for (const auto& p : plot_sweep_figure(output.staging(), scenario, rows)) files.push_back(p);
  files = output.commit(files);
  if (command.quiet) return;

  print_sweep_report(out, run, rows,
                     command.resume ? std::to_string(resumed) + " of " + std::to_string(points) + " points from " +
                                          points_file.string() + ", " + std::to_string(todo.size()) +
                                          " computed now" +
                                          (retried > 0 ? " (" + std::to_string(retried) + " failed before, tried again)"
                                                       : "")
                                    : std::string());
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
  add_work_options(sub, command->output, command->quiet, command->set);
  sub->add_option("--jobs", command->jobs, "points run at the same time (default: the number of cores)")
      ->check(CLI::Range(1, 4096));
  sub->add_flag("--resume", command->resume,
                "keep the points an interrupted run of the same scenario finished (sweep-points.txt in the output "
                "folder) and compute only the rest; points that failed stay failed");
  sub->add_flag("--retry-failed", command->retry_failed,
                "with --resume: compute the points recorded as failed again");
  sub->callback([command] {
    SweepCommand c = *command;
    c.show_progress = !c.quiet && ProgressBar::terminal_allows();
    run_sweep_command(c, std::cout, std::cerr);
  });
}

}  // namespace trapwork
