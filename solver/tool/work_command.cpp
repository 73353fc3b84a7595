// `trapwork work`, `trapwork sweep` and `trapwork demo` (see commands.hpp).
#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <fstream>
#include <iostream>
#include <limits>
#include <memory>
#include <sstream>

#include "solver/errors.hpp"
#include "solver/scenario/machine.hpp"
#include "solver/scenario/progress.hpp"
#include "solver/scenario/work_output.hpp"
#include "solver/tool/commands.hpp"
#include "solver/tool/sweep_points.hpp"

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

// --uncertainty and its method options, for work and sweep.
void add_uncertainty_options(CLI::App* sub, UncertaintySettings& u, const std::string& what) {
  sub->add_option("--uncertainty", u.calibration,
                  "carry the trap's calibration uncertainty forward: the fit_summary.json of `trapwork fit` (or its "
                  "folder), whose coefficients name parameters of the scenario's potential; " + what +
                  "; without it, the scenario's [uncertainty] table if it has one (not both); \"none\": no "
                  "propagation");
  sub->add_option("--uncertainty-method", u.method,
                  "auto (linear propagation by central differences, 2 runs per parameter, where its second-order "
                  "terms are below 0.1 of the sd, else sampling; `work` also checks a small case against sampling), "
                  "linear, sampling, or both (each, with their disagreement)");
  sub->add_option("--uncertainty-samples", u.samples,
                  "parameter sets drawn from the covariance for sampling (default 100)");
  sub->add_option("--uncertainty-seed", u.seed, "seed of the parameter draws (default 1)");
}

}  // namespace

// ---- sweep points kept for --resume (solver/tool/sweep_points.hpp) -------------------------
// sweep-points.txt beside sweep.csv holds every finished point in internal units, each number
// in the shortest text that reads back to the same double, so a resumed sweep writes the same
// sweep.csv as an uninterrupted one. Line 1: "trapwork sweep points <fingerprint>"; then one
// line per point: its number in [sweep] (0-based), its swept values (one per parameter) and
// the other SweepRow numbers; or, for a point that failed, its number, its values, the word
// "failed" and the message (one line).

// FNV-1a, 64 bit (Fowler, Noll and Vo; common practice for a non-cryptographic fingerprint)
// of the resolved scenario text (the file with the --set changes) and of the sweep points as read.
std::string sweep_fingerprint(const std::string& resolved_text, const Scenario& scenario) {
  std::string text = resolved_text;
  const SweepSpec& w = *scenario.sweep;
  for (std::size_t i = 0; i < w.points(); ++i)
    for (double v : w.point_values(i)) {
      text += '\n';  // two appends: "\n" + number_text(v) draws g++ 12's false -Wrestrict warning
      text += number_text(v);
    }
  std::uint64_t h = 14695981039346656037ull;
  for (unsigned char c : text) h = (h ^ c) * 1099511628211ull;
  char hex[17];
  std::snprintf(hex, sizeof hex, "%016llx", static_cast<unsigned long long>(h));
  return hex;
}

namespace {
constexpr const char* points_header = "trapwork sweep points ";
}  // namespace

std::string sweep_point_line(std::size_t i, const SweepRow& r) {
  std::string line = std::to_string(i);
  for (double v : r.values) line += ' ' + number_text(v);
  if (!r.failure.empty()) return line + " failed " + r.failure;
  for (double v : {r.mean, r.sd, r.skewness, r.free_energy_change, r.dissipated_work, r.jarzynski_residual,
                   r.crooks_ratio_error, r.harmonic_mean, r.harmonic_sd, r.time_step_error,
                   r.unresolved_weight, double(r.warnings), r.mean_error, r.sd_error})
    line += ' ' + number_text(v);
  if (r.calibration_method != 0)  // the calibration's spread: 5 more numbers
    for (double v : {r.calibration_mean_sd, r.calibration_sd_sd, r.calibration_free_energy_sd,
                     double(r.calibration_method), r.calibration_check})
      line += ' ' + number_text(v);
  return line;
}

std::optional<std::pair<std::size_t, SweepRow>> parse_sweep_point(const std::string& line, const SweepSpec& sweep) {
  std::istringstream fields(line);
  std::size_t i = 0;
  if (!(fields >> i) || i >= sweep.points()) return std::nullopt;
  auto number = [](const std::string& text, double& x) {
    char* end = nullptr;
    x = std::strtod(text.c_str(), &end);  // reads nan and inf as number_text writes them
    return !text.empty() && *end == '\0';
  };
  SweepRow row;
  row.point = i;
  // the values must be those of that point, bit for bit (they were written as their exact text)
  for (std::size_t k = 0; k < sweep.axes.size(); ++k) {
    std::string f;
    double x = 0;
    if (!(fields >> f) || !number(f, x) || !(x == sweep.value(i, k))) return std::nullopt;
    row.values.push_back(x);
  }
  std::string word;
  if (!(fields >> word)) return std::nullopt;
  if (word == "failed") {  // a failed point: its message follows
    std::string message;
    std::getline(fields >> std::ws, message);
    row = failed_sweep_row(sweep, i, message);
    return std::pair{i, row};
  }
  // 14 numbers, 19 with the calibration's spread; 12 and 17 from before the moments' errors were
  // recorded (read with those errors NaN: not known)
  double x[19];
  for (int k = 0; k < 12; ++k)
    if ((k > 0 && !(fields >> word)) || !number(word, x[k])) return std::nullopt;
  int count = 12;
  while (fields >> word) {
    if (count == 19 || !number(word, x[count])) return std::nullopt;  // more than the numbers of a point
    ++count;
  }
  if (count != 12 && count != 14 && count != 17 && count != 19) return std::nullopt;
  const int errors = count == 14 || count == 19 ? 2 : 0, calibration = 12 + errors;
  row.mean_error = errors ? x[12] : std::numeric_limits<double>::quiet_NaN();
  row.sd_error = errors ? x[13] : std::numeric_limits<double>::quiet_NaN();
  if (count - errors == 17) {
    if (!(x[calibration + 3] == 1 || x[calibration + 3] == 2)) return std::nullopt;
    row.calibration_mean_sd = x[calibration], row.calibration_sd_sd = x[calibration + 1];
    row.calibration_free_energy_sd = x[calibration + 2];
    row.calibration_method = int(x[calibration + 3]), row.calibration_check = x[calibration + 4];
  }
  // the warning count a whole number (converting nan or a huge double to int is undefined)
  if (!(x[11] >= 0 && x[11] <= 1e6 && x[11] == std::floor(x[11]))) return std::nullopt;
  row.mean = x[0], row.sd = x[1], row.skewness = x[2], row.free_energy_change = x[3], row.dissipated_work = x[4];
  row.jarzynski_residual = x[5], row.crooks_ratio_error = x[6], row.harmonic_mean = x[7], row.harmonic_sd = x[8];
  row.time_step_error = x[9], row.unresolved_weight = x[10], row.warnings = int(x[11]);
  return std::pair{i, row};
}

void write_sweep_points(std::ostream& out, const std::string& fingerprint,
                        const std::vector<std::pair<std::size_t, SweepRow>>& done) {
  out << points_header << fingerprint << '\n';
  for (const auto& [i, r] : done) out << sweep_point_line(i, r) << '\n';
}

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
  std::vector<bool> seen(sweep.points(), false);
  for (int number = 2; std::getline(in, line); ++number) {
    const auto point = parse_sweep_point(line, sweep);
    if (!point || seen[point->first])
      throw InputError("", line,
                       "a finished sweep point (number, the swept values, and 14 numbers or \"failed\" and "
                       "a message) of this scenario, each once: remove the file, or run without --resume",
                       "", file.string(), number);
    seen[point->first] = true;
    done.push_back(*point);
  }
  return done;
}

void write_sweep_table(const std::filesystem::path& folder, const Scenario& scenario, const std::string& fingerprint,
                       const std::vector<std::pair<std::size_t, SweepRow>>& done) {
  // The points first (the record --resume reads), then sweep.csv made from them: a kill
  // between the two leaves sweep.csv one point behind, which the resumed run rewrites.
  write_file_atomically(folder / "sweep-points.txt", [&](std::ostream& o) { write_sweep_points(o, fingerprint, done); });
  std::vector<SweepRow> finished_rows;
  for (const auto& d : done) finished_rows.push_back(d.second);
  CsvTable table = sweep_table(scenario, finished_rows, scenario.sweep->points());
  table.comments.push_back("scenario fingerprint " + fingerprint +
                           " (FNV-1a of the scenario text and the sweep values); sweep-points.txt keeps the "
                           "finished points for trapwork sweep --resume");
  write_file_atomically(folder / "sweep.csv", [&](std::ostream& o) { write_csv(o, table); });
}

namespace {

// Under `mpirun -n P` (P > 1) the noise realisations are shared among the ranks
// (mpi_part_sharing): every rank runs the same task, rank 0 alone writes and reports. A run
// without [noise] has nothing to share: rank 0 computes it and the others end at once.
void run_work_in_world(const WorkCommand& command, const MpiWorld& world, std::ostream& out, std::ostream& progress) {
  Scenario scenario = load_scenario(command.scenario, command.set);
  if (!command.output.empty()) scenario.output_folder = command.output;
  (void)build_protocol(scenario);  // a missing [protocol] is reported before a missing [initial]
  (void)work_request(scenario);
  if (world.size() > 1 && scenario.noise) scenario.noise->request.sharing = mpi_part_sharing(world);
  if (world.rank() > 0) {  // an MPI rank other than 0: its share of the realisations, no files
    if (scenario.noise) (void)work_task(scenario, command.tolerance, command.search_budget, {});
    return;
  }
  OutputRun output(scenario.output_folder, work_output_names(), scenario_inputs(scenario),
                   "trapwork work " + scenario.file);
  TaskBar bar(progress, command.show_progress);
  const TaskHooks hooks = bar.hooks(command.quiet ? nullptr : notice_to(progress));
  if (has_calibration(scenario, command.uncertainty)) (void)calibration_of(scenario, command.uncertainty);
  WorkOutcome outcome = work_task(scenario, command.tolerance, command.search_budget, hooks);
  add_work_uncertainty(outcome, command.uncertainty, hooks);
  bar.finish();
  const auto files = output.commit(write_task_outputs(output.staging(), outcome));
  if (command.quiet) return;
  print_task_report(out, outcome);
  if (world.size() > 1) {
    out << "\nMPI: " << world.size() << " ranks; ";
    if (!outcome.noise) {
      out << "no noise realisations to share: rank 0 computed the run alone\n";
    } else if (outcome.noise->route_name != "realisations") {
      out << "the " << outcome.noise->route_name << " route has no realisations to share: every rank computed it\n";
    } else {
      const int R = outcome.noise->realisations, P = world.size();
      out << "the " << R << " noise realisations shared (rank k computed realisations k + 1, k + 1 + " << P
          << ", ...:";
      for (int k = 0; k < P; ++k) out << (k == 0 ? " " : ", ") << (R - k + P - 1) / P;
      out << "), everything else computed by every rank\n";
    }
  }
  print_files(out, files);
}

}  // namespace

void run_work_command(const WorkCommand& command, std::ostream& out, std::ostream& progress) {
  MpiWorld world;
  try {
    run_work_in_world(command, world, out, progress);
  } catch (const std::exception& e) {
    if (world.size() > 1) {  // the other ranks may wait in an exchange: end them all (the folder is released)
      progress << "trapwork: error: rank " << world.rank() << ": " << e.what() << std::endl;
      world.abort(2);
    }
    throw;
  }
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
                  "first split-operator run's (default " + short_number(default_search_budget) + "); at the bound it stops and "
                  "reports the accuracy it verified");
  add_uncertainty_options(sub, command->uncertainty,
                          "<W>, sd(W), Delta F and the strong lines' probabilities get the standard deviation it "
                          "gives them (lines_uncertainty.csv, summary.json, bars in work.png)");
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

namespace {

// --shard I/N: (I, N) with 1 <= I <= N; InputError otherwise.
std::pair<std::size_t, std::size_t> parse_shard(const std::string& text) {
  const auto slash = text.find('/');
  std::size_t i = 0, n = 0;
  try {
    std::size_t used = 0;
    if (slash != std::string::npos) {
      i = std::stoul(text.substr(0, slash), &used);
      if (used != slash) i = 0;
      n = std::stoul(text.substr(slash + 1), &used);
      if (used != text.size() - slash - 1) n = 0;
    }
  } catch (const std::exception&) {
    i = n = 0;
  }
  if (!(i >= 1 && n >= 1 && i <= n && n <= 1000000))
    throw InputError("--shard", text, "I/N with 1 <= I <= N (shard I of N runs the points p = I, I + N, I + 2N, ... "
                     "numbered from 1), e.g. --shard 2/8");
  return {i, n};
}

constexpr const char* shard_record = "sweep-shard.txt";
constexpr const char* shard_scenario = "sweep-scenario.toml";

}  // namespace

void run_sweep_command(const SweepCommand& command, std::ostream& out, std::ostream& progress) {
  MpiWorld world;
  try {
    run_sweep_in_world(command, world, out, progress);
  } catch (const std::exception& e) {
    if (world.size() > 1) {  // the other ranks wait for messages that will not come: end them all
      progress << "trapwork: error: rank " << world.rank() << ": " << e.what() << std::endl;
      world.abort(2);
    }
    throw;
  }
}

void run_sweep_in_world(const SweepCommand& command, const MpiWorld& world, std::ostream& out,
                        std::ostream& progress) {
  const std::string resolved = set_scenario_text(command.scenario, command.set);
  Scenario scenario = load_scenario(command.scenario, command.set);
  if (!command.output.empty()) scenario.output_folder = command.output;
  if (!scenario.sweep)
    throw InputError("sweep", "", "a [sweep] table: parameter, and values = [...] or from, to, points", "",
                     scenario.file);
  if (command.retry_failed && !command.resume)
    throw InputError("--retry-failed", "without --resume", "--resume --retry-failed (it retries the failed points "
                     "of the earlier run kept in sweep-points.txt)");
  std::optional<std::pair<std::size_t, std::size_t>> shard;
  if (!command.shard.empty()) shard = parse_shard(command.shard);
  if (shard && world.size() > 1)
    throw InputError("--shard", command.shard, "either --shard or mpirun with more than one rank, not both");
  (void)build_protocol(scenario);  // the errors of a missing [protocol] or [initial] come first
  (void)work_request(scenario);
  // --uncertainty FILE is no part of the scenario text that shards, merge and the MPI ranks share:
  // there the calibration is written in the scenario ([uncertainty]).
  const bool calibration_file = !command.uncertainty.calibration.empty() && command.uncertainty.calibration != "none";
  if (calibration_file && (shard || world.size() > 1))
    throw InputError("--uncertainty", command.uncertainty.calibration,
                     "no --uncertainty FILE with --shard or mpirun: write the calibration into the scenario as an "
                     "[uncertainty] table, which every shard and rank reads");
  const UncertaintySettings defaults;  // the ranks compute with these: other method options would not reach them
  if (world.size() > 1 && (!command.uncertainty.calibration.empty() || command.uncertainty.method != defaults.method ||
                           command.uncertainty.samples != defaults.samples || command.uncertainty.seed != defaults.seed))
    throw InputError("--uncertainty", command.uncertainty.calibration,
                     "no --uncertainty options with mpirun (the ranks use the scenario's [uncertainty] with the "
                     "default method, auto, 100 samples, seed 1)");
  if (has_calibration(scenario, command.uncertainty)) {  // its errors before any file is made
    check_uncertainty_settings(command.uncertainty);
    (void)calibration_of(scenario, command.uncertainty);
  }
  if (world.rank() > 0) {  // an MPI worker: rank 0 keeps the records and writes the files
    serve_sweep(world, scenario, command.jobs);
    return;
  }
  const SweepSpec& sweep = *scenario.sweep;
  const std::size_t points = sweep.points();
  // A shard writes into its own folder: -o, or shard-I-of-N inside the scenario's output folder.
  if (shard && command.output.empty())
    scenario.output_folder = (std::filesystem::path(scenario.output_folder) /
                              ("shard-" + std::to_string(shard->first) + "-of-" + std::to_string(shard->second)))
                                 .string();
  // sweep.csv and sweep-points.txt are written in the folder itself as points finish (the
  // record --resume reads); the figures go through the staging folder.
  std::vector<std::string> names = {"sweep.csv", "sweep-points.txt", "sweep.png", "sweep.svg", shard_record,
                                    shard_scenario};
  for (const auto& n : sweep_map_names(scenario)) names.push_back(n);
  if (const auto parent = std::filesystem::path(scenario.output_folder).parent_path(); shard && !parent.empty())
    std::filesystem::create_directories(parent);
  OutputRun output(scenario.output_folder, names, scenario_inputs(scenario), "trapwork sweep " + scenario.file);
  const std::filesystem::path folder = scenario.output_folder;

  // --resume: the points an earlier run of the same scenario finished are kept, the rest run.
  // With --uncertainty FILE, the file's text and the method settings join the fingerprint.
  const auto& u = command.uncertainty;
  const std::string fingerprint = sweep_fingerprint(
      calibration_file ? resolved + "\n--uncertainty " + read_text_file(calibration_of(scenario, u).file, "the calibration") +
                             "\n" + u.method + " " + std::to_string(u.samples) + " " + std::to_string(u.seed)
                       : resolved,
      scenario);
  const std::filesystem::path points_file = folder / "sweep-points.txt";
  std::vector<std::pair<std::size_t, SweepRow>> done;  // (point, row), guarded by sweep_task's lock
  if (command.resume && std::filesystem::exists(points_file)) done = read_sweep_points(points_file, fingerprint, sweep);
  const bool calibrated = has_calibration(scenario, command.uncertainty);
  for (const auto& d : done)
    if (d.second.failure.empty() && (d.second.calibration_method != 0) != calibrated)
      throw InputError("--resume", points_file.string(),
                       std::string("points computed ") + (calibrated ? "with" : "without") +
                           " the calibration's spread, as this run is (the earlier run was made " +
                           (calibrated ? "without" : "with") + " it): use another output folder, or run without --resume");
  auto in_shard = [&](std::size_t i) { return !shard || i % shard->second == shard->first - 1; };
  for (const auto& d : done)
    if (!in_shard(d.first))
      throw InputError("", std::to_string(d.first + 1), "points of shard " + command.shard + " only (point " +
                       std::to_string(d.first + 1) + " is not): use the shard's own folder", "", points_file.string());
  // Failed points are kept as failed (not tried again on every --resume) unless asked.
  const std::size_t retried = command.retry_failed ? std::size_t(std::count_if(done.begin(), done.end(), [](const auto& d) {
    return !d.second.failure.empty();
  })) : 0;
  if (command.retry_failed)
    std::erase_if(done, [](const auto& d) { return !d.second.failure.empty(); });
  const std::size_t resumed = done.size();
  std::vector<std::size_t> todo;  // unfinished points of this run (its shard), in [sweep] order
  std::size_t mine = 0;           // points of this run (its shard)
  {
    std::vector<bool> finished(points, false);
    for (const auto& d : done) finished[d.first] = true;
    for (std::size_t i = 0; i < points; ++i) {
      if (!in_shard(i)) continue;
      ++mine;
      if (!finished[i]) todo.push_back(i);
    }
  }
  if (shard) {  // the shard's record: which points, of which scenario, for trapwork merge
    write_file_atomically(folder / shard_scenario, [&](std::ostream& o) { o << resolved; });
    write_file_atomically(folder / shard_record, [&](std::ostream& o) {
      o << "trapwork sweep shard\nshard " << shard->first << "/" << shard->second << "\nfingerprint " << fingerprint
        << "\npoints " << points << "\nscenario " << scenario.file << '\n';
    });
  }
  auto write_done = [&] { write_sweep_table(folder, scenario, fingerprint, done); };
  if (resumed > 0) write_done();

  ProgressBar bar("sweep points", mine, progress, command.show_progress);
  bar.update(resumed);
  SweepOptions options;
  options.jobs = command.jobs;
  options.todo = todo;
  options.uncertainty = command.uncertainty;
  options.on_point = [&](std::size_t i, const SweepRow& row) {
    done.push_back({i, row});
    write_done();
    bar.update(done.size());
  };
  std::optional<ClusterSweepOutcome> cluster;
  if (world.size() > 1) cluster = coordinate_sweep(world, scenario, options);
  const SweepOutcome run = cluster ? cluster->run : sweep_task(scenario, options);
  bar.finish();
  std::vector<SweepRow> rows;
  for (const auto& d : done) rows.push_back(d.second);
  const auto failed = std::count_if(rows.begin(), rows.end(), [](const SweepRow& r) { return !r.failure.empty(); });
  if (failed > 0)  // an error, so printed even with --quiet
    progress << "trapwork sweep: " << failed << " of " << mine << " point(s) failed (failed = 1 in "
             << (folder / "sweep.csv").string() << ", each with its message; --resume --retry-failed computes them "
             << "again)\n";

  std::vector<std::filesystem::path> files = {folder / "sweep.csv", points_file};
  if (shard) files.insert(files.end(), {folder / shard_record, folder / shard_scenario});
  // A shard draws no figure: its points are scattered over the sweep (trapwork merge draws them).
  if (!shard)
    for (const auto& p : plot_sweep_figure(output.staging(), scenario, rows)) files.push_back(p);
  files = output.commit(files);
  if (command.quiet) return;

  std::string resumed_text = command.resume ? std::to_string(resumed) + " of " + std::to_string(mine) + " points from " +
                                                  points_file.string() + ", " + std::to_string(todo.size()) +
                                                  " computed now" +
                                                  (retried > 0 ? " (" + std::to_string(retried) +
                                                                     " failed before, tried again)"
                                                               : "")
                                            : std::string();
  print_sweep_report(out, run, rows, resumed_text);
  if (shard)
    out << "\nshard " << command.shard << ": " << mine << " of " << points << " points (p = " << shard->first
        << ", " << shard->first << " + " << shard->second << ", ... numbered from 1); join the shards with "
        << "trapwork merge OUT " << folder.string() << " ...\n";
  if (cluster) {  // who computed what: the load balance (mean over max of the ranks' busy seconds)
    out << "\nMPI: " << world.size() << " ranks (rank 0 hands out the points; every rank computes them, " << run.jobs
        << " at a time each)\n";
    double total = 0, most = 0;
    for (int r = 0; r < world.size(); ++r) {
      const double b = cluster->busy_seconds[std::size_t(r)];
      out << "  rank " << r << ": " << cluster->points_per_rank[std::size_t(r)] << " points, busy "
          << short_number(b, 4) << " s\n";
      total += b;
      most = std::max(most, b);
    }
    if (most > 0)
      out << "  load balance (mean / largest busy time of the computing ranks): "
          << short_number(total / double(world.size()) / most, 3) << '\n';
  }
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
  sub->add_option("--shard", command->shard,
                  "I/N: compute only the points p = I, I + N, I + 2N, ... (numbered from 1 in [sweep] order) into "
                  "the shard's own folder (-o, or shard-I-of-N inside the output folder), for batch systems "
                  "without MPI; trapwork merge joins the shards' folders into one sweep.csv");
  add_uncertainty_options(sub, command->uncertainty,
                          "each point's <W>, sd(W) and Delta F get the standard deviation it gives them (columns "
                          "*_calibration_sd of sweep.csv, a band in sweep.png); linear propagation costs 2 work runs "
                          "per parameter per point");
  sub->callback([command] {
    SweepCommand c = *command;
    c.show_progress = !c.quiet && ProgressBar::terminal_allows();
    run_sweep_command(c, std::cout, std::cerr);
  });
}

}  // namespace trapwork
