// trapwork: one quantum particle in a one-dimensional trap. Each subcommand registers itself
// (solver/tool/commands.hpp); main only builds the app and runs it.
#include "solver/scenario/output.hpp"
#include "solver/tool/commands.hpp"

int main(int argc, char** argv) {
  CLI::App app{"trapwork: one quantum particle in a one-dimensional trap (ions, atoms in tweezers, boxes)",
               "trapwork"};
  app.require_subcommand(1);
  app.set_version_flag("--version", "trapwork " + std::string(trapwork::trapwork_version()));
  trapwork::add_spectrum_command(app);
  trapwork::add_work_command(app);
  trapwork::add_sweep_command(app);
  trapwork::add_merge_command(app);
  trapwork::add_demo_command(app);
  trapwork::add_fit_command(app);
  trapwork::add_compare_command(app);
  trapwork::add_plan_command(app);
  trapwork::add_design_command(app);
  trapwork::add_keys_command(app);
  return trapwork::run_command_line(app, argc, argv);
}
