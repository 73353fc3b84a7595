#include "solver/plan.hpp"

#include <algorithm>
#include <cmath>
#include <random>
#include <sstream>
#include <string>

#include "solver/compare.hpp"
#include "solver/errors.hpp"

namespace trapwork {

namespace {

void check(int runs, double resolution, const PlanOptions& o) {
  if (runs < 1) throw InputError("runs", std::to_string(runs), "a number of runs >= 1");
  if (!(resolution >= 0) || !std::isfinite(resolution))
    throw InputError("resolution", std::to_string(resolution), "a resolution sigma >= 0 (energy)");
  if (!(o.beta > 0) || !std::isfinite(o.beta)) throw InputError("beta", std::to_string(o.beta), "1/kT > 0");
  if (o.experiments < 2)
    throw InputError("experiments", std::to_string(o.experiments), "at least 2 synthetic experiments");
}

double true_kT(const std::vector<WorkLine>& model, const PlanOptions& o) {
  return std::isfinite(o.model_free_energy) ? o.beta * o.model_free_energy
                                            : model_free_energy_kT(model, o.beta);
}

double resolution_bias(double beta, double sigma, bool corrected) {
  return corrected ? 0.0 : -beta * beta * sigma * sigma / 2;
}

// var(X) / <X>^2 of X = exp(-beta (W + eta)).
double relative_variance(const std::vector<WorkLine>& model, double beta, double resolution) {
  // Moments of X = exp(-beta W) exp(-beta eta), shifted by the smallest W (no overflow); the
  // shift cancels in var(X)/<X>^2. <exp(-k beta eta)> = exp(k^2 beta^2 sigma^2 / 2).
  TRAPWORK_EXPECT(!model.empty(), "delta method: needs model lines");
  double w_min = model.front().work, total = 0;
  for (const auto& l : model) w_min = std::min(w_min, l.work), total += l.probability;
  double m1 = 0, m2 = 0;
  for (const auto& l : model) {
    const double x = std::exp(-beta * (l.work - w_min));
    m1 += l.probability / total * x;
    m2 += l.probability / total * x * x;
  }
  const double b2s2 = beta * beta * resolution * resolution;
  m1 *= std::exp(b2s2 / 2);
  m2 *= std::exp(2 * b2s2);
  return (m2 - m1 * m1) / (m1 * m1);
}

}  // namespace

double delta_method_bias_kT(const std::vector<WorkLine>& model, int runs, double beta, double resolution,
                            bool correct_resolution) {
  TRAPWORK_EXPECT(runs > 0, "delta_method_bias_kT needs runs > 0");
  return relative_variance(model, beta, resolution) / (2.0 * runs) + resolution_bias(beta, resolution, correct_resolution);
}

double delta_method_rms_kT(const std::vector<WorkLine>& model, int runs, double beta, double resolution,
                           bool correct_resolution) {
  TRAPWORK_EXPECT(runs > 0, "delta_method_rms_kT needs runs > 0");
  const double bias = delta_method_bias_kT(model, runs, beta, resolution, correct_resolution);
  return std::sqrt(relative_variance(model, beta, resolution) / runs + bias * bias);
}

EstimatorStatistics jarzynski_estimator_statistics(const std::vector<WorkLine>& model, int runs,
                                                   double resolution, const PlanOptions& o) {
  check(runs, resolution, o);
  EstimatorStatistics s;
  s.runs = runs;
  s.resolution = resolution;
  s.experiments = o.experiments;
  s.true_kT = true_kT(model, o);
  s.resolution_bias_kT = resolution_bias(o.beta, resolution, o.correct_resolution);
  s.delta_method_bias_kT = delta_method_bias_kT(model, runs, o.beta, resolution, o.correct_resolution);
  const double correction = o.correct_resolution ? o.beta * o.beta * resolution * resolution / 2 : 0.0;
  std::mt19937_64 engine(o.seed);
  double sum = 0, sum2 = 0, sum_err2 = 0;
  for (int e = 0; e < o.experiments; ++e) {
    const double estimate =
        jarzynski_estimate_kT(sample_work(model, runs, resolution, engine), o.beta) + correction;
    sum += estimate;
    sum2 += estimate * estimate;
    sum_err2 += (estimate - s.true_kT) * (estimate - s.true_kT);
  }
  const double m = double(o.experiments);
  s.mean_kT = sum / m;
  s.bias_kT = s.mean_kT - s.true_kT;
  s.spread_kT = std::sqrt(std::max(0.0, (sum2 - sum * sum / m) / (m - 1)));
  s.bias_error_kT = s.spread_kT / std::sqrt(m);
  s.rms_error_kT = std::sqrt(sum_err2 / m);
  return s;
}

RunsNeeded runs_needed(const std::vector<WorkLine>& model, double target_kT, double resolution,
                       const PlanOptions& o, int start_runs, int max_runs) {
  if (!(target_kT > 0)) throw InputError("target", std::to_string(target_kT), "a target rms error > 0 (kT)");
  check(std::max(start_runs, 1), resolution, o);
  const double floor_kT = std::abs(resolution_bias(o.beta, resolution, o.correct_resolution));
  if (floor_kT >= target_kT) {
    std::ostringstream s;
    s << "plan: the resolution alone biases the Jarzynski estimate by beta^2 sigma^2 / 2 = " << floor_kT
      << " kT >= the target " << target_kT << " kT, at any number of runs: improve the resolution or correct "
      << "for the known sigma";
    throw PhysicsError(s.str());
  }
  RunsNeeded r;
  auto rms = [&](int n) {
    ++r.evaluations;
    return jarzynski_estimator_statistics(model, n, resolution, o);
  };
  int lo = 0, hi = std::max(start_runs, 1);
  EstimatorStatistics at = rms(hi);
  while (at.rms_error_kT > target_kT) {
    if (hi >= max_runs) {
      std::ostringstream s;
      s << "plan: " << max_runs << " runs give an rms error of " << at.rms_error_kT
        << " kT, above the target " << target_kT << " kT: raise the run limit or relax the target";
      throw PhysicsError(s.str());
    }
    lo = hi;
    hi = std::min(2 * hi, max_runs);
    at = rms(hi);
  }
  // Bisection: lo fails (or is 0), hi meets the target.
  while (hi - lo > 1 && hi - lo > hi / 100) {
    const int mid = lo + (hi - lo) / 2;
    const EstimatorStatistics s = rms(mid);
    if (s.rms_error_kT <= target_kT) {
      hi = mid;
      at = s;
    } else {
      lo = mid;
    }
  }
  r.runs = hi;
  r.at = at;
  return r;
}

std::vector<EstimatorStatistics> estimator_table(const std::vector<WorkLine>& model,
                                                 const std::vector<int>& runs,
                                                 const std::vector<double>& resolutions,
                                                 const PlanOptions& o) {
  std::vector<EstimatorStatistics> table;
  for (double sigma : resolutions)
    for (int n : runs) table.push_back(jarzynski_estimator_statistics(model, n, sigma, o));
  return table;
}

}  // namespace trapwork
