// trapwork keys [TABLE] [--markdown]: the key reference of scenario files (solver/scenario/keys.hpp).
#include <iostream>
#include <memory>

#include "solver/scenario/keys.hpp"
#include "solver/tool/commands.hpp"

namespace trapwork {

void add_keys_command(CLI::App& app) {
  auto command = std::make_shared<KeysCommand>();
  CLI::App* sub = app.add_subcommand(
      "keys",
      "Print the keys a scenario file may hold: every table, each key's type, dimension, default and meaning, "
      "and each potential shape's parameters with its formula");
  std::string tables;
  for (const auto& a : reference_addresses()) tables += (tables.empty() ? "" : ", ") + a;
  sub->add_option("table", command->table,
                  "one table or shape: the table's address as in the file (\"work\", \"box.soft_walls\", "
                  "\"protocol.change\", \"top\" for the top level) or \"potential.<shape>\" (or the bare shape "
                  "name) for one shape's parameters; nothing: all. Known: " +
                      tables);
  sub->add_flag("--markdown", command->markdown, "print Markdown (examples/scenario-keys.md is this output)");
  sub->callback([command] { run_keys(*command, std::cout); });
}

void run_keys(const KeysCommand& command, std::ostream& out) { out << keys_text(command.table, command.markdown); }

}  // namespace trapwork
