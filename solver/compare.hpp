#pragma once
// Comparison of measured work data with a model work distribution P(W) = sum_l p_l delta(W - W_l)
// (the lines of a WorkDistribution, or plain (W, P) pairs via work_lines). Energies, work and
// the resolution in internal energy units; beta = 1/kT in 1/energy; free energies in kT.
//
// Resolution: the measured work is W + eta, eta ~ N(0, sigma^2) (sigma is the resolution of the
// work value; two independent energy measurements of resolution s each give sigma = sqrt(2) s).
// The model density for measured samples is then sum_l p_l N(w - W_l; sigma).
// Model probabilities are normalised by their sum (the resolved weight of a WorkDistribution);
// `model_weight` reports that sum so a model missing probability is seen, not hidden.
//
// Data forms: (a) one work value per run, (b) per-run initial and final level indices (model:
// the TPM joint probabilities p_m P(m -> n) of a WorkInput), (c) counts on given bins.
// Results: log-likelihood, Pearson chi-square on bins merged until the expected count is >= 5
// (Cochran's rule, common practice) with its p-value from Boost.Math's chi_squared
// distribution, total variation distance on the bins, Kolmogorov-Smirnov statistic against the
// model CDF, the Jarzynski estimate beta Delta F = -ln mean exp(-beta W) with a percentile
// bootstrap interval (Efron 1979, common practice; std::mt19937_64 with the given seed), and
// the first two moments with standard errors. Pure functions: no I/O, no global state.
#include <cstdint>
#include <limits>
#include <optional>
#include <random>
#include <utility>
#include <vector>

#include "solver/work.hpp"

namespace trapwork {

// Lines from plain (work, probability) pairs, sorted by work. Throws InputError (key
// "model[i]") for a negative or non-finite probability or a non-finite work value.
std::vector<WorkLine> work_lines(const std::vector<std::pair<double, double>>& work_probability);

// ---- building blocks (also used by solver/plan) ------------------------------------------

// Uniform in [0, 1) from the top 53 bits of one engine output, and a standard normal by the
// Box-Muller transform (Box & Muller 1958, common practice): both fixed by the engine's
// standard-specified sequence, so seeded results are the same with every standard library.
double uniform01(std::mt19937_64& engine);
double standard_normal(std::mt19937_64& engine);

// `runs` work values drawn from the model lines (inverse CDF), plus N(0, sigma^2) noise.
std::vector<double> sample_work(const std::vector<WorkLine>& model, int runs, double resolution,
                                std::mt19937_64& engine);

// Model CDF P(W_measured <= w) = sum_l p_l Phi((w - W_l)/sigma) (sigma > 0), or
// sum_{W_l <= w} p_l (sigma = 0), with normalised p_l.
double model_cdf(const std::vector<WorkLine>& model, double resolution, double w);

// beta Delta F estimate -ln( (1/N) sum_i exp(-beta W_i) ), evaluated shifted by the smallest
// beta W (no overflow).
double jarzynski_estimate_kT(const std::vector<double>& work, double beta);

// Model's beta Delta F from its lines: -ln sum_l p_l exp(-beta W_l) (exact in the TPM scheme
// for a Gibbs initial state, Jarzynski's equality).
double model_free_energy_kT(const std::vector<WorkLine>& model, double beta);

struct ChiSquareTest {
  double statistic = 0;
  int degrees_of_freedom = 0;  // merged bins - 1 (no parameters estimated from the data)
  double p_value = 1;   // P(chi^2_dof >= statistic); 0 when a run falls where the model has no probability
  int bins = 0;         // before merging
  int merged_bins = 0;  // after merging
  std::vector<double> observed;  // counts per merged bin
  std::vector<double> expected;  // expected counts per merged bin
};
// Pearson chi-square sum (O - E)^2 / E for counts `observed` against probabilities
// `probability` (same order, summing to 1), merging neighbours (in the order given) until
// every expected count N p >= min_expected; a last bin below it joins the one before.
// N = `runs` if given (> 0; e.g. including runs kept out of the bins), else the sum of `observed`.
// Throws PhysicsError when fewer than two merged bins remain (too few runs to test).
ChiSquareTest pearson_chi_square(const std::vector<double>& observed, const std::vector<double>& probability,
                                 double min_expected = 5, double runs = 0);

struct JarzynskiEstimate {
  double estimate_kT = 0;             // beta Delta F from the data
  double lower_kT = 0, upper_kT = 0;  // percentile bootstrap interval
  double confidence = 0.9;
  int resamples = 0;
  std::uint64_t seed = 0;
  double model_kT = 0;  // the model's beta Delta F (no resolution)
  // What the estimate converges to for data with resolution sigma: <exp(-beta (W + eta))> =
  // <exp(-beta W)> exp(beta^2 sigma^2 / 2), so beta Delta F - beta^2 sigma^2 / 2.
  double model_with_resolution_kT = 0;
  double difference_kT = 0;  // estimate - model_with_resolution
  // The model's own estimate from as many runs: `experiments` synthetic data sets of N runs drawn
  // from the model with the resolution (sample_work), each estimated as the data are. Its central
  // `confidence` range and mean (the estimator's bias at N runs shows as mean - model_with_resolution),
  // and the two-sided p-value of the data's estimate within it. This, not the bootstrap interval,
  // decides whether the data agree with the model's Delta F: the percentile bootstrap of this
  // biased, skewed estimator covers less than its level at small N (measured: 68 % for a 90 %
  // interval at N = 20). NaN where not computed (no resamples, or no model).
  double model_lower_kT = std::numeric_limits<double>::quiet_NaN();
  double model_upper_kT = std::numeric_limits<double>::quiet_NaN();
  double model_mean_estimate_kT = std::numeric_limits<double>::quiet_NaN();
  double model_p_value = std::numeric_limits<double>::quiet_NaN();
  int experiments = 0;
};
// Percentile bootstrap of jarzynski_estimate_kT: `resamples` resamples of the N runs with
// replacement (indices from std::mt19937_64(seed)); the interval is the (1 -+ confidence)/2
// quantiles of the resampled estimates (linear interpolation between order statistics).
// The model fields are left NaN. resamples = 0: no interval (NaN bounds).
JarzynskiEstimate bootstrap_jarzynski(const std::vector<double>& work, double beta, int resamples,
                                      std::uint64_t seed, double confidence = 0.9);

struct SampleMoments {
  double mean = 0, mean_error = 0;  // sample mean, sqrt(s^2 / N)
  double variance = 0,
         variance_error = 0;  // unbiased s^2, sqrt((m4 - s^4 (N-3)/(N-1)) / N) (common practice)
  double model_mean = 0, model_variance = 0;  // model, with the resolution's sigma^2 added to the variance
};

struct CompareOptions {
  double beta = std::numeric_limits<double>::quiet_NaN();  // 1/kT; NaN: no Jarzynski estimate
  double resolution = 0;                                   // sigma >= 0 (energy)
  double match_tolerance = 1e-9;  // sigma = 0: a sample within this of a line belongs to it (energy)
  // sigma = 0, samples: per sample, the rounding its written digits allow (energy; half a unit of
  // its last digit). A sample within the larger of this and match_tolerance of a line belongs to
  // the nearest such line. Empty, or NaN entries: match_tolerance alone.
  std::vector<double> precision;
  std::vector<double>
      bin_edges;  // samples, sigma > 0: interior edges of the chi-square bins (ascending;
                  // under- and overflow bins added). Empty: equal-probability bins under
                  // the model, K = min(N/5, max(2, round(2 N^0.4))) (Mann-Wald rule, common practice)
  double min_expected = 5;
  int resamples = 2000;  // bootstrap resamples (0: none)
  std::uint64_t seed = 1;
  double confidence = 0.9;
  double model_free_energy =
      std::numeric_limits<double>::quiet_NaN();  // Delta F (energy); NaN: from the lines
};

struct WorkComparison {
  std::int64_t runs = 0;  // 64 bit: a histogram may hold more than 2^31 runs
  double model_weight = 0;    // sum of the model probabilities before normalisation
  double log_likelihood = 0;  // sum over runs of ln(model density or probability)
  double log_likelihood_per_run = 0;
  std::int64_t impossible_runs = 0;  // runs where the model has no probability (log-likelihood -inf)
  // samples (sigma = 0) whose written precision admits more than one line (given the nearest)
  std::int64_t ambiguous_runs = 0;
  ChiSquareTest chi_square;
  double total_variation = 0;  // (1/2) sum_bins |O/N - p| over the bins before merging
  double ks_statistic = std::numeric_limits<double>::quiet_NaN();  // sup |F_data - F_model|
  double ks_p_value =
      std::numeric_limits<double>::quiet_NaN();  // asymptotic Kolmogorov, continuous models only (sigma > 0)
  std::optional<JarzynskiEstimate> jarzynski;    // when beta is given
  std::optional<SampleMoments> moments;          // samples and level pairs
  double model_mass_outside = 0;                 // histograms: model probability outside the given bins
};

// (a) One measured work value per run. sigma = 0: the categories are the model lines; a sample
// matching no line is impossible (chi-square infinite, p = 0). Throws InputError for fewer than
// 2 samples or non-finite values, PhysicsError for an empty model.
WorkComparison compare_samples(const std::vector<WorkLine>& model, const std::vector<double>& work,
                               const CompareOptions& options);

// (b) Per-run level indices: the model is the joint probability p_m P(m -> n) of `model`
// (levels by index, as measured; degenerate groups are not merged here), with work
// W = E_n^B - E_m^A. The categories, in order of work, are the (m, n) cells. The resolution is
// not used (levels are identified, not energies measured). Throws InputError (key
// "runs[i].initial" / ".final") for levels outside the model.
struct LevelPair {
  int initial = 0, final = 0;
};
WorkComparison compare_level_pairs(const WorkInput& model, const std::vector<LevelPair>& runs,
                                   const CompareOptions& options);

// (c) Counts on bins [edges[k], edges[k+1]). The model is conditioned on the covered range
// (probabilities renormalised there; model_mass_outside reports what is left out). Log-likelihood
// is the multinomial sum_k c_k ln p_k (without the combinatorial constant). No KS statistic,
// moments or Jarzynski estimate: a histogram does not fix exp(-beta W) inside a bin.
WorkComparison compare_histogram(const std::vector<WorkLine>& model, const std::vector<double>& edges,
                                 const std::vector<double>& counts, const CompareOptions& options);

}  // namespace trapwork
