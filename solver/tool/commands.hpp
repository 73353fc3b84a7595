#pragma once
// Subcommands of the `trapwork` tool. Each command has one registration function that adds
// its CLI11 subcommand, options and callback to the app (main() calls each once), and one
// run function doing the work, callable from tests. Commands print through the stream given.
#include <CLI/CLI.hpp>
#include <optional>
#include <ostream>
#include <string>

#include "solver/tool/scenario.hpp"

namespace trapwork {

// Parses the command line and runs the chosen command. Exit codes: 0 success; 2 bad input
// (InputError, a command-line error) or unusable physics (PhysicsError); 1 anything else.
// Errors are printed to stderr as "trapwork: error: <message>".
int run_command_line(CLI::App& app, int argc, char** argv);

// The scenario named on a command line: "default" or "" is the built-in one, else a file.
Scenario load_scenario(const std::string& name);

// trapwork spectrum [SCENARIO] [-o DIR] [--levels N] [--quiet]
struct SpectrumCommand {
  std::string scenario;       // file, or "default"/"" for the built-in scenario
  std::string output;         // overrides [output] folder when not empty
  std::optional<int> levels;  // overrides [spectrum] levels
  bool quiet = false;         // print nothing but errors
};
void add_spectrum_command(CLI::App& app);
void run_spectrum(const SpectrumCommand& command, std::ostream& out);

// trapwork work [SCENARIO] [-o DIR] [--quiet]: the work statistics of the scenario's protocol
// (run_work), the report on `out`, the files of write_work_outputs. A progress bar goes to
// `progress` when `show_progress` (the command line: stderr is a terminal and not --quiet).
struct WorkCommand {
  std::string scenario;  // file, or "default"/"" for the built-in scenario
  std::string output;    // overrides [output] folder when not empty
  bool quiet = false;
  bool show_progress = false;
};
void add_work_command(CLI::App& app);
void run_work_command(const WorkCommand& command, std::ostream& out, std::ostream& progress);

// trapwork demo [-o DIR] [--quiet]: `trapwork work` on the built-in scenario.
void add_demo_command(CLI::App& app);

// trapwork sweep SCENARIO [-o DIR] [--quiet] [--jobs N]: one run_work per [sweep] value, `jobs`
// points at a time (each with one FFTW thread), sweep.csv rewritten as points finish, then
// sweep.png/.svg.
struct SweepCommand {
  std::string scenario;
  std::string output;
  bool quiet = false;
  bool show_progress = false;
  int jobs = 0;  // 0: std::thread::hardware_concurrency()
};
void add_sweep_command(CLI::App& app);
void run_sweep_command(const SweepCommand& command, std::ostream& out, std::ostream& progress);

}  // namespace trapwork
