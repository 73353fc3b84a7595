#pragma once
// Deciding between candidate models of one measured data set (`trapwork compare --against`,
// `trapwork plan --against`). Work and the resolution in internal energy units.
//
// Data forms, as in solver/compare.hpp: measured work values with a Gaussian resolution sigma > 0
// (each model's density rho(w) = sum_l p_l N(w - W_l; sigma)), or categories (level pairs,
// histogram bins, exact work values): each model a probability per category.
//
// Statistic: the log-likelihood ratio T = ln L_a - ln L_b of models a and b. The models are
// fixed (no parameter is fitted to these data), so each is a simple hypothesis and the ratio
// is the most powerful test of one against the other (Neyman-Pearson lemma, common practice).
// Wilks' chi-square limit does not apply (nothing is fitted, the models need not be nested):
// the p-value is calibrated by a parametric bootstrap instead, T computed on synthetic data
// sets of the same size drawn from each model (Davison & Hinkley 1997, ch. 4, common
// practice): p_b = (1 + #{T_b >= T}) / (M + 1) says how unlikely so large a ratio is when b is
// true, p_a = (1 + #{T_a <= T}) / (M + 1) the same for a.
// Bayes factor exp(T) (exact for simple hypotheses); with k_j parameters fitted to these very
// data, Schwarz's approximation exp(-Delta BIC / 2) (Kass & Raftery 1995, common practice).
// AIC = 2k - 2 ln L, BIC = k ln N - 2 ln L. Pure functions: no I/O, no global state; seeded
// std::mt19937_64 streams, one per (seed, a, b, true model, N), so results do not depend on order.
#include <cstdint>
#include <random>
#include <utility>
#include <vector>

#include "solver/work.hpp"

namespace trapwork {

// ln of a model's density of a measured work value: ln sum_l p_l N(w - W_l; sigma) with the
// p_l normalised (sigma > 0), or ln p of the line within match_tolerance of w (sigma = 0; -inf
// when none). Exact evaluation: log-sum-exp over the lines within 38 sigma of w (the others add
// less than e^-722 in all, kept out while the largest term is above e^-600, so the relative
// error is below e^-122), over all lines otherwise. For speed (sigma > 0) a cubic Hermite table
// of ln rho and its exact derivative on nodes sigma/16 apart over [W_min - 12 sigma, W_max +
// 12 sigma] (at most 2^17 nodes, else no table); an interval whose midpoint misses the exact
// value by more than 1e-7 (near a deep minimum between distant lines) is evaluated exactly.
class WorkLogDensity {
 public:
  WorkLogDensity(const std::vector<WorkLine>& model, double resolution, double match_tolerance = 1e-9);
  double operator()(double w) const;  // from the table where it holds, else exact
  double exact(double w) const;
  bool tabulated() const { return !value_.empty(); }

 private:
  double exact(double w, double* slope) const;
  std::vector<double> work_, log_probability_;
  double sigma_ = 0, tolerance_ = 0;
  double lo_ = 0, step_ = 0;
  std::vector<double> value_, slope_;
  std::vector<char> exact_interval_;
};

// Candidate models of one data set, in one of the two forms.
struct CandidateModels {
  std::vector<std::vector<WorkLine>> lines;  // work values: each model's lines (any order)
  double resolution = 0;                     // sigma > 0 of the work values
  std::vector<std::vector<double>> categories;  // categories: each model's probabilities (same length)
  bool categorical() const { return !categories.empty(); }
  std::size_t size() const { return categorical() ? categories.size() : lines.size(); }
};
// The measured data in the models' form: work values, or runs per category.
struct MeasuredRuns {
  std::vector<double> work;
  std::vector<double> counts;
  double runs() const;
};

// ln L of each model (densities per internal energy unit for work values). Throws InputError
// for fewer than 2 models, mismatched forms or sizes.
std::vector<double> log_likelihoods(const CandidateModels& models, const MeasuredRuns& data);

struct ModelChoiceOptions {
  int synthetic_sets = 1000;  // M per model and pair (0: no calibrated p-value)
  std::uint64_t seed = 1;
  double confidence = 0.95;               // of the decision, in (0, 1)
  std::vector<int> fitted_parameters;     // k per model (empty: 0 each)
  std::vector<double> prior;              // prior weight per model (empty: equal)
};

// What a pair test says, in words the scenario layer turns into a sentence.
enum class Decision { favours_a, favours_b, cannot_tell, rejects_both };

struct PairTest {
  int a = 0, b = 1;
  double statistic = 0;  // T = ln L_a - ln L_b of the data
  int sets = 0;          // M
  double p_b = 1;        // (1 + #{T_b >= T}) / (M + 1): small when the data disfavour b
  double p_a = 1;        // (1 + #{T_a <= T}) / (M + 1): small when the data disfavour a
  // The other tails: a ratio beyond what even the favoured model gives (small: the data are
  // atypical of that model as well, and may fit neither).
  double p_a_beyond = 1;  // (1 + #{T_a >= T}) / (M + 1)
  double p_b_beyond = 1;  // (1 + #{T_b <= T}) / (M + 1)
  std::vector<double> synthetic_a, synthetic_b;  // T of the synthetic sets under a and under b, sorted
  Decision decision = Decision::cannot_tell;     // at the options' confidence
  bool atypical = false;  // favours a with p_a_beyond <= 1 - confidence, or b with p_b_beyond <= 1 - confidence
};

struct ModelChoice {
  double runs = 0;
  std::vector<double> log_likelihood, aic, bic, prior, posterior;  // per model; prior and posterior sum to 1
  std::vector<int> fitted_parameters;
  bool bic_odds = false;  // posterior from exp(-BIC/2) (some k > 0), else exact likelihood ratios
  double confidence = 0.95;
  std::vector<PairTest> tests;  // the first model against each other one
};

// Log-likelihoods, information criteria, posterior probabilities and the calibrated test of
// model 0 against each other model. Throws InputError for bad options, PhysicsError when a run
// is impossible under two models at once (the ratio is undefined).
ModelChoice choose_model(const CandidateModels& models, const MeasuredRuns& data, const ModelChoiceOptions& options);

// T = ln L_a - ln L_b of one synthetic data set of `runs` runs drawn from model `truth`.
// (The synthetic sets of choose_model and decision_power are made this way.)
class SyntheticRatio {
 public:
  SyntheticRatio(const CandidateModels& models, int a, int b);
  double draw(int truth, std::int64_t runs, std::mt19937_64& engine) const;
  // Mean and standard deviation of one run's ln(rho_a / rho_b) under model `truth`: exact sums
  // for categories; for work values by quadrature on the density tables, or (no tables) from
  // 200000 draws of a stream seeded by `seed`.
  std::pair<double, double> per_run(int truth, std::uint64_t seed) const;

 private:
  const CandidateModels& models_;
  int a_, b_;
  std::vector<WorkLogDensity> density_;                 // work values: a, b
  std::vector<double> ratio_;                           // categories: ln p_a - ln p_b
  std::vector<std::vector<double>> cumulative_;         // categories: per model a, b
};

// How often the calibrated test decides right when N runs are taken, from `experiments`
// synthetic experiments from each model (plus as many again under the other model to fix
// the thresholds). t_b: the `confidence` quantile of T under b (B rejected above it); t_a: the
// (1 - confidence) quantile under a (A rejected below it).
struct DecisionPoint {
  std::int64_t runs = 0;
  int experiments = 0;
  double threshold_b = 0, threshold_a = 0;
  double power_a = 0;     // P_a(T > t_b): b rejected when a is true
  double power_b = 0;     // P_b(T < t_a): a rejected when b is true
  double size_b = 0;      // P_b(T > t_b) on fresh experiments: 1 - confidence up to resampling
  double size_a = 0;      // P_a(T < t_a)
  double correct_a = 0;   // P_a(T > 0): the likelier model chosen, a true
  double correct_b = 0;   // P_b(T < 0)
  double normal_power_a = 0, normal_power_b = 0;  // the normal approximation of power_a, power_b
};
struct DecisionOptions {
  int experiments = 1000;
  std::uint64_t seed = 1;
  double confidence = 0.95;
};
DecisionPoint decision_power(const CandidateModels& models, int a, int b, std::int64_t runs,
                             const DecisionOptions& options);

// The normal approximation of N needed: T of N runs ~ N(N mu_j, N s_j^2) under model j, so both
// tests reach `power` at sqrt(N) (mu_a - mu_b) = z_c s + z_p s' for each direction:
// N = max over directions of ((z_c s_b + z_p s_a) / (mu_a - mu_b))^2 and the same with a, b
// exchanged (common practice). Infinite when the models give the same per-run mean.
double normal_runs_to_decide(const CandidateModels& models, int a, int b, double power, double confidence,
                             std::uint64_t seed = 1);

// Smallest N with power_a and power_b >= `power`: N doubled from `start` until both are met,
// then bisection to 2 % of N. Each N has its own random streams, so the powers carry their
// resampling error (sqrt(p(1-p)/experiments)) and N is found to that precision. `reached`
// false when max_runs does not suffice (the last evaluation returned).
struct RunsToDecide {
  std::int64_t runs = 0;
  DecisionPoint at;
  int evaluations = 0;
  bool reached = false;
};
RunsToDecide runs_to_decide(const CandidateModels& models, int a, int b, double power, const DecisionOptions& options,
                            std::int64_t start = 8, std::int64_t max_runs = std::int64_t(1) << 22);

}  // namespace trapwork
