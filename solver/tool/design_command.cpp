// `trapwork design` (see commands.hpp): the command line of design_task (solver/scenario/design_task.cpp).
#include <iostream>
#include <memory>
#include <optional>

#include "solver/scenario/design_task.hpp"
#include "solver/scenario/progress.hpp"
#include "solver/tool/commands.hpp"
#include "solver/tool/sweep_points.hpp"

namespace trapwork {

namespace {

// Under `mpirun -n P` (P > 1) a robust design's members are shared among the ranks
// (mpi_part_sharing): every rank runs the same search, rank 0 alone writes and reports. A
// design without members has nothing to share: rank 0 runs it and the others end at once.
DesignCommandOutcome run_design_in_world(const DesignCommand& command, const MpiWorld& world, std::ostream& out,
                                         std::ostream& progress) {
  DesignSettings settings;
  settings.scenario_text = set_scenario_text(command.scenario, command.set);
  Scenario scenario = load_scenario(command.scenario, command.set);
  if (!command.output.empty()) scenario.output_folder = command.output;
  DesignOptions& o = settings.options;
  o.modes = command.modes;
  o.starts = command.starts;
  o.max_evaluations = command.evaluations;
  o.objective = design_objective_from_name(command.objective);
  o.method = design_method_from_name(command.method);
  o.amplitude_bound = command.amplitude_bound;
  o.overshoot = command.overshoot;
  o.stop_below = command.stop_below;
  o.zero_end_acceleration = command.smoother;
  o.seed = command.seed;
  settings.max_speed = command.max_speed;
  settings.max_overshoot = command.max_overshoot;
  if (!command.target.empty()) settings.target = command.target;
  settings.shortest = command.shortest;
  settings.bisections = command.bisections;
  settings.robust_variants = command.robust;
  settings.robust_fit = command.robust_fit;
  settings.robust_term = command.robust_term;
  settings.robust_samples = command.robust_samples;
  const bool members = !settings.robust_variants.empty() || !settings.robust_fit.empty();
  if (world.size() > 1 && members) settings.member_sharing = mpi_part_sharing(world);
  if (world.rank() > 0) {  // an MPI rank other than 0: its share of the members, no files
    if (members) (void)design_task(scenario, settings);
    return {};
  }
  std::optional<OutputRun> output;
  TaskBar bar(progress, command.show_progress);
  const TaskHooks hooks = bar.hooks(command.quiet ? std::function<void(const std::string&)>() : notice_to(progress));
  const DesignTaskOutcome task = design_task(scenario, settings, hooks, [&] {
    output.emplace(scenario.output_folder, design_output_names(scenario), scenario_inputs(scenario),
                   "trapwork design " + scenario.file);
  });
  bar.finish();
  DesignCommandOutcome outcome{task.result.objective_before, task.result.objective_after,
                               int(task.result.history.size()), {}};
  outcome.files = commit_and_report(*output, task, out, command.quiet);
  if (world.size() > 1 && !command.quiet) {
    out << "\nMPI: " << world.size() << " ranks; ";
    if (task.robust.empty()) {
      out << "a design without robust members has nothing to share: rank 0 computed it alone\n";
    } else {
      const int M = int(task.robust.size()), P = world.size();
      out << "the " << M << " robust members shared at every evaluation (rank k ran members k + 1, k + 1 + " << P
          << ", ...:";
      for (int k = 0; k < P; ++k) out << (k == 0 ? " " : ", ") << (M - k + P - 1) / P;
      out << "), the search and the final runs computed by every rank\n";
    }
  }
  return outcome;
}

}  // namespace

DesignCommandOutcome run_design_command(const DesignCommand& command, std::ostream& out, std::ostream& progress) {
  MpiWorld world;
  try {
    return run_design_in_world(command, world, out, progress);
  } catch (const std::exception& e) {
    if (world.size() > 1) {  // the other ranks may wait in an exchange: end them all (the folder is released)
      progress << "trapwork: error: rank " << world.rank() << ": " << e.what() << std::endl;
      world.abort(2);
    }
    throw;
  }
}

void add_design_command(CLI::App& app) {
  auto command = std::make_shared<DesignCommand>();
  CLI::App* sub = app.add_subcommand(
      "design",
      "Designs the protocol's ramp: the smooth ramp plus free modes sin^2(pi u) sin(k pi u) (end values kept, zero "
      "end velocity), searched (NLopt) for the least excitation or dissipated work; writes designed.toml with its "
      "table files, design_history.csv, design_summary.json and the pictures of the schedule and the convergence");
  sub->add_option("scenario", command->scenario, "scenario file (TOML) with [protocol] and [initial]")->required();
  sub->add_option("--modes", command->modes, "free modes per changed parameter")
      ->capture_default_str()
      ->check(CLI::Range(1, 20));
  sub->add_option("--starts", command->starts, "starts of the local search (the first from the smooth ramp)")
      ->capture_default_str()
      ->check(CLI::Range(1, 1000));
  sub->add_option("--evaluations", command->evaluations, "bound on the work runs of all starts together (a robust design runs every member at each evaluation: each run counts)")
      ->capture_default_str()
      ->check(CLI::Range(1, 1000000));
  sub->add_option("--objective", command->objective,
                  "excitation (probability of leaving the initial level's adiabatic partner), dissipated_work "
                  "(<W> - Delta F, thermal start) or quanta (mean excitation in quanta: levels climbed above the "
                  "adiabatic partner)")
      ->capture_default_str();
  sub->add_option("--method", command->method, "NLopt local method: bobyqa, cobyla, nelder_mead or sbplx")
      ->capture_default_str();
  sub->add_option("--amplitude-bound", command->amplitude_bound, "bound on each mode amplitude, in units of the change")
      ->capture_default_str();
  sub->add_option("--overshoot", command->overshoot,
                  "how far the ramp may leave the range of its end values, in units of the change")
      ->capture_default_str();
  sub->add_option("--max-speed", command->max_speed,
                  "bound on the ramp's speed in lab units, PARAMETER=VALUE (e.g. trap.centre=0.5m/s) or VALUE "
                  "with one designed parameter; repeatable");
  sub->add_option("--max-overshoot", command->max_overshoot,
                  "bound on how far the ramp leaves its end values, in lab units (e.g. trap.centre=20nm); "
                  "the tighter of this and --overshoot applies; repeatable");
  sub->add_option("--target", command->target,
                  "search for the shortest duration whose design meets this objective value (a number; for "
                  "dissipated_work an energy such as 0.1h*kHz): a design at the scenario's duration, at --shortest, "
                  "then --bisections halvings, each at most --evaluations work runs");
  sub->add_option("--shortest", command->shortest, "lower end of the duration search (default: a quarter of the duration)");
  sub->add_option("--bisections", command->bisections, "halvings of the duration bracket")
      ->capture_default_str()
      ->check(CLI::Range(0, 30));
  sub->add_option("--robust", command->robust,
                  "robust design: a variant of the potential, ADDRESS=VALUE[;ADDRESS=VALUE] in lab units (e.g. "
                  "\"trap.quartic=0.012 h*Hz/nm^4\"); the objective is averaged over the scenario and its variants; "
                  "repeatable");
  sub->add_option("--robust-fit", command->robust_fit,
                  "robust design over samples of a fit: the fit_summary.json of `trapwork fit` (coefficients, "
                  "uncertainties, correlation); --robust-samples samples drawn with --seed");
  sub->add_option("--robust-samples", command->robust_samples, "samples drawn from --robust-fit")
      ->capture_default_str()
      ->check(CLI::Range(1, 1000));
  sub->add_option("--robust-term", command->robust_term,
                  "the term the fitted coefficients belong to (default: the one term that has them all)");
  sub->add_option("--stop-below", command->stop_below, "a start ends once the objective is below this")
      ->capture_default_str();
  sub->add_flag("--smoother", command->smoother, "base ramp 10u^3 - 15u^4 + 6u^5: zero end acceleration too");
  sub->add_option("--seed", command->seed, "seed of the starts after the first")->capture_default_str();
  sub->add_option("-o,--output", command->output, "output folder (overrides [output] folder)");
  sub->add_flag("--quiet", command->quiet, "print nothing but errors");
  add_set_option(sub, command->set);
  sub->callback([command] {
    DesignCommand c = *command;
    c.show_progress = !c.quiet && ProgressBar::terminal_allows();
    run_design_command(c, std::cout, std::cerr);
  });
}

}  // namespace trapwork
