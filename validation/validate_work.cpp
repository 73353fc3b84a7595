// Validation of the TPM work statistics against published harmonic-oscillator results.
// Sources (beside each check):
//   [CG69]  Cahill & Glauber, Phys. Rev. 177, 1857 (1969) (from memory): displaced number states
//   [TBH08] Talkner, Burada & Hanggi, PRE 78, 011115 (2008) (journal ref from memory),
//           arXiv:0803.2808: forced oscillator, |alpha|^2 and <W> = 2 m v^2 sin^2(w tau/2)
//   [H53]   Husimi, Prog. Theor. Phys. 9, 381 (1953) (from memory): parametric oscillator
//   [DL08]  Deffner & Lutz, PRE 77, 021128 (2008) (formula from memory): <W>, Q*
//   [T00]   Tasaki, arXiv:cond-mat/0009244 (2000) (from memory): Jarzynski / Crooks in TPM
// Numbers were recomputed independently (mpmath sums, Airy functions, overlap integrals).
#include <catch2/catch.hpp>

#include <cmath>

#include "solver/harmonic_reference.hpp"
#include "solver/work.hpp"

using namespace trapwork;

namespace {
const Potential trap({Term("trap", Shape::harmonic, {{"frequency", 1.0}, {"centre", 0.0}})});

WorkRequest thermal_request(double beta) {
  WorkRequest r;
  r.initial = InitialState::thermal(beta);
  r.thermal_tolerance = 1e-12;
  r.final_margin = 24;
  r.spectrum.options.method = EigenMethod::dense;
  return r;
}

// Jarzynski holds to the truncation terms eps_K + p_R(>=K) (derived in the TPM scheme from
// unitarity; [T00]) plus the solver error, which the time-step estimate bounds.
void check_fluctuation_relations(const WorkResult& r) {
  REQUIRE(r.crooks);
  const auto& d = r.diagnostics;
  INFO("Jarzynski residual " << d.jarzynski_residual << ", bound " << d.truncation.bound << ", Crooks lines "
                             << d.crooks_line_difference << ", ratio " << d.crooks_ratio_error);
  CHECK(std::abs(d.jarzynski_residual) <= d.truncation.bound + 1e-10);
  // symmetric splitting: P_F(m->n) = P_R(n->m) to rounding at any time step [T00]
  CHECK(d.crooks_line_difference < 1e-11);
  // ratio form, exact up to eps_A + eps_B ~ 2e-12 from the normalisation over kept levels
  CHECK(d.crooks_ratio_error < 1e-8);
}
}  // namespace

TEST_CASE("trap translated at constant speed: every line vs the displaced oscillator", "[validation]") {
  // w = v = tau = beta = 1: |alpha|^2 = <W> = 1 - cos 1 = 0.4596976941318603 [TBH08],
  // var W = 0.9947643945044261 (w <W> coth(beta w / 2), [TBH08] form, verified by summation)
  const Protocol move(1, {Schedule::linear("trap.centre", 0, 1)});
  const WorkResult r = run_work(trap, move, thermal_request(1));
  CHECK(r.co_moving);
  REQUIRE(r.harmonic);
  CHECK(r.harmonic->parameter == Approx(0.4596976941318603).epsilon(1e-11));  // classical ODE, tol 1e-12
  INFO("max line difference " << r.harmonic->max_line_difference << ", time-step error " << r.diagnostics.time_step_error);
  CHECK(r.harmonic->max_line_difference < 1e-8);  // every line, 1e-8 absolute [CG69]
  CHECK(r.distribution.mean == Approx(0.4596976941318603).epsilon(1e-8));  // [TBH08]
  CHECK(r.distribution.variance == Approx(0.9947643945044261).epsilon(1e-8));
  CHECK(std::abs(r.distribution.free_energy_change) < 1e-10);  // rigid translation: Delta F = 0
  INFO("norm drift " << r.diagnostics.norm_drift << " steps " << r.steps);
  // rounding only: 12 passes of ~epsilon per step (3 substeps x 2 kicks + 2 FFTs); the
  // measured floor is 1.4e-15 per step, the bound 1e-14 per step
  CHECK(r.diagnostics.norm_drift < 1e-14 * r.steps);
  CHECK(r.diagnostics.unresolved_weight < 1e-10);
  check_fluctuation_relations(r);
}

TEST_CASE("constant-speed mean work in the lab frame at a mean phonon number", "[validation]") {
  // <W> = 2 v^2 sin^2(w tau/2) at any temperature [TBH08]; v = 0.5, tau = 4, nbar = 1
  const Protocol move(4, {Schedule::linear("trap.centre", 0, 2)});
  WorkRequest request = thermal_request(1);
  request.initial = InitialState::phonons(1);
  request.co_moving = false;  // the grid covers the path
  request.time_step_check = false;
  const WorkResult r = run_work(trap, move, request);
  CHECK_FALSE(r.co_moving);
  CHECK(r.distribution.mean == Approx(constant_speed_mean_work(1, 0.5, 4)).epsilon(1e-8));
  REQUIRE(r.harmonic);
  CHECK(r.harmonic->max_line_difference < 1e-8);  // [CG69]
  CHECK(r.distribution.beta == Approx(std::log(2.0)).epsilon(1e-10));  // beta = ln(1 + 1/nbar)/w
  check_fluctuation_relations(r);
}

TEST_CASE("sudden frequency change 1 -> 2 against Husimi", "[validation]") {
  const Protocol quench(0, {Schedule::linear("trap.frequency", 1, 2)});
  const WorkResult r = run_work(trap, quench, thermal_request(1));
  const auto& p = r.forward.transitions.probability;
  CHECK(std::abs(p(0, 0) - 0.9428090415820634) < 1e-10);   // 2 sqrt 2 / 3 [H53]
  CHECK(std::abs(p(0, 2) - 0.05237828008789241) < 1e-10);  // [H53]
  REQUIRE(r.harmonic);
  CHECK(r.harmonic->parameter == 1.25);  // sudden Q* [DL08]
  CHECK(r.harmonic->max_line_difference < 1e-10);
  CHECK(r.distribution.mean == Approx(1.622965060303990).epsilon(1e-9));          // 0.75 coth 0.5 [DL08]
  CHECK(r.distribution.partition_ratio == Approx(0.4434094419850370).epsilon(1e-10));  // Z1/Z0
  check_fluctuation_relations(r);
}

TEST_CASE("finite-time ramp w^2 linear 1 -> 4 over tau = 1 against Husimi", "[validation]") {
  const Protocol ramp(1, {Schedule::formula("trap.frequency", "sqrt(1 + 3*t/tau)")});
  const WorkResult r = run_work(trap, ramp, thermal_request(1));
  REQUIRE(r.harmonic);
  CHECK(std::abs(r.harmonic->parameter - 1.114949406924928) < 1e-10);  // Q* (Airy functions) [H53]
  INFO("max line difference " << r.harmonic->max_line_difference << ", time-step error " << r.diagnostics.time_step_error);
  CHECK(r.harmonic->max_line_difference < 1e-8);  // [H53] lines, propagated: 1e-8
  const auto& p = r.forward.transitions.probability;
  CHECK(std::abs(p(0, 0) - 0.9724449076863052) < 1e-8);   // [H53]
  CHECK(std::abs(p(0, 2) - 0.02642662870319788) < 1e-8);  // [H53]
  CHECK(r.distribution.mean == Approx(1.3307218683917582).epsilon(1e-8));  // [DL08]
  CHECK(r.diagnostics.time_step_error < 1e-8);
  check_fluctuation_relations(r);
}

TEST_CASE("split-operator and eigenbasis ODE agree on the ramp", "[validation]") {
  // Independent integrators on the same grid and spectra (cross-check, common practice)
  const Protocol ramp(1, {Schedule::formula("trap.frequency", "sqrt(1 + 3*t/tau)")});
  WorkRequest request = thermal_request(1);
  request.thermal_tolerance = 1e-8;  // fewer levels: the ODE costs n K^2 per evaluation
  request.final_margin = 16;
  request.reverse_run = false;
  request.time_step_check = false;
  const WorkResult split = run_work(trap, ramp, request);
  request.integrator = Integrator::eigenbasis;
  request.ode = {1e-11, 1e-11};
  request.eigenbasis_levels = 100;  // the squeezed final states need many levels of H_A
  const WorkResult ode = run_work(trap, ramp, request);
  // The eigenbasis of H_A is truncated (100 levels), which limits the highest initial levels
  // (thermal weight ~e^{-m}): compare the rows with weight above 1e-6 and the thermal lines.
  const auto& ps = split.forward.transitions.probability;
  const auto& po = ode.forward.transitions.probability;
  double diff = 0;
  for (int m = 0; m < ps.rows(); ++m)
    if (split.forward.initial_weights[std::size_t(m)] > 1e-6) diff = std::max(diff, (ps.row(m) - po.row(m)).cwiseAbs().maxCoeff());
  INFO("max |P_split - P_ode| over rows with p_m > 1e-6 = " << diff);
  CHECK(diff < 1e-8);  // CF4 error ~1e-10 (time-step estimate) + ODE tolerance 1e-11 x steps
  REQUIRE(split.distribution.lines.size() == ode.distribution.lines.size());
  double line_diff = 0;
  for (std::size_t i = 0; i < split.distribution.lines.size(); ++i)
    line_diff = std::max(line_diff, std::abs(split.distribution.lines[i].probability - ode.distribution.lines[i].probability));
  CHECK(line_diff < 1e-8);
  CHECK(split.distribution.mean == Approx(ode.distribution.mean).epsilon(1e-8));
}

TEST_CASE("adiabatic limit of a slow smooth frequency ramp", "[validation]") {
  // Q* -> 1: P(m->n) -> delta_mn and <W> -> (w1 - w0)/2 coth(beta w0/2) [DL08]
  const double tau = 10, beta = 2;
  const Protocol slow(tau, {Schedule::smoother_step("trap.frequency", 1, 2)});
  WorkRequest request = thermal_request(beta);
  request.thermal_tolerance = 1e-10;
  request.final_margin = 12;
  request.time_step_check = false;
  const WorkResult r = run_work(trap, slow, request);
  REQUIRE(r.harmonic);
  const double q = r.harmonic->parameter;
  INFO("Q* = " << q);
  CHECK(q - 1 < 1e-4);
  const auto& p = r.forward.transitions.probability;
  const auto adiabatic = adiabatic_transition_matrix(int(p.rows()), int(p.cols())).probability;
  // departure from the adiabatic limit is exactly Husimi's, to the propagation accuracy 1e-8
  const double husimi_departure = (r.harmonic->reference.probability - adiabatic).cwiseAbs().maxCoeff();
  CHECK((p - adiabatic).cwiseAbs().maxCoeff() <= husimi_departure + 1e-8);
  CHECK(r.harmonic->max_line_difference < 1e-8);
  const double adiabatic_mean = 0.5 / std::tanh(beta / 2);  // (w1 - w0)/2 coth(beta w0/2)
  CHECK(std::abs(r.distribution.mean - adiabatic_mean) <= std::abs(r.harmonic->mean_work - adiabatic_mean) + 1e-8);
  check_fluctuation_relations(r);
}
