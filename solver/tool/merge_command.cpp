// `trapwork merge OUT SHARD_FOLDER...`: the folders of `trapwork sweep --shard I/N` joined into
// one sweep table (see commands.hpp).
#include <algorithm>
#include <fstream>
#include <iostream>
#include <map>
#include <sstream>

#include "solver/errors.hpp"
#include "solver/tool/commands.hpp"
#include "solver/tool/sweep_points.hpp"

namespace trapwork {

namespace {

struct ShardRecord {
  std::filesystem::path folder;
  std::size_t index = 0, count = 0, points = 0;
  std::string fingerprint, scenario_file;
};

// sweep-shard.txt of a shard folder; InputError naming it when missing or damaged.
ShardRecord read_shard_record(const std::filesystem::path& folder) {
  const std::filesystem::path file = folder / "sweep-shard.txt";
  std::ifstream in(file);
  if (!in)
    throw InputError("", folder.string(), "a shard folder of trapwork sweep --shard I/N (with sweep-shard.txt)", "",
                     file.string());
  ShardRecord r;
  r.folder = folder;
  std::string line, word;
  std::getline(in, line);
  bool ok = line == "trapwork sweep shard";
  char slash = 0;
  ok = ok && std::getline(in, line) && (std::istringstream(line) >> word >> r.index >> slash >> r.count) &&
       word == "shard" && slash == '/';
  ok = ok && std::getline(in, line) && (std::istringstream(line) >> word >> r.fingerprint) && word == "fingerprint";
  ok = ok && std::getline(in, line) && (std::istringstream(line) >> word >> r.points) && word == "points";
  ok = ok && std::getline(in, line) && line.rfind("scenario ", 0) == 0;
  if (ok) r.scenario_file = line.substr(9);
  if (!ok || r.index < 1 || r.index > r.count)
    throw InputError("", line, "the record of a shard written by trapwork sweep --shard (shard, fingerprint, points, "
                     "scenario lines)", "", file.string());
  return r;
}

// "3, 7, 11 and 2 more" (1-based point numbers)
std::string point_list(const std::vector<std::size_t>& points) {
  std::string text;
  const std::size_t shown = std::min<std::size_t>(points.size(), 20);
  for (std::size_t k = 0; k < shown; ++k) text += (k ? ", " : "") + std::to_string(points[k] + 1);
  if (points.size() > shown) text += " and " + std::to_string(points.size() - shown) + " more";
  return text;
}

}  // namespace

void run_merge_command(const MergeCommand& command, std::ostream& out) {
  if (command.shards.empty()) throw InputError("SHARD_FOLDER", "", "one or more shard folders of trapwork sweep --shard");
  std::vector<ShardRecord> records;
  for (const auto& f : command.shards) records.push_back(read_shard_record(f));
  const ShardRecord& first = records.front();
  for (const auto& r : records) {
    if (r.fingerprint != first.fingerprint || r.points != first.points)
      throw InputError("", r.folder.string(), "shards of one scenario: " + r.folder.string() + " has fingerprint " +
                       r.fingerprint + " (" + std::to_string(r.points) + " points), " + first.folder.string() + " " +
                       first.fingerprint + " (" + std::to_string(first.points) + " points): a different scenario, "
                       "--set change or sweep");
    if (r.count != first.count)
      throw InputError("", r.folder.string(), "shards of one division: " + r.folder.string() + " is shard " +
                       std::to_string(r.index) + "/" + std::to_string(r.count) + ", " + first.folder.string() +
                       " is of " + std::to_string(first.count));
  }
  // The scenario as the shards ran it: its resolved text, read under its own name (so that its
  // table files are found as they were), checked against the shards' fingerprint.
  std::ifstream text_in(first.folder / "sweep-scenario.toml", std::ios::binary);
  std::ostringstream text;
  text << text_in.rdbuf();
  if (!text_in)
    throw InputError("", "", "the scenario text the shard ran (sweep-scenario.toml)", "",
                     (first.folder / "sweep-scenario.toml").string());
  Scenario scenario = read_scenario_text(text.str(), first.scenario_file);
  if (!scenario.sweep || sweep_fingerprint(text.str(), scenario) != first.fingerprint ||
      scenario.sweep->points() != first.points)
    throw InputError("", "", "the scenario text of the shard's fingerprint " + first.fingerprint +
                     " (the file was changed after the run)", "", (first.folder / "sweep-scenario.toml").string());
  scenario.invocation = command_line();
  scenario.output_folder = command.output;

  std::vector<std::pair<std::size_t, SweepRow>> done;
  std::vector<int> owner(first.points, -1);  // which shard holds each point
  std::vector<std::size_t> overlap;
  for (std::size_t s = 0; s < records.size(); ++s) {
    for (auto& d : read_sweep_points(records[s].folder / "sweep-points.txt", first.fingerprint, *scenario.sweep)) {
      if (owner[d.first] >= 0) {
        overlap.push_back(d.first);
        continue;
      }
      owner[d.first] = int(s);
      done.push_back(std::move(d));
    }
  }
  std::sort(overlap.begin(), overlap.end());  // shards are read in the order given
  if (!overlap.empty())
    throw InputError("", "", "each point in one shard only: point(s) " + point_list(overlap) + " are in two (the "
                     "same folder given twice, or shards of the same number)");
  std::vector<std::size_t> missing;
  for (std::size_t i = 0; i < first.points; ++i)
    if (owner[i] < 0) missing.push_back(i);
  if (!missing.empty()) {
    std::vector<bool> shard_given(first.count, false);
    for (const auto& r : records) shard_given[r.index - 1] = true;
    std::string absent;
    for (std::size_t k = 0; k < first.count; ++k)
      if (!shard_given[k]) absent += (absent.empty() ? "" : ", ") + std::to_string(k + 1) + "/" + std::to_string(first.count);
    throw InputError("", "", "every point of the sweep: " + std::to_string(missing.size()) + " of " +
                     std::to_string(first.points) + " missing (points " + point_list(missing) + ", numbered from 1)" +
                     (absent.empty() ? std::string("; finish the shards with trapwork sweep --shard I/N --resume")
                                     : "; shard(s) not given: " + absent));
  }
  std::sort(done.begin(), done.end(), [](const auto& a, const auto& b) { return a.first < b.first; });

  std::vector<std::string> names = {"sweep.csv", "sweep-points.txt", "sweep.png", "sweep.svg"};
  for (const auto& n : sweep_map_names(scenario)) names.push_back(n);
  OutputRun output(command.output, names, scenario_inputs(scenario), "trapwork merge " + command.output);
  write_sweep_table(output.staging(), scenario, first.fingerprint, done);
  std::vector<SweepRow> rows;
  for (const auto& d : done) rows.push_back(d.second);
  std::vector<std::filesystem::path> files = {output.staging() / "sweep.csv", output.staging() / "sweep-points.txt"};
  for (const auto& p : plot_sweep_figure(output.staging(), scenario, rows)) files.push_back(p);
  files = output.commit(files);
  if (command.quiet) return;
  out << "merged " << records.size() << " shard(s) of " << first.count << ": " << first.points
      << " points of " << first.scenario_file << " (fingerprint " << first.fingerprint << ")\n";
  for (const auto& f : files) out << "wrote " << f.string() << '\n';
}

void add_merge_command(CLI::App& app) {
  auto command = std::make_shared<MergeCommand>();
  CLI::App* sub = app.add_subcommand(
      "merge",
      "Joins the folders of trapwork sweep --shard I/N into one sweep.csv (rows as a single run writes them), "
      "sweep-points.txt and figures; refuses shards of different scenarios, points in two shards and missing points");
  sub->add_option("output", command->output, "output folder of the joined sweep")->required();
  sub->add_option("shards", command->shards, "the shard folders")->required();
  sub->add_flag("--quiet", command->quiet, "print nothing but errors");
  sub->callback([command] { run_merge_command(*command, std::cout); });
}

}  // namespace trapwork
