// `trapwork work --tolerance`: the numerics chosen for a bound on the distance of P(W) from the
// converged result, checked against an exact answer (a harmonic frequency change, Husimi).
#include <catch2/catch.hpp>
#include <cmath>

#include "solver/tool/scenario.hpp"
#include "solver/tool/work_output.hpp"

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

TEST_CASE("--tolerance: the estimate bounds the true distance to the exact Husimi result", "[work][tolerance]") {
  const Scenario s = read_scenario_text(squeeze, "squeeze.toml");
  const ToleranceChoice loose = compute_work_to_tolerance(s, work_request(s), 1e-3);
  const ToleranceChoice tight = compute_work_to_tolerance(s, work_request(s), 1e-7);
  for (const ToleranceChoice* c : {&loose, &tight}) {
    INFO("tolerance " << c->tolerance << ", estimate " << c->estimate() << ", steps " << c->steps);
    CHECK(c->reached());
    CHECK(c->trail.size() >= 3);  // at least one step doubling and one grid refinement
    // Husimi, J. Phys. Soc. Jpn. 9, 381 (1953) (from memory; solver/harmonic_reference)
    CHECK(distance_to_exact(c->work->result()) <= c->tolerance);
    // The method: the eigenbasis ODE is tried with the split-operator run's arithmetic as its
    // budget; either it was stopped, or it finished within it and was timed.
    INFO("method " << c->method << ", ODE cost ratio " << c->ode_cost_ratio << ", ODE part " << c->ode_part
                   << ", split " << c->split_seconds << " s, ODE " << c->eigenbasis_seconds << " s");
    CHECK(c->method == c->work->result().method);
    CHECK(c->ode_stopped != std::isfinite(c->eigenbasis_seconds));
    if (!c->ode_stopped) CHECK(c->ode_cost_ratio <= 1);
  }
  // from 2000 steps the loose bound halves them and the tight one doubles them (Strang: error ~ dt^2)
  CHECK(loose.steps < 2000);
  CHECK(tight.steps > 2000);
}

