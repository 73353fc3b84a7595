// Protocol design (solver/design.hpp): the family keeps the end values with zero end velocity,
// the search lowers the objective computed by run_work, and in harmonic traps it reaches the
// known optimum (zero excitation), checked against the classical formulas of
// solver/harmonic_reference.hpp rather than against the numbers the search itself used.
#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>

#include "solver/design.hpp"
#include "solver/errors.hpp"
#include "solver/harmonic_reference.hpp"

using namespace trapwork;
using Catch::Matchers::Contains;

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

// Harmonic frequency change omega 1 -> 2 in tau = 2 (a third of the initial period, below the
// final one). At tau = 1 this family stops near 1 - P(0->0) = 6e-3 (measured, 85 evaluations):
// there the shortcut needs omega^2 < 0 for part of the ramp (from memory, as Chen et al. note
// for short times), which a family of schedules of omega itself cannot represent. Shortcut
// ramps with Husimi's Q* = 1 exist for any duration (Chen et al., PRL 104, 063002 (2010), from
// memory); Husimi's P(0 -> 0) = sqrt(2 / (1 + Q*)) (Husimi 1953, from memory), so 1 - P(0->0)
// = (Q* - 1)/4 to first order. The designed ramp is checked by parametric_q (classical solutions).
TEST_CASE("design: harmonic frequency change reaches Husimi's Q* - 1 < 1e-8 in a short time", "[design][validation][heavy]") {
  const Potential trap({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  const double tau = 2;
  const Protocol squeeze(tau, {Schedule::smooth_step("trap.frequency", 1, 2)});
  const DesignFamily family(squeeze, 3, false);
  DesignOptions options;
  options.starts = 1;
  options.max_evaluations = 120;
  options.stop_below = 1e-11;
  const DesignResult r = design_protocol(family, work_evaluator(trap, level_request(), DesignObjective::excitation), options);
  INFO("frequency: " << r.history.size() << " evaluations, before " << r.objective_before << ", after "
       << r.objective_after << ", " << r.start_results[0]);
  const auto q_of = [&](const std::vector<double>& c) {
    return parametric_q([&](double t) { return std::pow(family.value(0, c, t / tau), 2); }, tau);
  };
  const double q_before = q_of(std::vector<double>(3, 0.0));
  CHECK(q_before - 1 > 0.01);  // the smooth ramp is far from adiabatic here
  CHECK(std::abs(r.objective_before - (1 - std::sqrt(2 / (1 + q_before)))) < 1e-6);
  CHECK(r.objective_after < 1e-9);
  CHECK(q_of(r.amplitudes) - 1 < 1e-8);
}

// Anharmonic trap V = x^2/2 + 0.01 x^3 + 0.002 x^4 (internal units; one minimum at 0), moved by
// 3 in tau = 4 as above. The harmonic design (nulling the displaced-oscillator excitation)
// leaves excitation behind here; designing in the anharmonic trap itself beats it and the
// smooth ramp (the first start begins at the harmonic design). Factors measured below.
TEST_CASE("design: in an anharmonic trap the design beats the harmonic design and the smooth ramp", "[design][validation][heavy]") {
  const Potential harmonic({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  const Potential anharmonic({Term("trap", Shape::polynomial, {{"frequency", 1.0}, {"cubic", 0.01}, {"quartic", 0.002}})});
  const double tau = 4;
  const Protocol move(tau, {Schedule::smooth_step("trap.centre", 0, 3)});
  const DesignFamily family(move, 3, false);
  DesignOptions options;
  options.starts = 1;
  options.max_evaluations = 80;
  options.stop_below = 1e-10;
  const DesignResult in_harmonic = design_protocol(family, work_evaluator(harmonic, level_request(), DesignObjective::excitation), options);
  REQUIRE(in_harmonic.objective_after < 1e-8);
  const auto in_anharmonic = work_evaluator(anharmonic, level_request(), DesignObjective::excitation);
  const double harmonic_design = in_anharmonic(family.protocol(in_harmonic.amplitudes));
  options.first_start = in_harmonic.amplitudes;  // refine the harmonic design
  const DesignResult r = design_protocol(family, in_anharmonic, options);
  WARN("anharmonic transport: smooth ramp " << r.objective_before << ", harmonic design " << harmonic_design
       << ", anharmonic design " << r.objective_after << " (" << r.history.size() << " evaluations); factors "
       << harmonic_design / r.objective_after << " over the harmonic design, " << r.objective_before / r.objective_after
       << " over the smooth ramp");
  CHECK(harmonic_design > 1e-6);  // the harmonic design is not good enough here
  // Measured (3 modes, 80 evaluations each): smooth ramp 0.85, harmonic design 1.2e-2, anharmonic
  // design 3.0e-3: factors 4.1 and 280. With 6 modes and 250 evaluations: 1.6e-4, factors 86 and
  // 5400 (the bound still ended it). The checks leave room for other rounding and NLopt builds.
  CHECK(r.objective_after < harmonic_design / 2);
  CHECK(r.objective_after < r.objective_before / 100);
}

// The search's bookkeeping on a cheap objective of the schedule itself (no work run): the
// bound, the starts, the history, the progress and interrupt hooks, the overshoot penalty.
TEST_CASE("design: bound, starts, history, hooks and overshoot on a cheap objective", "[design]") {
  const double tau = 2;
  const DesignFamily family(Protocol(tau, {Schedule::smooth_step("trap.centre", 0, 1)}), 3, false);
  // Minimum 0 where x(tau/2) = 0.8 and x(tau/4) = 0.1 (reachable inside the band: the ramp is
  // 0.5 and 0.156 there).
  const DesignEvaluator cheap = [&](const Protocol& p) {
    const double a = p.schedules()[0].evaluate(tau / 2, tau).value - 0.8;
    const double b = p.schedules()[0].evaluate(tau / 4, tau).value - 0.1;
    return a * a + b * b;
  };
  DesignOptions options;
  options.starts = 3;
  options.max_evaluations = 40;
  int calls = 0, last_done = 0;
  DesignHooks hooks;
  hooks.progress = [&](const DesignEvaluation& e, int done, int bound) {
    ++calls;
    CHECK(done == e.index + 1);
    CHECK(bound == 40);
    last_done = done;
  };
  const DesignResult r = design_protocol(family, cheap, options, hooks);
  CHECK(r.history.size() == 40);
  CHECK(calls == 40);
  CHECK(last_done == 40);
  CHECK(r.start_results.size() == 3);
  CHECK(r.history.back().start == 2);
  CHECK(r.history.front().amplitudes == std::vector<double>(3, 0.0));
  CHECK(r.objective_before == Approx(0.09 + std::pow(0.15625 - 0.1, 2)));
  CHECK(r.objective_after < r.objective_before / 1000);  // 3 starts of ~13 evaluations: measured 1.5e-5
  CHECK(r.bound_reached);
  for (const auto& e : r.history)
    if (e.feasible) CHECK(e.objective >= r.objective_after);
  // Overshoot 0: the band is [0, 1]; every member the search keeps stays inside it.
  options.overshoot = 0;
  const DesignResult inside = design_protocol(family, cheap, options);
  CHECK(family.overshoot_excess(inside.amplitudes, 0) == 0);
  // Interrupt: the third evaluation stops the search; the exception passes through.
  int seen = 0;
  hooks.progress = {};
  hooks.interrupt = [&] {
    if (++seen == 3) throw Interrupted("stop");
  };
  CHECK_THROWS_AS(design_protocol(family, cheap, options, hooks), Interrupted);
  CHECK(seen == 3);
  // An evaluator failing stops the search with its own error.
  const DesignEvaluator failing = [](const Protocol&) -> double { throw PhysicsError("grid too small"); };
  CHECK_THROWS_WITH(design_protocol(family, failing, options), Contains("grid too small"));
  options.max_evaluations = 2;  // fewer than the starts
  CHECK_THROWS_AS(design_protocol(family, cheap, options), InputError);
  DesignOptions no_stop;
  no_stop.stop_below = std::nan("");  // would never end a start: refused, naming the key
  CHECK_THROWS_WITH(design_protocol(family, cheap, no_stop), Contains("stop_below"));
}

// The mean excitation in quanta (issue 18): in a harmonic trap the mean phonon number gained,
// |alpha|^2 for a transport from the ground state (the final state is the coherent state
// |alpha>, whose mean number is |alpha|^2: textbook, common practice), and (Q* - 1)/2 for a
// frequency change (Husimi 1953, from memory: <H_B> = (omega_1/2) Q* from the ground state).
// Checked against the classical formulas of harmonic_reference.hpp, not the run's own numbers.
TEST_CASE("design: the quanta objective is |alpha|^2 and (Q* - 1)/2 in a harmonic trap", "[design][validation]") {
  CHECK(design_objective_from_name("quanta") == DesignObjective::quanta);
  CHECK(design_objective_name(DesignObjective::quanta) == "quanta");
  const Potential trap({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  const double tau = 4;
  const DesignFamily move(Protocol(tau, {Schedule::smooth_step("trap.centre", 0, 3)}), 3, false);
  const std::vector<double> c = {0.2, -0.1, 0.05};
  const double quanta = work_evaluator(trap, level_request(), DesignObjective::quanta)(move.protocol(c));
  const double alpha2 = std::norm(translation_alpha(1, [&](double t) { return move.value(0, c, t / tau); }, tau));
  INFO("quanta " << quanta << ", |alpha|^2 " << alpha2);
  CHECK(alpha2 > 0.1);
  CHECK(std::abs(quanta - alpha2) < 1e-6 * alpha2);
  const DesignFamily squeeze(Protocol(2, {Schedule::smooth_step("trap.frequency", 1, 2)}), 3, false);
  const double q_quanta = work_evaluator(trap, level_request(), DesignObjective::quanta)(squeeze.protocol(c));
  const double q = parametric_q([&](double t) { return std::pow(squeeze.value(0, c, t / 2), 2); }, 2);
  INFO("quanta " << q_quanta << ", Q* " << q);
  CHECK(q - 1 > 0.01);
  CHECK(std::abs(q_quanta - (q - 1) / 2) < 1e-6 * (q - 1));
}

// Lab-unit bounds on speed and overshoot (issue 18): the rate is the derivative of the value;
// the search returns only members inside the bounds; a speed bound below the mean speed is refused.
TEST_CASE("design: bounds on speed and overshoot are enforced", "[design]") {
  const double tau = 2;
  const DesignFamily family(Protocol(tau, {Schedule::smooth_step("trap.centre", 0, 1)}), 3, false);
  const std::vector<double> c = {0.4, -0.3, 0.2};
  for (double u : {0.2, 0.5, 0.9}) {  // central differences, error O(h^2)
    const double h = 1e-5;
    CHECK(std::abs(family.rate(0, c, u) - (family.value(0, c, u + h) - family.value(0, c, u - h)) / (2 * h * tau)) < 1e-8);
  }
  CHECK(std::abs(family.rate(0, c, 0)) < 1e-14);  // zero end velocity
  CHECK(std::abs(family.rate(0, c, 1)) < 1e-14);
  CHECK(family.max_speed(0, std::vector<double>(3, 0.0)) == Approx(1.5 / tau));  // 6u(1-u) peaks at 3/2
  CHECK(family.max_overshoot(0, std::vector<double>(3, 0.0)) == 0);
  // Objective: reach x(tau/2) = 0.95 (needs speed above the smooth ramp's 0.75 near the start).
  const DesignEvaluator cheap = [&](const Protocol& p) {
    const double a = p.schedules()[0].evaluate(tau / 2, tau).value - 0.95;
    return a * a;
  };
  DesignOptions options;
  options.starts = 1;
  options.max_evaluations = 60;
  const DesignResult free = design_protocol(family, cheap, options);
  CHECK(free.objective_after < 1e-6);
  options.bounds = {{"trap.centre", 0.7, 0.02}};  // speed 0.7 (internal), overshoot 0.02
  options.max_evaluations = 200;
  const DesignResult bounded = design_protocol(family, cheap, options);
  CHECK_FALSE(bounded.before_feasible);  // the smooth ramp peaks at 0.75
  CHECK(bounded.objective_before == Approx(0.45 * 0.45));  // simulated all the same
  CHECK(family.max_speed(0, bounded.amplitudes) <= 0.7);
  CHECK(family.max_overshoot(0, bounded.amplitudes) <= 0.02);
  // x(tau/2) <= 0.7 (tau/2) = 0.7 at that speed, so the objective is at least 0.25^2.
  CHECK(bounded.objective_after >= 0.0625 * (1 - 1e-9));
  // The search improves inside the feasible set (measured: 0.19 after 161 evaluations; this
  // family, with zero end velocity and 3 modes, cannot come close to the bang-bang bound 0.0625).
  const auto first_feasible = std::find_if(bounded.history.begin(), bounded.history.end(),
                                           [](const DesignEvaluation& e) { return e.feasible; });
  REQUIRE(first_feasible != bounded.history.end());
  CHECK(bounded.objective_after < first_feasible->objective);
  for (const auto& e : bounded.history)
    if (e.feasible) CHECK(family.bound_excess(e.amplitudes, options.overshoot, options.bounds) <= 0);
  options.bounds = {{"trap.centre", 0.4, 1.0}};  // below the mean speed 1/2
  CHECK_THROWS_WITH(design_protocol(family, cheap, options), Contains("max_speed") && Contains("mean speed"));
  options.bounds = {{"trap.frequency", 1, 1}};
  CHECK_THROWS_AS(design_protocol(family, cheap, options), InputError);
}

// The shortest duration meeting a target (issue 18), in a harmonic trap: each trial's objective
// is checked against the classical excitation 1 - exp(-|alpha|^2) of its designed ramp
// (displaced oscillator, translation_alpha in harmonic_reference.hpp), so every verdict "met" is
// independent of the run's own numbers; the bracket halves per bisection and ends at a met trial.
TEST_CASE("design: the shortest duration that meets a target", "[design]") {
  const Potential trap({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  const Protocol move(8, {Schedule::smooth_step("trap.centre", 0, 3), Schedule::constant("trap.frequency", 1)});
  DesignOptions options;
  options.starts = 1;
  options.modes = 2;
  options.max_evaluations = 25;
  const double target = 1e-6;
  const auto r = design_shortest_duration(move, work_evaluator(trap, level_request(), DesignObjective::excitation),
                                          options, target, 0.5, 3);
  REQUIRE(r.trials.size() == 5);  // longest, shortest, 3 bisections
  CHECK(r.trials[0].met);         // 8 > one period: easy
  CHECK_FALSE(r.trials[1].met);   // 0.5: a shift by 3 in a twelfth of a period is not found in 25 runs
  REQUIRE(r.best >= 0);
  const auto& best = r.trials[std::size_t(r.best)];
  CHECK(best.duration == r.upper);
  CHECK(r.upper - r.lower == Approx((8 - 0.5) / 8));
  for (const auto& t : r.trials) {
    REQUIRE(t.ran);
    const DesignFamily family(Protocol(t.duration, move.schedules()), 2, false);
    const auto centre = [&](double time) { return family.value(0, t.design.amplitudes, time / t.duration); };
    const double classical = 1 - std::exp(-std::norm(translation_alpha(1, centre, t.duration)));
    CHECK(std::abs(classical - t.design.objective_after) < 1e-6 * t.design.objective_after + 1e-9);
    CHECK(t.met == (t.design.objective_after <= target));
  }
  // Refusals: a schedule that is neither designed nor constant; a shortest at or above tau.
  const Protocol wobble(8, {Schedule::smooth_step("trap.centre", 0, 3), Schedule::formula("trap.frequency", "1+0.1*sin((t/tau)*(1-t/tau))")});
  CHECK_THROWS_AS(design_shortest_duration(wobble, work_evaluator(trap, level_request(), DesignObjective::excitation),
                                           options, target, 0.5, 4),
                  InputError);
  CHECK_THROWS_AS(design_shortest_duration(move, work_evaluator(trap, level_request(), DesignObjective::excitation),
                                           options, target, 8, 4),
                  InputError);
  // A speed bound makes durations below |b - a| / v_max not met without a run.
  options.bounds = {{"trap.centre", 1.0, 1e9}};  // 3 / 1.0 = 3 time units at least
  const auto fast = design_shortest_duration(move, work_evaluator(trap, level_request(), DesignObjective::excitation),
                                             options, target, 0.5, 1);
  REQUIRE(fast.trials.size() == 3);
  CHECK_FALSE(fast.trials[1].ran);
  CHECK_FALSE(fast.trials[1].met);
}

// Robust design (issue 18): the averaged evaluator is the mean of its members; samples from a
// covariance have that mean and covariance (sample moments within their statistical error,
// 5 standard errors for 20000 samples), the same seed gives the same samples, and a matrix that
// is not a covariance is refused.
TEST_CASE("design: averaged objective and samples from a covariance", "[design]") {
  const Protocol p(1, {Schedule::smooth_step("trap.centre", 0, 1)});
  const DesignEvaluator averaged = averaged_evaluator({[](const Protocol&) { return 1.0; }, [](const Protocol&) { return 4.0; }});
  CHECK(averaged(p) == 2.5);
  const std::vector<double> mean = {1.0, -2.0};
  const std::vector<std::vector<double>> cov = {{0.04, 0.018}, {0.018, 0.09}};  // correlation 0.3
  const int n = 20000;
  const auto s = gaussian_samples(mean, cov, n, 7);
  REQUIRE(s.size() == std::size_t(n));
  double m0 = 0, m1 = 0;
  for (const auto& x : s) { m0 += x[0] / n; m1 += x[1] / n; }
  double c00 = 0, c01 = 0, c11 = 0;
  for (const auto& x : s) {
    c00 += (x[0] - m0) * (x[0] - m0) / n;
    c01 += (x[0] - m0) * (x[1] - m1) / n;
    c11 += (x[1] - m1) * (x[1] - m1) / n;
  }
  CHECK(std::abs(m0 - 1) < 5 * 0.2 / std::sqrt(n));
  CHECK(std::abs(m1 + 2) < 5 * 0.3 / std::sqrt(n));
  CHECK(std::abs(c00 - 0.04) < 5 * 0.04 * std::sqrt(2.0 / n));
  CHECK(std::abs(c11 - 0.09) < 5 * 0.09 * std::sqrt(2.0 / n));
  CHECK(std::abs(c01 - 0.018) < 5 * std::sqrt((0.04 * 0.09 + 0.018 * 0.018) / n));
  CHECK(gaussian_samples(mean, cov, 3, 7) == std::vector<std::vector<double>>(s.begin(), s.begin() + 3));
  // Exactly correlated (semi-definite): the samples lie on the line x1 = -2 + 1.5 (x0 - 1).
  for (const auto& x : gaussian_samples(mean, {{0.04, 0.06}, {0.06, 0.09}}, 5, 1)) CHECK(std::abs(x[1] + 2 - 1.5 * (x[0] - 1)) < 1e-12);
  CHECK_THROWS_AS(gaussian_samples(mean, {{0.04, 0.1}, {0.1, 0.09}}, 5, 1), InputError);  // not semi-definite
  CHECK_THROWS_AS(gaussian_samples(mean, {{0.04, 0.0}, {0.01, 0.09}}, 5, 1), InputError);  // not symmetric
}

// Issue 18: a robust design runs every member for each evaluation, and every one of those work
// runs counts against the evaluation bound (runs_per_evaluation); before, only the evaluations
// were counted, so 30 evaluations of 3 members made 90 runs under a bound of 30.
TEST_CASE("design: every member run of a robust design counts against the evaluation bound", "[design]") {
  const double tau = 2;
  const DesignFamily family(Protocol(tau, {Schedule::smooth_step("trap.centre", 0, 1)}), 3, false);
  int runs = 0;
  const auto member = [&](double goal) -> DesignEvaluator {
    return [&runs, goal, tau](const Protocol& p) {
      ++runs;
      const double a = p.schedules()[0].evaluate(tau / 2, tau).value - goal;
      return a * a;
    };
  };
  DesignOptions options;
  options.starts = 2;
  options.max_evaluations = 30;
  options.runs_per_evaluation = 3;
  int last_done = 0;
  DesignHooks hooks;
  hooks.progress = [&](const DesignEvaluation&, int done, int bound) {
    CHECK(done <= bound);
    last_done = done;
  };
  const DesignResult r =
      design_protocol(family, averaged_evaluator({member(0.8), member(0.85), member(0.9)}), options, hooks);
  INFO(r.history.size() << " evaluations, " << runs << " runs");
  CHECK(r.bound_reached);
  CHECK(r.history.size() == 10);
  CHECK(r.work_runs == 30);
  CHECK(last_done == 30);
  CHECK(runs <= 30);  // members refused by the overshoot band are charged but not run
  CHECK(r.start_results.size() == 2);
  CHECK(r.objective_after < r.objective_before);
  // The bound must allow one evaluation of every member per start.
  options.max_evaluations = 5;
  CHECK_THROWS_WITH(design_protocol(family, averaged_evaluator({member(0.8), member(0.9)}), options),
                    Contains("evaluations") && Contains("work run"));
  options.runs_per_evaluation = 0;
  CHECK_THROWS_AS(design_protocol(family, member(0.8), options), InputError);
}

// Issue 18: a duration at which no member of the family meets the bounds is "not met", and the
// outer search goes on (before, design_protocol's error ended the whole search). Speed bound 1.01
// for a change of 1: at tau = 1 the mean speed 1 passes the quick check, but every member with
// zero end velocity peaks well above its mean (the smooth ramp at 1.5), so none is feasible. The
// cheap objective 1/tau meets the target 0.5 from tau = 2 on.
TEST_CASE("design: the shortest-duration search goes on past a duration with no feasible member", "[design]") {
  const Protocol move(4, {Schedule::smooth_step("trap.centre", 0, 1)});
  const DesignEvaluator cheap = [](const Protocol& p) {
    return 1 / p.duration() + 1e-3 * std::abs(p.schedules()[0].evaluate(p.duration() / 2, p.duration()).value - 0.5);
  };
  DesignOptions options;
  options.starts = 1;
  options.max_evaluations = 20;
  options.bounds = {{"trap.centre", 1.01, 1e9}};
  // The duration alone: design_protocol finds no member within the bound and says so.
  const DesignFamily at_one(Protocol(1, move.schedules()), 3, false);
  CHECK_THROWS_AS(design_protocol(at_one, cheap, options), NoFeasibleDesign);
  const auto r = design_shortest_duration(move, cheap, options, 0.5, 1, 3);
  REQUIRE(r.trials.size() == 5);  // 4, 1, then 2.5, 1.75, 2.125: the bisection went on
  CHECK(r.trials[0].met);
  CHECK(r.trials[1].ran);
  CHECK_FALSE(r.trials[1].feasible);
  CHECK_FALSE(r.trials[1].met);
  CHECK(r.trials[1].note.find("no member") != std::string::npos);
  CHECK_FALSE(r.trials[1].design.history.empty());  // its evaluations are reported
  CHECK(r.trials[2].duration == Approx(2.5));
  CHECK(r.trials[3].duration == Approx(1.75));
  CHECK(r.trials[4].duration == Approx(2.125));
  REQUIRE(r.best == 4);
  CHECK(r.lower == Approx(1.75));
  CHECK(r.upper == Approx(2.125));
  bool warned = false;
  for (const auto& w : r.warnings) warned = warned || w.find("no member of the family met the bounds") != std::string::npos;
  CHECK(warned);
}
