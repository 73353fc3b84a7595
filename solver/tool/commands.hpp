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

}  // namespace trapwork
