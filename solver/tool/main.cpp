// trapwork: one quantum particle in a one-dimensional trap. Each subcommand registers itself
// (solver/tool/commands.hpp); main only builds the app and runs it.
#include "solver/scenario/output.hpp"
#include "solver/tool/commands.hpp"

#include <malloc.h>

int main(int argc, char** argv) {
  // glibc's allocator, left to itself, hands the freed top of the heap back to the system once it
  // passes twice the largest block it mapped (a few MB here) and faults it in again at the next
  // allocation: every potential scan (200001 points, 1.6 MB per vector) paid for fresh zeroed
  // pages, and page faults and memset took half of a lab-frame run's preliminaries (perf, the
  // tweezer_deform example). Freed memory up to 256 MB stays with the process, blocks up to
  // 64 MB come from the heap (larger ones are still mapped and returned). Measured side by side
  // (GLIBC_TUNABLES with the same values, two runs each): tweezer_deform.toml 0.60 to 0.47 s,
  // with --tolerance 1e-5 1.07 to 0.59-0.74 s, ion_sweep.toml 2.0-2.3 to 1.9 s; the demo and
  // the benchmark's reference job unchanged (within their noise).
  mallopt(M_TRIM_THRESHOLD, 256 << 20);
  mallopt(M_MMAP_THRESHOLD, 64 << 20);
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
