#include "solver/compare.hpp"

#include <algorithm>
#include <boost/math/distributions/chi_squared.hpp>
#include <cmath>
#include <numeric>
#include <sstream>
#include <string>

#include "solver/errors.hpp"
#include "solver/units.hpp"

namespace trapwork {

namespace {

constexpr double nan = std::numeric_limits<double>::quiet_NaN();
constexpr double infinity = std::numeric_limits<double>::infinity();

// Model lines sorted by work with probabilities normalised by their sum.
struct NormalisedModel {
  std::vector<double> work, probability;
  double weight = 0;
};

NormalisedModel normalise(const std::vector<WorkLine>& lines) {
  std::vector<WorkLine> sorted = lines;
  std::stable_sort(sorted.begin(), sorted.end(),
                   [](const WorkLine& a, const WorkLine& b) { return a.work < b.work; });
  NormalisedModel m;
  for (const auto& l : sorted) {
    TRAPWORK_EXPECT(std::isfinite(l.work) && l.probability >= 0,
                    "model lines need finite work, probability >= 0");
    m.weight += l.probability;
  }
  if (!(m.weight > 0)) throw PhysicsError("compare: the model has no probability (no lines or all zero)");
  for (const auto& l : sorted) {
    m.work.push_back(l.work);
    m.probability.push_back(l.probability / m.weight);
  }
  return m;
}

double normal_cdf(double z) {
  return 0.5 * std::erfc(-z / std::sqrt(2.0));
}

// P(W_measured < w): strictly below for lines (sigma = 0), the same as <= for sigma > 0.
double cdf_below(const NormalisedModel& m, double sigma, double w) {
  double s = 0;
  for (std::size_t l = 0; l < m.work.size(); ++l)
    s += m.probability[l] * (sigma > 0 ? normal_cdf((w - m.work[l]) / sigma) : (m.work[l] < w ? 1.0 : 0.0));
  return s;
}

double cdf_at_most(const NormalisedModel& m, double sigma, double w) {
  if (sigma > 0) return cdf_below(m, sigma, w);
  double s = 0;
  for (std::size_t l = 0; l < m.work.size(); ++l)
    if (m.work[l] <= w) s += m.probability[l];
  return s;
}

// The q-quantile of sorted values (linear interpolation between order statistics).
double sorted_quantile(const std::vector<double>& sorted, double q) {
  const double h = q * double(sorted.size() - 1);
  const std::size_t lo = std::size_t(std::floor(h));
  const std::size_t hi = std::min(lo + 1, sorted.size() - 1);
  return sorted[lo] + (h - double(lo)) * (sorted[hi] - sorted[lo]);
}

// Index of the line within tol of w, or -1.
int matching_line(const NormalisedModel& m, double w, double tol) {
  const auto it = std::lower_bound(m.work.begin(), m.work.end(), w - tol);
  if (it == m.work.end() || *it > w + tol) return -1;
  return int(it - m.work.begin());
}

// Kolmogorov's asymptotic tail Q(lambda) = 2 sum_k (-1)^(k-1) exp(-2 k^2 lambda^2), with
// Stephens' (1970) finite-N argument lambda = (sqrt N + 0.12 + 0.11/sqrt N) D (as in Numerical
// Recipes, section 14.3; from memory).
double kolmogorov_p_value(double d, int n) {
  const double rn = std::sqrt(double(n));
  const double lambda = (rn + 0.12 + 0.11 / rn) * d;
  if (lambda < 0.2) return 1.0;
  double q = 0, sign = 1;
  for (int k = 1; k <= 100; ++k) {
    const double term = sign * std::exp(-2.0 * k * k * lambda * lambda);
    q += term;
    if (std::abs(term) < 1e-16) break;
    sign = -sign;
  }
  return std::clamp(2 * q, 0.0, 1.0);
}

// sup |F_data - F_model| over the samples and the line positions, both one-sided limits.
double ks_statistic(const NormalisedModel& m, double sigma, std::vector<double> samples, double tol) {
  std::sort(samples.begin(), samples.end());
  const double n = double(samples.size());
  std::vector<double> points = samples;
  if (sigma == 0) points.insert(points.end(), m.work.begin(), m.work.end());
  const double t = sigma > 0 ? 0.0 : tol;
  double d = 0;
  for (double x : points) {
    const double below =
        double(std::lower_bound(samples.begin(), samples.end(), x - t) - samples.begin()) / n;
    const double at_most =
        double(std::upper_bound(samples.begin(), samples.end(), x + t) - samples.begin()) / n;
    d = std::max(
        {d, std::abs(at_most - cdf_at_most(m, sigma, x + t)), std::abs(below - cdf_below(m, sigma, x - t))});
  }
  return d;
}

SampleMoments sample_moments(const std::vector<double>& w, const NormalisedModel& m, double sigma) {
  const double n = double(w.size());
  SampleMoments s;
  s.mean = std::accumulate(w.begin(), w.end(), 0.0) / n;
  double m2 = 0, m4 = 0;
  for (double x : w) {
    const double d2 = (x - s.mean) * (x - s.mean);
    m2 += d2;
    m4 += d2 * d2;
  }
  s.variance = m2 / (n - 1);
  s.mean_error = std::sqrt(s.variance / n);
  m4 /= n;
  s.variance_error = std::sqrt(std::max(0.0, (m4 - s.variance * s.variance * (n - 3) / (n - 1)) / n));
  for (std::size_t l = 0; l < m.work.size(); ++l) s.model_mean += m.probability[l] * m.work[l];
  for (std::size_t l = 0; l < m.work.size(); ++l)
    s.model_variance += m.probability[l] * (m.work[l] - s.model_mean) * (m.work[l] - s.model_mean);
  s.model_variance += sigma * sigma;
  return s;
}

// Chi-square, total variation and impossible runs from per-category counts and probabilities.
// `observed` excludes the impossible runs; r.runs counts all.
void categorical(WorkComparison& r, const std::vector<double>& observed,
                 const std::vector<double>& probability, double min_expected) {
  const double n = double(r.runs);
  double tv = 0;
  for (std::size_t k = 0; k < observed.size(); ++k) tv += std::abs(observed[k] / n - probability[k]);
  r.total_variation = (tv + double(r.impossible_runs) / n) / 2;
  r.chi_square = pearson_chi_square(observed, probability, min_expected, n);
  if (r.impossible_runs > 0) {
    r.chi_square.statistic = infinity;
    r.chi_square.p_value = 0;
  }
}

void jarzynski_part(WorkComparison& r, const std::vector<double>& work, const std::vector<WorkLine>& lines,
                    double sigma, const CompareOptions& o) {
  if (!std::isfinite(o.beta)) return;
  if (!(o.beta > 0)) throw InputError("beta", std::to_string(o.beta), "1/kT > 0");
  JarzynskiEstimate j = bootstrap_jarzynski(work, o.beta, o.resamples, o.seed, o.confidence);
  j.model_kT =
      std::isfinite(o.model_free_energy) ? o.beta * o.model_free_energy : model_free_energy_kT(lines, o.beta);
  j.model_with_resolution_kT = j.model_kT - o.beta * o.beta * sigma * sigma / 2;
  j.difference_kT = j.estimate_kT - j.model_with_resolution_kT;
  if (o.resamples > 0 && std::isfinite(j.estimate_kT)) {
    // The model's estimate from N runs: at most 2e7 draws in all, at least 200 experiments.
    const std::size_t n = work.size();
    j.experiments = int(std::min<std::size_t>(std::size_t(o.resamples), std::max<std::size_t>(200, 20'000'000 / n)));
    std::mt19937_64 engine(o.seed ^ 0x9e3779b97f4a7c15ULL);  // a stream apart from the bootstrap's
    std::vector<double> estimates(std::size_t(j.experiments));
    double sum = 0;
    for (double& e : estimates) {
      e = jarzynski_estimate_kT(sample_work(lines, int(n), sigma, engine), o.beta);
      sum += e;
    }
    std::sort(estimates.begin(), estimates.end());
    j.model_mean_estimate_kT = sum / double(j.experiments);
    j.model_lower_kT = sorted_quantile(estimates, (1 - o.confidence) / 2);
    j.model_upper_kT = sorted_quantile(estimates, (1 + o.confidence) / 2);
    // two-sided, ties counted half (mid-rank): 2 min(F(x), 1 - F(x)), plus 1/K so that a finite
    // number K of experiments never claims p = 0
    const double below = double(std::lower_bound(estimates.begin(), estimates.end(), j.estimate_kT) - estimates.begin());
    const double at_most = double(std::upper_bound(estimates.begin(), estimates.end(), j.estimate_kT) - estimates.begin());
    const double f = (below + at_most) / 2 / double(j.experiments);
    j.model_p_value = std::min(1.0, 2 * std::min(f, 1 - f) + 1.0 / double(j.experiments));
  }
  r.jarzynski = j;
}

void check_options(const CompareOptions& o) {
  if (!(o.resolution >= 0) || !std::isfinite(o.resolution))
    throw InputError("resolution", std::to_string(o.resolution), "a resolution sigma >= 0 (energy)");
  if (!(o.confidence > 0 && o.confidence < 1))
    throw InputError("confidence", std::to_string(o.confidence), "a confidence level between 0 and 1");
  if (o.resamples < 0)
    throw InputError("resamples", std::to_string(o.resamples), "a number of resamples >= 0");
}

}  // namespace

std::vector<WorkLine> work_lines(const std::vector<std::pair<double, double>>& wp) {
  std::vector<WorkLine> lines;
  for (std::size_t i = 0; i < wp.size(); ++i) {
    const auto [w, p] = wp[i];
    if (!std::isfinite(w))
      throw InputError("model[" + std::to_string(i) + "].work", std::to_string(w), "a finite work value");
    if (!std::isfinite(p) || p < 0)
      throw InputError("model[" + std::to_string(i) + "].probability", std::to_string(p),
                       "a probability >= 0");
    lines.push_back({w, p, 0, 0});
  }
  std::stable_sort(lines.begin(), lines.end(),
                   [](const WorkLine& a, const WorkLine& b) { return a.work < b.work; });
  return lines;
}

double uniform01(std::mt19937_64& engine) {
  return double(engine() >> 11) * 0x1.0p-53;
}

double standard_normal(std::mt19937_64& engine) {
  const double u1 = 1.0 - uniform01(engine);  // in (0, 1]: the logarithm is finite
  const double u2 = uniform01(engine);
  return std::sqrt(-2.0 * std::log(u1)) * std::cos(2 * si::pi * u2);
}

std::vector<double> sample_work(const std::vector<WorkLine>& model, int runs, double resolution,
                                std::mt19937_64& engine) {
  const NormalisedModel m = normalise(model);
  std::vector<double> cumulative(m.probability.size());
  std::partial_sum(m.probability.begin(), m.probability.end(), cumulative.begin());
  std::vector<double> w(std::size_t(std::max(runs, 0)));
  for (auto& x : w) {
    const double u = uniform01(engine) * cumulative.back();
    const std::size_t l =
        std::min(std::size_t(std::upper_bound(cumulative.begin(), cumulative.end(), u) - cumulative.begin()),
                 cumulative.size() - 1);
    x = m.work[l] + (resolution > 0 ? resolution * standard_normal(engine) : 0.0);
  }
  return w;
}

double model_cdf(const std::vector<WorkLine>& model, double resolution, double w) {
  return cdf_at_most(normalise(model), resolution, w);
}

double jarzynski_estimate_kT(const std::vector<double>& work, double beta) {
  TRAPWORK_EXPECT(!work.empty(), "jarzynski_estimate_kT needs samples");
  const double w_min = *std::min_element(work.begin(), work.end());
  double s = 0;
  for (double w : work) s += std::exp(-beta * (w - w_min));
  return beta * w_min - std::log(s / double(work.size()));
}

double model_free_energy_kT(const std::vector<WorkLine>& model, double beta) {
  const NormalisedModel m = normalise(model);
  double s = 0;
  for (std::size_t l = 0; l < m.work.size(); ++l)
    s += m.probability[l] * std::exp(-beta * (m.work[l] - m.work[0]));
  return beta * m.work[0] - std::log(s);
}

ChiSquareTest pearson_chi_square(const std::vector<double>& observed, const std::vector<double>& probability,
                                 double min_expected, double runs) {
  TRAPWORK_EXPECT(observed.size() == probability.size(), "pearson_chi_square: sizes differ");
  ChiSquareTest t;
  t.bins = int(observed.size());
  double n = 0;
  for (double o : observed) n += o;
  if (runs > 0) n = runs;
  double o_acc = 0, e_acc = 0;
  for (std::size_t k = 0; k < observed.size(); ++k) {
    o_acc += observed[k];
    e_acc += n * probability[k];
    if (e_acc >= min_expected) {
      t.observed.push_back(o_acc);
      t.expected.push_back(e_acc);
      o_acc = e_acc = 0;
    }
  }
  if (!t.expected.empty()) {
    t.observed.back() += o_acc;
    t.expected.back() += e_acc;
  }
  t.merged_bins = int(t.expected.size());
  if (t.merged_bins < 2) {
    std::ostringstream s;
    s << "compare: " << n << " runs give fewer than two bins with an expected count >= " << min_expected
      << ": the chi-square test needs more runs (or finer bins)";
    throw PhysicsError(s.str());
  }
  for (std::size_t k = 0; k < t.expected.size(); ++k)
    t.statistic += (t.observed[k] - t.expected[k]) * (t.observed[k] - t.expected[k]) / t.expected[k];
  t.degrees_of_freedom = t.merged_bins - 1;
  t.p_value =
      boost::math::cdf(boost::math::complement(boost::math::chi_squared(t.degrees_of_freedom), t.statistic));
  return t;
}

JarzynskiEstimate bootstrap_jarzynski(const std::vector<double>& work, double beta, int resamples,
                                      std::uint64_t seed, double confidence) {
  JarzynskiEstimate j;
  j.estimate_kT = jarzynski_estimate_kT(work, beta);
  j.confidence = confidence;
  j.resamples = resamples;
  j.seed = seed;
  j.model_kT = j.model_with_resolution_kT = j.difference_kT = nan;
  j.lower_kT = j.upper_kT = nan;
  if (resamples <= 0) return j;
  const std::size_t n = work.size();
  const double w_min = *std::min_element(work.begin(), work.end());
  std::vector<double> x(n);
  for (std::size_t i = 0; i < n; ++i) x[i] = std::exp(-beta * (work[i] - w_min));
  std::mt19937_64 engine(seed);
  std::vector<double> estimates(static_cast<std::size_t>(resamples));
  for (auto& e : estimates) {
    double s = 0;
    // Index by the high half of a 64 x 64-bit product (Lemire 2019, common practice): unbiased
    // to 2^-64 relative and fixed by the engine's sequence.
    for (std::size_t i = 0; i < n; ++i)
      s += x[std::size_t((static_cast<unsigned __int128>(engine()) * n) >> 64)];
    e = beta * w_min - std::log(s / double(n));
  }
  std::sort(estimates.begin(), estimates.end());
  j.lower_kT = sorted_quantile(estimates, (1 - confidence) / 2);
  j.upper_kT = sorted_quantile(estimates, (1 + confidence) / 2);
  return j;
}

WorkComparison compare_samples(const std::vector<WorkLine>& model, const std::vector<double>& work,
                               const CompareOptions& o) {
  check_options(o);
  if (work.size() < 2)
    throw InputError("work", std::to_string(work.size()) + " samples", "at least 2 work samples");
  for (std::size_t i = 0; i < work.size(); ++i)
    if (!std::isfinite(work[i]))
      throw InputError("work[" + std::to_string(i) + "]", std::to_string(work[i]), "a finite work value");
  TRAPWORK_EXPECT(o.precision.empty() || o.precision.size() == work.size(),
                  "compare_samples: one precision per sample or none");
  const NormalisedModel m = normalise(model);
  const double sigma = o.resolution;
  WorkComparison r;
  r.runs = int(work.size());
  r.model_weight = m.weight;
  const double n = double(work.size());

  // Exact values (sigma = 0) that lie within their written precision of a line are taken at the
  // nearest such line for the matching below: data rounded to their digits must not read as
  // impossible runs. The moments and the Jarzynski estimate keep the values as given.
  std::vector<double> matched = work;
  if (sigma == 0)
    for (std::size_t i = 0; i < work.size(); ++i) {
      const double p = o.precision.empty() ? 0.0 : o.precision[i];
      const double tol = std::isnan(p) ? o.match_tolerance : std::max(o.match_tolerance, p * (1 + 1e-12));
      const auto lo = std::lower_bound(m.work.begin(), m.work.end(), work[i] - tol);
      const auto hi = std::upper_bound(m.work.begin(), m.work.end(), work[i] + tol);
      if (lo == hi) continue;
      const auto nearest = std::min_element(lo, hi, [&](double a, double b) {
        return std::abs(a - work[i]) < std::abs(b - work[i]);
      });
      matched[i] = *nearest;
      if (hi - lo > 1) ++r.ambiguous_runs;
    }

  // Log-likelihood: ln sum_l p_l N(w - W_l; sigma) by log-sum-exp, or ln p of the matching line.
  for (double w : matched) {
    double ll = -infinity;
    if (sigma > 0) {
      double top = -infinity;
      std::vector<double> a(m.work.size());
      for (std::size_t l = 0; l < m.work.size(); ++l) {
        const double z = (w - m.work[l]) / sigma;
        a[l] = m.probability[l] > 0 ? std::log(m.probability[l]) - z * z / 2 : -infinity;
        top = std::max(top, a[l]);
      }
      if (std::isfinite(top)) {
        double s = 0;
        for (double x : a) s += std::exp(x - top);
        ll = top + std::log(s) - std::log(sigma * std::sqrt(2 * si::pi));
      }
    } else {
      const int l = matching_line(m, w, o.match_tolerance);
      if (l >= 0 && m.probability[std::size_t(l)] > 0) ll = std::log(m.probability[std::size_t(l)]);
    }
    if (!std::isfinite(ll)) ++r.impossible_runs;
    r.log_likelihood += ll;
  }
  r.log_likelihood_per_run = r.log_likelihood / n;

  // Bins: given edges, the lines themselves (sigma = 0), or equal-probability bins.
  std::vector<double> observed, probability;
  std::vector<double> edges = o.bin_edges;
  if (!std::is_sorted(edges.begin(), edges.end()) ||
      std::adjacent_find(edges.begin(), edges.end()) != edges.end())
    throw InputError("bin_edges", std::to_string(edges.size()) + " edges", "strictly ascending bin edges");
  if (edges.empty() && sigma == 0) {
    observed.assign(m.work.size(), 0.0);
    for (double w : matched) {
      const int l = matching_line(m, w, o.match_tolerance);
      if (l >= 0) observed[std::size_t(l)] += 1;
    }
    probability = m.probability;
  } else {
    if (edges.empty()) {
      const int k = std::min(int(n / o.min_expected), std::max(2, int(std::lround(2 * std::pow(n, 0.4)))));
      const double lo0 = m.work.front() - 40 * sigma, hi0 = m.work.back() + 40 * sigma;
      for (int i = 1; i < k; ++i) {
        double lo = lo0, hi = hi0;
        for (int it = 0; it < 200 && hi - lo > 1e-12 * (1 + std::abs(lo)); ++it) {
          const double mid = (lo + hi) / 2;
          (cdf_below(m, sigma, mid) < double(i) / k ? lo : hi) = mid;
        }
        edges.push_back((lo + hi) / 2);
      }
    }
    // Samples off every line (sigma = 0) are impossible runs, kept out of the bins.
    std::vector<double> sorted;
    for (double w : matched)
      if (sigma > 0 || matching_line(m, w, o.match_tolerance) >= 0) sorted.push_back(w);
    std::sort(sorted.begin(), sorted.end());
    double previous_count = 0, previous_cdf = 0;
    for (std::size_t e = 0; e <= edges.size(); ++e) {
      const double count =
          e < edges.size() ? double(std::lower_bound(sorted.begin(), sorted.end(), edges[e]) - sorted.begin())
                           : double(sorted.size());
      const double cdf = e < edges.size() ? cdf_below(m, sigma, edges[e]) : 1.0;
      observed.push_back(count - previous_count);
      probability.push_back(cdf - previous_cdf);
      previous_count = count;
      previous_cdf = cdf;
    }
  }
  categorical(r, observed, probability, o.min_expected);
  r.ks_statistic = ks_statistic(m, sigma, matched, o.match_tolerance);
  if (sigma > 0) r.ks_p_value = kolmogorov_p_value(r.ks_statistic, int(r.runs));
  r.moments = sample_moments(work, m, sigma);
  jarzynski_part(r, work, model, sigma, o);
  return r;
}

WorkComparison compare_level_pairs(const WorkInput& model, const std::vector<LevelPair>& runs,
                                   const CompareOptions& o) {
  check_options(o);
  const Eigen::MatrixXd& p = model.transitions.probability;
  const int rows = int(p.rows()), cols = int(p.cols());
  TRAPWORK_EXPECT(int(model.initial_weights.size()) >= rows && model.initial_energies.size() >= rows &&
                      model.final_energies.size() >= cols,
                  "compare_level_pairs: model weights or energies shorter than the transition matrix");
  if (runs.size() < 2) throw InputError("runs", std::to_string(runs.size()) + " runs", "at least 2 runs");
  // Cells (m, n) in order of work; their lines form the model for the KS statistic and moments.
  std::vector<WorkLine> cells;
  for (int i = 0; i < rows; ++i)
    for (int f = 0; f < cols; ++f)
      cells.push_back({model.final_energies(f) - model.initial_energies(i),
                       model.initial_weights[std::size_t(i)] * p(i, f), i, f});
  std::stable_sort(cells.begin(), cells.end(),
                   [](const WorkLine& a, const WorkLine& b) { return a.work < b.work; });
  std::vector<int> cell_of(std::size_t(rows * cols));
  for (std::size_t c = 0; c < cells.size(); ++c)
    cell_of[std::size_t(cells[c].initial * cols + cells[c].final)] = int(c);
  const NormalisedModel m = normalise(cells);  // same order: stable sort of an already sorted list

  WorkComparison r;
  r.runs = int(runs.size());
  r.model_weight = m.weight;
  std::vector<double> observed(cells.size(), 0.0), work;
  for (std::size_t k = 0; k < runs.size(); ++k) {
    const auto [i, f] = runs[k];
    const std::string key = "runs[" + std::to_string(k) + "]";
    if (i < 0 || i >= rows)
      throw InputError(key + ".initial", std::to_string(i),
                       "an initial level 0.." + std::to_string(rows - 1) + " of the model");
    if (f < 0 || f >= cols)
      throw InputError(key + ".final", std::to_string(f),
                       "a final level 0.." + std::to_string(cols - 1) + " of the model");
    const std::size_t c = std::size_t(cell_of[std::size_t(i * cols + f)]);
    observed[c] += 1;
    const double prob = m.probability[c];
    if (prob > 0)
      r.log_likelihood += std::log(prob);
    else {
      r.log_likelihood = -infinity;
      ++r.impossible_runs;
    }
    work.push_back(m.work[c]);
  }
  r.log_likelihood_per_run = r.log_likelihood / double(r.runs);
  // Impossible runs are counted in their (zero-probability) cells: keep them out of the bins.
  std::vector<double> possible = observed;
  for (std::size_t c = 0; c < possible.size(); ++c)
    if (m.probability[c] == 0) possible[c] = 0;
  categorical(r, possible, m.probability, o.min_expected);
  r.ks_statistic = ks_statistic(m, 0.0, work, 0.0);
  r.moments = sample_moments(work, m, 0.0);
  CompareOptions exact = o;
  exact.resolution = 0;
  jarzynski_part(r, work, cells, 0.0, exact);
  return r;
}

WorkComparison compare_histogram(const std::vector<WorkLine>& model, const std::vector<double>& edges,
                                 const std::vector<double>& counts, const CompareOptions& o) {
  check_options(o);
  if (edges.size() != counts.size() + 1 || counts.empty())
    throw InputError("bins",
                     std::to_string(edges.size()) + " edges for " + std::to_string(counts.size()) + " counts",
                     "one more edge than counts");
  for (std::size_t k = 0; k + 1 < edges.size(); ++k)
    if (!(edges[k] < edges[k + 1]))
      throw InputError("bins.edges[" + std::to_string(k + 1) + "]", std::to_string(edges[k + 1]),
                       "strictly ascending edges");
  // Runs are summed as 64-bit integers: a double sum loses runs above 2^53 and an int overflows
  // at 2^31 (giving negative totals). Each count must be a whole number below 2^63 and the total
  // must stay below 2^63.
  constexpr double limit = 9223372036854775808.0;  // 2^63
  std::int64_t runs = 0;
  for (std::size_t k = 0; k < counts.size(); ++k) {
    const std::string key = "bins.counts[" + std::to_string(k) + "]";
    if (!(counts[k] >= 0) || !(counts[k] < limit) || counts[k] != std::floor(counts[k]))
      throw InputError(key, std::to_string(counts[k]), "a whole number of runs >= 0 and below 2^63");
    const auto c = static_cast<std::int64_t>(counts[k]);
    if (c > std::numeric_limits<std::int64_t>::max() - runs)
      throw InputError(key, std::to_string(counts[k]), "counts whose total stays below 2^63 runs");
    runs += c;
  }
  const double n = double(runs);
  const NormalisedModel m = normalise(model);
  std::vector<double> probability;
  for (std::size_t k = 0; k < counts.size(); ++k)
    probability.push_back(cdf_below(m, o.resolution, edges[k + 1]) - cdf_below(m, o.resolution, edges[k]));
  const double inside = std::accumulate(probability.begin(), probability.end(), 0.0);
  if (!(inside > 0)) throw PhysicsError("compare: the model has no probability inside the histogram's bins");
  WorkComparison r;
  r.runs = runs;
  r.model_weight = m.weight;
  r.model_mass_outside = 1 - inside;
  std::vector<double> possible = counts;
  for (std::size_t k = 0; k < counts.size(); ++k) {
    probability[k] /= inside;
    if (counts[k] == 0) continue;
    if (probability[k] > 0)
      r.log_likelihood += counts[k] * std::log(probability[k]);
    else {
      r.log_likelihood = -infinity;
      r.impossible_runs += static_cast<std::int64_t>(counts[k]);
      possible[k] = 0;
    }
  }
  r.log_likelihood_per_run = r.log_likelihood / n;
  categorical(r, possible, probability, o.min_expected);
  return r;
}

}  // namespace trapwork
