// Unit tests of solver/moving_wall: unitarity, the observer contract through propagate(),
// reversal symmetry, time-step orders, the sudden-compression refusal, sudden-expansion sum rules.
#include <catch2/catch.hpp>
#include <cmath>
#include <numbers>

#include "solver/errors.hpp"
#include "solver/moving_wall.hpp"

using namespace trapwork;
using Catch::Matchers::Contains;

namespace {
constexpr double pi = std::numbers::pi;

// A box whose right wall accelerates (L'' != 0, so the splitting has an error to measure) with
// a harmonic inner potential.
WallProtocol accelerating_box(double tau) {
  Potential inner({Term("trap", Shape::harmonic, {{"frequency", 6.0}, {"centre", 0.5}})});
  return WallProtocol(tau, Schedule::constant("walls.left", 0.0), Schedule::smooth_step("walls.right", 1.0, 1.5),
                      inner, {Schedule::linear("trap.frequency", 6.0, 4.0)});
}

// Lab amplitudes <n_B|U|m_A> of the lowest `count` flat-box... here: propagate the first
// `count` sine states of the initial box (frame chirp applied) and return the frame states.
Eigen::MatrixXcd evolve(const WallProtocol& p, std::size_t points, int count, int steps, SplitOrder order) {
  WallSplitOperatorPropagator prop(p, points, count, order);
  const Spectrum s = flat_box_spectrum(0, 1, points, count);
  Eigen::MatrixXcd state = s.states.cast<std::complex<double>>();  // sqrt(L0) = 1
  prop.from_lab(state, 0);
  propagate(prop, state, 0.0, p.duration(), steps);
  prop.to_lab(state, p.duration());
  return state;
}
}  // namespace

TEST_CASE("moving-wall split-operator is unitary", "[moving_wall]") {
  for (SplitOrder order : {SplitOrder::strang, SplitOrder::fourth}) {
    const Eigen::MatrixXcd s = evolve(accelerating_box(0.7), 128, 5, 300, order);
    const double dy = 1.0 / 129;
    for (int c = 0; c < 5; ++c)  // roundoff of ~1e5 unitary transforms of 128 points: well below 1e-12
      CHECK(std::abs(s.col(c).squaredNorm() * dy - 1) < 1e-12);
  }
}

TEST_CASE("propagate() drives the wall propagator with the observer contract", "[moving_wall]") {
  WallSplitOperatorPropagator prop(accelerating_box(1.0), 32, 1);
  Eigen::MatrixXcd state = flat_box_spectrum(0, 1, 32, 1).states.cast<std::complex<double>>();
  std::vector<double> times;
  const int taken = propagate(prop, state, 0.0, 1.0, 8, [&](const Eigen::MatrixXcd&, double t) { times.push_back(t); });
  CHECK(taken == 8);
  REQUIRE(times.size() == 9);
  for (int i = 0; i <= 8; ++i) CHECK(times[std::size_t(i)] == Approx(i / 8.0).margin(1e-15));
  CHECK(times.back() == 1.0);
  // an observer returning false stops the run
  int calls = 0;
  const int stopped = propagate(prop, state, 0.0, 1.0, 8, [&](const Eigen::MatrixXcd&, double) { return ++calls < 3; });
  CHECK(stopped == 2);
  CHECK(calls == 3);
}

TEST_CASE("reversal: protocol mirror and Crooks line by line", "[moving_wall]") {
  const WallProtocol p = accelerating_box(0.8);
  const WallProtocol r = p.reversed();
  for (double t : {0.0, 0.13, 0.5, 0.8}) {
    CHECK(r.walls(t).right.value == Approx(p.walls(0.8 - t).right.value).epsilon(1e-14));
    CHECK(r.walls(t).right.rate == Approx(-p.walls(0.8 - t).right.rate).epsilon(1e-14));
  }
  WallWorkRequest request;
  request.initial = InitialState::thermal(0.2);
  request.points = 96;
  request.max_initial_levels = 12;
  request.final_margin = 10;
  request.steps = 60;
  request.time_step_check = false;
  const WallWorkResult result = run_wall_work(p, request);
  REQUIRE(result.work.crooks);
  // symmetric splitting with real T and W: U_R = U_F^T exactly, so only roundoff remains
  CHECK(result.work.crooks->lines_compared > 20);
  CHECK(result.work.crooks->max_line_difference < 1e-12);
  CHECK(result.work.diagnostics.norm_drift < 1e-12);
}

TEST_CASE("time-step orders 2 and 4 from three step sizes", "[moving_wall]") {
  const WallProtocol p = accelerating_box(0.5);
  for (auto [order, expected, steps] : {std::tuple{SplitOrder::strang, 2.0, 800}, std::tuple{SplitOrder::fourth, 4.0, 400}}) {
    // projections on the three lowest final sine states; 16 modes keep dt E_max < 1, where the
    // asymptotic order is reached (high modes with E_max dt >> 1 reduce the observed order)
    const Eigen::MatrixXd low = flat_box_spectrum(0, 1, 16, 3).states;
    const SplitOrder scheme = order;  // a structured binding cannot be captured (clang 14)
    auto amplitudes = [&](int n) { return (low.transpose().cast<std::complex<double>>() * evolve(p, 16, 3, n, scheme)).eval(); };
    const Eigen::MatrixXcd a = amplitudes(steps), b = amplitudes(2 * steps), c = amplitudes(4 * steps);
    const double e1 = (a - b).cwiseAbs().maxCoeff(), e2 = (b - c).cwiseAbs().maxCoeff();
    INFO("order " << expected << ": differences " << e1 << ", " << e2);
    // asymptotic error ratio 2^p; +-0.3 in the exponent allows the next term of the series
    CHECK(std::log2(e1 / e2) == Approx(expected).margin(0.3));
  }
}

TEST_CASE("sudden compression is refused with the weight outside the new box", "[moving_wall]") {
  // weight of the ground state of [0, 1] inside [0, 0.8]: 0.8 + sin(0.4 pi)/(2 pi) (integral of
  // 2 sin^2; common practice), so 1 - that outside
  const double outside = 1 - (0.8 + std::sin(0.4 * pi) / (2 * pi));
  CHECK(box_state_weight_inside(0, 1, 0, 0, 0.8) == Approx(1 - outside).epsilon(1e-14));
  char expected[32];
  std::snprintf(expected, sizeof expected, "%.6g", outside);
  CHECK_THROWS_AS(sudden_wall_amplitudes(0, 1, 0, 0.8, 3, 3), PhysicsError);
  CHECK_THROWS_WITH(sudden_wall_amplitudes(0, 1, 0, 0.8, 3, 3),
                    Contains("refused") && Contains(expected) && Contains("post-selected") &&
                        Contains("not a unitary") && Contains("infinite"));
  // the left wall moved inward is refused too; and through the driver
  CHECK_THROWS_AS(sudden_wall_amplitudes(0, 1, 0.1, 2, 3, 3), PhysicsError);
  WallWorkRequest request;
  request.points = 64;
  request.initial = InitialState::eigenstate(0);
  CHECK_THROWS_WITH(run_wall_work(WallProtocol::linear_right(0, 1, 0.8, 0), request), Contains("refused"));
}

TEST_CASE("sudden expansion: closed form, quadrature and sum rules", "[moving_wall]") {
  // offset expansion [0.2, 1] -> [0, 1.5]: closed form against Gauss-Legendre quadrature of
  // the overlap integrals (smooth integrand on [0.2, 1]: 200 nodes are exact to roundoff)
  const Eigen::MatrixXcd a = sudden_wall_amplitudes(0.2, 1.0, 0.0, 1.5, 6, 9);
  Eigen::VectorXd y, w;
  gauss_legendre(200, y, w);
  double worst = 0;
  for (int n = 1; n <= 9; ++n)
    for (int m = 1; m <= 6; ++m) {
      double q = 0;
      for (Eigen::Index i = 0; i < y.size(); ++i) {
        const double x = 0.2 + 0.8 * y[i];
        q += w[i] * 0.8 * std::sqrt(2 / 1.5) * std::sin(n * pi * x / 1.5) * std::sqrt(2 / 0.8) * std::sin(m * pi * (x - 0.2) / 0.8);
      }
      worst = std::max(worst, std::abs(a(n - 1, m - 1).real() - q));
    }
  CHECK(worst < 1e-13);  // roundoff of O(1) terms
  // completeness: sum_n |<n'|1>|^2 -> 1, missing part ~ N^-3 (coefficients ~ n^-2)
  auto missing = [](int n) { return 1 - sudden_wall_amplitudes(0, 1, 0, 2, 1, n).squaredNorm(); };
  const double m250 = missing(250), m500 = missing(500), m1000 = missing(1000);
  CHECK(std::log2(m250 / m500) == Approx(3).margin(0.1));
  CHECK(std::log2(m500 / m1000) == Approx(3).margin(0.1));
  CHECK(m1000 > 0);
  CHECK(m1000 < 1e-9);
  // the exact sum over all m of P(m -> n) is the weight of phi_n^B inside the old box
  const Eigen::MatrixXcd columns = sudden_wall_amplitudes(0, 1, 0, 2, 4000, 3);
  for (int n = 0; n < 3; ++n)  // tail of sum_m ~ 1/m^2 terms beyond 4000: ~1e-4
    CHECK(columns.row(n).squaredNorm() == Approx(box_state_weight_inside(0, 2, n, 0, 1)).margin(1e-4));
}

TEST_CASE("fixed-basis ODE matrices agree with quadrature and the split-operator", "[moving_wall]") {
  // a short expansion with an inner potential: ODE (K = 24 modes) against the split-operator
  const WallProtocol p = accelerating_box(0.3);
  const Eigen::MatrixXcd ode = wall_eigenbasis_amplitudes(p, 24, 2, 4, {1e-11, 1e-11});
  WallWorkRequest request;
  request.initial = InitialState::eigenstate(1);
  request.points = 128;
  request.max_initial_levels = 4;
  request.final_margin = 2;
  request.reverse_run = false;
  const WallWorkResult grid = run_wall_work(p, request);
  const auto& pg = grid.work.forward.transitions.probability;
  REQUIRE(pg.rows() == 2);
  double worst = 0;
  for (int m = 0; m < 2; ++m)
    for (int n = 0; n < 4; ++n) worst = std::max(worst, std::abs(std::norm(ode(n, m)) - pg(m, n)));
  // the ODE's mode truncation error ~ K^-3 (coefficients ~ k^-3, see validate_walls): 1e-4 at K = 24
  CHECK(worst < 1e-4);
  // the automatic step (E-based heuristic) gives line changes ~1e-7 under halving here (measured
  // 1.2e-7); the bound pins that the heuristic stays in that range
  CHECK(grid.work.diagnostics.time_step_error < 1e-6);
}

TEST_CASE("soft-wall term: shape, parameters, schedule address", "[moving_wall]") {
  Potential v({soft_walls("walls", {500, 6}, 0.1, 0.0, 1.0)});
  CHECK(v(0.5) == 0.0);
  CHECK(v(1.1) == Approx(500).epsilon(1e-14));          // one width beyond the wall: height
  CHECK(v(-0.2) == Approx(500 * 64).epsilon(1e-14));    // two widths beyond: height 2^6
  v.set_parameter("walls.right", 1.5);
  CHECK(v(1.2) == 0.0);
  CHECK(Potential({soft_walls("walls", {500, 5}, 0.1, 0.0, 1.0)})(1.2) == Approx(500 * 32).epsilon(1e-14));  // odd powers too
  CHECK_THROWS_AS(soft_walls("walls", {500, -2}, 0.1, 0, 1), InputError);
  CHECK_THROWS_AS(soft_walls("walls", {500, 8}, 0.1, 1, 0.5), InputError);  // right wall left of the left one
  const WallProtocol p(1, Schedule::constant("walls.left", 0), Schedule::linear("walls.right", 1, 2));
  CHECK(p.as_protocol().at(v, 0.5).parameter("walls.right") == Approx(1.5));
  CHECK_THROWS_AS(WallProtocol(1, Schedule::constant("walls.left", 0), Schedule::linear("box.right", 1, 2)), InputError);
  CHECK_THROWS_AS(WallProtocol(1, Schedule::constant("walls.left", 0), Schedule::linear("walls.right", 1, -1)), PhysicsError);
}

TEST_CASE("sudden expansion with an inner potential: overlaps against direct quadrature", "[moving_wall]") {
  // [0.1, 1] -> [0, 1.4] with a harmonic trap inside that also changes in the switch. The
  // amplitudes come from the sine coefficients of both grid spectra and the closed-form flat
  // overlaps; here each overlap int_A phi_n^B phi_m^A dx is recomputed by Gauss-Legendre on
  // the old box, where both sine series are smooth (independent of the closed form).
  Potential inner({Term("trap", Shape::harmonic, {{"frequency", 9.0}, {"centre", 0.55}})});
  const WallProtocol p(0, Schedule::linear("walls.left", 0.1, 0.0), Schedule::linear("walls.right", 1.0, 1.4), inner,
                       {Schedule::linear("trap.frequency", 9.0, 7.0)});
  WallWorkRequest r;
  r.initial = InitialState::thermal(1.0 / 20);
  r.points = 96;
  r.reverse_run = false;
  const WallWorkResult out = run_wall_work(p, r);
  const Spectrum& sa = out.work.initial_spectrum;
  const Spectrum& sb = out.work.final_spectrum;
  REQUIRE(sb.grid.left() == 0.0);
  REQUIRE(sb.grid.right() == Approx(1.4));
  auto series = [](const Spectrum& s, int level, double a, double l, double x) {
    // psi(x) = sum_k c_k sqrt(2/l) sin(k pi (x - a)/l), c_k = sum_j s_k(x_j) psi_j dx
    const Eigen::Index n = s.states.rows();
    double v = 0;
    for (Eigen::Index k = 1; k <= n; ++k) {
      double c = 0;
      for (Eigen::Index j = 0; j < n; ++j)
        c += std::sqrt(2 / l) * std::sin(k * pi * double(j + 1) / double(n + 1)) * s.states(j, level);
      v += c * s.grid.spacing() * std::sqrt(2 / l) * std::sin(k * pi * (x - a) / l);
    }
    return v;
  };
  Eigen::VectorXd y, w;
  gauss_legendre(160, y, w);
  const auto& amplitudes = out.work.forward.transitions.probability;
  double worst = 0;
  for (int n = 0; n < 5; ++n)
    for (int m = 0; m < 3; ++m) {
      double q = 0;
      for (Eigen::Index i = 0; i < y.size(); ++i) {
        const double x = 0.1 + 0.9 * y[i];
        q += w[i] * 0.9 * series(sb, n, 0.0, 1.4, x) * series(sa, m, 0.1, 0.9, x);
      }
      worst = std::max(worst, std::abs(amplitudes(m, n) - q * q));
    }
  CHECK(worst < 1e-12);  // roundoff of O(1) sums of 96 terms
  // the Jarzynski failure term: int_A |phi_n^B|^2 < 1 makes <exp(-beta W)> fall short of Z_B/Z_A
  // (1/Z_A) sum_n exp(-beta E_n^B) int_A |phi_n^B|^2, the weights by the same quadrature
  REQUIRE(out.sudden);
  const double beta = 1.0 / 20;
  double za = 0, sum = 0;
  for (Eigen::Index m = 0; m < sa.energies.size(); ++m) za += std::exp(-beta * sa.energies[m]);
  for (Eigen::Index n = 0; n < sb.energies.size(); ++n) {
    double inside = 0;
    for (Eigen::Index i = 0; i < y.size(); ++i) {
      const double v = series(sb, int(n), 0.0, 1.4, 0.1 + 0.9 * y[i]);
      inside += w[i] * 0.9 * v * v;
    }
    sum += std::exp(-beta * sb.energies[n]) * inside;
  }
  CHECK(out.sudden->average == Approx(sum / za).epsilon(1e-10));
  CHECK(out.sudden->ratio < 0.99);
  // a compression with the same inner potential is refused, as for the flat box
  const WallProtocol squeeze(0, Schedule::constant("walls.left", 0.0), Schedule::linear("walls.right", 1.4, 1.0),
                             inner);
  CHECK_THROWS_WITH(run_wall_work(squeeze, r), Contains("refused"));
}

TEST_CASE("issue 14: wall at constant speed, moments with an error estimate that bounds the exact error",
          "[moving_wall][moments]") {
  // Box [0, 1] -> [0, 2], the wall at constant speed from t = 0 (tau = 0.5, kT = 0.2): before,
  // <W> was 3.3e-6 off with 86 final levels and var W (7.235) printed as a plain number.
  const WallProtocol p = WallProtocol::linear_right(0, 1, 2, 0.5);
  WallWorkRequest request;
  request.initial = InitialState::thermal(5);
  const WallWorkResult out = run_wall_work(p, request);
  const WorkResult& r = out.work;
  const MomentErrors& m = r.diagnostics.moments;
  // Reference: the Doescher-Rice exact amplitudes (Am. J. Phys. 37, 1246 (1969), from memory)
  // on 600 and 1200 final levels for the run's initial levels and weights; var W converges as
  // 1/levels here (psi'' != 0 at the moving wall), so it is extrapolated: 2 V(1200) - V(600).
  const int kept = r.forward.transitions.initial_levels();
  const Eigen::MatrixXcd dr = doescher_rice_amplitudes(1, 2, 2, 1200, 1300, kept);
  auto reference = [&](int levels) {
    WorkInput in = r.forward;
    in.transitions = transition_matrix(dr.topRows(levels));
    in.final_energies = flat_box_spectrum(0, 2, std::size_t(levels), levels).energies;
    return work_distribution(in);
  };
  const WorkDistribution fine = reference(1200), coarse = reference(600);
  const double mean = fine.mean, variance = 2 * fine.variance - coarse.variance;
  INFO("<W> " << r.distribution.mean - mean << " +- " << m.mean_error << ", var " << r.distribution.variance
              << " - " << variance << " +- " << m.variance_error << " (DR 600: " << coarse.variance << ", 1200: "
              << fine.variance << "), final levels " << r.forward.transitions.final_levels());
  // the reference <W> has converged far below the error judged (~1e-6): its tail falls as
  // levels^-3, so 600 -> 1200 levels changing it by ~9e-9 leaves ~1.3e-9 at 1200
  CHECK(std::abs(fine.mean - coarse.mean) < 1e-8);
  CHECK(std::abs(r.distribution.mean - mean) <= m.mean_error);
  CHECK(std::abs(r.distribution.variance - variance) <= m.variance_error);
  // var W cannot meet 1e-8 on 511 sine modes: the report says so and names the cause
  CHECK_FALSE(m.variance_met());
  bool warned = false;
  for (const auto& w : r.diagnostics.warnings) warned |= w.find("moments miss their relative tolerance") != std::string::npos;
  CHECK(warned);
  // the printed Doescher-Rice <W> no longer shares the run's final levels
  REQUIRE(out.doescher_rice);
  CHECK(out.doescher_rice->levels >= 4 * r.forward.transitions.final_levels());
  CHECK(std::abs(out.doescher_rice->mean_work - mean) <= out.doescher_rice->mean_work_error + 1e-9);

  SECTION("a deliberately truncated run reports a large moment error") {
    request.final_margin = 1;
    request.max_initial_levels = 4;
    request.unresolved_tolerance = 1e-2;  // one enlargement at most: stays truncated
    const WallWorkResult t = run_wall_work(p, request);
    const MomentErrors& e = t.work.diagnostics.moments;
    INFO("<W> " << t.work.distribution.mean - mean << " +- " << e.mean_error);
    CHECK(e.mean_error > 1e-4 * std::abs(mean));  // 1e4 times the tolerance of a default run
    CHECK(std::abs(t.work.distribution.mean - mean) <= e.mean_error + 1e-9);
  }
}

TEST_CASE("a wall at constant speed too fast for the exact reference's quadrature: said, not computed",
          "[moving_wall]") {
  // Box [0, 1] -> [0, 2] in tau = 1e-5 (u L1 / 2 = 2e5): the chirp quadrature needs some 2e5
  // nodes by Gauss-Legendre recurrence; a 2 um move of an 87 u atom in 10 ns (1.6e6) ran for days.
  const WallProtocol p = WallProtocol::linear_right(0, 1, 2, 1e-5);
  WallWorkRequest request;
  request.initial = InitialState::thermal(5);
  CHECK(doescher_rice_operations(1, 2, 2e5, 400) > 1e11);
  CHECK(doescher_rice_operations(1, 2, 2, 400) < 1e11);  // the wall of the test above keeps its reference
  const WallWorkResult out = run_wall_work(p, request);
  CHECK_FALSE(out.doescher_rice);
  CHECK_THAT(out.doescher_rice_absent, Contains("not computed: at this wall speed its chirp quadrature needs about"));
}

TEST_CASE("a flat box with walls at rest at both ends still checks its grid: the states between are not exact",
          "[moving_wall][moments]") {
  // Box [0, 1] -> [0, 2], smooth ramp in tau = 0.1, kT = 5, on 63 sine modes: the spectra are
  // exact in the sine basis, but the states during the expansion are not. The grid check was
  // skipped here, and the <W> error left out the basis part (an 87 u atom's 10 um box widened by
  // 2 um in 40 us printed <W> = 61 +- 1.7 kB*nK on 255 points, -0.0073 on 1023).
  const WallProtocol p(0.1, Schedule::constant("walls.left", 0.0), Schedule::smooth_step("walls.right", 1.0, 2.0));
  WallWorkRequest request;
  request.initial = InitialState::thermal(5);
  request.points = 63;
  const WallWorkResult coarse = run_wall_work(p, request);
  request.points = 255;
  request.grid_check = false;
  const WallWorkResult fine = run_wall_work(p, request);
  const double difference = std::abs(coarse.work.distribution.mean - fine.work.distribution.mean);
  INFO("<W> on 63 modes " << coarse.work.distribution.mean << " +- " << coarse.work.diagnostics.moments.mean_error
                          << ", on 255 modes " << fine.work.distribution.mean);
  CHECK(difference > 1e-6);  // the case is one where the modes matter
  CHECK(coarse.grid_line_change > 1e-6);
  CHECK(coarse.work.diagnostics.moments.mean_error >= difference);
  std::string warnings;
  for (const auto& w : coarse.work.diagnostics.warnings) warnings += w + "\n";
  CHECK_THAT(warnings, Contains("with twice the points (127)"));
}
