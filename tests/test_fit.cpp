// Unit tests of solver/fit: recovery of known coefficients from synthetic spectra made by the
// model itself, Hellmann-Feynman derivatives, and the refusals with their messages.
#include <catch2/catch.hpp>
#include <cmath>
#include <random>
#include <string>
#include <vector>

#include "solver/errors.hpp"
#include "solver/fit.hpp"
#include "solver/units.hpp"

using namespace trapwork;
using Catch::Matchers::Contains;

namespace {

PolynomialTrap make_trap(double omega, double cubic, double quartic) {
  PolynomialTrap t;
  t.omega = omega;
  t.k[3] = cubic;
  t.k[4] = quartic;
  return t;
}

// Transitions between the given level pairs at each force, from the model's own levels, with
// Gaussian noise of standard deviation sigma (ordinary frequency) drawn with a fixed seed.
std::vector<TransitionDatum> synthetic(const PolynomialTrap& truth, const std::vector<double>& forces,
                                       const std::vector<std::pair<int, int>>& pairs, double sigma,
                                       std::uint64_t seed) {
  std::mt19937_64 engine(seed);
  std::normal_distribution<double> noise(0.0, 1.0);
  std::vector<TransitionDatum> data;
  for (double f : forces) {
    const Eigen::VectorXd e = trap_levels(truth, f, 6);
    for (auto [i, j] : pairs) {
      const double nu = (e(j) - e(i)) / (2 * si::pi);
      data.push_back({i, j, nu + (sigma > 0 ? sigma * noise(engine) : 0.0), sigma > 0 ? sigma : 1e-9, f});
    }
  }
  return data;
}

// Runs f, which must throw E whose message contains every one of `words`.
template <class E, class F>
void check_refusal(F f, const std::vector<std::string>& words) {
  try {
    f();
    FAIL("no exception thrown");
  } catch (const E& e) {
    for (const auto& w : words) CHECK_THAT(std::string(e.what()), Contains(w));
  }
}

}  // namespace

TEST_CASE("fit recovers frequency, cubic and quartic from noisy spectra at several forces", "[fit]") {
  const PolynomialTrap truth = make_trap(1.0, 0.02, 0.003);
  const auto data = synthetic(truth, {-0.4, 0.0, 0.4}, {{0, 1}, {1, 2}, {2, 3}, {0, 2}}, 2e-5, 17);
  const TrapFit fit =
      fit_trap(data, make_trap(1.05, 0.0, 0.0),
               {TrapCoefficient::frequency, TrapCoefficient::cubic, TrapCoefficient::quartic});
  INFO(fit.status);
  REQUIRE(fit.value.size() == 3);
  const double truth_values[3] = {1.0, 0.02, 0.003};
  for (int q = 0; q < 3; ++q) {
    INFO(coefficient_name(fit.free[std::size_t(q)]) << " = " << fit.value(q) << " +- " << fit.uncertainty(q));
    // Gaussian errors of the stated size: |fitted - true| < 4 sigma fails with probability 6e-5.
    CHECK(std::abs(fit.value(q) - truth_values[q]) < 4 * fit.uncertainty(q));
    // The noise is 2e-5 out of frequencies ~0.16: every coefficient is resolved.
    CHECK(fit.uncertainty(q) < 0.05 * std::abs(truth_values[q]));
  }
  CHECK(fit.degrees_of_freedom == 12 - 3);
  CHECK(fit.independent_data == 9);  // 3 independent differences of levels 0..3 at each of 3 forces
  // chi^2 with 9 degrees of freedom: mean 9, standard deviation sqrt(18) = 4.2; 5 sd either side.
  CHECK(fit.chi_square < 9 + 5 * std::sqrt(18.0));
  CHECK(fit.p_value > 1e-6);
  // Normalised residuals have unit scale (12 draws: none beyond 4.5).
  for (double r : fit.residual) CHECK(std::abs(r) < 4.5);
  // Scaled covariance = covariance x chi^2/dof; the correlation matrix has unit diagonal.
  CHECK(fit.scaled_covariance(1, 1) == Approx(fit.covariance(1, 1) * fit.chi_square / 9).epsilon(1e-12));
  for (int q = 0; q < 3; ++q) CHECK(fit.correlation(q, q) == Approx(1.0).epsilon(1e-12));
  CHECK(fit.basis_change < 1e-3 * 2 * si::pi * 2e-5);
}

TEST_CASE("Hellmann-Feynman derivatives match finite differences of the levels", "[fit]") {
  // Exact data (no noise) at the truth: the fit must stay there, and its uncertainty for a
  // datum sigma must match that computed from finite-difference Jacobians.
  const PolynomialTrap truth = make_trap(1.2, 0.01, 0.002);
  const double force = 0.3;
  const double h = 1e-6;
  const Eigen::VectorXd e0 = trap_levels(truth, force, 3);
  PolynomialTrap up = truth;
  up.k[3] += h;
  PolynomialTrap down = truth;
  down.k[3] -= h;
  const Eigen::VectorXd de3 = (trap_levels(up, force, 3) - trap_levels(down, force, 3)) / (2 * h);
  // A fit with only the cubic free to the single transition 0 -> 1 has uncertainty
  // sigma_E / |d(E1 - E0)/dk3|: compare (central differences: error O(h^2) ~ 1e-12, rounding
  // ~ 1e-16/h = 1e-10 relative).
  const double sigma = 1e-6;
  std::vector<TransitionDatum> data{{0, 1, (e0(1) - e0(0)) / (2 * si::pi), sigma, force}};
  const TrapFit fit = fit_trap(data, truth, {TrapCoefficient::cubic});
  CHECK(fit.value(0) == Approx(0.01).epsilon(1e-8));
  CHECK(fit.uncertainty(0) == Approx(2 * si::pi * sigma / std::abs(de3(1) - de3(0))).epsilon(1e-7));
}

TEST_CASE("fit refuses what the data cannot determine, saying why", "[fit]") {
  const PolynomialTrap truth = make_trap(1.0, 0.0, 0.002);
  const PolynomialTrap start = make_trap(1.0, 0.0, 0.0);
  const std::vector<TrapCoefficient> w_k4{TrapCoefficient::frequency, TrapCoefficient::quartic};

  SECTION("repeats of one transition are one datum") {
    const auto data = synthetic(truth, {0.0, 0.0, 0.0}, {{0, 1}}, 1e-5, 1);
    check_refusal<PhysicsError>([&] { fit_trap(data, start, w_k4); },
                                {"only 1 independent transition frequency"});
  }
  SECTION("nu_02 is not independent of nu_01 and nu_12") {
    const auto data = synthetic(truth, {0.0}, {{0, 1}, {1, 2}, {0, 2}}, 1e-5, 2);
    check_refusal<PhysicsError>(
        [&] {
          fit_trap(data, start,
                   {TrapCoefficient::frequency, TrapCoefficient::quartic, TrapCoefficient::sextic});
        },
        {"3 free coefficients", "only 2 independent"});
  }
  SECTION("cubic and quartic from one ladder at a single force") {
    const auto data = synthetic(truth, {0.0}, {{0, 1}, {1, 2}, {2, 3}, {3, 4}}, 1e-5, 3);
    check_refusal<PhysicsError>(
        [&] {
          fit_trap(data, start,
                   {TrapCoefficient::frequency, TrapCoefficient::cubic, TrapCoefficient::quartic});
        },
        {"not separately determined by spacings of one ladder at a single trap position",
         "add data at several displacements/forces"});
  }
  SECTION("an odd coefficient of a symmetric trap measured without a tilt") {
    const auto data = synthetic(truth, {0.0}, {{0, 1}, {1, 2}}, 1e-5, 4);
    check_refusal<PhysicsError>(
        [&] {
          fit_trap(data, start, {TrapCoefficient::frequency, TrapCoefficient::cubic});
        },
        {"cubic is not determined by the data", "V(-x)"});
  }
  SECTION("two forces too close to separate frequency and quartic") {
    // 0 -> 1 at F = 0 and F = 1e-4: the quartic changes the second one by 6 k4 F^2 / omega^5
    // more than the first, so the correlation form of J^T J has eigenvalue ~ (F^2)^2 ~ 1e-16.
    const auto data = synthetic(truth, {0.0, 1e-4}, {{0, 1}}, 1e-5, 5);
    check_refusal<PhysicsError>([&] { fit_trap(data, start, w_k4); },
                                {"frequency and quartic are not separately determined"});
  }
  SECTION("no convergence within the iteration limit") {
    const auto data = synthetic(truth, {0.0}, {{0, 1}, {1, 2}}, 1e-7, 6);
    FitOptions o;
    o.max_iterations = 1;
    check_refusal<PhysicsError>([&] { fit_trap(data, make_trap(1.3, 0.0, 0.0), w_k4, o); },
                                {"did not converge in 1 iterations"});
  }
  SECTION("malformed data name the field") {
    auto data = synthetic(truth, {0.0}, {{0, 1}, {1, 2}}, 1e-5, 7);
    data[1].uncertainty = 0;
    check_refusal<InputError>([&] { fit_trap(data, start, w_k4); }, {"data[1].uncertainty"});
    data[1].uncertainty = 1e-5;
    data[0].lower = 2;
    check_refusal<InputError>([&] { fit_trap(data, start, w_k4); }, {"data[0].levels"});
  }
  SECTION("a tilt that overcomes a cubic trap") {
    const auto data = synthetic(make_trap(1.0, 0.0, 0.0), {0.0}, {{0, 1}}, 1e-5, 8);
    auto tilted = data;
    tilted[0].force = 10;  // V = x^2/2 + 0.1 x^3 + 10 x has no minimum
    check_refusal<PhysicsError>(
        [&] { fit_trap(tilted, make_trap(1.0, 0.1, 0.0), {TrapCoefficient::frequency}); },
        {"no local minimum"});
  }
}

TEST_CASE("fit recovers quartic and sextic of a symmetric trap from one ladder", "[fit]") {
  // Without odd terms one ladder suffices: the quartic shifts the spacings linearly in n, the
  // sextic quadratically (first-order perturbation theory, common practice).
  PolynomialTrap truth = make_trap(1.0, 0.0, 0.004);
  truth.k[6] = 2e-4;
  const auto data = synthetic(truth, {0.0}, {{0, 1}, {1, 2}, {2, 3}, {3, 4}, {4, 5}}, 1e-6, 11);
  const TrapFit fit =
      fit_trap(data, make_trap(1.0, 0.0, 0.0),
               {TrapCoefficient::frequency, TrapCoefficient::quartic, TrapCoefficient::sextic});
  INFO(fit.status);
  CHECK(std::abs(fit.trap.omega - 1.0) < 4 * fit.uncertainty(0));
  CHECK(std::abs(fit.trap.k[4] - 0.004) < 4 * fit.uncertainty(1));
  CHECK(std::abs(fit.trap.k[6] - 2e-4) < 4 * fit.uncertainty(2));
  CHECK(fit.uncertainty(2) < 0.1 * 2e-4);
}
