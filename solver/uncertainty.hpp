#pragma once
// Carrying the uncertainty of a calibrated trap forward to the results computed from it: given
// a function f from parameters to results (every result a number; NaN where a run could not give
// it) and the parameters' mean and covariance C (a fit's), the spread of each result.
//
// Linear propagation: along each principal axis k of C (C = sum_k lambda_k v_k v_k^T, Eigen's
// SelfAdjointEigenSolver) a central difference over one standard deviation s_k = sqrt(lambda_k)
// (times step_in_sd) gives the slope g_k = (f(mean + h v_k) - f(mean - h v_k)) / (2 h / s_k), the
// change of f per standard deviation along v_k, and var f = sum_k g_k^2 (the first-order
// ("delta method") variance J C J^T written in C's principal axes; common practice). The same
// three runs give the curvature c_k = (f(+) + f(-) - 2 f(mean)) / (h / s_k)^2 (the second
// derivative per sd^2); for a normal parameter the second-order terms add (1/2) sum_k c_k^2 to the
// variance and (1/2) sum_k c_k to the mean (diagonal terms only: mixed ones would need 2 n^2
// runs). The linear result is trusted when sqrt((1/2) sum_k c_k^2) <= linear_tolerance * sd for
// every result (nonlinearity below). Costs 2 n + 1 runs for n parameters (axes with lambda_k = 0
// cost none).
//
// Sampling: `samples` parameter sets drawn from N(mean, C) (gaussian_samples, solver/design.hpp,
// seeded), f at each; mean and standard deviation of each result over the draws that gave it,
// the standard deviation with its standard error sd / sqrt(2 (N - 1)) (normal approximation,
// common practice). Exact to sampling error for any f, at `samples` runs.
//
// No I/O, no global state; f is called from the calling thread, in order.
#include <Eigen/Dense>
#include <cstdint>
#include <functional>
#include <string>
#include <vector>

namespace trapwork {

// Results at one parameter set (same length every call; NaN: not available at that set).
using ResultFunction = std::function<Eigen::VectorXd(const Eigen::VectorXd& parameters)>;

struct LinearSpread {
  Eigen::VectorXd nominal;       // f(mean)
  Eigen::VectorXd sd;            // first-order standard deviation; NaN where a run lacked the result
  Eigen::VectorXd curvature_sd;  // sqrt((1/2) sum_k c_k^2): the second-order terms' standard deviation
  Eigen::VectorXd bias;          // (1/2) sum_k c_k: second-order shift of the mean
  Eigen::VectorXd nonlinearity;  // curvature_sd / sd (0 when both are below the result's floor, inf when only sd is)
  Eigen::MatrixXd slopes;        // results x axes: g_k, change per standard deviation along axis k
  Eigen::MatrixXd axes;          // parameters x axes: s_k v_k (one standard deviation along each axis)
  int runs = 0;                  // calls of f
  bool accurate = false;         // every result's nonlinearity <= linear_tolerance
};

struct LinearOptions {
  double step_in_sd = 1;           // difference step h along each axis, in its standard deviations
  double linear_tolerance = 0.1;   // trusted when the second-order sd is at most this share of sd
  // Spreads below floor * (|nominal| + floor_scale) count as zero when judging the nonlinearity
  // (rounding noise of the runs); floor_scale per result (empty: 0).
  double floor = 1e-10;
  Eigen::VectorXd floor_scale;
};

// Throws InputError (key "covariance") when the covariance is not square, not symmetric, not
// finite, of the wrong size or not positive semi-definite (an eigenvalue below -1e-12 of the
// largest), or the step is not positive.
LinearSpread linear_spread(const ResultFunction& f, const Eigen::VectorXd& mean, const Eigen::MatrixXd& covariance,
                           const LinearOptions& options = {});

struct SampledSpread {
  Eigen::VectorXd mean;      // over the draws that gave the result
  Eigen::VectorXd sd;        // sample standard deviation (N - 1); NaN with fewer than 2 draws
  Eigen::VectorXd sd_error;  // sd / sqrt(2 (N - 1))
  Eigen::VectorXi count;     // draws that gave the result
  Eigen::MatrixXd values;    // results x samples (NaN where not available)
  std::vector<std::vector<double>> parameters;  // the draws
  int samples = 0;
  std::uint64_t seed = 0;
};
// Throws InputError for samples < 2 (key "samples") and a covariance as linear_spread does.
SampledSpread sampled_spread(const ResultFunction& f, const Eigen::VectorXd& mean, const Eigen::MatrixXd& covariance,
                             int samples, std::uint64_t seed);

// The linear sd against the sampled one per result: (sd_linear - sd_sampled) in the sampled
// sd's standard errors, and relative to the sampled sd (NaN where either is missing or the
// sampled sd is 0).
struct SpreadAgreement {
  Eigen::VectorXd in_standard_errors;
  Eigen::VectorXd relative;
  double largest_in_standard_errors = 0;  // over the results where it is defined
};
SpreadAgreement compare_spreads(const LinearSpread& linear, const SampledSpread& sampled);

}  // namespace trapwork
