#pragma once
// Planning experiments: how well does the Jarzynski estimate beta Delta F = -ln mean exp(-beta W)
// from N runs recover the model's beta Delta F, for a model P(W) (lines) and a Gaussian
// resolution sigma of the measured work (W + eta, eta ~ N(0, sigma^2), as in solver/compare.hpp)?
//
// Method: synthetic experiments resampled from the model (sample_work in solver/compare.hpp,
// std::mt19937_64 with the given seed), each of N runs; statistics of the estimate over them.
// Cross-check: the large-N bias by the delta method (a second-order Taylor expansion of -ln
// about the mean, common practice):
//   bias ~ var(X) / (2 N <X>^2)  (kT),   X = exp(-beta (W + eta)),
// plus the systematic resolution term -beta^2 sigma^2 / 2 (from <exp(-beta eta)> =
// exp(beta^2 sigma^2 / 2)), which a known sigma lets one correct (`correct_resolution`).
// Free energies in kT; work and sigma in internal energy units. Pure functions, no I/O.
#include <cstdint>
#include <limits>
#include <vector>

#include "solver/work.hpp"

namespace trapwork {

struct PlanOptions {
  double beta = 1;         // 1/kT (1/energy), > 0
  int experiments = 2000;  // synthetic experiments per N
  std::uint64_t seed = 1;
  bool correct_resolution = false;  // add beta^2 sigma^2 / 2 back to each estimate
  double model_free_energy =
      std::numeric_limits<double>::quiet_NaN();  // Delta F (energy); NaN: from the lines
};

struct EstimatorStatistics {
  int runs = 0;           // N
  double resolution = 0;  // sigma
  int experiments = 0;
  double true_kT = 0;               // the model's beta Delta F
  double mean_kT = 0;               // mean estimate over the experiments
  double bias_kT = 0;               // mean - true
  double bias_error_kT = 0;         // its standard error, spread / sqrt(experiments)
  double spread_kT = 0;             // standard deviation of the estimate
  double rms_error_kT = 0;          // sqrt(mean (estimate - true)^2)
  double resolution_bias_kT = 0;    // -beta^2 sigma^2 / 2, or 0 when corrected
  double delta_method_bias_kT = 0;  // var(X)/(2 N <X>^2) + resolution_bias_kT
};

// The delta-method bias estimate alone (kT).
double delta_method_bias_kT(const std::vector<WorkLine>& model, int runs, double beta, double resolution,
                            bool correct_resolution = false);

// The delta method's rms error (kT): sqrt(var(X) / (N <X>^2) + bias^2), the first-order variance
// of -ln(mean X) plus the bias above squared (common practice; large N).
double delta_method_rms_kT(const std::vector<WorkLine>& model, int runs, double beta, double resolution,
                           bool correct_resolution = false);

// Statistics of the estimator from `options.experiments` synthetic experiments of `runs` runs.
// Throws InputError for runs < 1, experiments < 2, beta <= 0 or sigma < 0.
EstimatorStatistics jarzynski_estimator_statistics(const std::vector<WorkLine>& model, int runs,
                                                   double resolution, const PlanOptions& options);

// Smallest N with rms_error_kT <= target_kT: N doubled from `start_runs` until the target is met,
// then bisection between the last two values to 1% of N; every evaluation uses the same seed (common random
// numbers, so the comparison between N is not swamped by resampling noise). The rms error is
// itself a resampled quantity (relative error ~ 1/sqrt(2 experiments)), so N is found to that
// precision. Throws PhysicsError when the uncorrected resolution bias alone exceeds the target,
// or when max_runs does not reach it.
struct RunsNeeded {
  int runs = 0;
  EstimatorStatistics at;  // the statistics at that N
  int evaluations = 0;     // N values tried
};
RunsNeeded runs_needed(const std::vector<WorkLine>& model, double target_kT, double resolution,
                       const PlanOptions& options, int start_runs = 8, int max_runs = 1 << 20);

// One row per (resolution, N), resolutions outer: how the resolution changes bias and spread.
std::vector<EstimatorStatistics> estimator_table(const std::vector<WorkLine>& model,
                                                 const std::vector<int>& runs,
                                                 const std::vector<double>& resolutions,
                                                 const PlanOptions& options);

}  // namespace trapwork
