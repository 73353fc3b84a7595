// Work distributions, fluctuation-relation checks, thermal weights and the truncation terms.
#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <iomanip>

#include "solver/harmonic_reference.hpp"
#include "solver/thermal.hpp"
#include "solver/work.hpp"

using namespace trapwork;

namespace {
Eigen::VectorXd oscillator_energies(double omega, int levels) {
  Eigen::VectorXd e(levels);
  for (int n = 0; n < levels; ++n) e[n] = omega * (n + 0.5);
  return e;
}
// A 3-level unitary mixing (rotation in the (0,1) and (1,2) planes): doubly stochastic |U|^2
Eigen::MatrixXd mixing(double a, double b) {
  Eigen::Matrix3d r1 = Eigen::Matrix3d::Identity(), r2 = Eigen::Matrix3d::Identity();
  r1.topLeftCorner<2, 2>() << std::cos(a), -std::sin(a), std::sin(a), std::cos(a);
  r2.bottomRightCorner<2, 2>() << std::cos(b), -std::sin(b), std::sin(b), std::cos(b);
  return (r2 * r1).cwiseAbs2();
}
WorkInput three_level(double beta, const Eigen::MatrixXd& p) {
  Eigen::VectorXd ea(3), eb(3);
  ea << 0, 1, 2.5;
  eb << 0.3, 1.1, 3.0;
  return WorkInput{{p}, ea, eb, boltzmann_weights(ea, beta), {}, {}, beta};
}
}  // namespace

TEST_CASE("work lines, moments and Jarzynski for a closed three-level model", "[work]") {
  const double beta = 0.8;
  const auto in = three_level(beta, mixing(0.4, 1.1));
  const auto d = work_distribution(in);
  REQUIRE(d.lines.size() == 9);
  for (std::size_t i = 1; i < d.lines.size(); ++i) CHECK(d.lines[i - 1].work <= d.lines[i].work);
  double mean = 0, total = 0;
  for (int m = 0; m < 3; ++m)
    for (int n = 0; n < 3; ++n) {
      const double w = in.initial_weights[std::size_t(m)] * in.transitions.probability(m, n);
      total += w;
      mean += w * (in.final_energies[n] - in.initial_energies[m]);
    }
  CHECK(total == Approx(1).epsilon(1e-15));
  CHECK(d.mean == Approx(mean).epsilon(1e-14));
  CHECK(std::abs(d.unresolved_weight) < 1e-15);
  // closed model, U unitary on the whole space: Jarzynski exact to rounding (Tasaki 2000)
  CHECK(std::abs(d.jarzynski_residual) < 1e-14);
  CHECK(d.partition_ratio == Approx(std::exp(log_partition(in.final_energies, beta) -
                                             log_partition(in.initial_energies, beta))).epsilon(1e-14));
  CHECK(d.dissipated_work == Approx(d.mean - d.free_energy_change).epsilon(1e-14));
  CHECK(d.dissipated_work >= 0);  // second law, <W> >= Delta F
  // a wrong input: a matrix that is not doubly stochastic (not a unitary's) breaks the equality
  Eigen::MatrixXd wrong = in.transitions.probability;
  wrong.col(0) += 0.05 * wrong.col(2);
  wrong.col(2) *= 0.95;  // rows still sum to 1, columns no longer do
  CHECK(std::abs(work_distribution(three_level(beta, wrong)).jarzynski_residual) > 1e-3);
}

TEST_CASE("large energies do not overflow the Jarzynski average", "[work]") {
  auto in = three_level(1, mixing(0.3, 0.2));
  in.initial_energies.array() += 5000;  // exp(+beta E) alone would overflow
  in.final_energies.array() += 5000;
  in.beta = 1.0;
  const auto d = work_distribution(in);
  CHECK(std::isfinite(d.jarzynski_average));
  CHECK(std::abs(d.jarzynski_residual) < 1e-14);
}

TEST_CASE("equal work values merge; degenerate final levels are one eigenspace", "[work]") {
  Eigen::VectorXd ea(2), eb(3);
  ea << 0, 1;
  eb << 1, 2, 2 + 1e-12;  // levels 1 and 2 form a (near-)degenerate group
  Eigen::MatrixXd p(2, 3), q(2, 3);
  p << 0.5, 0.3, 0.2, 0.1, 0.6, 0.3;
  q << 0.5, 0.1, 0.4, 0.1, 0.2, 0.7;  // another basis inside the group: same group sums
  const std::vector<int> groups = degenerate_groups(eb, 1e-9);
  REQUIRE(groups[1] == groups[2]);
  const WorkInput a{{p}, ea, eb, {0.7, 0.3}, {}, groups, std::nullopt};
  WorkInput b = a;
  b.transitions.probability = q;
  const auto da = work_distribution(a), db = work_distribution(b);
  REQUIRE(da.lines.size() == db.lines.size());
  for (std::size_t i = 0; i < da.lines.size(); ++i) {
    CHECK(da.lines[i].work == db.lines[i].work);
    CHECK(da.lines[i].probability == Approx(db.lines[i].probability).epsilon(1e-15));
  }
  // W = 1 from 0 -> 0 and from 1 -> group (1 + 5e-13): merged within the default 1e-9
  CHECK(da.lines.size() == 3);  // W = 0 (1->0), 1 (0->0 with 1->group), 2 (0->group)
  CHECK(std::isnan(da.jarzynski_residual));  // no beta given
}

TEST_CASE("Crooks checks: exact for microreversible matrices, fail for a wrong one", "[work]") {
  const double beta = 0.6;
  const Eigen::MatrixXd f = mixing(0.7, 0.5);
  const auto forward = three_level(beta, f);
  WorkInput reverse{{f.transpose()}, forward.final_energies, forward.initial_energies,
                    boltzmann_weights(forward.final_energies, beta), {}, {}, beta};
  const auto c = crooks_check(forward, reverse);
  CHECK(c.lines_compared == 9);
  CHECK(c.max_line_difference < 1e-16);
  CHECK(c.ratios_compared > 0);
  CHECK(c.max_ratio_error < 1e-13);  // full space: no truncation, rounding only
  // deliberately wrong reverse matrix: one pair perturbed by 1e-3 (rows still sum to 1)
  WorkInput wrong = reverse;
  wrong.transitions.probability(0, 1) += 1e-3;
  wrong.transitions.probability(0, 2) -= 1e-3;
  const auto bad = crooks_check(forward, wrong);
  CHECK(bad.max_line_difference == Approx(1e-3).epsilon(1e-9));
  CHECK(bad.max_ratio_error > 1e-4);
}

TEST_CASE("Jarzynski residual with K kept levels: sudden 1 -> 2 quench", "[work][thermal]") {
  // residual (Z_A/Z_A^K)(1 - p_R(>=K)) - 1 (derived in the TPM scheme from unitarity); the
  // values for K = 5 and 20 at beta = 1 were computed independently from that formula
  // (quoted to 7 significant digits); Tasaki 2000 / Kurchan 2000 for the equality (from memory)
  const double beta = 1, q = sudden_q(1, 2);
  const int levels = 200;
  const Eigen::VectorXd ea = oscillator_energies(1, levels), eb = oscillator_energies(2, levels);
  for (auto [k, expect, eps, p_r] : {std::tuple{5, 1.717080e-3, 6.74e-3, 5.03e-3}, std::tuple{20, -1.416162e-8, 2.06e-9, 1.62e-8}}) {
    const WorkInput fwd{{husimi_transition_matrix(k, levels, q)}, ea, eb, boltzmann_weights(ea.head(k), beta), {}, {}, beta};
    const auto d = work_distribution(fwd);
    INFO("K = " << k << " residual " << std::setprecision(10) << d.jarzynski_residual);
    CHECK(d.jarzynski_residual == Approx(expect).epsilon(1e-6));
    // reverse run (2 -> 1, same Q*) from B's thermal levels, nearly complete (40 levels)
    const auto wb = boltzmann_weights(eb.head(40), beta);
    const auto t = truncation_residual_bound(thermal_tail(ea, beta, k), k, husimi_transition_matrix(40, levels, q), wb,
                                             thermal_tail(eb, beta, 40));
    CHECK(t.thermal_tail == Approx(eps).epsilon(5e-3));  // quoted to 3 digits
    CHECK(t.reverse_tail == Approx(p_r).epsilon(5e-3));
    const double za_over_zak = 1 / (1 - t.thermal_tail);
    INFO("formula " << za_over_zak * (1 - t.reverse_tail) - 1 << " eps " << t.thermal_tail << " pR " << t.reverse_tail);
    // identity to rounding: sums of ~200 terms near 1, 200 x 1.1e-16 ~ 2e-14
    CHECK(d.jarzynski_residual == Approx(za_over_zak * (1 - t.reverse_tail) - 1).margin(5e-14));
    CHECK(std::abs(d.jarzynski_residual) <= t.bound);
  }
}

TEST_CASE("histogram, resolution-broadened density and characteristic function", "[work]") {
  const auto d = work_distribution(three_level(0.8, mixing(0.4, 1.1)));
  const auto h = histogram(d, 0.5);
  double sum = 0;
  for (double p : h.probability) sum += p;
  CHECK(sum == Approx(1).epsilon(1e-14));
  CHECK(h.start <= d.lines.front().work);
  // density integrates to 1 (trapezoid on a fine wide grid: error << 1e-10 for sigma = 0.2)
  std::vector<double> w;
  for (int i = 0; i <= 4000; ++i) w.push_back(-6 + 12.0 * i / 4000);
  const auto rho = broadened_density(d, 0.2, w);
  double integral = 0;
  for (std::size_t i = 1; i < w.size(); ++i) integral += 0.5 * (rho[i] + rho[i - 1]) * (w[i] - w[i - 1]);
  CHECK(integral == Approx(1).epsilon(1e-10));
  // G(0) = 1; G'(0) = i <W> (central difference, error ~ h^2 <W^3>/6)
  const double hstep = 1e-5;
  const auto g = characteristic_function(d, {0.0, -hstep, hstep});
  CHECK(std::abs(g[0] - 1.0) < 1e-15);
  CHECK(((g[2] - g[1]) / (2 * hstep)).imag() == Approx(d.mean).epsilon(1e-8));
  CHECK_THROWS_AS(histogram(d, 0), InputError);
  CHECK_THROWS_AS(broadened_density(d, -1, w), InputError);
}

TEST_CASE("thermal weights: stable, phonon number, level choice", "[thermal]") {
  const Eigen::VectorXd e = oscillator_energies(1, 300);
  // Boltzmann weights at a huge beta: no overflow, ground state weight 1
  const auto cold = boltzmann_weights(e.array() + 1e4, 1e3);
  CHECK(cold[0] == 1.0);
  CHECK(std::isfinite(log_partition(e, 1e3)));
  // oscillator: Z = 1/(2 sinh(beta/2)) (common practice)
  CHECK(log_partition(e, 0.7) == Approx(-std::log(2 * std::sinh(0.35))).epsilon(1e-14));
  // beta from the mean phonon number: sum_m m p_m = nbar for an oscillator (Bose-Einstein)
  const double nbar = 2.5, beta = beta_from_phonons(nbar, 1.0);
  const auto p = boltzmann_weights(e, beta);
  double mean_n = 0;
  for (std::size_t m = 0; m < p.size(); ++m) mean_n += double(m) * p[m];
  CHECK(mean_n == Approx(nbar).epsilon(1e-12));  // tail beyond 300 levels ~ e^{-300 beta} ~ 1e-42
  CHECK(InitialState::phonons(nbar).beta(e) == beta);
  // level choice: eps_K = e^{-beta K} for the oscillator
  const auto c = choose_initial_levels(e, 1.0, 1e-8, 100);
  CHECK(c.reached);
  CHECK(c.kept == 19);  // e^{-18} = 1.5e-8 > 1e-8 > e^{-19} = 5.6e-9
  CHECK(c.left_out == Approx(std::exp(-19.0)).epsilon(1e-12));
  CHECK_FALSE(choose_initial_levels(e.head(10), 1.0, 1e-8, 100).reached);  // spectrum too short
  CHECK_THROWS_AS(beta_from_phonons(-1, 1), InputError);
  CHECK_THROWS_AS(InitialState::thermal(0), InputError);
  const auto mix = initial_weights(InitialState::mixture({1, 0, 3}), e, 1e-8, 10);
  CHECK(mix.weights.size() == 3);
  CHECK(mix.weights[2] == 0.75);
  CHECK_FALSE(mix.gibbs);
  CHECK_THROWS_AS(initial_weights(InitialState::eigenstate(400), e, 1e-8, 10), PhysicsError);
}

TEST_CASE("run_work: sudden quench through the driver, and a non-Gibbs start is flagged", "[work][driver]") {
  const Potential base({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  const Protocol quench(0, {Schedule::linear("trap.frequency", 1, 2)});
  WorkRequest request;
  request.initial = InitialState::thermal(1);
  request.thermal_tolerance = 1e-10;
  request.spectrum.options.method = EigenMethod::dense;
  const WorkResult r = run_work(base, quench, request);
  REQUIRE(r.harmonic);
  // the sudden amplitudes on the grid vs Husimi (grid and eigen-solver rounding, ~1e-12)
  CHECK(r.harmonic->max_line_difference < 1e-10);
  CHECK(std::abs(r.forward.transitions.probability(0, 0) - 0.94280904158206336587) < 1e-10);
  REQUIRE(r.crooks);
  CHECK(r.crooks->max_line_difference < 1e-12);  // U = 1: overlaps are symmetric
  CHECK(std::abs(r.diagnostics.jarzynski_residual) <= r.diagnostics.truncation.bound + 1e-10);

  request.initial = InitialState::eigenstate(1);
  const WorkResult e = run_work(base, quench, request);
  CHECK_FALSE(e.crooks);
  bool flagged = false;
  for (const auto& w : e.diagnostics.warnings) flagged |= w.find("not a Gibbs state") != std::string::npos;
  CHECK(flagged);
  CHECK(e.distribution.lines.front().initial == 1);
}

TEST_CASE("issue 14: Jarzynski average keeps the rows whose Boltzmann weight underflows", "[work][thermal]") {
  // beta (E_m - E_0) = 800 m: every weight but p_0 underflows to 0.0 (exp(-745) is below the
  // smallest double). The reverse run's escape p_R(>=K) is what the K kept rows are for; the
  // identity residual = (Z_A/Z_A^K)(1 - p_R(>=K)) - 1 (derived in the TPM scheme from unitarity,
  // as in the test above) must hold. Dropping rows m >= 1 gives P(0 -> 0) - 1 = -0.057 instead.
  const double beta = 800, q = sudden_q(1, 2);
  const int k = 12, levels = 200;
  const Eigen::VectorXd ea = oscillator_energies(1, levels), eb = oscillator_energies(2, levels);
  const auto weights = boltzmann_weights(ea.head(k), beta);
  REQUIRE(weights[1] == 0.0);
  const WorkInput fwd{{husimi_transition_matrix(k, levels, q)}, ea, eb, weights, {}, {}, beta};
  const auto d = work_distribution(fwd);
  const auto t = truncation_residual_bound(thermal_tail(ea, beta, k), k, husimi_transition_matrix(40, levels, q),
                                           boltzmann_weights(eb.head(40), beta), thermal_tail(eb, beta, 40));
  INFO("residual " << d.jarzynski_residual << " p_R(>=K) " << t.reverse_tail);
  CHECK(d.jarzynski_residual == Approx((1 - t.reverse_tail) / (1 - t.thermal_tail) - 1).margin(1e-14));
  CHECK(std::abs(d.jarzynski_residual) <= t.bound + 1e-14);
}

namespace {
// Sudden switch omega0 -> omega1 of a harmonic trap (U = 1): H_B - E_m^A acts on |m_A> as
// (omega1^2 - omega0^2) x^2 / 2, so <W^2>_m = ((omega1^2 - omega0^2)/2)^2 <m|x^4|m> with
// <m|x^4|m> = 3 (2m^2 + 2m + 1)/(4 omega0^2) (textbook ladder algebra), and over the Gibbs state
// 2<m^2> + 2<m> + 1 = (2 nbar + 1)^2 = coth^2(beta omega0/2): <W^2> = 3 <W>^2, var W = 2 <W>^2
// (derived here), with <W> from parametric_mean_work (Husimi 1953; Deffner & Lutz 2008).
WorkResult sudden_squeeze(WorkRequest request) {
  const Potential base({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  const Protocol quench(0, {Schedule::linear("trap.frequency", 1, 2.2)});
  request.initial = InitialState::thermal(0.5);
  request.spectrum.options.method = EigenMethod::dense;
  return run_work(base, quench, request);
}
bool has_warning(const Diagnostics& d, const std::string& text) {
  for (const auto& w : d.warnings)
    if (w.find(text) != std::string::npos) return true;
  return false;
}
}  // namespace

TEST_CASE("issue 14: moments of a sudden 1 -> 2.2 switch carry an error estimate that bounds the exact error",
          "[work][moments]") {
  const double mean = parametric_mean_work(1, 2.2, sudden_q(1, 2.2), 0.5), variance = 2 * mean * mean;
  WorkRequest request;  // defaults: thermal cut 1e-10, relative moment tolerance 1e-8
  const WorkResult r = sudden_squeeze(request);
  const MomentErrors& m = r.diagnostics.moments;
  INFO("<W> " << r.distribution.mean - mean << " +- " << m.mean_error << ", var " << r.distribution.variance - variance
              << " +- " << m.variance_error << ", final levels " << r.forward.transitions.final_levels());
  CHECK(std::abs(r.distribution.mean - mean) <= m.mean_error);
  CHECK(std::abs(r.distribution.variance - variance) <= m.variance_error);
  CHECK(m.mean_met());
  CHECK(m.variance_met());
  CHECK_FALSE(has_warning(r.diagnostics, "moments miss"));
  // before: 80 final levels, thermal cut 1e-10 gave <W> 9e-8 and var W 1.7e-6 relative off
  CHECK(std::abs(r.distribution.mean - mean) < 1e-8 * mean);
  CHECK(std::abs(r.distribution.variance - variance) < 1e-8 * variance);
  // the direct moments (no final-level sum) against the closed forms: the thermal cut and
  // rounding of <H_B^2> sums over the grid (~1e-13 relative) only
  CHECK(std::abs(m.mean_direct - mean) <= m.mean_thermal + 1e-12 * mean);

  SECTION("a deliberately truncated run reports a large moment error and a warning") {
    request.max_initial_levels = 8;  // thermal cut never reached: eps_K ~ exp(-0.5 K)
    request.final_margin = 2;
    const WorkResult t = sudden_squeeze(request);
    const MomentErrors& e = t.diagnostics.moments;
    INFO("<W> " << t.distribution.mean - mean << " +- " << e.mean_error << ", var " << t.distribution.variance - variance
                << " +- " << e.variance_error);
    CHECK(e.mean_error > 1e-4 * mean);
    CHECK_FALSE(e.mean_met());
    CHECK(has_warning(t.diagnostics, "moments miss their relative tolerance"));
    CHECK(std::abs(t.distribution.mean - mean) <= e.mean_error);
    CHECK(std::abs(t.distribution.variance - variance) <= e.variance_error);
  }
}

// The direct moments' spread of H_B in a state is computed about the state's own energy: with a
// large common energy offset (a deep trap, |E| = 3568 internal units as in examples/
// tweezer_deform.toml) <H^2> - <H>^2 would leave rounding of about 1e-16 |E|^2 ~ 1e-9 in place
// of the true spread. An oscillator ground state (hbar = m = omega = 1) has spread 0 and energy
// 1/2 above the offset; a displaced one (a coherent state, x0 = 1) has energy 1/2 + x0^2/2 and
// spread (hbar omega)^2 |alpha|^2 = x0^2 / 2, with |alpha|^2 = x0^2 / 2 (common practice, from
// memory: the textbook coherent-state energy variance).
TEST_CASE("the printed <W> error covers a coarse time step: the half-step run's shift is part of it",
          "[work][moments]") {
  // A harmonic ramp 1 -> 2 in tau = 2 on a deliberately coarse Strang step: the level truncation
  // is tiny, the time step is not. Against Husimi's <W> (J. Phys. Soc. Jpn. 9, 381 (1953), from
  // memory; the run's own harmonic reference, exact for one harmonic term).
  const Potential base({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  const Protocol ramp(2, {Schedule::linear("trap.frequency", 1, 2)});
  WorkRequest request;
  request.initial = InitialState::thermal(0.5);
  request.integrator = Integrator::strang;
  request.steps = 12;
  const WorkResult r = run_work(base, ramp, request);
  REQUIRE(r.harmonic);
  REQUIRE(r.harmonic->exact);
  const MomentErrors& m = r.diagnostics.moments;
  const double miss = std::abs(r.distribution.mean - r.harmonic->mean_work);
  INFO("<W> - exact " << miss << ", truncation part " << m.mean_error << ", discretisation "
                      << m.mean_discretisation);
  CHECK(miss > 10 * m.mean_error);  // the truncation part alone would hide the miss
  CHECK(miss <= m.reported_mean_error());
  CHECK(m.reported_mean_error() < 3 * miss);  // and is not a blanket bound
  CHECK(m.discretisation_from.find("half-step") != std::string::npos);
  // without the half-step run the part is not measured, and says so by NaN
  request.time_step_check = false;
  CHECK(std::isnan(run_work(base, ramp, request).diagnostics.moments.mean_discretisation));
}

TEST_CASE(
    "a run whose states reach the grid's momentum limit is repeated on a finer grid; a fixed grid is warned",
    "[work][grid]") {
  // A harmonic trap squeezed to 20 times its frequency and back (sin^2 in time) in tau = 1.257:
  // the squeezed state's momenta pass the automatic grid's, chosen from the instantaneous spectra.
  // Against Husimi's <W> (J. Phys. Soc. Jpn. 9, 381 (1953), from memory; the run's own reference).
  const Potential base({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  const Protocol squeeze(1.257,
                         {Schedule::formula("trap.frequency", "1 + 19*sin(3.141592653589793*t/tau)^2")});
  WorkRequest request;
  request.initial = InitialState::eigenstate(0);
  request.reverse_run = false;
  request.trace_points = 0;
  const WorkResult r = run_work(base, squeeze, request);
  REQUIRE(r.harmonic);
  const Diagnostics& d = r.diagnostics;
  INFO("grid " << r.grid.size() << " points, momentum edge " << d.momentum_edge << ", position edge "
               << d.position_edge << ", <W> - exact " << r.distribution.mean - r.harmonic->mean_work << " +- "
               << d.moments.reported_mean_error());
  CHECK(d.grid_refinements >= 1);
  CHECK(std::any_of(d.notes.begin(), d.notes.end(),
                    [](const std::string& n) { return n.find("grid refined") != std::string::npos; }));
  CHECK(d.momentum_edge <= momentum_edge_tolerance);
  CHECK(d.position_edge <= momentum_edge_tolerance);
  CHECK(std::abs(r.distribution.mean - r.harmonic->mean_work) <= d.moments.reported_mean_error());
  // the same extent on half the points, fixed: not refined, warned with the value
  request.spectrum.extent = std::make_pair(r.grid.left(), r.grid.right());
  request.spectrum.points = r.grid.size() / 2;
  const WorkResult coarse = run_work(base, squeeze, request);
  INFO("fixed grid: momentum edge " << coarse.diagnostics.momentum_edge);
  CHECK(coarse.diagnostics.grid_refinements == 0);
  CHECK(coarse.diagnostics.momentum_edge > momentum_edge_tolerance);
  CHECK(has_warning(coarse.diagnostics, "momentum limit pi hbar/dx"));
}

TEST_CASE("state_energies: the spread of H in a state is not lost under a large energy offset", "[work][moments]") {
  const Grid grid = Grid::periodic(-12, 12, 256);
  const double offset = -3568;
  std::vector<double> v;
  for (double x : grid.points()) v.push_back(offset + 0.5 * x * x);
  for (double x0 : {0.0, 1.0}) {
    Eigen::MatrixXcd psi(grid.size(), 1);
    for (std::size_t j = 0; j < grid.size(); ++j) psi(Eigen::Index(j), 0) = std::exp(-0.5 * std::pow(grid.x(j) - x0, 2));
    const StateEnergies e = state_energies(grid, v, psi);
    CHECK(std::abs(e.energy[0] - (offset + 0.5 + 0.5 * x0 * x0)) < 1e-10);
    CHECK(std::abs(e.energy_variance[0] - 0.5 * x0 * x0) < 1e-11);
  }
}

// The harmonic prediction's moments without a run (the sweep figure's dense curve): the
// closed forms of solver/harmonic_reference.hpp for the same model harmonic_comparison picks.
TEST_CASE("issue 16: harmonic_moments gives the harmonic <W> and sd W without a run", "[work][harmonic]") {
  const Potential trap({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  std::string why;
  // Displaced oscillator: constant speed v = 3 / 2.5 over tau = 2.5, thermal beta = 0.5.
  const Protocol move(2.5, {Schedule::linear("trap.centre", 0, 3)});
  const auto d = harmonic_moments(trap, move, InitialState::thermal(0.5), why);
  REQUIRE(d);
  const double alpha2 = constant_speed_alpha2(1, 3 / 2.5, 2.5);
  CHECK(d->mean == Approx(constant_speed_mean_work(1, 3 / 2.5, 2.5)).epsilon(1e-9));
  CHECK(d->sd * d->sd == Approx(displaced_thermal_variance(alpha2, 0.5, 1)).epsilon(1e-9));
  // the same from a level: var W = omega^2 |alpha|^2 (2 n + 1)
  const auto level = harmonic_moments(trap, move, InitialState::eigenstate(2), why);
  REQUIRE(level);
  CHECK(level->sd * level->sd == Approx(alpha2 * 5).epsilon(1e-9));
  // Parametric oscillator: <W> = (omega1 Q* - omega0) coth(beta omega0 / 2) / 2; sd W against
  // the variance of the TPM lines built from Husimi's transition probabilities
  // (husimi_transition_matrix, validated separately), on enough levels that the tails are < 1e-12.
  const Protocol ramp(3, {Schedule::linear("trap.frequency", 1, 2.2)});
  const double q = parametric_q([](double t) { const double w = 1 + 1.2 * t / 3; return w * w; }, 3);
  REQUIRE(q > 1.01);  // far enough from adiabatic that the Q* term matters
  const int rows = 80, cols = 160;
  const Eigen::MatrixXd husimi = husimi_transition_matrix(rows, cols, q);
  auto tpm_variance = [&](const std::vector<double>& p) {
    double mean = 0, second = 0;
    for (int m = 0; m < rows; ++m)
      for (int n = 0; n < cols; ++n) {
        const double w = 2.2 * (n + 0.5) - (m + 0.5);
        mean += p[std::size_t(m)] * husimi(m, n) * w;
        second += p[std::size_t(m)] * husimi(m, n) * w * w;
      }
    return std::pair{mean, second - mean * mean};
  };
  const auto p = harmonic_moments(trap, ramp, InitialState::thermal(0.5), why);
  REQUIRE(p);
  CHECK(p->mean == Approx(parametric_mean_work(1, 2.2, q, 0.5)).epsilon(1e-9));
  std::vector<double> gibbs(rows);
  for (int m = 0; m < rows; ++m) gibbs[std::size_t(m)] = -std::expm1(-0.5) * std::exp(-0.5 * m);
  const auto [thermal_mean, thermal_variance] = tpm_variance(gibbs);
  CHECK(p->mean == Approx(thermal_mean).epsilon(1e-9));
  CHECK(p->sd * p->sd == Approx(thermal_variance).epsilon(1e-9));
  // a level and a mixture
  const auto l3 = harmonic_moments(trap, ramp, InitialState::eigenstate(3), why);
  std::vector<double> only3(rows, 0.0);
  only3[3] = 1;
  REQUIRE(l3);
  CHECK(l3->sd * l3->sd == Approx(tpm_variance(only3).second).epsilon(1e-9));
  const auto mix = harmonic_moments(trap, ramp, InitialState::mixture({0.5, 0, 0.25, 0.25}), why);
  std::vector<double> weights(rows, 0.0);
  weights[0] = 0.5, weights[2] = 0.25, weights[3] = 0.25;
  REQUIRE(mix);
  CHECK(mix->sd * mix->sd == Approx(tpm_variance(weights).second).epsilon(1e-9));
  // No harmonic part: nothing, with the reason.
  const Potential tweezer({Term("trap", Shape::gaussian, {{"depth", 1.0}, {"waist", 1.0}})});
  CHECK_FALSE(harmonic_moments(tweezer, move, InitialState::thermal(0.5), why));
  CHECK(why.find("no harmonic") != std::string::npos);
}

// ---- issue 16: time traces of the forward run --------------------------------------------------

TEST_CASE("moments of a protocol that changes nothing meet their tolerance at the rounding floor", "[work][moments]") {
  // W = 0 exactly: the relative tolerance has nothing to be relative to, and the direct
  // moments carry the propagation's rounding (about 1e-13 of the energies). Before the floor,
  // this run warned "moments miss their relative tolerance" with a relative var W error of 13.
  const Potential trap({Term("trap", Shape::polynomial, {{"frequency", 1.0}, {"quartic", 5e-4}})});
  WorkRequest request;
  request.initial = InitialState::thermal(10.0);
  const WorkResult r = run_work(trap, Protocol(2 * std::numbers::pi, {Schedule::linear("trap.centre", 0, 0)}), request);
  const MomentErrors& m = r.diagnostics.moments;
  INFO("<W> " << r.distribution.mean << " +- " << m.mean_error << ", var W " << r.distribution.variance << " +- "
              << m.variance_error << ", floors " << m.rounding_mean << ", " << m.rounding_variance);
  CHECK(std::abs(r.distribution.mean) < 1e-12);
  CHECK(m.rounding_mean > 0);
  CHECK(m.rounding_mean < 1e-10);  // 1e-11 of the largest kept |E| (a few hbar omega at beta = 10)
  CHECK(m.mean_met());
  CHECK(m.variance_met());
  CHECK_FALSE(has_warning(r.diagnostics, "moments miss"));
  // the floor does not hide a real miss: the truncated sudden switch above still warns
}

TEST_CASE("a strong fast move keeps the initial levels the reverse run needs for the Jarzynski check", "[work][levels]") {
  // Half a period, 5 oscillator lengths, from nbar = 0.1: |alpha|^2 ~ 5, so the reverse run
  // from H_B's Gibbs state ends above the ~14 levels the thermal tail alone asks for with
  // p_R(>=K) ~ 1e-3, which bounds (and here made) the Jarzynski residual. run_work now reads
  // the levels it needs from the reverse run; before, its two retries tightened only the
  // thermal tail, and the residual stayed at its bound (examples/ion_sweep.toml at 0.5 us: 2.4e-3).
  const Potential trap({Term("trap", Shape::polynomial, {{"frequency", 1.0}, {"quartic", 2e-3}})});
  WorkRequest request;
  request.initial = InitialState::phonons(0.1);
  request.thermal_tolerance = 1e-8;
  const WorkResult r = run_work(trap, Protocol(std::numbers::pi, {Schedule::linear("trap.centre", 0, 5)}), request);
  const Diagnostics& d = r.diagnostics;
  INFO("residual " << d.jarzynski_residual << ", bound " << d.truncation.bound << " (p_R(>=K) " << d.truncation.reverse_tail
                   << "), kept " << r.forward.transitions.initial_levels());
  CHECK(r.distribution.mean > 4);  // strongly excited: mean work above 4 quanta
  CHECK(d.truncation.bound < 1e-8);
  CHECK(std::abs(d.jarzynski_residual) < 1e-9);
  CHECK(r.forward.transitions.initial_levels() > 20);
}

namespace {
// Gibbs weights (1 - e^{-beta omega}) e^{-beta omega n} of the lowest `levels` oscillator levels
// (textbook; normalised over all levels).
std::vector<double> oscillator_weights(double omega, double beta, int levels) {
  std::vector<double> p;
  for (int n = 0; n < levels; ++n) p.push_back(-std::expm1(-beta * omega) * std::exp(-beta * omega * n));
  return p;
}
}  // namespace

TEST_CASE("issue 16: traces of a harmonic trap at rest stay at the centre and thermal", "[work][traces]") {
  const Potential base({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  WorkRequest request;
  request.initial = InitialState::thermal(2.0);  // beta: about 12 levels kept
  request.time_step_check = false;
  request.reverse_run = false;
  request.spectrum.options.method = EigenMethod::dense;
  const double tau = 3.0;
  // A centre held still is a translation (co-moving frame, its levels carried along); a
  // frequency held still is not (lab frame, a spectrum solved at each observation point).
  for (const auto& held : {Schedule::constant("trap.centre", 0), Schedule::constant("trap.frequency", 1)}) {
    INFO(held.address());
    const WorkResult r = run_work(base, Protocol(tau, {held}), request);
    const WorkTraces& t = r.traces;
    CHECK(t.absent.empty());
    // 40 points asked for (about 40 in the co-moving frame; in the lab frame at least 9, fewer
    // where the spectra would cost more than 5% of the run)
    REQUIRE(t.time.size() >= (held.address() == "trap.centre" ? 21u : 9u));
    CHECK(t.time.size() <= 41);
    CHECK(t.time.front() == 0);
    CHECK(t.time.back() == tau);
    REQUIRE(t.populations.cols() == request.trace_levels);
    const auto thermal = oscillator_weights(1.0, 2.0, request.trace_levels);
    const double e0 = t.energy_mean.front();
    // The thermal energy of the oscillator, (1/2) coth(beta omega / 2) (textbook), to the left-out
    // thermal weight (1e-10) times the energies of the levels left out.
    CHECK(std::abs(e0 - 0.5 / std::tanh(1.0)) < 1e-8);
    for (std::size_t k = 0; k < t.time.size(); ++k) {
      // A stationary state stays stationary: the automatic step's line errors are ~1e-9
      // (work.cpp's choice of phase per step); 1e-7 leaves a margin of 100.
      CHECK(std::abs(t.position_mean[k]) < 1e-7);
      CHECK(std::abs(t.energy_mean[k] - e0) < 1e-7 * e0);
      for (int n = 0; n < request.trace_levels; ++n)
        CHECK(std::abs(t.populations(Eigen::Index(k), n) - thermal[std::size_t(n)]) < 1e-7);
    }
  }
}

TEST_CASE("issue 16: <x>(t) and <H>(t) of a translated harmonic trap follow the displaced oscillator",
          "[work][traces]") {
  // Harmonic trap omega = 1 moved at constant speed v = D / tau. For a harmonic trap the mean
  // position obeys the classical equation x'' = -omega^2 (x - d(t)) exactly (Ehrenfest; the
  // displaced-oscillator dynamics, common practice), so with x(0) = x'(0) = 0:
  //   x(t) = v (t - sin(omega t) / omega),  x'(t) = v (1 - cos(omega t)),
  // the known lag x - d = -(v / omega) sin(omega t) behind the centre; and the energy is the
  // thermal energy plus that of the centroid's motion relative to the trap:
  //   <H(t)> = <H(0)> + x'^2 / 2 + omega^2 (x - d)^2 / 2.
  const Potential base({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  const double tau = 5.0, distance = 3.0, v = distance / tau;
  WorkRequest request;
  request.initial = InitialState::thermal(2.0);
  request.time_step_check = false;
  request.reverse_run = false;
  request.spectrum.options.method = EigenMethod::dense;
  for (bool co_moving : {true, false}) {
    INFO("co-moving frame: " << co_moving);
    request.co_moving = co_moving;
    const WorkResult r = run_work(base, Protocol(tau, {Schedule::linear("trap.centre", 0, distance)}), request);
    const WorkTraces& t = r.traces;
    REQUIRE(t.time.size() >= 9);
    const double e0 = t.energy_mean.front();
    for (std::size_t k = 0; k < t.time.size(); ++k) {
      const double s = t.time[k], x = v * (s - std::sin(s)), rate = v * (1 - std::cos(s)), d = v * s;
      CHECK(std::abs(t.position_mean[k] - x) < 1e-6 * distance);
      CHECK(std::abs(t.energy_mean[k] - (e0 + 0.5 * rate * rate + 0.5 * (x - d) * (x - d))) < 1e-6 * e0);
      const double total = t.populations.row(Eigen::Index(k)).sum();
      CHECK(total <= 1 + 1e-9);
    }
    // at t = tau the populations are those of the final levels, P(n) = sum_m p_m P(m -> n)
    const auto final = final_populations(r.forward);
    for (int n = 0; n < request.trace_levels; ++n)
      CHECK(std::abs(t.populations(t.populations.rows() - 1, n) - final[std::size_t(n)]) < 1e-9);
  }
}

TEST_CASE("issue 16: traces of a frequency ramp end on the final populations; eigenbasis agrees", "[work][traces]") {
  const Potential base({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  const Protocol ramp(3.0, {Schedule::linear("trap.frequency", 1, 1.6)});
  WorkRequest request;
  request.initial = InitialState::thermal(2.0);
  request.time_step_check = false;
  request.reverse_run = false;
  request.spectrum.options.method = EigenMethod::dense;
  const WorkResult r = run_work(base, ramp, request);
  const WorkTraces& t = r.traces;
  REQUIRE(t.time.size() >= 9);
  const auto final = final_populations(r.forward);
  const Eigen::Index last = t.populations.rows() - 1;
  for (int n = 0; n < request.trace_levels; ++n) {
    CHECK(std::abs(t.populations(last, n) - final[std::size_t(n)]) < 1e-12);  // the same projection
    CHECK(std::abs(t.populations(0, n) - r.forward.initial_weights[std::size_t(n)]) < 1e-12);
  }
  // <H(tau)> - <H(0)> is the direct <W> (same states, same H_B; the cap on V far above the
  // energy range does not touch these states)
  CHECK(std::abs((t.energy_mean.back() - t.energy_mean.front()) - r.diagnostics.moments.mean_direct) < 1e-9);
  for (double x : t.position_mean) CHECK(std::abs(x) < 1e-7);  // a symmetric trap stays centred

  request.integrator = Integrator::eigenbasis;
  const WorkResult e = run_work(base, ramp, request);
  REQUIRE(e.traces.time.size() >= 9);
  CHECK(e.traces.time.back() == 3.0);
  for (int n = 0; n < request.trace_levels; ++n)  // two integrators, each accurate to ~1e-8
    CHECK(std::abs(e.traces.populations(e.traces.populations.rows() - 1, n) - t.populations(last, n)) < 1e-6);
  CHECK(std::abs(e.traces.energy_mean.back() - t.energy_mean.back()) < 1e-6);

  const WorkResult sudden = run_work(base, Protocol(0, {Schedule::linear("trap.frequency", 1, 1.6)}), request);
  CHECK(sudden.traces.time.empty());
  CHECK(sudden.traces.absent.find("sudden") != std::string::npos);
}

// A table ramp is piecewise linear: its acceleration is a delta function at each row, which
// the co-moving frame's inertial force cannot represent. The automatic frame is then the lab
// frame, and the excitation is the displaced oscillator's (Cahill & Glauber 1969) for that
// centre path; asking for the co-moving frame is refused (it gave P(0->0) = 1 - 1e-9 for a
// designed ramp whose true value is 0.996).
TEST_CASE("a table ramp of a trap centre runs in the lab frame, not the co-moving one", "[work][frame]") {
  const Potential trap({Term("trap", Shape::harmonic, {{"frequency", 1.0}})});
  const std::vector<double> times = {0, 1, 2, 3}, centres = {0, 1.5, 1.0, 2.0};
  const Protocol ramp(3, {Schedule::table("trap.centre", times, centres)});
  REQUIRE(ramp.translation(trap));
  WorkRequest request;
  request.initial = InitialState::eigenstate(0);
  request.reverse_run = false;
  const WorkResult r = run_work(trap, ramp, request);
  CHECK_FALSE(r.co_moving);
  const auto piecewise = [&](double t) {
    std::size_t i = std::min<std::size_t>(2, std::size_t(t));
    return centres[i] + (centres[i + 1] - centres[i]) * (t - times[i]);
  };
  const double alpha2 = std::norm(translation_alpha(1.0, piecewise, 3));
  REQUIRE(alpha2 > 0.1);  // order-one excitation: the frames differ visibly
  CHECK(r.forward.transitions.probability(0, 0) == Approx(std::exp(-alpha2)).margin(1e-6));
  request.co_moving = true;
  CHECK_THROWS_WITH(run_work(trap, ramp, request), Catch::Contains("table ramp of trap.centre") &&
                                                       Catch::Contains("frame = \"lab\""));
}

namespace {
// The quartic trap moved by 2 in tau = 4 (oscillator units) on a fixed dense grid, thermal,
// forward only: the runs of run_work's retries and budgets below.
Potential quartic_trap() { return Potential({Term("trap", Shape::polynomial, {{"frequency", 1.0}, {"quartic", 0.05}})}); }
Protocol quartic_move() { return Protocol(4, {Schedule::linear("trap.centre", 0.0, 2.0)}); }
WorkRequest quartic_request() {
  WorkRequest request;
  request.initial = InitialState::thermal(0.5);
  request.spectrum.extent = std::pair{-7.0, 9.0};
  request.spectrum.points = 256;  // dense
  request.reverse_run = false;
  request.time_step_check = false;
  return request;
}
}  // namespace

// The retry rule alone (enlarged_request), on diagnostics made up for each case: only what
// missed is enlarged, by what it needs.
TEST_CASE("a retry enlarges only what missed, by what it needs", "[work]") {
  WorkRequest r;
  r.final_margin = 20;
  r.thermal_tolerance = 1e-10;
  r.max_initial_levels = 80;
  r.unresolved_tolerance = 1e-8;
  auto diagnostics = [&](double unresolved, double mean_final, double mean_thermal) {
    Diagnostics d;
    d.unresolved_weight = unresolved;
    MomentErrors& e = d.moments;
    e.tolerance = 1e-8;
    e.scale_mean = e.scale_variance = 1;
    e.mean_final = mean_final;
    e.mean_thermal = mean_thermal;
    e.variance_final = e.variance_thermal = 0;
    total_moment_errors(e);
    return d;
  };
  // escaping probability only: twice the margin, the thermal cut as it was
  const WorkRequest escape = enlarged_request(r, diagnostics(1e-6, 0, 0));
  CHECK(escape.final_margin == 40);
  CHECK(escape.thermal_tolerance == r.thermal_tolerance);
  CHECK(escape.max_initial_levels == 160);
  // the thermal part 3 times its tolerance: a cut 30 times tighter, the margin kept
  const WorkRequest thermal = enlarged_request(r, diagnostics(0, 1e-10, 3e-8));
  CHECK(thermal.final_margin == 20);
  CHECK(thermal.thermal_tolerance == Approx(1e-10 / 30).epsilon(1e-12));
  // just over (1.2 times): at least 10 times tighter
  CHECK(enlarged_request(r, diagnostics(0, 0, 1.2e-8)).thermal_tolerance == Approx(1e-11 / 1.2).epsilon(1e-12));
  CHECK(enlarged_request(r, diagnostics(0, 0, 1.01e-8)).thermal_tolerance <= 1e-11);
  // the final levels' part the larger: the margin doubles; a thermal part at a third or more
  // of the tolerance is tightened as well
  const WorkRequest both = enlarged_request(r, diagnostics(0, 8e-9, 4e-9));
  CHECK(both.final_margin == 40);
  CHECK(both.thermal_tolerance == Approx(1e-10 / 10).epsilon(1e-12));
  const WorkRequest final_only = enlarged_request(r, diagnostics(0, 1.5e-8, 1e-10));
  CHECK(final_only.final_margin == 40);
  CHECK(final_only.thermal_tolerance == r.thermal_tolerance);
  // a part not known (NaN) counts as missed by far: an unknown final part doubles the margin,
  // an unknown thermal part tightens the cut the most, 1e6 times
  const double nan = std::numeric_limits<double>::quiet_NaN();
  const WorkRequest unknown_final = enlarged_request(r, diagnostics(0, nan, 0));
  CHECK(unknown_final.final_margin == 40);
  CHECK(unknown_final.thermal_tolerance == r.thermal_tolerance);
  CHECK(enlarged_request(r, diagnostics(0, 0, nan)).thermal_tolerance == Approx(1e-16).epsilon(1e-12));
  // met: nothing but the cap changes (run_work does not retry then; the rule stays quiet)
  const WorkRequest met = enlarged_request(r, diagnostics(0, 1e-9, 1e-9));
  CHECK(met.final_margin == 20);
  CHECK(met.thermal_tolerance == r.thermal_tolerance);
}

// An eigenbasis run with an arithmetic budget its basis spectrum alone would pass stops before
// solving it (the --tolerance search's ODE try on a large grid), saying so; with a budget
// above that estimate it solves the basis and goes on.
TEST_CASE("an eigenbasis run stops before a basis its budget cannot pay for", "[work][issue21]") {
  const Potential trap = quartic_trap();
  const Protocol move = quartic_move();
  WorkRequest request = quartic_request();  // dense: 9 n^3 = 1.5e8 estimated operations per basis
  request.integrator = Integrator::eigenbasis;
  request.ode_arithmetic_limit = 1e7;
  try {
    (void)run_work(trap, move, request);
    FAIL("no ArithmeticLimitReached");
  } catch (const ArithmeticLimitReached& stop) {
    CHECK(stop.basis);
    CHECK(stop.spent == 0);
    CHECK_THAT(std::string(stop.what()), Catch::Contains("basis of") && Catch::Contains("passes the limit"));
  }
  request.ode_arithmetic_limit = 1e12;
  const WorkResult paid = run_work(trap, move, request);
  CHECK(paid.diagnostics.ode_basis_levels > 0);
}

// Issue 21: when run_work repeats a run with more levels (the escape probability was above its
// tolerance), the states the previous attempt propagated on the same grid and steps are
// carried over instead of propagated again; the result is the one-attempt run at the enlarged
// settings, to rounding.
TEST_CASE("issue 21: an enlarged run carries the states already propagated", "[work][issue21]") {
  const Potential trap = quartic_trap();
  const Protocol move = quartic_move();
  WorkRequest request = quartic_request();  // a fixed grid: the same in every attempt
  request.integrator = Integrator::strang;
  request.steps = 400;
  request.co_moving = false;
  request.final_margin = 2;  // few final levels: the run is repeated with more
  const WorkResult enlarged = run_work(trap, move, request);
  REQUIRE(enlarged.diagnostics.notes.size() == 1);
  CHECK_THAT(enlarged.diagnostics.notes[0], Catch::Contains("levels enlarged 1 time") &&
                                                Catch::Contains("initial states carried over"));
  const int kept = enlarged.forward.transitions.initial_levels();
  CHECK(enlarged.diagnostics.carried_states > 0);
  CHECK(enlarged.diagnostics.carried_states < kept);  // the tighter thermal cut added states
  // The first attempt missed only in the moments' thermal part (var W: 1.2 times its
  // tolerance; the final levels' part and the escape 1e-13, the margin was enough): the thermal
  // cut is tightened 12 times (ten beyond the miss), not a fixed 1000 times, the margin kept.
  CHECK(enlarged.diagnostics.final_margin == request.final_margin);
  CHECK(enlarged.diagnostics.thermal_tolerance < request.thermal_tolerance / 10);
  CHECK(enlarged.diagnostics.thermal_tolerance > request.thermal_tolerance / 1e3);

  // the same run in one attempt at the enlarged settings (run_work doubles the margin and the
  // initial levels where they missed and tightens the thermal cut by what its part needed)
  WorkRequest direct = request;
  direct.final_margin = enlarged.diagnostics.final_margin;
  direct.max_initial_levels *= 2;
  direct.thermal_tolerance = enlarged.diagnostics.thermal_tolerance;
  const WorkResult once = run_work(trap, move, direct);
  CHECK(once.diagnostics.notes.empty());
  CHECK(once.diagnostics.carried_states == 0);
  REQUIRE(once.forward.transitions.initial_levels() == kept);
  REQUIRE(once.forward.transitions.final_levels() == enlarged.forward.transitions.final_levels());
  // Carried states agree with the ones solved now to 1e-11 in norm (carried_state_tolerance),
  // so each probability moves by at most about 2e-11; the rest is rounding of the propagation.
  const double line = (once.forward.transitions.probability - enlarged.forward.transitions.probability).cwiseAbs().maxCoeff();
  CHECK(line < 1e-10);
  CHECK(std::abs(once.distribution.mean - enlarged.distribution.mean) < 1e-10);
  CHECK(enlarged.diagnostics.norm_drift == Approx(once.diagnostics.norm_drift).margin(1e-12));
  // traces: the carried states' traces are kept too (every state has its column at tau)
  REQUIRE(!enlarged.traces.time.empty());
  CHECK(enlarged.traces.time.back() == once.traces.time.back());
  CHECK(std::abs(enlarged.traces.position_mean.back() - once.traces.position_mean.back()) < 1e-10);
  CHECK(std::abs(enlarged.traces.energy_mean.back() - once.traces.energy_mean.back()) < 1e-9);
}

// run_work asks for the levels its loops settle on at once (predicted from WKB energies), and
// for an enlarged attempt's levels where that costs nothing (a dense solver finds every level at
// once): an enlarged run solves each Hamiltonian once. With two threads H_A and H_B are solved
// at the same time, each as it would be alone: the same numbers bit for bit.
TEST_CASE("run_work solves each spectrum once, and on two threads gives the same numbers", "[work][spectra]") {
  const Potential trap = quartic_trap();
  const Protocol move = quartic_move();
  WorkRequest request = quartic_request();
  request.integrator = Integrator::strang;
  request.steps = 400;
  request.co_moving = false;
  request.final_margin = 2;  // few final levels: the run is repeated with more (issue 21)
  request.spectrum.options.memo = std::make_shared<SpectrumMemo>();
  const WorkResult one = run_work(trap, move, request);
  REQUIRE(one.diagnostics.notes.size() == 1);
  CHECK_THAT(one.diagnostics.notes[0], Catch::Contains("levels enlarged 1 time"));
  // H_A and H_B, each on the grid and on the finer check grid: four solves for two attempts
  // (each attempt's loop tries 22 levels first; 16 solves before)
  CHECK(request.spectrum.options.memo->solved() == 4);

  for (const EigenMethod method : {EigenMethod::dense, EigenMethod::lanczos}) {
    WorkRequest r = request;
    r.spectrum.options.method = method;
    r.spectrum.options.memo = nullptr;
    r.threads = 1;
    const WorkResult a = run_work(trap, move, r);
    r.threads = 2;
    const WorkResult b = run_work(trap, move, r);
    CHECK(a.initial_spectrum.energies == b.initial_spectrum.energies);
    CHECK(a.initial_spectrum.states == b.initial_spectrum.states);
    CHECK(a.final_spectrum.energies == b.final_spectrum.energies);
    CHECK(a.final_spectrum.states == b.final_spectrum.states);
    CHECK(a.diagnostics.grid_convergence == b.diagnostics.grid_convergence);
    CHECK(a.forward.transitions.probability == b.forward.transitions.probability);
    CHECK(a.distribution.mean == b.distribution.mean);
    if (method == EigenMethod::dense) CHECK(a.forward.transitions.probability == one.forward.transitions.probability);
  }
}
