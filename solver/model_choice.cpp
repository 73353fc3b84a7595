#include "solver/model_choice.hpp"

#include <algorithm>
#include <boost/math/distributions/normal.hpp>
#include <cmath>
#include <limits>
#include <numeric>
#include <string>

#include "solver/compare.hpp"
#include "solver/errors.hpp"
#include "solver/units.hpp"

namespace trapwork {

namespace {

constexpr double infinity = std::numeric_limits<double>::infinity();
constexpr double nan = std::numeric_limits<double>::quiet_NaN();
constexpr double window_sigmas = 38;   // e^(-38^2/2) = e^-722
constexpr double kept_term = -600;     // the window's largest term must be above e^-600
constexpr double table_margin = 12;    // sigmas beyond the outer lines
constexpr int table_per_sigma = 16;
constexpr std::size_t table_limit = std::size_t(1) << 17;
constexpr double table_tolerance = 1e-7;

// One random stream per purpose: (seed, a, b, truth, runs, purpose).
std::mt19937_64 stream(std::uint64_t seed, int a, int b, int truth, std::int64_t runs, int purpose) {
  std::seed_seq s{std::uint32_t(seed), std::uint32_t(seed >> 32), std::uint32_t(a), std::uint32_t(b),
                  std::uint32_t(truth), std::uint32_t(runs), std::uint32_t(std::uint64_t(runs) >> 32),
                  std::uint32_t(purpose)};
  return std::mt19937_64(s);
}

std::vector<double> normalised(const std::vector<double>& p, std::size_t model) {
  double total = 0;
  for (std::size_t c = 0; c < p.size(); ++c) {
    if (!(p[c] >= 0) || !std::isfinite(p[c]))
      throw InputError("models[" + std::to_string(model) + "].categories[" + std::to_string(c) + "]",
                       std::to_string(p[c]), "a probability >= 0");
    total += p[c];
  }
  if (!(total > 0)) throw PhysicsError("model " + std::to_string(model) + " has no probability in any category");
  std::vector<double> out(p);
  for (double& x : out) x /= total;
  return out;
}

void check_models(const CandidateModels& m) {
  if (m.size() < 2) throw InputError("models", std::to_string(m.size()), "at least two models to choose between");
  if (m.categorical()) {
    if (!m.lines.empty()) throw InputError("models", "lines and categories", "one form of model");
    for (const auto& c : m.categories)
      if (c.size() != m.categories.front().size() || c.empty())
        throw InputError("models.categories", std::to_string(c.size()) + " categories",
                         "the same (non-zero) number of categories for every model");
  } else if (!(m.resolution > 0) || !std::isfinite(m.resolution)) {
    throw InputError("resolution", std::to_string(m.resolution),
                     "a resolution > 0 for work values (exact values and level pairs are categories)");
  }
}

double quantile_sorted(const std::vector<double>& sorted, double q) {
  const double h = q * double(sorted.size() - 1);
  const std::size_t lo = std::size_t(std::floor(h));
  const std::size_t hi = std::min(lo + 1, sorted.size() - 1);
  if (!std::isfinite(sorted[lo]) || !std::isfinite(sorted[hi])) return sorted[h - double(lo) < 0.5 ? lo : hi];
  return sorted[lo] + (h - double(lo)) * (sorted[hi] - sorted[lo]);
}

double z_of(double probability) {
  return boost::math::quantile(boost::math::normal(), probability);
}
double normal_cdf(double z) {
  return 0.5 * std::erfc(-z / std::sqrt(2.0));
}

}  // namespace

// ---- WorkLogDensity ---------------------------------------------------------------------------

WorkLogDensity::WorkLogDensity(const std::vector<WorkLine>& model, double resolution, double match_tolerance)
    : sigma_(resolution), tolerance_(match_tolerance) {
  TRAPWORK_EXPECT(resolution >= 0 && std::isfinite(resolution), "WorkLogDensity: resolution >= 0");
  std::vector<WorkLine> sorted = model;
  std::stable_sort(sorted.begin(), sorted.end(), [](const WorkLine& x, const WorkLine& y) { return x.work < y.work; });
  double total = 0;
  for (const auto& l : sorted) {
    TRAPWORK_EXPECT(std::isfinite(l.work) && l.probability >= 0, "WorkLogDensity: finite work, probability >= 0");
    total += l.probability;
  }
  if (!(total > 0)) throw PhysicsError("a model has no probability (no lines or all zero)");
  for (const auto& l : sorted)
    if (l.probability > 0) {
      work_.push_back(l.work);
      log_probability_.push_back(std::log(l.probability / total));
    }
  if (sigma_ == 0) return;
  const double lo = work_.front() - table_margin * sigma_, hi = work_.back() + table_margin * sigma_;
  step_ = sigma_ / table_per_sigma;
  const double nodes = std::ceil((hi - lo) / step_) + 1;
  if (nodes > double(table_limit)) return;
  lo_ = lo;
  value_.resize(std::size_t(nodes));
  slope_.resize(value_.size());
  for (std::size_t i = 0; i < value_.size(); ++i) value_[i] = exact(lo_ + double(i) * step_, &slope_[i]);
  exact_interval_.assign(value_.size() - 1, 0);
  for (std::size_t i = 0; i + 1 < value_.size(); ++i) {
    const double mid = lo_ + (double(i) + 0.5) * step_;
    if (!(std::abs((*this)(mid) - exact(mid)) <= table_tolerance)) exact_interval_[i] = 1;
  }
}

double WorkLogDensity::exact(double w) const { return exact(w, nullptr); }

double WorkLogDensity::exact(double w, double* slope) const {
  if (sigma_ == 0) {
    const auto it = std::lower_bound(work_.begin(), work_.end(), w - tolerance_);
    if (slope) *slope = 0;
    if (it == work_.end() || *it > w + tolerance_) return -infinity;
    return log_probability_[std::size_t(it - work_.begin())];
  }
  auto sum = [&](std::size_t from, std::size_t to) {
    double top = -infinity;
    for (std::size_t l = from; l < to; ++l) {
      const double z = (w - work_[l]) / sigma_;
      top = std::max(top, log_probability_[l] - z * z / 2);
    }
    double s = 0, s_slope = 0;
    for (std::size_t l = from; l < to; ++l) {
      const double z = (w - work_[l]) / sigma_;
      const double e = std::exp(log_probability_[l] - z * z / 2 - top);
      s += e;
      s_slope += -z / sigma_ * e;
    }
    if (slope) *slope = s_slope / s;
    return std::pair{top, top + std::log(s)};
  };
  const std::size_t from =
      std::size_t(std::lower_bound(work_.begin(), work_.end(), w - window_sigmas * sigma_) - work_.begin());
  const std::size_t to =
      std::size_t(std::upper_bound(work_.begin(), work_.end(), w + window_sigmas * sigma_) - work_.begin());
  std::pair<double, double> r{-infinity, -infinity};
  if (from < to) r = sum(from, to);
  if (!(r.first > kept_term)) r = sum(0, work_.size());
  return r.second - std::log(sigma_ * std::sqrt(2 * si::pi));
}

double WorkLogDensity::operator()(double w) const {
  if (value_.empty()) return exact(w);
  const double x = (w - lo_) / step_;
  if (!(x >= 0 && x < double(value_.size() - 1))) return exact(w);
  const std::size_t i = std::size_t(x);
  if (!exact_interval_.empty() && exact_interval_[i]) return exact(w);
  // Cubic Hermite interpolation on [x_i, x_i+1] with the exact slopes (common practice).
  const double t = x - double(i), t2 = t * t, t3 = t2 * t;
  return (2 * t3 - 3 * t2 + 1) * value_[i] + (t3 - 2 * t2 + t) * step_ * slope_[i] + (-2 * t3 + 3 * t2) * value_[i + 1] +
         (t3 - t2) * step_ * slope_[i + 1];
}

// ---- likelihoods -----------------------------------------------------------------------------

double MeasuredRuns::runs() const {
  if (!counts.empty()) return std::accumulate(counts.begin(), counts.end(), 0.0);
  return double(work.size());
}

std::vector<double> log_likelihoods(const CandidateModels& models, const MeasuredRuns& data) {
  check_models(models);
  std::vector<double> ll;
  if (models.categorical()) {
    if (data.counts.size() != models.categories.front().size())
      throw InputError("counts", std::to_string(data.counts.size()) + " categories",
                       std::to_string(models.categories.front().size()) + " categories, as the models");
    for (std::size_t j = 0; j < models.size(); ++j) {
      const auto p = normalised(models.categories[j], j);
      double s = 0;
      for (std::size_t c = 0; c < p.size(); ++c)
        if (data.counts[c] > 0) s += p[c] > 0 ? data.counts[c] * std::log(p[c]) : -infinity;
      ll.push_back(s);
    }
    return ll;
  }
  if (data.work.empty()) throw InputError("work", "0 runs", "measured work values");
  for (std::size_t j = 0; j < models.size(); ++j) {
    const WorkLogDensity density(models.lines[j], models.resolution);
    double s = 0;
    for (double w : data.work) s += density.exact(w);
    ll.push_back(s);
  }
  return ll;
}

// ---- synthetic ratios ------------------------------------------------------------------------

SyntheticRatio::SyntheticRatio(const CandidateModels& models, int a, int b) : models_(models), a_(a), b_(b) {
  check_models(models);
  TRAPWORK_EXPECT(a >= 0 && b >= 0 && a != b && std::size_t(std::max(a, b)) < models.size(),
                  "SyntheticRatio: two different models");
  if (models.categorical()) {
    const auto pa = normalised(models.categories[std::size_t(a)], std::size_t(a));
    const auto pb = normalised(models.categories[std::size_t(b)], std::size_t(b));
    for (std::size_t c = 0; c < pa.size(); ++c)
      ratio_.push_back((pa[c] > 0 ? std::log(pa[c]) : -infinity) - (pb[c] > 0 ? std::log(pb[c]) : -infinity));
    for (const auto* p : {&pa, &pb}) {
      std::vector<double> cumulative(p->size());
      std::partial_sum(p->begin(), p->end(), cumulative.begin());
      cumulative_.push_back(std::move(cumulative));
    }
  } else {
    density_.emplace_back(models.lines[std::size_t(a)], models.resolution);
    density_.emplace_back(models.lines[std::size_t(b)], models.resolution);
  }
}

double SyntheticRatio::draw(int truth, std::int64_t runs, std::mt19937_64& engine) const {
  TRAPWORK_EXPECT(truth == a_ || truth == b_, "SyntheticRatio::draw: truth is a or b");
  double t = 0;
  if (models_.categorical()) {
    const auto& cumulative = cumulative_[truth == a_ ? 0 : 1];
    for (std::int64_t i = 0; i < runs; ++i) {
      const double u = uniform01(engine) * cumulative.back();
      std::size_t c = std::size_t(std::upper_bound(cumulative.begin(), cumulative.end(), u) - cumulative.begin());
      c = std::min(c, cumulative.size() - 1);
      t += ratio_[c];
    }
    return t;
  }
  constexpr std::int64_t chunk = 1 << 16;  // bounded memory for large N
  for (std::int64_t done = 0; done < runs; done += chunk) {
    const auto w = sample_work(models_.lines[std::size_t(truth)], int(std::min(chunk, runs - done)),
                               models_.resolution, engine);
    for (double x : w) t += density_[0](x) - density_[1](x);
  }
  return t;
}

std::pair<double, double> SyntheticRatio::per_run(int truth, std::uint64_t seed) const {
  TRAPWORK_EXPECT(truth == a_ || truth == b_, "SyntheticRatio::per_run: truth is a or b");
  double m1 = 0, m2 = 0;
  if (models_.categorical()) {
    const auto& cumulative = cumulative_[truth == a_ ? 0 : 1];
    for (std::size_t c = 0; c < ratio_.size(); ++c) {
      const double p = (cumulative[c] - (c ? cumulative[c - 1] : 0.0)) / cumulative.back();
      if (p <= 0) continue;
      m1 += p * ratio_[c];
      m2 += p * ratio_[c] * ratio_[c];
    }
  } else if (density_[0].tabulated() && density_[1].tabulated()) {
    // Quadrature over w of rho_truth(w) r(w)^k: Simpson's rule on nodes sigma/16 apart over the
    // lines +- 12 sigma (the density outside is below e^-72 of its peak); the integrand is smooth
    // on the scale sigma, so the rule's error is far below the table's.
    double lo = infinity, hi = -infinity;
    for (int j : {a_, b_})
      for (const auto& l : models_.lines[std::size_t(j)]) lo = std::min(lo, l.work), hi = std::max(hi, l.work);
    const double sigma = models_.resolution;
    lo -= table_margin * sigma;
    hi += table_margin * sigma;
    const std::int64_t intervals = 2 * std::int64_t(std::ceil((hi - lo) / sigma * table_per_sigma / 2));
    const double h = (hi - lo) / double(intervals);
    const WorkLogDensity& truth_density = density_[truth == a_ ? 0 : 1];
    for (std::int64_t i = 0; i <= intervals; ++i) {
      const double w = lo + double(i) * h;
      const double weight = (i == 0 || i == intervals ? 1.0 : (i % 2 ? 4.0 : 2.0)) * h / 3;
      const double rho = std::exp(truth_density(w)), r = density_[0](w) - density_[1](w);
      m1 += weight * rho * r;
      m2 += weight * rho * r * r;
    }
  } else {
    constexpr int draws = 200000;
    auto engine = stream(seed, a_, b_, truth, draws, 9);
    const auto w = sample_work(models_.lines[std::size_t(truth)], draws, models_.resolution, engine);
    for (double x : w) {
      const double r = density_[0](x) - density_[1](x);
      m1 += r / draws;
      m2 += r * r / draws;
    }
  }
  return {m1, std::sqrt(std::max(0.0, m2 - m1 * m1))};
}

// ---- choosing ----------------------------------------------------------------------------------

ModelChoice choose_model(const CandidateModels& models, const MeasuredRuns& data, const ModelChoiceOptions& o) {
  check_models(models);
  const std::size_t n_models = models.size();
  if (!(o.confidence > 0 && o.confidence < 1))
    throw InputError("confidence", std::to_string(o.confidence), "a confidence level between 0 and 1");
  if (o.synthetic_sets < 0)
    throw InputError("synthetic_sets", std::to_string(o.synthetic_sets), "a number of synthetic sets >= 0");
  if (!o.fitted_parameters.empty() && o.fitted_parameters.size() != n_models)
    throw InputError("fitted_parameters", std::to_string(o.fitted_parameters.size()) + " values",
                     "one number per model (" + std::to_string(n_models) + ")");
  if (!o.prior.empty() && o.prior.size() != n_models)
    throw InputError("prior", std::to_string(o.prior.size()) + " values",
                     "one prior weight per model (" + std::to_string(n_models) + ")");
  ModelChoice r;
  r.runs = data.runs();
  r.confidence = o.confidence;
  r.log_likelihood = log_likelihoods(models, data);
  r.fitted_parameters = o.fitted_parameters.empty() ? std::vector<int>(n_models, 0) : o.fitted_parameters;
  r.prior = o.prior.empty() ? std::vector<double>(n_models, 1.0) : o.prior;
  double prior_total = 0;
  for (std::size_t j = 0; j < n_models; ++j) {
    if (r.fitted_parameters[j] < 0)
      throw InputError("fitted_parameters[" + std::to_string(j) + "]", std::to_string(r.fitted_parameters[j]),
                       "a number of parameters >= 0");
    if (!(r.prior[j] > 0) || !std::isfinite(r.prior[j]))
      throw InputError("prior[" + std::to_string(j) + "]", std::to_string(r.prior[j]), "a prior weight > 0");
    prior_total += r.prior[j];
    if (r.fitted_parameters[j] > 0) r.bic_odds = true;
  }
  std::vector<double> log_weight;
  for (std::size_t j = 0; j < n_models; ++j) {
    r.prior[j] /= prior_total;
    const double k = r.fitted_parameters[j];
    r.aic.push_back(2 * k - 2 * r.log_likelihood[j]);
    r.bic.push_back(k * std::log(r.runs) - 2 * r.log_likelihood[j]);
    log_weight.push_back(std::log(r.prior[j]) + (r.bic_odds ? -r.bic[j] / 2 : r.log_likelihood[j]));
  }
  const double top = *std::max_element(log_weight.begin(), log_weight.end());
  if (!std::isfinite(top)) throw PhysicsError("the data are impossible under every model (a run where none has probability)");
  double total = 0;
  for (double x : log_weight) total += std::exp(x - top);
  for (double x : log_weight) r.posterior.push_back(std::exp(x - top) / total);

  const std::int64_t runs = std::int64_t(std::llround(r.runs));
  const double alpha = 1 - o.confidence;
  for (int b = 1; b < int(n_models); ++b) {
    PairTest t;
    t.a = 0;
    t.b = b;
    t.statistic = r.log_likelihood[0] - r.log_likelihood[std::size_t(b)];
    if (std::isnan(t.statistic))
      throw PhysicsError("a run is impossible under both model 0 and model " + std::to_string(b) +
                         ": their likelihood ratio is undefined");
    t.sets = o.synthetic_sets;
    if (t.sets == 0) {
      t.p_a = t.p_b = nan;
      r.tests.push_back(t);
      continue;
    }
    const SyntheticRatio ratio(models, 0, b);
    for (int truth : {0, b}) {
      auto engine = stream(o.seed, 0, b, truth, runs, 0);
      auto& out = truth == 0 ? t.synthetic_a : t.synthetic_b;
      for (int s = 0; s < t.sets; ++s) out.push_back(ratio.draw(truth, runs, engine));
      std::sort(out.begin(), out.end());
    }
    const double above_b = double(t.synthetic_b.end() -
                                  std::lower_bound(t.synthetic_b.begin(), t.synthetic_b.end(), t.statistic));
    const double below_a =
        double(std::upper_bound(t.synthetic_a.begin(), t.synthetic_a.end(), t.statistic) - t.synthetic_a.begin());
    t.p_b = (1 + above_b) / (t.sets + 1);
    t.p_a = (1 + below_a) / (t.sets + 1);
    const double above_a =
        double(t.synthetic_a.end() - std::lower_bound(t.synthetic_a.begin(), t.synthetic_a.end(), t.statistic));
    const double below_b =
        double(std::upper_bound(t.synthetic_b.begin(), t.synthetic_b.end(), t.statistic) - t.synthetic_b.begin());
    t.p_a_beyond = (1 + above_a) / (t.sets + 1);
    t.p_b_beyond = (1 + below_b) / (t.sets + 1);
    const bool reject_b = t.p_b <= alpha, reject_a = t.p_a <= alpha;
    t.decision = reject_b && reject_a ? Decision::rejects_both
                 : reject_b           ? Decision::favours_a
                 : reject_a           ? Decision::favours_b
                                      : Decision::cannot_tell;
    t.atypical = (t.decision == Decision::favours_a && t.p_a_beyond <= alpha) ||
                 (t.decision == Decision::favours_b && t.p_b_beyond <= alpha);
    r.tests.push_back(std::move(t));
  }
  return r;
}

// ---- planning ----------------------------------------------------------------------------------

DecisionPoint decision_power(const CandidateModels& models, int a, int b, std::int64_t runs,
                             const DecisionOptions& o) {
  if (runs < 1) throw InputError("runs", std::to_string(runs), "a number of runs >= 1");
  if (o.experiments < 10)
    throw InputError("experiments", std::to_string(o.experiments), "at least 10 synthetic experiments");
  if (!(o.confidence > 0 && o.confidence < 1))
    throw InputError("confidence", std::to_string(o.confidence), "a confidence level between 0 and 1");
  const SyntheticRatio ratio(models, a, b);
  auto draw_sorted = [&](int truth, int purpose) {
    auto engine = stream(o.seed, a, b, truth, runs, purpose);
    std::vector<double> t(std::size_t(o.experiments));
    for (double& x : t) x = ratio.draw(truth, runs, engine);
    std::sort(t.begin(), t.end());
    return t;
  };
  // Thresholds from one set of experiments, powers and sizes measured on fresh ones.
  const auto calibrate_a = draw_sorted(a, 1), calibrate_b = draw_sorted(b, 1);
  const auto test_a = draw_sorted(a, 2), test_b = draw_sorted(b, 2);
  DecisionPoint p;
  p.runs = runs;
  p.experiments = o.experiments;
  p.threshold_b = quantile_sorted(calibrate_b, o.confidence);
  p.threshold_a = quantile_sorted(calibrate_a, 1 - o.confidence);
  const double m = o.experiments;
  auto above = [&](const std::vector<double>& t, double x) {
    return double(t.end() - std::upper_bound(t.begin(), t.end(), x)) / m;
  };
  auto below = [&](const std::vector<double>& t, double x) {
    return double(std::lower_bound(t.begin(), t.end(), x) - t.begin()) / m;
  };
  p.power_a = above(test_a, p.threshold_b);
  p.size_b = above(test_b, p.threshold_b);
  p.power_b = below(test_b, p.threshold_a);
  p.size_a = below(test_a, p.threshold_a);
  p.correct_a = above(test_a, 0.0);
  p.correct_b = below(test_b, 0.0);
  const auto [mu_a, s_a] = ratio.per_run(a, o.seed);
  const auto [mu_b, s_b] = ratio.per_run(b, o.seed);
  const double z = z_of(o.confidence), root = std::sqrt(double(runs));
  p.normal_power_a = s_a > 0 ? normal_cdf((root * (mu_a - mu_b) - z * s_b) / s_a) : nan;
  p.normal_power_b = s_b > 0 ? normal_cdf((root * (mu_a - mu_b) - z * s_a) / s_b) : nan;
  return p;
}

double normal_runs_to_decide(const CandidateModels& models, int a, int b, double power, double confidence,
                             std::uint64_t seed) {
  if (!(power > 0 && power < 1)) throw InputError("power", std::to_string(power), "a power between 0 and 1");
  const SyntheticRatio ratio(models, a, b);
  const auto [mu_a, s_a] = ratio.per_run(a, seed);
  const auto [mu_b, s_b] = ratio.per_run(b, seed);
  const double gap = mu_a - mu_b;
  if (!(gap > 0)) return infinity;
  const double zc = z_of(confidence), zp = z_of(power);
  const double n1 = (zc * s_b + zp * s_a) / gap, n2 = (zc * s_a + zp * s_b) / gap;
  return std::max(n1 * n1, n2 * n2);
}

RunsToDecide runs_to_decide(const CandidateModels& models, int a, int b, double power, const DecisionOptions& o,
                            std::int64_t start, std::int64_t max_runs) {
  if (!(power > 0 && power < 1)) throw InputError("power", std::to_string(power), "a power between 0 and 1");
  RunsToDecide r;
  auto meets = [&](const DecisionPoint& p) { return p.power_a >= power && p.power_b >= power; };
  std::int64_t lo = 0, hi = std::max<std::int64_t>(1, start);
  DecisionPoint at = decision_power(models, a, b, hi, o);
  ++r.evaluations;
  while (!meets(at)) {
    if (hi >= max_runs) {
      r.runs = hi;
      r.at = at;
      return r;
    }
    lo = hi;
    hi = std::min(max_runs, 2 * hi);
    at = decision_power(models, a, b, hi, o);
    ++r.evaluations;
  }
  DecisionPoint best = at;
  while (hi - lo > std::max<std::int64_t>(1, hi / 50)) {
    const std::int64_t mid = lo + (hi - lo) / 2;
    const DecisionPoint p = decision_power(models, a, b, mid, o);
    ++r.evaluations;
    if (meets(p)) {
      hi = mid;
      best = p;
    } else {
      lo = mid;
    }
  }
  r.runs = hi;
  r.at = best;
  r.reached = true;
  return r;
}

}  // namespace trapwork
