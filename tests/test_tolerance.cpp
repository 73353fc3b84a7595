// `trapwork work --tolerance`: the numerics chosen for a bound on the distance of P(W) from the
// converged result, checked against an exact answer (a harmonic frequency change, Husimi).
#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>

#include "solver/scenario/scenario.hpp"
#include "solver/scenario/work_output.hpp"

using namespace trapwork;

namespace {
const std::string squeeze = R"(title = "harmonic squeeze"
[particle]
mass = "40 u"
[[potential]]
name = "trap"
shape = "harmonic"
frequency = "1 MHz"
[protocol]
duration = "1 us"
[[protocol.change]]
parameter = "trap.frequency"
to = "1.4 MHz"
[initial]
mean_phonons = 0.5
[work]
integrator = "strang"
steps = 2000
)";

// (1/2) sum_{m,n} p_m |P(m->n) - P_exact(m->n)| against the Husimi reference of the run.
double distance_to_exact(const WorkResult& r) {
  REQUIRE(r.harmonic);
  REQUIRE(r.harmonic->exact);
  const auto& p = r.forward.transitions.probability;
  const auto& q = r.harmonic->reference.probability;
  double d = 0;
  for (Eigen::Index m = 0; m < p.rows(); ++m)
    for (Eigen::Index n = 0; n < p.cols(); ++n)
      d += 0.5 * r.forward.initial_weights[std::size_t(m)] * std::abs(p(m, n) - q(m, n));
  return d;
}
}  // namespace

TEST_CASE("--tolerance: the estimate bounds the true distance to the exact Husimi result", "[work][tolerance][heavy]") {
  const Scenario s = read_scenario_text(squeeze, "squeeze.toml");
  const ToleranceChoice loose = compute_work_to_tolerance(s, work_request(s), 1e-3);
  const ToleranceChoice tight = compute_work_to_tolerance(s, work_request(s), 1e-7);
  for (const ToleranceChoice* c : {&loose, &tight}) {
    INFO("tolerance " << c->tolerance << ", estimate " << c->estimate() << ", steps " << c->steps);
    CHECK(c->reached());
    CHECK(c->trail.size() >= 3);  // at least one step doubling and one grid refinement
    // Husimi, J. Phys. Soc. Jpn. 9, 381 (1953) (from memory; solver/harmonic_reference)
    CHECK(distance_to_exact(c->work->result()) <= c->tolerance);
    // The method: the eigenbasis ODE is tried within what is left of 1.5 times the chosen run
    // with its checks, at most half the split-operator run's time (its operations charged at 2.5
    // times a transform's, so at most 0.2 of its arithmetic); either it was not tried,
    // or stopped, or it finished within that and was timed.
    INFO("method " << c->method << ", ODE cost ratio " << c->ode_cost_ratio << ", ODE part " << c->ode_part
                   << ", split " << c->split_seconds << " s, ODE " << c->eigenbasis_seconds << " s");
    CHECK(c->method == c->work->result().method);
    if (std::isfinite(c->eigenbasis_seconds)) CHECK((!c->ode_stopped && c->ode_cost_ratio <= 0.2));
    // issue 21: the whole call within 1.5 times the chosen run alone with its usual half-step
    // check (estimated arithmetic: a deterministic count, not a timing)
    CHECK(c->cost_spent <= 1.5 * c->chosen_cost);
    // The printed <W> error carries the search's own measure of the time step and the grid
    // (its pairs' shift of the direct moments): without it the error was the level truncation's
    // alone. Against Husimi's <W> (same source as above).
    const WorkResult& r = c->work->result();
    const MomentErrors& m = r.diagnostics.moments;
    INFO("<W> - exact " << r.distribution.mean - r.harmonic->mean_work << " +- " << m.reported_mean_error()
                        << " (truncation " << m.mean_error << ", discretisation " << m.mean_discretisation
                        << ")");
    CHECK(std::isfinite(m.mean_discretisation));
    CHECK(m.discretisation_from.find("--tolerance search") != std::string::npos);
    CHECK(std::abs(r.distribution.mean - r.harmonic->mean_work) <= m.reported_mean_error());
    // the scenario's 2000 steps are not the start: the search chooses the steps
    // (the first line may be the eigenbasis ODE's first try, stopped by its budget here)
    CHECK(std::any_of(c->trail.begin(), c->trail.end(), [](const std::string& line) {
      return line.find("the scenario's 2000 steps are replaced") != std::string::npos;
    }));
  }
  // the estimate: Richardson's from a pair in the range where the error falls as dt^4 (the
  // search replaced the scenario's Strang by order 4, and says so), or the pair's distance
  CHECK(tight.time_step_part <= tight.tolerance / 2);
  CHECK(!tight.time_step_rule.empty());
  for (const ToleranceChoice* c : {&loose, &tight}) {
    CHECK(c->method.find("order 4") != std::string::npos);
    CHECK(std::any_of(c->trail.begin(), c->trail.end(), [](const std::string& line) {
      return line.find("order 4 instead of the scenario's Strang") != std::string::npos;
    }));
  }
}

TEST_CASE("--tolerance on the built-in anharmonic translation: the ODE chosen where cheaper, the call within 1.5 times its run",
          "[work][tolerance][heavy]") {
  // No exact answer for the quartic trap: the reference is the order-4 split-operator run at
  // 4096 steps on 288 points (its distance to 2048 steps, measured 2e-10, bounds its own error
  // by order 4: about 1/15 of that).
  const Scenario s = read_scenario_text(default_scenario_text(), "default");
  Scenario fine = s;
  fine.spectrum.points = 288;
  WorkRequest reference_request = work_request(fine);
  reference_request.steps = 4096;
  reference_request.time_step_check = false;
  const ScenarioWork reference = compute_work(fine, reference_request);
  reference_request.steps = 2048;
  REQUIRE(line_distance(compute_work(fine, reference_request).result().forward, reference.result().forward).distance <
          1e-9);

  const ToleranceChoice loose = compute_work_to_tolerance(s, work_request(s), 1e-4);
  const ToleranceChoice tight = compute_work_to_tolerance(s, work_request(s), 1e-8);
  for (const ToleranceChoice* c : {&loose, &tight}) {
    INFO("tolerance " << c->tolerance << ": " << c->method << ", " << c->steps << " steps, " << c->points
                      << " points, estimate " << c->estimate() << ", ODE cost ratio " << c->ode_cost_ratio);
    CHECK(c->reached());
    CHECK(line_distance(c->work->result().forward, reference.result().forward).distance <= c->tolerance);
    // the grid search keeps the coarser grid of the agreeing pair: no finer [grid] fixed
    if (!c->ode_first) CHECK(c->grid_part <= c->tolerance / 2);
    CHECK(!c->scenario.spectrum.extent);
    // a fixed extent on the frame's grid must not spoil the finer-grid check of H_B (which
    // sits displaced in the lab): the chosen run passes it
    CHECK(c->work->result().diagnostics.grid_convergence < 1e-6 * lowest_spacing(c->work->result()));
  }
  // wherever the interaction-picture ODE is chosen, it needs at most 0.2 of the split-operator
  // run's arithmetic (a deterministic count, not a timing: its operations are charged at 2.5)
  for (const ToleranceChoice* c : {&loose, &tight})
    if (c->method.rfind("eigenbasis", 0) == 0) CHECK((c->ode_cost_ratio <= 0.2 && c->ode_part <= c->tolerance / 2));
  CHECK(tight.time_step_part <= tight.tolerance / 2);
  // A slow move (25 us, ten times the built-in one: nearly adiabatic) is where the ODE wins: it
  // is chosen, at a small fraction of the split-operator arithmetic, and agrees with the
  // split-operator run to T (part of its choice)
  Scenario slow = s;
  slow.protocol->duration *= 10;
  Scenario slow_fine = slow;  // its reference as above (the order-4 error falls as tau steps^-4)
  slow_fine.spectrum.points = 288;
  WorkRequest slow_request = work_request(slow_fine);
  slow_request.steps = 40960;
  slow_request.time_step_check = false;
  const ScenarioWork reference_slow = compute_work(slow_fine, slow_request);
  const ToleranceChoice ode = compute_work_to_tolerance(slow, work_request(slow), 1e-8);
  INFO("slow move: " << ode.method << ", ODE cost ratio " << ode.ode_cost_ratio);
  CHECK(ode.method.rfind("eigenbasis", 0) == 0);
  CHECK(ode.ode_cost_ratio <= 0.2);
  CHECK(ode.reached());
  // issue 21: tried first, it wins there, so the call is its run and its check alone (on 3/2 the
  // points at T/500 with 2/3 the basis), within 1.5 times the chosen run with its usual check
  // (estimated arithmetic; the check on 3/2 the basis took 2.7 times), and that check's
  // distance, the estimate, bounds the true error
  CHECK(ode.ode_first);
  CHECK(ode.trail.size() == 2);
  CHECK(ode.cost_spent <= 1.5 * ode.chosen_cost);
  CHECK(line_distance(ode.work->result().forward, reference_slow.result().forward).distance <= ode.tolerance);
  // issue 21: each whole call within 1.5 times the chosen split-operator run with its usual
  // half-step check (estimated arithmetic)
  for (const ToleranceChoice* c : {&loose, &tight}) CHECK(c->cost_spent <= 1.5 * c->chosen_cost);
}

TEST_CASE("--tolerance: the ODE check on 2/3 the basis over-estimates a truncated basis's error",
          "[work][tolerance][heavy]") {
  // The built-in move (2.5 us, fast enough to climb some tens of levels), forward only, with a
  // basis too small on purpose. Reference: the same ODE on 120 levels at tighter tolerances
  // (its own basis error is checked below against 90 levels).
  const Scenario s = read_scenario_text(default_scenario_text(), "default");
  WorkRequest e = work_request(s);
  e.integrator = Integrator::eigenbasis;
  e.steps = 0;
  e.time_step_check = false;
  e.reverse_run = false;
  auto with_basis = [&](int levels, double ode) {
    WorkRequest r = e;
    r.eigenbasis_levels = levels;
    r.ode = {ode, ode};
    return compute_work(s, r);
  };
  const ScenarioWork reference = with_basis(120, 1e-13);
  REQUIRE(line_distance(with_basis(90, 1e-13).result().forward, reference.result().forward).distance < 1e-12);
  const double tolerance = 1e-8;  // the search's first run is at T/50
  for (const int levels : {40, 50}) {
    const ScenarioWork first = with_basis(levels, tolerance / 50);
    const WorkRequest c = ode_check_request(first.request, first.result(), tolerance);
    CHECK(c.eigenbasis_levels == (2 * levels + 2) / 3);
    CHECK(!c.reverse_run);
    const ScenarioWork check = compute_work(s, c);
    const double truth = line_distance(first.result().forward, reference.result().forward).distance;
    const double estimate = line_distance(first.result().forward, check.result().forward).distance;
    INFO(levels << " levels: true error " << truth << ", distance to the check " << estimate);
    CHECK(truth > 1e-10);  // the basis is too small: there is an error to find
    CHECK(estimate >= truth);
  }
}
