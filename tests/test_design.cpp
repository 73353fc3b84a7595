// Protocol design (solver/design.hpp): the family keeps the end values with zero end velocity,
// the search lowers the objective computed by run_work, and in harmonic traps it reaches the
// known optimum (zero excitation), checked against the classical formulas of
// solver/harmonic_reference.hpp rather than against the numbers the search itself used.
#include <catch2/catch.hpp>
#include <cmath>

#include "solver/design.hpp"
#include "solver/errors.hpp"
#include "solver/harmonic_reference.hpp"

using namespace trapwork;

namespace {
WorkRequest level_request() {
  WorkRequest r;
  r.initial = InitialState::eigenstate(0);
  r.spectrum.options.method = EigenMethod::dense;
  return r;
}
}  // namespace

TEST_CASE("design: the family keeps end values, zero end velocity, and builds the protocol", "[design]") {
  const Protocol move(4, {Schedule::smooth_step("trap.centre", 0, 3), Schedule::constant("trap.frequency", 1)});
  const DesignFamily family(move, 3, false);
  REQUIRE(family.parameters().size() == 1);  // the constant schedule is kept as it is
  CHECK(family.dimension() == 3);
  const std::vector<double> c = {0.3, -0.2, 0.1};
  const Protocol p = family.protocol(c);
  const Schedule& s = p.schedules()[0];
  CHECK(s.form() == ScheduleForm::formula);
  CHECK(std::abs(s.evaluate(0, 4).value - 0) < 1e-14);
  CHECK(std::abs(s.evaluate(4, 4).value - 3) < 1e-13);
  CHECK(std::abs(s.evaluate(0, 4).rate) < 1e-8);  // formula derivatives: 5-point differences
  CHECK(std::abs(s.evaluate(4, 4).rate) < 1e-8);
  for (double u : {0.1, 0.37, 0.8}) CHECK(std::abs(s.evaluate(4 * u, 4).value - family.value(0, c, u)) < 1e-12);
  CHECK(p.schedules()[1].form() == ScheduleForm::constant);
  // Smoother base: zero end acceleration too (the modes have it by construction).
  const Protocol smoother = DesignFamily(move, 3, true).protocol(c);
  CHECK(std::abs(smoother.schedules()[0].evaluate(0, 4).acceleration) < 1e-5);
  CHECK(std::abs(p.schedules()[0].evaluate(0, 4).acceleration - 3 * 6 / 16.0) < 1e-5);
  // Overshoot: large amplitudes leave the band.
  CHECK(family.overshoot_excess(std::vector<double>(3, 0.0), 0) == 0);
  CHECK(family.overshoot_excess({3, 0, 0}, 0.5) > 0);
  CHECK_THROWS_AS(DesignFamily(Protocol(4, {Schedule::constant("trap.centre", 1)}), 3, false), InputError);
  CHECK_THROWS_AS(DesignFamily(move, 0, false), InputError);
  CHECK_THROWS_AS(design_objective_from_name("speed"), InputError);
}

// Harmonic transport (displaced oscillator). Inverse-engineered transport ramps reach zero
// final excitation for any duration (Torrontegui et al., PRA 83, 013415 (2011), from memory); in
// this family |alpha|^2 is a quadratic form in the amplitudes (alpha is linear in the trap's
// acceleration), so two modes can null it. tau = 4 < one period 2 pi.
TEST_CASE("design: harmonic transport below one period reaches 1 - P(0->0) < 1e-8", "[design][validation]") {
  const Potential trap({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  const double tau = 4, distance = 3;
  const Protocol move(tau, {Schedule::smooth_step("trap.centre", 0, distance)});
  const DesignFamily family(move, 3, false);
  DesignOptions options;
  options.starts = 1;
  options.max_evaluations = 80;
  options.stop_below = 1e-10;
  const DesignResult r = design_protocol(family, work_evaluator(trap, level_request(), DesignObjective::excitation), options);
  INFO("transport: " << r.history.size() << " evaluations, before " << r.objective_before << ", after " << r.objective_after);
  // The smooth ramp leaves order-one excitation; check it against the classical formula too.
  const auto centre0 = [&](double t) { return family.value(0, std::vector<double>(3, 0.0), t / tau); };
  const double alpha2_before = std::norm(translation_alpha(1, centre0, tau));
  CHECK(r.objective_before > 0.3);
  CHECK(std::abs(r.objective_before - (1 - std::exp(-alpha2_before))) < 1e-6);  // P(0->0) = exp(-|alpha|^2)
  CHECK(r.objective_after < 1e-8);
  // The designed ramp, checked by the displaced-oscillator formula (classical motion, Odeint).
  const auto centre = [&](double t) { return family.value(0, r.amplitudes, t / tau); };
  CHECK(std::norm(translation_alpha(1, centre, tau)) < 1e-8);
}
