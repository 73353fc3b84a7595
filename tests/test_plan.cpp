// Unit tests of solver/plan: the resampled bias of the Jarzynski estimator against the
// delta-method estimate, the effect of the resolution, the search for N.
#include <catch2/catch.hpp>
#include <cmath>

#include "solver/errors.hpp"
#include "solver/harmonic_reference.hpp"
#include "solver/plan.hpp"

using namespace trapwork;
using Catch::Matchers::Contains;

namespace {
// Forced oscillator at beta omega = 1 (W = k omega, Delta F = 0), as in test_compare.
std::vector<WorkLine> forced_oscillator(double alpha2) {
  std::vector<WorkLine> lines;
  for (int k = -60; k <= 60; ++k) {
    const double p = displaced_thermal_line(k, alpha2, 1.0, 1.0);
    if (p > 1e-30) lines.push_back({double(k), p, 0, 0});
  }
  return lines;
}
}  // namespace

TEST_CASE("resampled bias agrees with the delta method at large N", "[plan]") {
  // |alpha|^2 = 1: var(X)/<X>^2 ~ 6, so at N = 1000 the bias ~ 3e-3 kT; with 20000 experiments
  // its resampling error is ~ 6e-4. Agreement within 3 resampling errors, and the bias must be
  // resolved (> 3 errors from 0) so the comparison can fail. The delta method's remainder is
  // O(1/N^2) ~ 1e-5 here, far below.
  const auto model = forced_oscillator(1.0);
  PlanOptions o;
  o.experiments = 20000;
  o.seed = 5;
  const EstimatorStatistics s = jarzynski_estimator_statistics(model, 1000, 0.0, o);
  INFO("bias " << s.bias_kT << " +- " << s.bias_error_kT << ", delta method " << s.delta_method_bias_kT);
  CHECK(std::abs(s.true_kT) < 1e-12);
  CHECK(std::abs(s.bias_kT - s.delta_method_bias_kT) < 3 * s.bias_error_kT);
  CHECK(s.bias_kT > 3 * s.bias_error_kT);
  // rms^2 = bias^2 + spread^2 (up to the (m-1)/m of the sample variance).
  CHECK(s.rms_error_kT * s.rms_error_kT ==
        Approx(s.bias_kT * s.bias_kT + s.spread_kT * s.spread_kT * (o.experiments - 1.0) / o.experiments)
            .epsilon(1e-9));
}

TEST_CASE("the resolution biases the estimate by -beta^2 sigma^2 / 2", "[plan]") {
  const auto model = forced_oscillator(0.5);
  PlanOptions o;
  o.experiments = 4000;
  const auto table = estimator_table(model, {500}, {0.0, 0.5}, o);
  REQUIRE(table.size() == 2);
  // sigma = 0.5: systematic -0.125 kT plus the statistical bias; within 4 resampling errors of
  // the delta-method sum.
  CHECK(table[1].resolution_bias_kT == Approx(-0.125));
  CHECK(std::abs(table[1].bias_kT - table[1].delta_method_bias_kT) < 4 * table[1].bias_error_kT);
  CHECK(table[1].rms_error_kT > table[0].rms_error_kT);
  // Corrected for the known sigma, the systematic part goes away.
  o.correct_resolution = true;
  const EstimatorStatistics c = jarzynski_estimator_statistics(model, 500, 0.5, o);
  CHECK(std::abs(c.bias_kT - c.delta_method_bias_kT) < 4 * c.bias_error_kT);
  CHECK(std::abs(c.bias_kT) < 0.02);
}

TEST_CASE("runs needed for a target precision", "[plan]") {
  const auto model = forced_oscillator(0.5);
  PlanOptions o;
  o.experiments = 1000;
  const RunsNeeded r = runs_needed(model, 0.1, 0.0, o);
  INFO("N = " << r.runs << ", rms " << r.at.rms_error_kT);
  CHECK(r.at.rms_error_kT <= 0.1);
  // The spread is ~ sqrt(var(X)/(N <X>^2)) (delta method), var/<X>^2 ~ e - 1 for this model
  // (Gaussian estimate, common practice): N ~ 170 for 0.1 kT. Allow a factor 2 either way.
  CHECK(r.runs > 85);
  CHECK(r.runs < 350);
  // One per cent fewer runs miss the target (same seed): the search found the edge.
  CHECK(jarzynski_estimator_statistics(model, r.runs - r.runs / 50 - 1, 0.0, o).rms_error_kT > 0.1);
  // A resolution whose systematic bias alone exceeds the target is refused.
  CHECK_THROWS_WITH(runs_needed(model, 0.1, 0.5, o), Contains("resolution alone biases"));
}
