// Cost before commitment (solver/cost.hpp): estimates grow with the sizes as the arrays do, a
// run that cannot fit in the memory limit is refused before it allocates with the estimate and
// the key to change, the estimate is reported, and the progress of a run repeated with more
// levels starts a new stage instead of sitting at 100 %.
#include <catch2/catch.hpp>
#include <cmath>
#include <sstream>
#include <string>
#include <vector>

#include "scratch_files.hpp"
#include "solver/cost.hpp"
#include "solver/errors.hpp"
#include "solver/scenario/machine.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/scenario/work_output.hpp"
#include "solver/spectrum.hpp"
#include "solver/tool/commands.hpp"
#include "solver/work.hpp"

using namespace trapwork;

namespace {
// The message of the PhysicsError that f throws ("" if it throws none).
template <class F>
std::string physics_error_of(F&& f) {
  try {
    f();
  } catch (const PhysicsError& e) {
    return e.what();
  }
  return "";
}

bool contains(const std::string& text, const std::string& part) { return text.find(part) != std::string::npos; }

// A 40 u ion in a 1 MHz trap moved by 40 nm in 0.3 us (|alpha|^2 about 3): with a final margin
// of 2 levels the unresolved weight is far above 1e-8, so run_work repeats the run with more
// levels.
const std::string enlarging_scenario = R"(title = "enlarged"
[particle]
mass = "40 u"
[[potential]]
name = "trap"
shape = "harmonic"
frequency = "1 MHz"
[protocol]
duration = "0.3 us"
[[protocol.change]]
parameter = "trap.centre"
to = "40 nm"
[initial]
mean_phonons = 0.2
[work]
final_margin = 2
time_step_check = false
)";
}  // namespace

TEST_CASE("cost estimates grow with the sizes as the arrays do", "[cost]") {
  // dense: n^2 memory and n^3 arithmetic
  const CostEstimate d1 = spectrum_cost(500, 20, true), d2 = spectrum_cost(1000, 20, true);
  CHECK(d2.bytes / d1.bytes == Approx(4));
  CHECK(d2.operations / d1.operations == Approx(8));
  // Lanczos: linear in the points at fixed levels, and at least the states themselves
  const CostEstimate l1 = spectrum_cost(1 << 20, 100, false), l2 = spectrum_cost(1 << 21, 100, false);
  CHECK(l2.bytes / l1.bytes == Approx(2));
  CHECK(l1.bytes >= double(1 << 20) * 100 * 8);
  // the propagation's arithmetic is linear in steps, states and runs
  WorkSizes s;
  s.points = 512;
  s.levels = 60;
  s.kept = 40;
  s.steps = 1000;
  s.runs = 4;
  const CostEstimate w1 = work_cost(s);
  s.steps = 2000;
  CHECK(work_cost(s).operations / w1.operations == Approx(2));
  s.kept = 80;
  CHECK(work_cost(s).operations / w1.operations == Approx(4));
  // the two spectra and the propagated states are held: at least 2 n L doubles + 2 n K complex
  CHECK(w1.bytes >= 2.0 * 512 * 60 * 8 + 2.0 * 512 * 40 * 16);
  CHECK(plan_cost(2e9, 2e12, 100).bytes == Approx(1.6e10));  // one experiment's 2e9 samples of 8 bytes
}

TEST_CASE("check_memory refuses an estimate above the limit with the estimate and what to change", "[cost]") {
  const CostEstimate big = spectrum_cost(std::size_t(1) << 24, 100, false);
  CHECK_NOTHROW(check_memory(big, 0, "x"));               // no limit
  CHECK_NOTHROW(check_memory(big, 2 * big.bytes, "x"));   // fits
  const std::string message = physics_error_of([&] { check_memory(big, 1e9, "refused before computing"); });
  INFO(message);
  CHECK(contains(message, "refused before computing"));
  CHECK(contains(message, "16777216 points"));
  CHECK(contains(message, "needs about " + bytes_text(big.bytes)));
  CHECK(contains(message, "more than the 1.0 GB available"));
  CHECK(contains(message, "[grid] points"));
  CHECK(contains(message, "[spectrum] levels"));
  CHECK(bytes_text(1.5e9) == "1.5 GB");
  CHECK(bytes_text(40e9) == "40 GB");
}

TEST_CASE("long_run_notice says an estimate above long_run_seconds, and only that", "[cost]") {
  std::vector<std::string> said;
  const auto notice = long_run_notice([&](const std::string& text) { said.push_back(text); }, 2);
  CostEstimate e;
  e.bytes = 2e6;
  e.what = "a spectrum of 1000 levels on 2048 points (Lanczos)";
  e.operations = 5e9 * 2 * long_run_seconds * 0.9;  // 27 s on 2 threads at the assumed rate
  notice(e);
  CHECK(said.empty());
  e.operations = 5e9 * 2 * 125;  // 125 s on 2 threads
  notice(e);
  REQUIRE(said.size() == 1);
  CHECK(said[0] ==
        "estimated 2.0 MB of memory, about 2m05s (a spectrum of 1000 levels on 2048 points (Lanczos))");
  CHECK_FALSE(long_run_notice(nullptr));
}

TEST_CASE("automatic step counts: at least 16, refused past 1e9 or when not finite", "[cost]") {
  CHECK(automatic_steps(100, 0.2) == 500);
  CHECK(automatic_steps(100.01, 0.2) == 501);  // rounded up: the phase per step is a bound
  CHECK(automatic_steps(1, 0.2) == 16);
  CHECK(automatic_steps(2e8, 0.2) == 1000000000);
  // a duration of 1e30 s gave int(ceil(...)) past an int (undefined; 16 steps here)
  const std::string message = physics_error_of([] { (void)automatic_steps(1e40, 0.2); });
  INFO(message);
  CHECK(contains(message, "5e+40 split-operator steps"));
  CHECK(contains(message, "more than the 1e+09"));
  CHECK(contains(message, "[protocol] duration"));
  CHECK(contains(message, "[work] steps"));
  CHECK_THROWS_AS(automatic_steps(INFINITY, 0.2), PhysicsError);
  CHECK_THROWS_AS(automatic_steps(NAN, 0.2), PhysicsError);
}

TEST_CASE("issue 14: a spectrum that cannot fit in the memory limit is refused before it is computed", "[cost]") {
  // 2^22 points, 100 levels: the Lanczos basis alone is about 10 GB. Without the check the solver
  // would start (and allocate, or run for hours); with a 1 GB limit it must refuse at once.
  const std::size_t n = std::size_t(1) << 22;
  const Grid grid = Grid::periodic(-50, 50, n);
  std::vector<double> v(n);
  for (std::size_t j = 0; j < n; ++j) v[j] = 0.5 * grid.x(j) * grid.x(j);
  SpectrumOptions options;
  options.levels = 100;
  options.memory_limit = 1e9;
  const std::string message = physics_error_of([&] { (void)solve_spectrum(grid, v, options); });
  INFO(message);
  CHECK(contains(message, "needs about"));
  CHECK(contains(message, "[grid] points"));
}

TEST_CASE("issue 14: run_work refuses levels = 50000 before computing a spectrum", "[cost]") {
  Scenario s = read_scenario_text(enlarging_scenario + "[spectrum]\nlevels = 50000\n", "levels.toml");
  WorkRequest request = work_request(s);
  request.spectrum.options.memory_limit = 16e9;
  request.spectrum.options.memo = std::make_shared<SpectrumMemo>();
  const std::string message = physics_error_of([&] { (void)run_work(s.potential, build_protocol(s), request); });
  INFO(message);
  // refused after the top level's WKB estimate, not after 50000 WKB levels (a minute's work)
  CHECK(request.spectrum.options.memo->wkb_levels() < 100);
  CHECK(contains(message, "50000 levels"));
  CHECK(contains(message, "more than the 16 GB available"));
  CHECK(contains(message, "[spectrum] levels"));
}

TEST_CASE("issue 14: a run's cost estimate is made before its propagation and kept in its diagnostics", "[cost]") {
  Scenario s = read_scenario_text(enlarging_scenario, "estimate.toml");
  WorkRequest request = work_request(s);
  request.threads = 1;
  std::vector<CostEstimate> seen, spectra;
  request.on_estimate = [&](const CostEstimate& e) { seen.push_back(e); };
  // run estimates seen when the first spectrum's came (threads = 1: in order; an enlarged
  // attempt solves more spectra after the first run's estimate)
  std::size_t told_after = 99;
  request.on_spectrum_estimate = [&](const CostEstimate& e) {
    if (spectra.empty()) told_after = seen.size();
    spectra.push_back(e);
  };
  const WorkResult r = run_work(s.potential, build_protocol(s), request);
  REQUIRE(!seen.empty());
  CHECK_THAT(seen.back().what, Catch::Contains("propagated states"));
  REQUIRE(spectra.size() >= 2);  // H_A and H_B at least
  CHECK(told_after == 0);        // the first before the run's own estimate
  for (const auto& e : spectra) CHECK_THAT(e.what, Catch::StartsWith("a spectrum of "));
  CHECK(seen.back().bytes == r.diagnostics.estimated_bytes);
  CHECK(seen.back().operations == r.diagnostics.estimated_operations);
  // at least the forward propagation's transforms: steps x 3 substeps x states x 2 x 5 n log2 n
  const double n = double(r.grid.size());
  CHECK(r.diagnostics.estimated_operations >=
        double(r.steps) * 3 * r.forward.transitions.initial_levels() * 10 * n * std::log2(n));
}

TEST_CASE("issue 14: a run repeated with more levels starts a new progress stage instead of sitting at 100 %", "[cost]") {
  Scenario s = read_scenario_text(enlarging_scenario, "stages.toml");
  WorkRequest request = work_request(s);
  request.threads = 1;
  std::vector<std::string> stages;
  std::vector<double> first_after_stage;  // the first progress value reported in each new stage
  bool fresh = false;
  request.stage = [&](const std::string& stage) {
    stages.push_back(stage);
    fresh = true;
  };
  request.progress = [&](double f) {
    if (fresh) first_after_stage.push_back(f);
    fresh = false;
  };
  const WorkResult r = run_work(s.potential, build_protocol(s), request);
  bool enlarged = false;
  for (const auto& n : r.diagnostics.notes) enlarged = enlarged || contains(n, "levels enlarged");
  REQUIRE(enlarged);  // the scenario is built to need more levels
  REQUIRE(!stages.empty());
  CHECK(contains(stages.front(), "more levels"));
  REQUIRE(first_after_stage.size() == stages.size());
  for (double f : first_after_stage) CHECK(f < 0.5);  // progress of the new stage starts near 0

  // the tool's bar: a new line for the new stage, so it does not stay at 100 % meanwhile
  const auto dir = trapwork_test::scratch_dir("test-cost", "stages");
  std::ofstream(dir / "stages.toml") << enlarging_scenario;
  WorkCommand c;
  c.scenario = (dir / "stages.toml").string();
  c.output = (dir / "out").string();
  c.show_progress = true;
  std::ostringstream out, progress;
  run_work_command(c, out, progress);
  INFO(progress.str());
  CHECK(contains(progress.str(), "propagating ["));
  CHECK(contains(progress.str(), "\rmore levels (escape probability"));
}

TEST_CASE("issue 14: a tunnelling doublet does not ask the histogram for 1e8 bins", "[cost]") {
  // Found by the property stage (a tilted double well, seed 9 of its first corpus): the default
  // bin width, the lowest spacing of H_A, was the doublet's splitting, and the histogram of a
  // work range 1e8 times wider threw std::bad_alloc after the whole computation.
  WorkDistribution d;
  d.lines = {{0.0, 0.5, 0, 0}, {10.0, 0.5, 1, 1}};
  const std::string message = physics_error_of([&] { (void)histogram(d, 1e-8); });
  INFO(message);
  CHECK(contains(message, "[work] bin_width"));
  CHECK(histogram(d, 1.0).probability.size() == 11);

  Scenario s = read_scenario_text(enlarging_scenario, "doublet.toml");
  const Protocol protocol = build_protocol(s);
  const WorkRequest request = work_request(s);
  WorkResult result;
  result.initial_spectrum.energies = Eigen::Vector4d(0, 1e-9, 1, 1 + 1e-9);  // two doublets
  result.initial_spectrum.group = {0, 1, 2, 3};  // split by more than the degeneracy tolerance
  result.distribution = d;
  const WorkRun run{s, protocol, request, result};
  CHECK(bin_width_of(run) == Approx(10.0 / 4000));  // at most 4000 bins over the work range
  s.work->bin_width = 1e-9;  // a width the user asks for is kept
  CHECK(bin_width_of(run) == 1e-9);
}

TEST_CASE("issue 14: the Hermite basis path is refused before it allocates, too", "[cost]") {
  // A polynomial trap with method = "hermite" and 50000 levels: a dense basis of 200060 functions
  // (about 1 TB); before, it ended in std::bad_alloc (or swapping) with no advice.
  Scenario s = read_scenario_text(enlarging_scenario + "[spectrum]\nlevels = 50000\nmethod = \"hermite\"\n",
                                  "hermite.toml");
  s.spectrum.options.memory_limit = 16e9;
  const std::string message = physics_error_of([&] { (void)compute_spectrum(s.potential, s.spectrum); });
  INFO(message);
  CHECK(contains(message, "Hermite basis"));
  CHECK(contains(message, "more than the 16 GB available"));
  CHECK(contains(message, "[spectrum] levels"));
}
