// Designing a moving wall (solver/design.hpp, wall_evaluator): the members move the wall as
// formula schedules through the dilated-box route of solver/moving_wall.hpp. Checked against
// closed forms outside the search: Doescher and Rice's exact amplitudes for a wall at constant
// speed (the route), the sudden expansion's overlaps and the adiabatic limit (the scale and the
// floor of what any ramp can reach). Flat box [0, 1] in internal units (hbar = m = 1, initial width 1).
#include <catch2/catch.hpp>
#include <cmath>

#include "solver/design.hpp"
#include "solver/errors.hpp"
#include "solver/moving_wall.hpp"

using namespace trapwork;

namespace {
constexpr double pi = 3.14159265358979323846;

WallWorkRequest level_request(std::size_t points = 127) {
  WallWorkRequest r;
  r.initial = InitialState::eigenstate(0);
  r.points = points;
  return r;
}

WallProtocol right_wall(double tau, Schedule right) {
  return WallProtocol(tau, Schedule::constant("box.left", 0), std::move(right));
}

// Flat-box levels E_k = k^2 pi^2 / (2 L^2), k = 1..n (textbook).
Eigen::VectorXd box_levels(double width, int n) {
  Eigen::VectorXd e(n);
  for (int k = 1; k <= n; ++k) e(k - 1) = k * k * pi * pi / (2 * width * width);
  return e;
}
}  // namespace

// The route: a wall at constant speed through a flat box, given as a formula, against the exact
// solution of Doescher & Rice, Am. J. Phys. 37, 1246 (1969) (from memory), whose amplitudes
// doescher_rice_amplitudes computes in closed form (chirp matrices, no propagation).
TEST_CASE("wall design: the evaluator moves the wall through the dilated-box route (Doescher-Rice)", "[design][walls]") {
  const double tau = 0.3;
  const WallProtocol linear = right_wall(tau, Schedule::formula("box.right", "1+t/tau"));
  const double excitation = wall_evaluator(linear, level_request(255), DesignObjective::excitation)(linear.as_protocol());
  const Eigen::MatrixXcd a = doescher_rice_amplitudes(1, 2, 1 / tau, 40);
  const double exact = 1 - std::norm(a(0, 0));
  INFO("excitation " << excitation << ", Doescher-Rice " << exact);
  CHECK(exact > 0.01);
  // Tolerance: the 255-point run against the closed form; the wall moves at the ends, so the
  // chirp converges slowly in the points (measured difference ~1e-5 here).
  CHECK(std::abs(excitation - exact) < 1e-4);
  // The family of walls.as_protocol() designs the right wall only (the left one stands).
  const DesignFamily family(right_wall(tau, Schedule::smooth_step("box.right", 1, 2)).as_protocol(), 3, false);
  REQUIRE(family.parameters().size() == 1);
  CHECK(family.parameters()[0].address == "box.right");
}

// Expansion 1 -> 2 in tau = 2 (about one period 2 pi/(E_2 - E_1) = 1.7 of the final box) from
// the ground state. Scale: the sudden expansion leaves 1 - |<1_B|1_A>|^2 = 1 - 32/(9 pi^2) = 0.64
// (overlap sqrt(2) int_0^1 sin(pi x) sin(pi x/2) dx = 4 sqrt(2)/(3 pi), derived here; the closed
// form of sudden_wall_amplitudes agrees); floor: the adiabatic limit leaves 0 (no level crossings
// in a box). Measured (3 modes, 40 evaluations): smooth ramp 4.9e-3, designed 3.9e-5, factor
// 126; the check asks for 20, room for other rounding and NLopt builds. At tau = 0.4 (smooth
// ramp 0.46) the family gains only a factor 1.2: that fast, no smooth ramp of the wall alone
// comes close to adiabatic.
TEST_CASE("wall design: expansion beats the smooth ramp towards the adiabatic limit", "[design][walls][validation]") {
  const double tau = 2;
  const WallProtocol smooth = right_wall(tau, Schedule::smooth_step("box.right", 1, 2));
  const double sudden = 1 - std::norm(sudden_wall_amplitudes(0, 1, 0, 2, 1, 1)(0, 0));
  CHECK(std::abs(sudden - (1 - 32 / (9 * pi * pi))) < 1e-12);
  const DesignFamily family(smooth.as_protocol(), 3, false);
  DesignOptions options;
  options.starts = 1;
  options.max_evaluations = 40;
  const DesignResult r = design_protocol(family, wall_evaluator(smooth, level_request(), DesignObjective::excitation), options);
  WARN("wall expansion: sudden " << sudden << ", smooth ramp " << r.objective_before << ", designed "
       << r.objective_after << " (" << r.history.size() << " evaluations), factor " << r.objective_before / r.objective_after);
  CHECK(r.objective_before > 1e-3);
  CHECK(r.objective_before < sudden);
  CHECK(r.objective_after >= 0);
  CHECK(r.objective_after < r.objective_before / 20);
}

// Compression 1 -> 0.7 in tau = 0.6 from a thermal state (beta = 0.05: about ten levels),
// dissipated work. Floor: for a passive initial state
// and no level crossings the adiabatic process does the least mean work (minimal-work principle,
// Allahverdyan & Nieuwenhuizen, PRE 71, 046107 (2005), from memory), so every ramp has
// <W> - Delta F >= <W>_ad - Delta F, with <W>_ad = sum_m p_m (E_m^B - E_m^A) (adiabatic_wall_work).
TEST_CASE("wall design: compression lowers the dissipated work to near the adiabatic floor", "[design][walls][validation][heavy]") {
  const double tau = 0.6, beta = 0.05;
  const WallProtocol smooth = right_wall(tau, Schedule::smooth_step("box.right", 1, 0.7));
  WallWorkRequest request = level_request();
  request.initial = InitialState::thermal(beta);
  const DesignFamily family(smooth.as_protocol(), 3, false);
  DesignOptions options;
  options.starts = 1;
  options.max_evaluations = 40;
  options.objective = DesignObjective::dissipated_work;
  const DesignResult r = design_protocol(family, wall_evaluator(smooth, request, DesignObjective::dissipated_work), options);
  // Floor from the closed-form levels, over enough levels that the Gibbs tail is below 1e-12.
  const int n = 60;
  const Eigen::VectorXd ea = box_levels(1, n), eb = box_levels(0.7, n);
  std::vector<double> p(static_cast<std::size_t>(n));
  double z = 0, zb = 0;
  for (int k = 0; k < n; ++k) z += std::exp(-beta * (ea(k) - ea(0)));
  for (int k = 0; k < n; ++k) zb += std::exp(-beta * (eb(k) - ea(0)));
  for (int k = 0; k < n; ++k) p[std::size_t(k)] = std::exp(-beta * (ea(k) - ea(0))) / z;
  const double delta_f = -std::log(zb / z) / beta;
  const double floor = adiabatic_wall_work(ea, eb, p).mean - delta_f;
  WARN("wall compression: adiabatic floor " << floor << ", smooth ramp " << r.objective_before << ", designed "
       << r.objective_after << " (" << r.history.size() << " evaluations); excess over the floor "
       << r.objective_before - floor << " -> " << r.objective_after - floor);
  CHECK(floor > 0);
  CHECK(r.objective_after >= floor - 1e-6 * floor);
  // Measured (3 modes, 40 evaluations): floor 3.6759, smooth ramp 3.6962, designed 3.6796: the
  // excess over the floor falls by a factor 5.5 (the check asks for 3).
  CHECK(r.objective_before - floor > 1e-3 * floor);
  CHECK(r.objective_after - floor < (r.objective_before - floor) / 3);
}

// The wall route takes the wall's acceleration from its formula ramp (5-point differences). A
// box's durations are short in its units m L0^2/hbar (examples/box_expansion.toml: tau = 0.029),
// so the difference step follows tau: with the former h = 1e-3 max(tau, 1) the acceleration of a
// designed mode sin(3 pi t/tau) was off by 3e-4 of itself at tau = 0.03 (5-point error
// h^4 f^(6)/90, common practice); with h = 1e-3 tau it is ~1e-10.
TEST_CASE("wall design: a formula ramp's acceleration is accurate at a box's short duration", "[design][walls]") {
  const double tau = 0.03, w = 3 * pi / tau;
  const Schedule s = Schedule::formula("box.right", "1+0.2*sin(3*3.14159265358979323846*t/tau)");
  for (double u : {0.1, 0.25, 0.6}) {
    const ScheduleValue v = s.evaluate(u * tau, tau);
    const double exact = -0.2 * w * w * std::sin(w * u * tau);
    INFO("u = " << u << ": acceleration " << v.acceleration << ", exact " << exact);
    CHECK(std::abs(v.acceleration - exact) < 1e-7 * 0.2 * w * w);
    CHECK(std::abs(v.rate - 0.2 * w * std::cos(w * u * tau)) < 1e-9 * 0.2 * w);
  }
}
