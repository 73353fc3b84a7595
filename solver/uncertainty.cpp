// Propagation of a parameter covariance to computed results (uncertainty.hpp).
#include "solver/uncertainty.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

#include "solver/design.hpp"
#include "solver/errors.hpp"

namespace trapwork {

namespace {

constexpr double nan = std::numeric_limits<double>::quiet_NaN();

// Checks the covariance and returns its principal axes scaled by their standard deviations
// (columns s_k v_k, zero axes left out).
Eigen::MatrixXd principal_axes(const Eigen::VectorXd& mean, const Eigen::MatrixXd& c) {
  const Eigen::Index n = mean.size();
  if (c.rows() != n || c.cols() != n)
    throw InputError("covariance", std::to_string(c.rows()) + "x" + std::to_string(c.cols()),
                     "a " + std::to_string(n) + "x" + std::to_string(n) + " matrix (one row per parameter)");
  if (!c.allFinite() || !mean.allFinite()) throw InputError("covariance", "a value that is not finite", "finite numbers");
  const double largest = n ? c.diagonal().cwiseAbs().maxCoeff() : 0.0;
  if (n && (c - c.transpose()).cwiseAbs().maxCoeff() > 1e-12 * std::max(largest, 1e-300))
    throw InputError("covariance", "a matrix that is not symmetric", "a symmetric covariance");
  const Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> eigen(c);
  const Eigen::VectorXd lambda = eigen.eigenvalues();
  if (n && lambda.minCoeff() < -1e-12 * std::max(largest, 1e-300))
    throw InputError("covariance", "an eigenvalue " + std::to_string(lambda.minCoeff()) + " < 0",
                     "a positive semi-definite covariance");
  std::vector<Eigen::Index> kept;
  for (Eigen::Index k = 0; k < n; ++k)
    if (lambda(k) > 1e-12 * largest) kept.push_back(k);
  Eigen::MatrixXd axes(n, Eigen::Index(kept.size()));
  for (std::size_t j = 0; j < kept.size(); ++j)
    axes.col(Eigen::Index(j)) = std::sqrt(lambda(kept[j])) * eigen.eigenvectors().col(kept[j]);
  return axes;
}

Eigen::VectorXd call(const ResultFunction& f, const Eigen::VectorXd& p, Eigen::Index size) {
  Eigen::VectorXd r = f(p);
  if (size >= 0 && r.size() != size)
    throw ContractViolation("uncertainty: the result function returned " + std::to_string(r.size()) +
                            " results, earlier " + std::to_string(size));
  return r;
}

}  // namespace

LinearSpread linear_spread(const ResultFunction& f, const Eigen::VectorXd& mean, const Eigen::MatrixXd& covariance,
                           const LinearOptions& options) {
  if (!(options.step_in_sd > 0) || !std::isfinite(options.step_in_sd))
    throw InputError("step", std::to_string(options.step_in_sd), "a step > 0 standard deviations");
  LinearSpread out;
  out.axes = principal_axes(mean, covariance);
  out.nominal = call(f, mean, -1);
  out.runs = 1;
  const Eigen::Index m = out.nominal.size(), axes = out.axes.cols();
  const double h = options.step_in_sd;
  out.slopes = Eigen::MatrixXd::Zero(m, axes);
  Eigen::MatrixXd curvature = Eigen::MatrixXd::Zero(m, axes);
  for (Eigen::Index k = 0; k < axes; ++k) {
    const Eigen::VectorXd up = call(f, mean + h * out.axes.col(k), m);
    const Eigen::VectorXd down = call(f, mean - h * out.axes.col(k), m);
    out.runs += 2;
    out.slopes.col(k) = (up - down) / (2 * h);
    curvature.col(k) = (up + down - 2 * out.nominal) / (h * h);
  }
  out.sd = out.slopes.rowwise().norm();  // NaN propagates from any run that lacked the result
  out.curvature_sd = (0.5 * curvature.rowwise().squaredNorm()).cwiseSqrt();
  out.bias = 0.5 * curvature.rowwise().sum();
  out.nonlinearity = Eigen::VectorXd::Zero(m);
  out.accurate = true;
  for (Eigen::Index i = 0; i < m; ++i) {
    const double scale = options.floor_scale.size() == m ? options.floor_scale(i) : 0.0;
    const double floor = options.floor * (std::abs(out.nominal(i)) + scale);
    const double sd = out.sd(i), c = out.curvature_sd(i);
    if (!std::isfinite(sd) || !std::isfinite(c))
      out.nonlinearity(i) = nan;
    else if (sd > floor)
      out.nonlinearity(i) = c / sd;
    else
      out.nonlinearity(i) = c > floor ? std::numeric_limits<double>::infinity() : 0.0;
    if (std::isfinite(out.nominal(i)) && !(out.nonlinearity(i) <= options.linear_tolerance)) out.accurate = false;
  }
  return out;
}

SampledSpread sampled_spread(const ResultFunction& f, const Eigen::VectorXd& mean, const Eigen::MatrixXd& covariance,
                             int samples, std::uint64_t seed) {
  if (samples < 2) throw InputError("samples", std::to_string(samples), "at least 2 samples");
  (void)principal_axes(mean, covariance);  // the same checks and messages as the linear route
  std::vector<std::vector<double>> cov(std::size_t(mean.size()), std::vector<double>(std::size_t(mean.size())));
  for (Eigen::Index i = 0; i < mean.size(); ++i)
    for (Eigen::Index j = 0; j < mean.size(); ++j) cov[std::size_t(i)][std::size_t(j)] = covariance(i, j);
  SampledSpread out;
  out.samples = samples;
  out.seed = seed;
  out.parameters = gaussian_samples(std::vector<double>(mean.data(), mean.data() + mean.size()), cov, samples, seed);
  Eigen::Index m = -1;
  for (int s = 0; s < samples; ++s) {
    const auto& p = out.parameters[std::size_t(s)];
    const Eigen::VectorXd r = call(f, Eigen::Map<const Eigen::VectorXd>(p.data(), Eigen::Index(p.size())), m);
    if (m < 0) {
      m = r.size();
      out.values = Eigen::MatrixXd::Constant(m, samples, nan);
    }
    out.values.col(s) = r;
  }
  out.mean = Eigen::VectorXd::Constant(m, nan);
  out.sd = Eigen::VectorXd::Constant(m, nan);
  out.sd_error = Eigen::VectorXd::Constant(m, nan);
  out.count = Eigen::VectorXi::Zero(m);
  for (Eigen::Index i = 0; i < m; ++i) {
    double sum = 0;
    int n = 0;
    for (int s = 0; s < samples; ++s)
      if (std::isfinite(out.values(i, s))) sum += out.values(i, s), ++n;
    out.count(i) = n;
    if (n == 0) continue;
    out.mean(i) = sum / n;
    if (n < 2) continue;
    double squares = 0;
    for (int s = 0; s < samples; ++s)
      if (std::isfinite(out.values(i, s))) squares += (out.values(i, s) - out.mean(i)) * (out.values(i, s) - out.mean(i));
    out.sd(i) = std::sqrt(squares / (n - 1));
    out.sd_error(i) = out.sd(i) / std::sqrt(2.0 * (n - 1));
  }
  return out;
}

SpreadAgreement compare_spreads(const LinearSpread& linear, const SampledSpread& sampled) {
  const Eigen::Index m = linear.sd.size();
  if (sampled.sd.size() != m) throw ContractViolation("compare_spreads: different numbers of results");
  SpreadAgreement a;
  a.in_standard_errors = Eigen::VectorXd::Constant(m, nan);
  a.relative = Eigen::VectorXd::Constant(m, nan);
  for (Eigen::Index i = 0; i < m; ++i) {
    const double l = linear.sd(i), s = sampled.sd(i), e = sampled.sd_error(i);
    if (!std::isfinite(l) || !std::isfinite(s) || !(s > 0) || !(e > 0)) continue;
    a.in_standard_errors(i) = (l - s) / e;
    a.relative(i) = (l - s) / s;
    a.largest_in_standard_errors = std::max(a.largest_in_standard_errors, std::abs(a.in_standard_errors(i)));
  }
  return a;
}

}  // namespace trapwork
