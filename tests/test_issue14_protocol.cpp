// Regression tests for issue 14 (protocols): explicit time dependence of formula terms, the
// harmonic reference where it does not apply, and the --tolerance search on moving walls
// (its step count must change; its cost is bounded).
#include <catch2/catch.hpp>
#include <cmath>
#include <regex>
#include <set>

#include "solver/errors.hpp"
#include "solver/moving_wall.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/scenario/work_output.hpp"
#include "solver/work.hpp"

using namespace trapwork;
using Catch::Matchers::Contains;

namespace {

// A fixed grid and steps, no checks: both runs of a comparison see the same numerics.
WorkRequest small_request(double beta) {
  WorkRequest r;
  r.initial = InitialState::thermal(beta);
  r.spectrum.extent = std::make_pair(-9.0, 9.0);
  r.spectrum.points = 256;
  r.max_initial_levels = 30;
  r.spectrum.convergence_check = false;
  r.grid_check = false;
  r.time_step_check = false;
  r.integrator = Integrator::fourth_order;
  r.steps = 400;
  return r;
}

}  // namespace

TEST_CASE("issue 14: a formula using t gives H_B = V(x, tau), as the same V(x, t) written as a ramp",
          "[issue14][work][formula]") {
  // V(x, t) = (1/2) k(t) x^2, k = 1 + t/1.5 over tau = 1.5: a harmonic frequency 1 -> sqrt(2)
  const double tau = 1.5, beta = 1.0;
  const Potential explicit_t({Term::formula("trap", "0.5*x^2*(1 + t/1.5)")});
  const Potential scheduled({Term::formula("trap", "0.5*k*x^2", {{"k", 1.0}})});
  const WorkResult a = run_work(explicit_t, Protocol(tau, {}), small_request(beta));
  const WorkResult b = run_work(scheduled, Protocol(tau, {Schedule::linear("trap.k", 1.0, 2.0)}), small_request(beta));

  // H_B: harmonic levels of omega_1 = sqrt(2), (n + 1/2) omega_1 (textbook); the Fourier grid
  // of 256 points over [-9, 9] resolves the lowest levels to rounding (measured 1e-13)
  const double w1 = std::sqrt(2.0);
  REQUIRE(a.final_spectrum.energies.size() > 3);
  for (int n = 0; n < 3; ++n) CHECK(a.final_spectrum.energies[n] == Approx((n + 0.5) * w1).epsilon(1e-9));
  // the same distribution: the two potentials agree to rounding at every time
  REQUIRE(a.distribution.lines.size() == b.distribution.lines.size());
  for (std::size_t i = 0; i < a.distribution.lines.size(); ++i) {
    CHECK(a.distribution.lines[i].work == Approx(b.distribution.lines[i].work).margin(1e-10));
    CHECK(a.distribution.lines[i].probability == Approx(b.distribution.lines[i].probability).margin(1e-10));
  }
  CHECK(a.distribution.mean == Approx(b.distribution.mean).margin(1e-10));
  CHECK(a.distribution.free_energy_change == Approx(b.distribution.free_energy_change).margin(1e-10));
  // Delta F of the oscillator: Z = 1/(2 sinh(beta omega/2)) (textbook), so
  // Delta F = ln(sinh(beta w1/2) / sinh(beta w0/2)) / beta; the kept levels leave out 1e-10
  const double exact = std::log(std::sinh(beta * w1 / 2) / std::sinh(beta / 2)) / beta;
  CHECK(a.distribution.free_energy_change == Approx(exact).margin(1e-8));
  // the reverse run reads the formula at tau - t: its lines match the ramp's reverse run
  REQUIRE(a.reverse_distribution);
  REQUIRE(b.reverse_distribution);
  CHECK(a.reverse_distribution->mean == Approx(b.reverse_distribution->mean).margin(1e-10));
  CHECK(std::abs(a.diagnostics.jarzynski_residual) < 1e-8);
}

TEST_CASE("issue 14: a formula using t with a sudden switch is refused; one without t is not", "[issue14][formula]") {
  const Potential explicit_t({Term::formula("trap", "0.5*x^2*(1 + t)")});
  CHECK(explicit_t.depends_on_time());
  CHECK_THROWS_AS(run_work(explicit_t, Protocol(0, {}), small_request(1)), InputError);
  CHECK_THROWS_WITH(Protocol(0, {}).check(explicit_t), Contains("trap.expression") && Contains("duration > 0"));
  const Potential plain({Term::formula("trap", "0.5*k*x^2", {{"k", 1.0}})});
  CHECK_FALSE(plain.depends_on_time());
  CHECK_NOTHROW(Protocol(0, {Schedule::linear("trap.k", 1.0, 2.0)}).check(plain));
  // snapshots carry their time: H_A at 0, H_B at tau, the reverse protocol the other way
  const Protocol p(2.0, {});
  CHECK(p.initial(explicit_t)(1.0) == Approx(0.5));
  CHECK(p.final(explicit_t)(1.0) == Approx(1.5));
  CHECK(p.reversed().initial(explicit_t)(1.0) == Approx(1.5));
  CHECK(p.reversed().at(explicit_t, 0.5)(1.0) == Approx(0.5 * (1 + 1.5)));
}

TEST_CASE("issue 14: a polynomial trap ramped to a pure quartic has no harmonic reference, and says why",
          "[issue14][work][harmonic]") {
  const Potential trap({Term("trap", Shape::polynomial, {{"frequency", 1.0}, {"quartic", 0.1}})});
  WorkRequest r = small_request(2.0);
  r.reverse_run = false;
  WorkResult result;
  REQUIRE_NOTHROW(result = run_work(trap, Protocol(2.0, {Schedule::linear("trap.frequency", 1.0, 0.0)}), r));
  CHECK_FALSE(result.harmonic);
  CHECK_THAT(result.harmonic_absent, Contains("frequency is 0 at the end"));
  // the same ramp to a finite frequency keeps its reference: the check can tell them apart
  const WorkResult finite = run_work(trap, Protocol(2.0, {Schedule::linear("trap.frequency", 1.0, 0.5)}), r);
  CHECK(finite.harmonic);
  CHECK(finite.harmonic_absent.empty());
}

namespace {
// A hard-wall box [0, 10 um] widened to [0, 20 um] in 4 ms by the smooth formula ramp of the
// issue, 1 + t/tau - sin(2 pi t/tau)/(2 pi) (zero wall speed at both ends); few levels and a
// coarse grid so that a search takes seconds.
const std::string smooth_box = R"toml(title = "smooth box expansion"
[particle]
mass = "87 u"
[units]
energy = "kB*nK"
[box]
left = "0 um"
right = "10 um"
[grid]
points = 63
[protocol]
duration = "4 ms"
[[protocol.change]]
parameter = "box.right"
ramp = "formula"
formula = "10*(1 + t/tau - sin(2*_pi*t/tau)/(2*_pi))"
time_unit = "ms"
value_unit = "um"
[initial]
temperature = "1 nK"
[work]
reverse = false
max_initial_levels = 12
)toml";

std::set<int> trail_steps(const ToleranceChoice& c) {
  std::set<int> steps;
  const std::regex pattern("^([0-9]+) steps");
  for (const auto& line : c.trail) {
    std::smatch m;
    if (std::regex_search(line, m, pattern)) steps.insert(std::stoi(m[1]));
  }
  return steps;
}
}  // namespace

TEST_CASE("issue 14: --tolerance on moving walls changes the step count and ends", "[issue14][tolerance][walls]") {
  const Scenario s = read_scenario_text(smooth_box, "smooth_box.toml");
  REQUIRE(moves_walls(s));
  const ToleranceChoice c = compute_work_to_tolerance(s, work_request(s), 1e-4);
  INFO("trail: " << c.trail.size() << " runs, estimate " << c.estimate());
  for (const auto& line : c.trail) INFO(line);
  // before the fix every run had the scenario's automatic steps: one step count, distance 0
  CHECK(trail_steps(c).size() >= 2);
  CHECK(c.work->result().steps == c.steps);
  CHECK(c.time_step_part > 0);
  CHECK(c.reached());
  CHECK_FALSE(c.bound_reached);
  CHECK(c.cost_spent <= c.cost_bound);
}

TEST_CASE("issue 14: a --tolerance search at its cost bound stops with its verified accuracy and says so",
          "[issue14][tolerance]") {
  const Scenario s = read_scenario_text(smooth_box, "smooth_box.toml");
  const double bound = 3;  // the first run, its finer grid (about 1.5 of it) and no more
  const ToleranceChoice c = compute_work_to_tolerance(s, work_request(s), 1e-12, bound);
  CHECK(c.bound_reached);
  CHECK(c.cost_spent <= bound);
  CHECK_FALSE(c.reached());
  REQUIRE(c.work);
  WorkRun run = c.work->run(c.scenario);
  run.tolerance = &c;
  bool said = false;
  for (const auto& w : work_warnings(run))
    said = said || (w.find("stopped at its cost bound") != std::string::npos && w.find("NOT within") != std::string::npos);
  CHECK(said);
  // a bound of 1 allows the first run only: nothing is verified
  const ToleranceChoice first = compute_work_to_tolerance(s, work_request(s), 1e-4, 1);
  CHECK(first.bound_reached);
  CHECK(first.trail.size() == 1);
  CHECK(std::isnan(first.estimate()));
}

TEST_CASE("issue 14: moving walls with a formula inside that uses t: H_B at tau, as the same ramp",
          "[issue14][walls][formula]") {
  // a box [0, 1] -> [0, 1.5] with a tilt V = s(t) x inside, s(t) = 20 t/tau, tau = 0.5
  const double tau = 0.5;
  WallWorkRequest r;
  r.initial = InitialState::thermal(0.05);
  r.points = 127;
  r.steps = 200;
  r.max_initial_levels = 12;
  r.grid_check = false;
  r.time_step_check = false;
  const WallProtocol explicit_t(tau, Schedule::constant("walls.left", 0), Schedule::linear("walls.right", 1, 1.5),
                                Potential({Term::formula("tilt", "20*x*t/0.5")}));
  const WallProtocol scheduled(tau, Schedule::constant("walls.left", 0), Schedule::linear("walls.right", 1, 1.5),
                               Potential({Term::formula("tilt", "s*x", {{"s", 0.0}})}),
                               {Schedule::linear("tilt.s", 0, 20)});
  const WallWorkResult a = run_wall_work(explicit_t, r), b = run_wall_work(scheduled, r);
  // before the fix H_B was the untilted box (E_0^B about pi^2/(2 1.5^2) = 2.19) in the first
  REQUIRE(a.work.final_spectrum.energies.size() > 2);
  CHECK(a.work.final_spectrum.energies[0] == Approx(b.work.final_spectrum.energies[0]).epsilon(1e-10));
  CHECK(a.work.distribution.mean == Approx(b.work.distribution.mean).margin(1e-9));
  CHECK(a.work.distribution.free_energy_change == Approx(b.work.distribution.free_energy_change).margin(1e-9));
  REQUIRE(a.work.reverse_distribution);
  CHECK(a.work.reverse_distribution->mean == Approx(b.work.reverse_distribution->mean).margin(1e-9));
}
