// The subcommands of the `trapwork` tool (see commands.hpp).
#include "solver/tool/commands.hpp"

#include <algorithm>
#include <iostream>
#include <memory>

#include "solver/errors.hpp"
#include "solver/scenario/output.hpp"
#include "solver/scenario/scenario_edit.hpp"
#include "solver/scenario/machine.hpp"

namespace trapwork {

namespace {
std::string the_command_line;  // this process's command line (command_line())

// An argument as a POSIX shell reads it back: single-quoted unless it is plain.
std::string shell_quoted(const std::string& a) {
  if (!a.empty() && a.find_first_not_of("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789-_./=:,+@%") ==
                        std::string::npos)
    return a;
  std::string q = "'";
  for (char c : a) q += c == '\'' ? std::string("'\\''") : std::string(1, c);
  return q + "'";
}
}  // namespace

const std::string& command_line() { return the_command_line; }

void add_set_option(CLI::App* sub, std::vector<std::string>& set) {
  sub->add_option("--set", set,
                  "change a value of the scenario, ADDRESS=VALUE with the file's addresses and units, e.g. "
                  "--set protocol.duration=\"1 us\" --set trap.quartic=\"0.02 h*Hz/nm^4\" (repeatable; recorded in the "
                  "summary)")
      ->allow_extra_args(false);
}

int run_command_line(CLI::App& app, int argc, char** argv) {
  the_command_line = "trapwork";
  for (int i = 1; i < argc; ++i) the_command_line += " " + shell_quoted(argv[i]);
  try {
    app.parse(argc, argv);  // runs the chosen command's callback
    return 0;
  } catch (const CLI::ParseError& e) {
    // For a word that is no command CLI11 says only "A subcommand is required": name it.
    std::vector<std::string> commands;
    for (const CLI::App* sub : app.get_subcommands({})) commands.push_back(sub->get_name());
    const std::string first = argc > 1 ? argv[1] : "";
    if (!first.empty() && first[0] != '-' &&
        std::find(commands.begin(), commands.end(), first) == commands.end()) {
      std::string list;
      for (const auto& c : commands) list += (list.empty() ? "" : ", ") + c;
      std::cerr << "trapwork: error: " << InputError::format("", 0, 0, "command", first, "one of " + list,
                                                             closest_name(first, commands))
                << '\n';
      return 2;
    }
    const int code = app.exit(e);  // prints help, or the command-line error
    return code == 0 ? 0 : 2;
  } catch (const InputError& e) {
    std::cerr << "trapwork: error: " << e.what() << '\n';
    return 2;
  } catch (const PhysicsError& e) {
    std::cerr << "trapwork: error: " << e.what() << '\n';
    return 2;
  } catch (const std::exception& e) {
    std::cerr << "trapwork: error: " << e.what() << '\n';
    return 1;
  }
}

std::string set_scenario_text(const std::string& name, const std::vector<std::string>& set) {
  const bool builtin = name.empty() || name == "default";
  std::string text = builtin ? std::string(default_scenario_text()) : read_text_file(name, "the scenario file");
  if (!set.empty()) text = scenario_text_with_values(text, builtin ? "default" : name, assignments_json(set));
  return text;
}

Scenario load_scenario(const std::string& name, const std::vector<std::string>& set) {
  const bool builtin = name.empty() || name == "default";
  Scenario s = read_scenario_text(set_scenario_text(name, set), builtin ? "default" : name);
  s.invocation = command_line();
  s.changed_values = set;
  return s;
}

void add_spectrum_command(CLI::App& app) {
  auto command = std::make_shared<SpectrumCommand>();
  CLI::App* sub = app.add_subcommand(
      "spectrum",
      "Lowest energy levels and eigenstates of a scenario's potential; writes spectrum.csv, "
      "states.csv, summary.json and spectrum.png/.svg");
  sub->add_option("scenario", command->scenario,
                  "scenario file (TOML); \"default\" or nothing: the built-in 40 u ion scenario");
  sub->add_option("-o,--output", command->output, "output folder (overrides [output] folder)");
  sub->add_option("--levels", command->levels, "number of levels (overrides [spectrum] levels)")
      ->check(CLI::Range(1, 100000));
  sub->add_flag("--quiet", command->quiet, "print nothing but errors");
  add_set_option(sub, command->set);
  sub->callback([command] { run_spectrum(*command, std::cout); });
}

void run_spectrum(const SpectrumCommand& command, std::ostream& out) {
  Scenario scenario = load_scenario(command.scenario, command.set);
  if (!command.output.empty()) scenario.output_folder = command.output;
  OutputRun output(scenario.output_folder, spectrum_output_names(), scenario_inputs(scenario),
                   "trapwork spectrum " + scenario.file);
  TaskHooks hooks;  // a long solve says so before it starts
  if (!command.quiet) hooks.notice = notice_to(std::cerr);
  const SpectrumOutcome outcome = spectrum_task(std::move(scenario), command.levels, hooks);
  commit_and_report(output, outcome, out, command.quiet);
}

TaskHooks TaskBar::hooks(std::function<void(const std::string&)> notice) {
  TaskHooks h;
  h.progress = [this](double fraction) {
    if (bar_) bar_->update(std::size_t(fraction * double(total_)));
  };
  h.stage = [this](const std::string& name) {
    if (!bar_) bar_.emplace(name, total_, out_, show_);
    else bar_->restart(name);
  };
  h.notice = std::move(notice);
  return h;
}

std::function<void(const std::string&)> notice_to(std::ostream& out) {
  // one insertion: notices may come from two threads at once (the spectra solved side by side)
  return [&out](const std::string& text) { out << ("trapwork: " + text + "\n") << std::flush; };
}

}  // namespace trapwork
