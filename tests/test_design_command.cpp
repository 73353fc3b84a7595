// `trapwork design` (solver/tool/design_command.cpp, solver/scenario/design_task.cpp): the example
// examples/ion_design.toml with a small evaluation budget; its files; the designed scenario run
// by the work task gives the objective the search reported; refusals.
#include <catch2/catch.hpp>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>

#include "solver/errors.hpp"
#include "solver/scenario/tasks.hpp"
#include "solver/tool/commands.hpp"
#include "tests/scratch_files.hpp"

using namespace trapwork;
namespace fs = std::filesystem;

TEST_CASE("trapwork design: the example with a small budget, its files and designed.toml", "[design][cli][examples]") {
  const fs::path dir = trapwork_test::scratch_dir("design", "example");
  DesignCommand c;
  c.scenario = (fs::path(TRAPWORK_SOURCE_DIR) / "examples" / "ion_design.toml").string();
  c.output = (dir / "out").string();
  c.starts = 1;
  c.evaluations = 10;
  std::ostringstream report;
  const DesignCommandOutcome o = run_design_command(c, report, report);
  INFO(report.str());
  CHECK(o.evaluations == 10);
  CHECK(o.objective_before > 0.99);           // one trap period: the smooth ramp excites almost surely
  CHECK(o.objective_after < o.objective_before / 2);
  CHECK(report.str().find("the evaluation bound (10) ended the search") != std::string::npos);
  for (const char* f : {"designed.toml", "designed_trap_centre.csv", "design_history.csv", "design_summary.json",
                        "design_schedule.png", "design_schedule.svg", "design_convergence.png", "design_convergence.svg"})
    CHECK(fs::exists(dir / "out" / f));
  const auto summary = nlohmann::json::parse(trapwork_test::read_all(dir / "out" / "design_summary.json"));
  CHECK(summary.at("evaluations") == 10);
  CHECK(summary.at("objective_after").get<double>() == o.objective_after);
  CHECK(summary.at("parameters").at(0).at("unit") == "nm");
  // History: one row per evaluation (evaluation, start, objective, feasible, excess, 3 amplitudes).
  const auto history = trapwork_test::csv_rows(trapwork_test::read_all(dir / "out" / "design_history.csv"));
  REQUIRE(history.size() == 10);
  CHECK(history[0].size() == 8);
  CHECK(history[0][2] == Approx(o.objective_before).epsilon(1e-12));
  // The designed scenario runs as any scenario: its table (2001 rows, linear in between, lab frame)
  // reproduces the search's objective 1 - P(0 -> 0) up to the table's interpolation.
  const Scenario designed = read_scenario((dir / "out" / "designed.toml").string());
  REQUIRE(designed.work);
  CHECK(designed.work->frame == "lab");
  const WorkOutcome w = work_task(designed, std::nullopt);
  const double stay = w.run().result.forward.transitions.probability(0, 0);
  CHECK(std::abs((1 - stay) - o.objective_after) < 1e-4 * o.objective_after + 1e-9);
}

TEST_CASE("trapwork design refuses what it cannot design, naming the key", "[design][cli]") {
  const fs::path dir = trapwork_test::scratch_dir("design", "refusals");
  const std::string example = trapwork_test::read_all(fs::path(TRAPWORK_SOURCE_DIR) / "examples" / "ion_design.toml");
  std::ofstream(dir / "ion.toml") << example;
  DesignCommand c;
  c.scenario = (dir / "ion.toml").string();
  c.output = (dir / "out").string();
  c.quiet = true;
  c.objective = "dissipated_work";  // a level start has no Delta F
  try {
    run_design_command(c, std::cout, std::cout);
    FAIL("no error");
  } catch (const InputError& e) {
    CHECK(e.key == "objective");
  }
  c.objective = "speed";
  CHECK_THROWS_AS(run_design_command(c, std::cout, std::cout), InputError);
  c.objective = "excitation";
  c.set = {"change[1].ramp=constant"};  // nothing changes: nothing to design
  CHECK_THROWS_AS(run_design_command(c, std::cout, std::cout), InputError);
  CHECK_FALSE(fs::exists(dir / "out" / "design_summary.json"));  // nothing written
}
